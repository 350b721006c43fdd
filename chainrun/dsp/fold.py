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
samples, for the meter's skip rule; :func:`prescreen_rows` and :func:`screen_picked` the bounds of its
screen) with numpy, or with the optional compiled
extension (chainrun/dsp/_cascade.c) when it is built: the same float32 additions, subtractions
and magnitudes either way, so the results are the same bits (tests/unit/meters/test_truepeak_fold.py).
"""
from __future__ import annotations

import numpy as np
from numpy.lib.stride_tricks import as_strided

from . import compiled

__all__ = ["fold_rows", "absmax_sum", "absmax_runs", "prescreen_rows", "screen_picked"]


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


def _prescreen_rows_numpy(z, start, n_rows, centre, tail, one_eps, l13_eps, one_tiny, level, s, d, xs, rows):
    half = s.shape[1] - 1
    if (start < 0 or start + 32 * n_rows + 37 > z.shape[0] or centre.shape != (8, 32) or half != 34
            or centre.dtype != np.float32
            or min(s.shape[0], d.shape[0], xs.shape[0], rows.shape[0]) < n_rows):
        raise ValueError("prescreen_rows: z must hold start + 32R + 37 samples; centre (8, 32); buffers of R rows")
    runs = np.empty(n_rows + 2)
    _absmax_runs_numpy(z[start:start + 32 * n_rows + 37], 32, runs)
    level = max(level, float(runs.max()))
    if n_rows == 0:
        return level, 0
    x = np.maximum(np.maximum(runs[:-2], runs[1:-1]), runs[2:])
    view = as_strided(z[start:], shape=(n_rows, 69), strides=(32 * z.strides[0], z.strides[0]), writeable=False)
    acc = np.zeros((n_rows, 32), dtype=np.float32)
    for k in range(8):                                   # the C loop's order: tap k of every instant
        acc += centre[k] * view[:, 15 + k:47 + k]
    p2b = np.abs(acc).max(axis=1).astype(np.float64) + tail * x
    b13 = (0.5 * (x * one_eps + p2b) + l13_eps * x) * one_tiny
    picked = np.flatnonzero((p2b * one_tiny > level) | (b13 > level))
    n = picked.size
    for i, r in enumerate(picked.tolist()):
        _fold_rows_numpy(z, start + 32 * r, 32, s[i:i + 1], d[i:i + 1])
    xs[:n] = x[picked]
    rows[:n] = picked
    return level, n


def prescreen_rows(z: np.ndarray, start: int, n_rows: int, centre: np.ndarray, tail: float, one_eps: float,
                   l13_eps: float, one_tiny: float, level: float, s: np.ndarray, d: np.ndarray, xs: np.ndarray,
                   rows: np.ndarray) -> tuple[float, int]:
    """The true-peak meter's prescreen of one product's ``n_rows`` rows (69 samples each, from ``start`` on).

    Per row ``r``, ``X`` is the peak |z| of runs ``r``, ``r + 1`` and ``r + 2`` of 32 samples (its
    69 samples lie in them). For each of its 32 instants, the prescreen sums the 8 branch-2 taps
    nearest to it (``centre``, float32 (8, 32): tap ``k`` of instant ``j`` weighs sample
    ``j + 15 + k`` of the row) in float32, the taps in order; ``P2b``, the largest magnitude of
    those plus ``tail * X``, bounds every branch-2 value of the row. The level is the larger of
    ``level`` and every run peak of the product. A row is a candidate when ``P2b * one_tiny`` or
    :func:`screen_picked`'s bound of branches 1 and 3 with ``P2b`` for ``P2`` passes it; the
    candidates' folded samples go to ``s`` and ``d``, their ``X`` to ``xs`` and their indices to
    ``rows``, packed in order. Returns (the level, how many candidates). The same float32 and
    double operations in C and numpy.
    """
    if compiled.prescreen_rows is not None:
        return compiled.prescreen_rows(z, start, n_rows, centre, tail, one_eps, l13_eps, one_tiny, level,
                                       s, d, xs, rows)
    return _prescreen_rows_numpy(z, start, n_rows, centre, tail, one_eps, l13_eps, one_tiny, level, s, d, xs, rows)


def _screen_picked_numpy(a2, b2, xs, one_eps, l13_eps, one_tiny, level, rows) -> tuple[float, int]:
    n = a2.shape[0]
    if b2.shape != a2.shape or xs.shape[0] != n or rows.shape[0] < n:
        raise ValueError("screen_picked: a2, b2 float32 (N, Q); xs (N,); rows int64 (>= N,)")
    if n == 0:
        return 0.0, 0
    t = np.abs(a2)
    t += np.abs(b2)
    p2 = t.max(axis=1).astype(np.float64)
    p2max = float(p2.max())
    level = max(level, p2max)
    bound = (0.5 * (xs * one_eps + p2) + l13_eps * xs) * one_tiny
    kept = np.flatnonzero(bound > level)
    rows[:kept.size] = kept
    return p2max, int(kept.size)


def screen_picked(a2: np.ndarray, b2: np.ndarray, xs: np.ndarray, one_eps: float, l13_eps: float, one_tiny: float,
                  level: float, rows: np.ndarray) -> tuple[float, int]:
    """The screen of the prescreen's candidates: ``a2``, ``b2`` (float32, N x Q) their folded branch-2
    products, ``xs`` their ``X``. Per row, ``P2 = max(|a2| + |b2|)``; the row is kept when
    ``(0.5 * (X * one_eps + P2) + l13_eps * X) * one_tiny`` passes the level, the larger of ``level``
    and every P2. Returns (max P2, how many kept); the kept rows' indices (into the N) go to
    ``rows`` in order. The same double operations in C and numpy.
    """
    if compiled.screen_picked is not None:
        return compiled.screen_picked(a2, b2, xs, one_eps, l13_eps, one_tiny, level, rows)
    return _screen_picked_numpy(a2, b2, xs, one_eps, l13_eps, one_tiny, level, rows)
