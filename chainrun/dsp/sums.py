"""Passes over rows: the RMS meter's sums of a row (:func:`row_sums`), the loudness meter's sub-block
sums (:func:`segment_sums`), a block's per-channel extremes (:func:`row_extremes`).

:func:`row_sums` gives the sum of a row's samples and of their squares, in one pass:

32 running sums each (sample ``i`` into sum ``i mod 32``, in order, starting from the first 32
samples), combined pairwise (sum ``2k`` with sum ``2k + 1``, level by level), then the last
``n mod 32`` samples added in order; every square rounded once. Each running sum adds about
n / 32 terms one after another: a relative error below (n / 32 + 5) * 2**-53 of the sum of
magnitudes (3e-13 for a block of 65536), far below what a level in hundredths of a dB shows.

:func:`row_sums` is the optional compiled loop (chainrun/dsp/_cascade.c: one pass, the running sums in
vector lanes) or its numpy form here, which gives the same bits (numpy adds the rows of an
(m, 32) array one after another along axis 0; tests/unit/test_compiled.py compares the two).
"""
from __future__ import annotations

import numpy as np

from . import compiled

__all__ = ["row_sums", "segment_sums", "row_extremes"]


_LANES = 32


def _tree(v: list[float]) -> float:
    while len(v) > 1:
        v = [v[2 * k] + v[2 * k + 1] for k in range(len(v) // 2)]
    return v[0]


def _row_sums_numpy(x: np.ndarray) -> tuple[float, float]:
    n = x.shape[0]
    m = n - n % _LANES
    s1 = s2 = 0.0
    if m:
        rows = x[:m].reshape(-1, _LANES)
        s1 = _tree(rows.sum(axis=0).tolist())
        s2 = _tree(np.square(rows).sum(axis=0).tolist())
    for v in x[m:].tolist():
        s1 += v
        s2 += v * v
    return s1, s2


def row_sums(x: np.ndarray) -> tuple[float, float]:
    """(sum, sum of squares) of the float64 row ``x``, as the module's notes say."""
    if compiled.row_sums is not None and x.dtype == np.float64 and x.ndim == 1 and x.flags.c_contiguous:
        return compiled.row_sums(x)
    return _row_sums_numpy(np.asarray(x, dtype=np.float64))


def _probe_segments() -> bool:
    """True if the compiled segment sums give numpy's bits here: segments of every length from 1 to
    20 and around each split of numpy's pairwise sum (128, 256, 512) and a sub-block's (441, 480,
    960), of values >= 0 as the meter's squares are, and of signed ones."""
    lengths = [*range(1, 21), 127, 128, 129, 130, 135, 255, 256, 257, 264, 441, 480, 511, 512, 513, 960, 1921]
    starts = np.cumsum([0, *lengths[:-1]]).astype(np.int64)
    x = np.random.default_rng(1770).standard_normal((2, int(sum(lengths))))
    x[0] *= x[0]
    out = np.empty((2, len(lengths)))
    compiled.segment_sums(x, starts, x.shape[1], out)
    return bool(np.array_equal(out, np.add.reduceat(x, starts, axis=1)))


_compiled_segments: list = []      # [the compiled loop, or None when it is missing or differs], once probed


def segment_sums(x: np.ndarray, starts: np.ndarray, stop: int) -> np.ndarray:
    """``numpy.add.reduceat(x[:, :stop], starts, axis=1)``, the same bits: the sum of each row's
    segment from ``starts[i]`` to ``starts[i + 1]`` (the last to ``stop``).

    ``x`` is float64 (rows, N), C-contiguous, ``starts`` int64 in ``[0, stop)``. The compiled
    loop (chainrun/dsp/_cascade.c) does numpy's operations in numpy's order: each segment's first
    value plus numpy's pairwise sum of the others, the pairwise sum's 8 running sums in one vector.
    It is used once a probe of one call shows it gives numpy's bits here (a numpy that summed
    another way would make it step aside); tests/unit/test_compiled.py compares the two widely.
    """
    if not _compiled_segments:
        _compiled_segments.append(compiled.segment_sums if compiled.segment_sums is not None
                                  and _probe_segments() else None)
    loop = _compiled_segments[0]
    if (loop is not None and x.dtype == np.float64 and x.ndim == 2 and x.flags.c_contiguous
            and starts.dtype == np.int64 and starts.ndim == 1):
        out = np.empty((x.shape[0], starts.shape[0]))
        loop(x, starts, int(stop), out)
        return out
    return np.add.reduceat(x[:, :stop], starts, axis=1)


def row_extremes(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``(x.max(axis=1), x.min(axis=1))`` of a block (channels x frames, frames >= 1): the same values
    (NaN for both in a row holding NaN), in one pass with the compiled loop when it is built. A
    zero extreme may carry the other sign of zero than numpy's; nothing in chainrun reads that sign.
    """
    if (compiled.row_extremes is not None and x.dtype == np.float64 and x.ndim == 2 and x.shape[1]
            and x.flags.c_contiguous):
        hi, lo = np.empty(x.shape[0]), np.empty(x.shape[0])
        compiled.row_extremes(x, hi, lo)
        return hi, lo
    return x.max(axis=1), x.min(axis=1)
