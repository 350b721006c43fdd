"""The optional compiled biquad cascade: the same bytes as scipy.signal.sosfilt, in less CPU.

``fold_rows``, ``absmax_sum``, ``absmax_runs``, ``prescreen_rows`` and ``screen_picked`` are the true-peak meter's loops around its matrix products
(chainrun/dsp/fold.py), or None.

``pack24_row`` and ``unpack24_rows`` are PCM_24's quantise-and-pack of one channel row and its
unpacking loop (chainrun/audio/quantise.py ``Quantiser.packed24``, chainrun/audio/reader.py
``unpack24`` hold the numpy forms, which give the same bytes), or None.

``linear`` is the same for ``scipy.signal.lfilter``'s loop (the loudness meter's K-weighting),
with the call ``linear(b, a, x, zi) -> (y, zf)``, or None.

``cascade`` is a drop-in for ``sosfilt(sos, x, axis=-1, zi=zi) -> (y, zf)`` on channel-major
float64 blocks, backed by the C extension ``chainrun.dsp._cascade`` (_cascade.c), or None when
that is not usable; ``AVAILABLE`` says which and ``REASON`` why. The extension is built by
``pip install`` when the machine has a C compiler and Python's headers, and skipped otherwise:
chainrun then filters with scipy's sosfilt, byte for byte the same output.

Set ``CHAINRUN_NO_KERNEL=1`` to leave the extension unused (to compare, or to rule it out).
A build whose source digest differs from a ``_cascade.c`` lying beside it (an in-place build
older than an edit of the source) is refused, so a stale build never stands in for the source.
"""
from __future__ import annotations

import os
from pathlib import Path

import numpy as np

__all__ = ["AVAILABLE", "REASON", "ENV_OFF", "cascade", "linear", "linear_two", "cascade_rows", "fold_rows", "absmax_sum", "absmax_runs",
           "prescreen_rows", "screen_picked", "pack24_row", "unpack24_rows", "row_sums", "segment_sums",
           "row_extremes"]

ENV_OFF = "CHAINRUN_NO_KERNEL"
_ABI = 12                                   # CASCADE_ABI in _cascade.c
_SOURCE = Path(__file__).with_name("_cascade.c")


def _digest(path: Path) -> str:
    """SHA-256 of a file (hashlib is imported here: an installed package has no source beside it)."""
    import hashlib
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _load():
    """(the extension module or None, why)."""
    if os.environ.get(ENV_OFF, "").strip() not in ("", "0"):
        return None, f"left unused: {ENV_OFF} is set"
    try:
        from . import _cascade
    except ImportError as exc:
        return None, f"not built ({exc}); scipy.signal.sosfilt is used"
    if getattr(_cascade, "ABI", None) != _ABI:
        return None, "built from another version of chainrun; rebuild it (DEVELOPERS.md)"
    if _SOURCE.is_file() and _digest(_SOURCE) != _cascade.SOURCE_DIGEST:
        return None, (f"stale: {_cascade.__file__} was built from another _cascade.c; "
                      "rebuild with `python setup.py build_ext --inplace`")
    return _cascade, f"compiled ({_cascade.__file__})"


_module, REASON = _load()
AVAILABLE = _module is not None


def _cascade(sos, x, axis=-1, zi=None):
    """sosfilt's call for chainrun's blocks: ``x`` (channels, frames), ``zi`` (sections, channels, 2).

    Returns ``(y, zf)`` like ``scipy.signal.sosfilt(sos, x, axis=-1, zi=zi)``; inputs are not
    modified. Anything else than float64 2-d blocks along the last axis goes to sosfilt itself."""
    sos, x, zi = np.asarray(sos), np.asarray(x), np.asarray(zi)
    if (axis not in (-1, 1) or x.ndim != 2 or sos.ndim != 2 or zi.ndim != 3
            or np.result_type(sos, x, zi) != np.float64):
        from scipy.signal import sosfilt
        return sosfilt(sos, x, axis=axis, zi=zi)
    if sos.shape[1] != 6 or zi.shape != (len(sos), len(x), 2):
        raise ValueError(f"cascade: sos {sos.shape}, x {x.shape} and zi {zi.shape} do not fit together")
    sos = np.ascontiguousarray(sos, dtype=np.float64)
    x = np.ascontiguousarray(x, dtype=np.float64)
    state = np.ascontiguousarray(zi.transpose(1, 0, 2), dtype=np.float64)   # (channels, sections, 2)
    if np.shares_memory(state, zi):
        state = state.copy()                                                  # zi is never modified
    y = np.empty_like(x)
    _module.cascade(sos, x, state, y)
    return y, state.transpose(1, 0, 2)


