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
from chainrun.meters.interpolator import _SCREEN_EPS, _TP_ROWS_PER_CALL, _TP_SPAN, _interpolation_branches, _weights
from chainrun.meters.truepeak import _PRESCREEN_EPS, TruePeakMeter

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


# --- the screen of rows at 4x -----------------------------------------------------------------------

def test_the_screens_constant_holds_for_the_weights_the_products_use():
    # Analytic: the screen writes branch 1 at s + 1/4 as the mean of the sample at s and branch 2
    # at s + 1/2 plus a filter g1 of the row's samples (branch 3 likewise with the sample at s + 1),
    # so that |branch 1| <= (|x(s)| + |branch 2|) / 2 + L1(g1) max|x|. Checked here on random rows
    # against the float64 values of the float32 weights, for every instant of a row.
    fw = _weights(4)
    sc, rng = fw.screen, np.random.default_rng(5)
    x = rng.standard_normal((200, _TP_SPAN))
    h = _TP_SPAN // 2
    s = np.hstack([x[:, :h] + x[:, :h:-1], x[:, h:h + 1]])
    d = x[:, :h] - x[:, :h:-1]
    a, b = s @ fw.e.astype(np.float64), d @ fw.o.astype(np.float64)
    y = np.empty((200, 32 * 3))
    y[:, fw.plus], y[:, fw.minus] = a + b, a - b
    y = y.reshape(200, 32, 3)                                   # (row, instant j, branch 1..3)
    xs, xnext = x[:, 18:18 + 32], x[:, 19:19 + 32]              # the samples at s and s + 1
    peak = np.abs(x).max(axis=1)[:, None]
    g1 = np.abs(y[:, :, 0] - (xs + y[:, :, 1]) / 2)
    g3 = np.abs(y[:, :, 2] - (y[:, :, 1] + xnext) / 2)
    assert (g1 <= sc.l13 * peak * (1 + 1e-12)).all() and (g3 <= sc.l13 * peak * (1 + 1e-12)).all()
    assert 0.3 < sc.l13 < 0.5                                    # about 0.39 (computed, not a spec value)
    assert max(g1.max(), g3.max()) > 0.5 * sc.l13 * peak.min()  # and not loose by orders of magnitude


def _prescreen_args(rng, rows, start, level):
    sc = _weights(4).screen
    z = (rng.standard_normal(start + 32 * rows + 37 + int(rng.integers(0, 9))) * 0.3).astype(np.float32)
    bufs = (np.full((rows, 35), np.nan, np.float32), np.full((rows, 34), np.nan, np.float32),
            np.full(rows, np.nan), np.full(rows, -1, np.int64))
    return z, (sc.centre, sc.tail + _SCREEN_EPS + _PRESCREEN_EPS, 1 + _SCREEN_EPS, sc.l13 + 1.5 * _SCREEN_EPS,
               1 + 1e-9, level), bufs


@built
def test_compiled_prescreen_and_pick_give_numpys_results():
    # numpy (reference library): the same level, candidates, folded rows and peaks, bit for bit
    picked_total, rows_total = 0, 0
    for seed in range(8):
        rng = np.random.default_rng(seed)
        rows, start = (int(rng.integers(1, 600)) if seed else 0), int(rng.integers(0, 50))
        z, consts, got = _prescreen_args(rng, rows, start, float(rng.uniform(0, 2.5)))
        want = tuple(b.copy() for b in got)
        g = kernel.prescreen_rows(z, start, rows, consts[0], *consts[1:], *got)
        w = fold._prescreen_rows_numpy(z, start, rows, consts[0], *consts[1:], *want)
        assert g == w and all(a[:g[1]].tobytes() == b[:g[1]].tobytes() for a, b in zip(got, want))
        n = g[1]
        a2 = (rng.standard_normal((n, 16)) * 0.3).astype(np.float32)
        b2 = (rng.standard_normal((n, 16)) * 0.3).astype(np.float32)
        kept_c, kept_n = np.full(max(n, 1), -1, np.int64), np.full(max(n, 1), -1, np.int64)
        pc = kernel.screen_picked(a2, b2, got[2][:n], *consts[2:5], g[0], kept_c)
        pn = fold._screen_picked_numpy(a2, b2, got[2][:n], *consts[2:5], g[0], kept_n)
        assert pc == pn and kept_c.tobytes() == kept_n.tobytes()
        picked_total, rows_total = picked_total + n, rows_total + rows
    assert 0 < picked_total < rows_total                        # the draws pick some rows, not all


def _branch2_taps(fw) -> np.ndarray:
    """(32, 69): the float64 values of the weights branch 2's instant j of a row puts on its samples."""
    e, o, h = fw.e.astype(np.float64), fw.o.astype(np.float64), _TP_SPAN // 2
    taps = np.empty((32, _TP_SPAN))
    for j in range(32):
        pair, sign = (32 + j, 1.0) if j < 16 else (63 - j, -1.0)
        taps[j, :h] = e[:h, pair] + sign * o[:, pair]
        taps[j, _TP_SPAN - 1:h:-1] = e[:h, pair] - sign * o[:, pair]
        taps[j, h] = e[h, pair]
    return taps


