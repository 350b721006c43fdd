"""The loops around the true-peak meter's matrix products: folding rows of samples, max |y|, run peaks.

The true-peak interpolator's prototype is symmetric, so the weights of a row of interpolated
values come in pairs of columns, one the other read backwards.  Of a row of samples ``x`` (length
``span``, odd) the meter needs only the sums and differences of mirrored samples:

    s[i] = x[i] + x[span-1-i]   (i < span // 2),   s[span // 2] = x[span // 2]
    d[i] = x[i] - x[span-1-i]   (i < span // 2)

after which the two values of a pair of columns are ``a + b`` and ``a - b`` with ``a = s @ e`` and
``b = d @ o`` (``e``, ``o`` the symmetric and antisymmetric halves of the pair's weights), and the
larger magnitude of the two is ``|a| + |b|``.  See chainrun.meters.truepeak.

:func:`fold_rows` and :func:`absmax_sum` compute these (and :func:`absmax_runs` the peaks of runs of
samples, for the meter's skip rule; :func:`screen_rows` the bounds of its screen) with numpy, or with the optional compiled
extension (chainrun/dsp/_cascade.c) when it is built: the same float32 additions, subtractions
and magnitudes either way, so the results are the same bits (tests/unit/meters/test_truepeak_fold.py).
"""
from __future__ import annotations

import numpy as np
from numpy.lib.stride_tricks import as_strided

from . import compiled

__all__ = ["fold_rows", "absmax_sum", "absmax_runs", "screen_rows"]


def _fold_rows_numpy(z: np.ndarray, start: int, step: int, s: np.ndarray, d: np.ndarray) -> None:
    """``s`` and ``d`` (rows, span // 2 + 1) and (rows, span // 2) of the rows of ``z`` (1-d float32)
    that start at ``start + r*step`` and hold ``span = 2 * (span // 2) + 1`` samples."""
    rows, half = d.shape
    span = 2 * half + 1
    if rows == 0:
        return
    if start < 0 or start + (rows - 1) * step + span > z.shape[0]:
        raise ValueError("fold_rows: the rows run past the samples")
    view = as_strided(z[start:], shape=(rows, span), strides=(step * z.strides[0], z.strides[0]),
                      writeable=False)
    back = view[:, span - 1:half:-1]                     # x[span-1-i] for i < half
    np.add(view[:, :half], back, out=s[:, :half])
    s[:, half] = view[:, half]
    np.subtract(view[:, :half], back, out=d)


def _absmax_sum_numpy(a: np.ndarray, b: np.ndarray) -> float:
    """max(|a| + |b|) over the elements of two float32 arrays of one shape (0.0 when empty)."""
    if a.size == 0:
        return 0.0
    t = np.abs(a)
    t += np.abs(b)
    return float(t.max())


def fold_rows(z: np.ndarray, start: int, step: int, s: np.ndarray, d: np.ndarray) -> None:
    """Fill ``s`` and ``d`` with the folded rows of ``z`` (see the module's notes)."""
    if compiled.fold_rows is not None:
        compiled.fold_rows(z, start, step, s, d)
    else:
        _fold_rows_numpy(z, start, step, s, d)


def absmax_sum(a: np.ndarray, b: np.ndarray) -> float:
    """max(|a| + |b|): the larger magnitude of ``a + b`` and ``a - b``, over all elements."""
    if compiled.absmax_sum is not None:
        return compiled.absmax_sum(a, b)
    return _absmax_sum_numpy(a, b)


def _absmax_runs_numpy(z: np.ndarray, run: int, out: np.ndarray) -> None:
    """``out[k]`` = max |z| over ``z[k*run:(k+1)*run]`` (1-d float32 in, float64 out, the last run short)."""
    whole = z.shape[0] // run
    zz = z[:whole * run].reshape(whole, run)
    out[:whole] = np.maximum(zz.max(axis=1), -zz.min(axis=1))
    if whole * run < z.shape[0]:
        rest = z[whole * run:]
        out[whole] = max(float(rest.max()), -float(rest.min()))


def absmax_runs(z: np.ndarray, run: int, out: np.ndarray) -> None:
    """The peak of each run of ``run`` samples of ``z``: ``out[k] = max |z[k*run:(k+1)*run]|``."""
    if compiled.absmax_runs is not None:
        compiled.absmax_runs(z, run, out)
    else:
        _absmax_runs_numpy(z, run, out)


def _screen_rows_numpy(a2, b2, z, start, one_eps, l13_eps, one_tiny, level, rows) -> tuple[float, int]:
    n_rows = a2.shape[0]
    if start < 0 or start + 32 * n_rows + 37 > z.shape[0] or rows.shape[0] < n_rows:
        raise ValueError("screen_rows: z must hold start + 32R + 37 samples, rows R indices")
    runs = np.empty(n_rows + 2)
    _absmax_runs_numpy(z[start:start + 32 * n_rows + 37], 32, runs)
    if n_rows == 0:
        return 0.0, 0
    t = np.abs(a2)
    t += np.abs(b2)
    p2 = t.max(axis=1).astype(np.float64)
    p2max = float(p2.max())
    level = max(level, float(runs.max()), p2max)
    x = np.maximum(np.maximum(runs[:-2], runs[1:-1]), runs[2:])
    bound = (0.5 * (x * one_eps + p2) + l13_eps * x) * one_tiny
    kept = np.flatnonzero(bound > level)
    rows[:kept.size] = kept
    return p2max, int(kept.size)


def screen_rows(a2: np.ndarray, b2: np.ndarray, z: np.ndarray, start: int, one_eps: float, l13_eps: float,
                one_tiny: float, level: float, rows: np.ndarray) -> tuple[float, int]:
    """The true-peak meter's screen of one product's ``R`` rows of 32 instants (69 samples each).

    ``a2``, ``b2`` (float32, R x Q): the folded branch-2 products; ``z`` (float32): samples, the
    product's from ``start`` on. Per row, ``P2 = max(|a2| + |b2|)`` and ``X`` the peak |z| of the
    three runs of 32 samples under it; the row is kept when
    ``(0.5 * (X * one_eps + P2) + l13_eps * X) * one_tiny`` passes the level, the larger of
    ``level`` and every P2 and run peak of the product. Returns (max P2, how many kept); the kept
    rows' indices go to ``rows`` (int64) in order. The same double operations in C and numpy.
    """
    if compiled.screen_rows is not None:
        return compiled.screen_rows(a2, b2, z, start, one_eps, l13_eps, one_tiny, level, rows)
    return _screen_rows_numpy(a2, b2, z, start, one_eps, l13_eps, one_tiny, level, rows)