def _linear_args(b, a, x, zi) -> bool:
    """True when ``_linear`` can take these (float64, ``a[0] == 1``, order 1-8, shapes that fit)."""
    order = len(b) - 1
    return (b.ndim == 1 and a.shape == b.shape and 1 <= order <= 8 and a[0] == 1.0 and x.ndim == 2
            and zi.shape == (len(x), order) and all(v.dtype == np.float64 for v in (b, a, x, zi)))


def _linear(b, a, x, zi, square=False):
    """lfilter's loop for chainrun's blocks: ``(y, zf)`` as ``scipy.signal.lfilter(b, a, x, axis=-1, zi=zi)``
    for float64 ``x`` (channels, frames), ``zi`` (channels, K), ``b`` and ``a`` (K+1,) with
    ``a[0] == 1`` and K <= 8; None for anything else (the caller then uses scipy's loop). Inputs are
    not modified. With ``square``, ``y`` holds ``numpy.square`` of the output instead (the same bits)."""
    b, a, x, zi = np.asarray(b), np.asarray(a), np.asarray(x), np.asarray(zi)
    if not _linear_args(b, a, x, zi):
        return None
    b, a = np.ascontiguousarray(b, dtype=np.float64), np.ascontiguousarray(a, dtype=np.float64)
    x = np.ascontiguousarray(x, dtype=np.float64)
    state = np.array(zi, dtype=np.float64, order="C")          # a copy: zi is never modified
    y = np.empty_like(x)
    _module.linear(b, a, x, state, y, bool(square))
    return y, state


def _linear_two(b, a, x1, zi1, x2, zi2, square=False):
    """``_linear`` of two blocks of the same frames in one pass (their rows side by side in the
    loop's vectors): ``(y1, zf1, y2, zf2)``, the same bits as two calls; None where ``_linear``
    would give None for either."""
    b, a = np.asarray(b), np.asarray(a)
    x1, zi1, x2, zi2 = np.asarray(x1), np.asarray(zi1), np.asarray(x2), np.asarray(zi2)
    if not (_linear_args(b, a, x1, zi1) and _linear_args(b, a, x2, zi2) and x2.shape[1] == x1.shape[1]):
        return None
    b, a = np.ascontiguousarray(b), np.ascontiguousarray(a)
    x1, x2 = np.ascontiguousarray(x1), np.ascontiguousarray(x2)
    s1, s2 = np.array(zi1, order="C"), np.array(zi2, order="C")   # copies: zi1, zi2 are never modified
    y1, y2 = np.empty_like(x1), np.empty_like(x2)
    _module.linear(b, a, x1, s1, y1, bool(square), x2, s2, y2)
    return y1, s1, y2, s2


cascade = _cascade if AVAILABLE else None
linear = _linear if AVAILABLE else None
linear_two = _linear_two if AVAILABLE else None
# The raw loop: cascade_rows(sos, x, state, y) with x, y (signals, N) and state (signals, sections, 2),
# all C-contiguous float64, state updated in place (chainrun.dsp.kernel's sosfilt uses it first).
cascade_rows = _module.cascade if AVAILABLE else None
# The true-peak meter's loops (chainrun/dsp/fold.py holds their numpy forms and says what they do).
fold_rows = _module.fold_rows if AVAILABLE else None
absmax_sum = _module.absmax_sum if AVAILABLE else None
absmax_runs = _module.absmax_runs if AVAILABLE else None
prescreen_rows = _module.prescreen_rows if AVAILABLE else None
screen_picked = _module.screen_picked if AVAILABLE else None
# The RMS meter's sums (chainrun/dsp/sums.py holds the numpy form).
row_sums = _module.row_sums if AVAILABLE else None
# The loudness meter's sub-block sums, numpy.add.reduceat's bits (chainrun/dsp/sums.py).
segment_sums = _module.segment_sums if AVAILABLE else None
# A block's per-channel max and min in one pass (chainrun/dsp/sums.py row_extremes).
row_extremes = _module.row_extremes if AVAILABLE else None
# PCM_24 packing (Quantiser.packed24) and unpacking (reader.unpack24); their numpy forms are the fallback.
pack24_row = _module.pack24_row if AVAILABLE else None
unpack24_rows = _module.unpack24_rows if AVAILABLE else None