@pytest.mark.parametrize("kind", ["worst", "noise", "alternating", "quarter", "near-nyquist", "steps"])
def test_the_prescreens_bound_holds_for_the_branch_2_values_the_products_compute(kind):
    # The prescreen's P2b against branch 2 as the meter computes it (the folded float32 products):
    # P2b >= every computed branch-2 value of the row. Analytic: the taps split into the 8 nearest
    # and the rest, whose L1 norm times the row's peak bounds their sum, plus the rounding allowances.
    # With the branch-1/3 term switched off (l13 0, no margin), a row is picked exactly when P2b passes
    # the level, so a level just under the row's computed branch-2 peak must pick it. (The branch-1/3
    # bound given P2 is the screen's, tested above.) "worst": each row's samples are the signs of one
    # instant's weights, where the bound is reached to rounding (the test fails with the tail's norm
    # cut by a fifth); the others are adversarial signals (full-scale alternation, fs/4, 0.449 fs,
    # steps) and noise.
    fw, rng = _weights(4), np.random.default_rng(17)
    n, taps = 256, _branch2_taps(fw)
    j = np.arange(n * 32 + 37)
    long = {"noise": lambda: rng.standard_normal(j.size),
            "alternating": lambda: np.where(j % 2, 1.0, -1.0) * (1 + 0.01 * rng.standard_normal(j.size)),
            "quarter": lambda: np.sin(2 * np.pi * 0.25 * j + rng.uniform(0, 2 * np.pi)),
            "near-nyquist": lambda: np.sin(2 * np.pi * 0.449 * j + 0.3),
            "steps": lambda: np.repeat(rng.choice([-1.0, 1.0], j.size // 5 + 1), 5)[:j.size]}
    z_all = long[kind]().astype(np.float32) if kind in long else None
    _, consts, bufs = _prescreen_args(rng, 1, 0, 0.0)
    s, d = np.empty((1, 35), np.float32), np.empty((1, 34), np.float32)
    tested = 0
    for r in range(n):
        if z_all is None:
            sign = np.where(taps[r % 32] < 0, -1.0, 1.0)
            z = (sign * rng.uniform(0.1, 2.0)).astype(np.float32)
        else:
            z = np.ascontiguousarray(z_all[32 * r:32 * r + _TP_SPAN])
        fold._fold_rows_numpy(z, 0, 32, s, d)
        computed = float((np.abs(s @ fw.screen.e2) + np.abs(d @ fw.screen.o2)).max())
        level = computed * (1 - 1e-7)
        if level <= float(np.abs(z).max()):
            continue                                            # the samples reach it: nothing to show
        _, picked = fold.prescreen_rows(z, 0, 1, consts[0], consts[1], 1.0, 0.0, 1.0, level, *bufs)
        assert picked == 1, (kind, r)
        tested += 1
    if kind in ("worst", "noise"):
        assert tested > n // 10


def _tp_both_ways(x, monkeypatch, block=65536):
    readings = []
    for screen in (True, False):
        monkeypatch.setattr(TruePeakMeter, "SCREEN", screen)
        m = TruePeakMeter(48000, x.shape[0])
        for i in range(0, x.shape[1], block):
            m.update(np.ascontiguousarray(x[:, i:i + block]))
        readings.append((m.reading().true_peak, m.rows_screened, m.rows_computed))
    return readings


@pytest.mark.parametrize("kind", ["noise", "clipped", "sine", "quarter", "clicks", "square"])
def test_the_screen_never_changes_the_reading(kind, monkeypatch):
    # The reading with the screen equals the reading with every row computed, to the rounding of
    # single precision (the same bits where BLAS gives them whatever the product's shape).
    rng = np.random.default_rng(9)
    n, t = 3 * 16384 + 999, np.arange(3 * 16384 + 999) / 48000
    x = {"noise": rng.standard_normal((2, n)) * 0.1,
         "clipped": np.clip(rng.standard_normal((2, n)) * 0.5, -0.4, 0.4),
         "sine": np.vstack([np.sin(2 * np.pi * 11997.0 * t + 0.3), 0.5 * np.sin(2 * np.pi * 1000.0 * t)]),
         # fs/4 with its crests 0.3 of a sample after a sample: the samples read cos(27 deg) = 0.891 of
         # the amplitude, branch 2 cos(18 deg) = 0.951, branch 1 (0.05 of a sample off) cos(4.5 deg)
         # = 0.997 (analytic): only the rows the screen keeps reach the reading (faded to half the level
         # within the first product, so that the instants left for the end do not reach it)
         "quarter": ((0.675 + 0.225 * np.cos(np.pi * np.clip((t - 0.2) / 0.05, 0, 1)))
                     * np.sin(2 * np.pi * 12000.0 * t + 0.35 * np.pi))[None, :].repeat(2, axis=0),
         "clicks": np.where(rng.random((2, n)) < 1e-3, 1.0, 0.0) * rng.choice([-1.0, 1.0], (2, n)),
         "square": np.sign(np.sin(2 * np.pi * 7001.0 * t))[None, :].repeat(2, axis=0) * 0.7}[kind]
    (screened, seen, computed), (full, _, _) = _tp_both_ways(x, monkeypatch)
    assert seen > 0
    np.testing.assert_allclose(screened, full, rtol=3e-5, atol=0)
    if kind == "quarter":                       # the interpolator is flat to 0.015 dB below 0.45 fs
        np.testing.assert_allclose(screened, 0.9 * np.cos(np.pi / 2 * 0.05), rtol=0.002)


def test_the_screen_computes_few_rows_of_noise(monkeypatch):
    # on noise, the rows that could hold a new peak are rare: the point of the screen
    x = np.random.default_rng(10).standard_normal((2, 6 * 16384)) * 0.1
    (_, seen, computed), _ = _tp_both_ways(x, monkeypatch)
    assert seen >= 2 * 5 * 512 and computed < 0.1 * seen
