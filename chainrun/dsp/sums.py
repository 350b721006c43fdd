"""The RMS meter's sums of a row: of its samples and of their squares, in one pass.

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

__all__ = ["row_sums"]


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
