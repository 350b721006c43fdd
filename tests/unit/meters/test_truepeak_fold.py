"""The true-peak meter's folded products: the compiled loops give numpy's bits, and folding changes
nothing but the rounding.

References: numpy (reference library) for the loops' bits; scipy.signal.firwin + upfirdn (reference
library, float64) for the interpolated values; the folding identity itself is analytic (for weights
w and their mirror image, x @ w and x @ w[::-1] are s @ e + d @ o and s @ e - d @ o with s, d the
sums and differences of mirrored samples and e, o the symmetric and antisymmetric halves of w).
The compiled tests skip when the optional extension is not built; the others run everywhere.
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

import chainrun.dsp.compiled as kernel
from chainrun.dsp import fold
from chainrun.meters.interpolator import _TP_ROWS_PER_CALL, _TP_SPAN, _interpolation_branches, _weights
from chainrun.meters.truepeak import TruePeakMeter

built = pytest.mark.skipif(not kernel.AVAILABLE and not kernel.REASON.startswith("stale"),
                           reason=f"compiled loops not in use: {kernel.REASON}")


def samples(rng, n):
    z = (rng.standard_normal(n) * 10.0 ** rng.uniform(-30, 30, n)).astype(np.float32)
    z[rng.integers(0, n, 5)] = [np.float32(1e30), np.float32(-1e30), np.float32(1e-45), -0.0, 0.0]
    return z


@built
@pytest.mark.parametrize("rows, start, step", [(1, 0, 32), (7, 3, 32), (512, 11, 32), (40, 0, 5), (0, 0, 32)])
def test_compiled_fold_gives_numpys_bits(rows, start, step):
    rng = np.random.default_rng(rows + start)
    z = samples(rng, start + max(rows - 1, 0) * step + _TP_SPAN + 3)
    half = _TP_SPAN // 2
    got = np.full((rows, half + 1), np.nan, np.float32), np.full((rows, half), np.nan, np.float32)
    want = np.full((rows, half + 1), np.nan, np.float32), np.full((rows, half), np.nan, np.float32)
    kernel.fold_rows(z, start, step, *got)
    fold._fold_rows_numpy(z, start, step, *want)
    for g, w in zip(got, want):                                  # numpy (reference library): same bits
        assert g.tobytes() == w.tobytes()


@built
def test_compiled_fold_refuses_rows_past_the_samples():
    z = np.zeros(100, np.float32)
    s, d = np.empty((2, 35), np.float32), np.empty((2, 34), np.float32)
    for f in (kernel.fold_rows, fold._fold_rows_numpy):
        with pytest.raises(ValueError, match="past the samples"):
            f(z, 40, 32, s, d)                                   # 40 + 32 + 69 > 100


@built
@pytest.mark.parametrize("n", [0, 1, 7, 8, 9, 6143, 6144])
def test_compiled_absmax_sum_gives_numpys_bits(n):
    rng = np.random.default_rng(n)
    a, b = samples(rng, n + 5)[:n], samples(rng, n + 5)[:n]
    assert kernel.absmax_sum(a, b) == fold._absmax_sum_numpy(a, b)          # numpy: the same value
    if n:
        a[n // 2] = np.nan                                       # numpy's max returns the NaN
        assert np.isnan(kernel.absmax_sum(a, b)) and np.isnan(fold._absmax_sum_numpy(a, b))


@built
@pytest.mark.parametrize("n, run", [(1, 1), (100, 7), (65536 + 37, 16384), (16384 * 2, 16384), (5, 16384)])
def test_compiled_absmax_runs_gives_numpys_bits(n, run):
    z = samples(np.random.default_rng(n), n)
    got, want = np.full(-(-n // run), -1.0), np.full(-(-n // run), -1.0)
    kernel.absmax_runs(z, run, got)
    fold._absmax_runs_numpy(z, run, want)
    # numpy (reference library): the same values (the sign of a zero peak may differ; it bounds nothing)
    assert np.array_equal(got, want)


@pytest.mark.parametrize("factor", [4, 2])
def test_the_folded_weights_are_the_interpolators(factor):
    # analytic identity (module docstring): rebuilding each pair's two columns from e and o gives
    # the banded weights, to float32 rounding of e and o (2**-24 relative to the largest tap)
    fw = _weights(factor)
    e, o = fw.e.astype(np.float64), fw.o.astype(np.float64)
    h = o.shape[0]
    first = np.vstack([e[:h] + o, e[h:], (e[:h] - o)[::-1]])
    br = _interpolation_branches(factor)
    row = 32
    for k, (cp, cm) in enumerate(zip(fw.plus, fw.minus)):
        for col, w in ((cp, first[:, k]), (cm, first[::-1, k])):
            j, p = divmod(int(col), factor - 1)
            want = np.zeros(_TP_SPAN)
            want[j:j + 38] = br[p]
            assert np.max(np.abs(w - want)) <= 2.0 ** -23
    assert len(fw.plus) * 2 == row * (factor - 1)                # every output column in one pair


def test_stacked_products_give_the_bits_of_products_one_by_one():
    # the meter relies on numpy running one BLAS product per stacked matrix (the same shape
    # wherever the products fall): numpy (reference library), compared bit for bit
    rng = np.random.default_rng(3)
    fw = _weights(4)
    s = rng.standard_normal((2, _TP_ROWS_PER_CALL, 35)).astype(np.float32)
    stacked = np.matmul(s, fw.e)
    for k in range(2):
        assert np.matmul(s[k], fw.e).tobytes() == stacked[k].tobytes()


@pytest.mark.parametrize("seed", [0, 1])
def test_noise_reads_the_reference_within_single_precision(seed):
    # scipy.signal.firwin + upfirdn (reference library, float64) with the meter's own prototype,
    # over 80000 samples of noise (several products, the stacked and the pending paths)
    rng = np.random.default_rng(seed)
    x = 0.3 * rng.standard_normal(80000)
    m = TruePeakMeter(48000, 1)
    for a, b in ((0, 1000), (1000, 50000), (50000, 80000)):
        m.update(np.ascontiguousarray(x[np.newaxis, a:b]))
    proto = signal.firwin(2 * 19 * 4 + 1, 0.25, window=("kaiser", 5.75)) * 4
    y = signal.upfirdn(proto, x, up=4)[4 * 19:]                  # y[4*s + p]: instant s + p/4
    valid = y[4 * 18:4 * (80000 - 19)]                           # instants whose 38 samples all exist
    ref = max(float(np.max(np.abs(valid))), float(np.max(np.abs(x))))
    # the documented bound is 1.15e-5 of the local peak (TruePeakMeter notes)
    assert abs(m.reading().true_peak[0] - ref) <= 1.15e-5 * ref
