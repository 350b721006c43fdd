"""dsp.compiled: the optional compiled cascade gives scipy.signal.sosfilt's bytes, or stays unused.

The reference is scipy.signal.sosfilt (reference library), run on the same blocks with its own
carried state; "identical" means the same float64 bytes for every output sample and every final
state value. The cascades are stable biquads from the W3C Audio EQ Cookbook formulas, written out
here (formulas from memory of the W3C Audio EQ Cookbook; verify), so no chainrun designer is used
as a reference. The tests of the compiled code skip when the extension is not built; the tests of
the fallback run everywhere.
"""
from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest
from scipy import signal

import chainrun.dsp.compiled as kernel
from chainrun.audio.quantise import Quantiser
from chainrun.audio.reader import unpack24
from chainrun.render.filter import _Filter, sosfilt as filter_sosfilt
from support import REPO

# A stale build is not skipped: its tests fail, saying to rebuild.
built = pytest.mark.skipif(not kernel.AVAILABLE and not kernel.REASON.startswith("stale"),
                           reason=f"compiled cascade not in use: {kernel.REASON}")


def cookbook(kind: str, f0: float, q: float, db: float, rate: float) -> np.ndarray:
    """One SOS row [b0, b1, b2, 1, a1, a2] by the W3C Audio EQ Cookbook's formulas."""
    w0 = 2 * np.pi * f0 / rate
    cw, alpha, big_a = np.cos(w0), np.sin(w0) / (2 * q), 10 ** (db / 40)
    sq = 2 * np.sqrt(big_a) * alpha
    if kind == "peak":
        b, a = (1 + alpha * big_a, -2 * cw, 1 - alpha * big_a), (1 + alpha / big_a, -2 * cw, 1 - alpha / big_a)
    elif kind == "lowpass":
        b, a = ((1 - cw) / 2, 1 - cw, (1 - cw) / 2), (1 + alpha, -2 * cw, 1 - alpha)
    elif kind == "highpass":
        b, a = ((1 + cw) / 2, -(1 + cw), (1 + cw) / 2), (1 + alpha, -2 * cw, 1 - alpha)
    elif kind == "lowshelf":
        b = (big_a * ((big_a + 1) - (big_a - 1) * cw + sq), 2 * big_a * ((big_a - 1) - (big_a + 1) * cw),
             big_a * ((big_a + 1) - (big_a - 1) * cw - sq))
        a = ((big_a + 1) + (big_a - 1) * cw + sq, -2 * ((big_a - 1) + (big_a + 1) * cw),
             (big_a + 1) + (big_a - 1) * cw - sq)
    else:                                                                   # highshelf
        b = (big_a * ((big_a + 1) + (big_a - 1) * cw + sq), -2 * big_a * ((big_a - 1) + (big_a + 1) * cw),
             big_a * ((big_a + 1) + (big_a - 1) * cw - sq))
        a = ((big_a + 1) - (big_a - 1) * cw + sq, 2 * ((big_a - 1) - (big_a + 1) * cw),
             (big_a + 1) - (big_a - 1) * cw - sq)
    row = np.array([b[0], b[1], b[2], a[0], a[1], a[2]]) / a[0]
    # analytic: a biquad is stable iff |a2| < 1 and |a1| < 1 + a2 (the stability triangle)
    assert abs(row[5]) < 1 and abs(row[4]) < 1 + row[5]
    return row


def random_cascade(rng, rate=48000.0) -> np.ndarray:
    kinds = ["peak", "lowpass", "highpass", "lowshelf", "highshelf"]
    return np.array([cookbook(kinds[rng.integers(5)], rng.uniform(20, 0.45 * rate), rng.uniform(0.3, 12),
                              rng.uniform(-18, 18), rate) for _ in range(rng.integers(1, 9))])


def run_both(sos, blocks, channels):
    """Feed the same blocks to the kernel and to sosfilt, each carrying its own state; compare
    the bytes of every block's output and state."""
    zk = zs = np.zeros((len(sos), channels, 2))
    for x in blocks:
        yk, zk = kernel.cascade(sos, x, axis=-1, zi=zk)
        ys, zs = signal.sosfilt(sos, x, axis=-1, zi=zs)          # scipy.signal (reference library)
        assert yk.shape == ys.shape and zk.shape == zs.shape
        assert yk.tobytes() == ys.tobytes() and np.array_equal(yk, ys, equal_nan=True)
        assert np.ascontiguousarray(zk).tobytes() == np.ascontiguousarray(zs).tobytes()


@built
def test_the_built_extension_is_current_and_in_use():
    # A build from another _cascade.c is refused (kernel.REASON says "stale"): rebuild it.
    assert kernel.AVAILABLE, kernel.REASON


@built
@pytest.mark.parametrize("seed", range(40))
def test_kernel_gives_sosfilts_bytes_over_random_cascades_blocks_and_channels(seed):
    rng = np.random.default_rng(seed)
    sos, channels = random_cascade(rng), int(rng.integers(1, 9))
    sizes = [int(rng.integers(0, 700)) * 2 + 1 for _ in range(4)] + [1]   # odd sizes
    level = 10 ** rng.uniform(-3, 0)
    blocks = [level * rng.standard_normal((channels, n)) for n in sizes]
    run_both(sos, blocks, channels)


@built
@pytest.mark.parametrize("channels", [1, 2, 3])
def test_kernel_gives_sosfilts_bytes_through_the_subnormal_range(channels):
    rng = np.random.default_rng(7)
    sos = np.array([cookbook("peak", 9000, 0.7, 6, 48000), cookbook("highpass", 3000, 0.5, 0, 48000)])
    tiny = 1e-310 * rng.standard_normal((channels, 999))          # IEEE 754: subnormal doubles
    loud_then_quiet = np.concatenate([1e-300 * rng.standard_normal((channels, 101)),
                                      np.zeros((channels, 20001))], axis=1)
    run_both(sos, [tiny, loud_then_quiet[:, :5001], loud_then_quiet[:, 5001:]], channels)


@built
def test_kernel_gives_sosfilts_bytes_at_huge_values_and_overflow():
    rng = np.random.default_rng(8)
    sos = np.array([cookbook("peak", 100, 8, 18, 48000), cookbook("lowshelf", 60, 0.7, 12, 48000)])
    blocks = [1e300 * rng.standard_normal((2, 333)), 1e150 * rng.standard_normal((2, 777))]
    run_both(sos, blocks, 2)


@built
def test_kernel_gives_sosfilts_bytes_on_long_cascades_and_strided_blocks():
    rng = np.random.default_rng(9)
    sos = np.concatenate([random_cascade(rng) for _ in range(12)])     # past the 64-section pair path
    wide = rng.standard_normal((5, 4001))
    run_both(sos, [wide[:, 1::2], wide[:, ::3]], 5)                     # non-contiguous views


@built
@pytest.mark.parametrize("sections", range(1, 18))
@pytest.mark.parametrize("channels", [1, 2, 3])
def test_kernel_gives_sosfilts_bytes_for_every_shape_of_the_wavefront(sections, channels):
    # _cascade.c runs up to 8 sections of two signals, or 16 of one, side by side in vector lanes,
    # a sample entering section s one step after section s - 1, the first and last steps of each
    # block lane by lane; past 16 sections the plain loops serve. Every count from 1 to 17 with one,
    # two and three signals, and blocks shorter than the cascade (1, 2, ..., sections + 1 samples)
    # between longer ones, so that a block ends before its first sample reaches the last section.
    rng = np.random.default_rng(100 + sections)
    sos = np.concatenate([random_cascade(rng) for _ in range(sections)])[:sections]
    sizes = [1, 2, max(sections - 1, 1), sections, sections + 1, 517, 3, 1000]   # (sosfilt refuses 0)
    blocks = [rng.standard_normal((channels, n)) for n in sizes]
    blocks[5][:, ::5] = -0.0                                  # negative zeros keep their sign through it
    run_both(sos, blocks, channels)


@built
def test_kernel_leaves_its_inputs_untouched():
    rng = np.random.default_rng(10)
    sos, x = random_cascade(rng), rng.standard_normal((2, 301))
    zi = rng.standard_normal((len(sos), 2, 2))
    copies = [a.copy() for a in (sos, x, zi)]
    kernel.cascade(sos, x, zi=zi)
    assert all(np.array_equal(a, c) for a, c in zip((sos, x, zi), copies))


@built
def test_a_stale_build_is_refused(tmp_path, monkeypatch):
    edited = tmp_path / "_cascade.c"
    edited.write_text((REPO / "chainrun/dsp/_cascade.c").read_text() + "\n/* edited */\n")
    monkeypatch.setattr(kernel, "_SOURCE", edited)
    module, reason = kernel._load()
    assert module is None and reason.startswith("stale")


def test_the_environment_switch_leaves_the_kernel_unused():
    code = "import chainrun.dsp.compiled as k; print(k.AVAILABLE, k.cascade is None, k.REASON)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True,
                         env={"PYTHONPATH": str(REPO), kernel.ENV_OFF: "1"}, cwd=REPO).stdout
    assert out.startswith("False True left unused"), out


def _filter_signal(chain, channels, x, blocks):
    f = _Filter(chain, channels, 1e6)
    out, frame = [], 0
    for n in blocks:
        out.append(f(x[:, frame:frame + n].copy(), frame, float(np.abs(x[:, frame:frame + n]).max())))
        frame += n
    return f, np.concatenate(out, axis=1)


@pytest.mark.parametrize("channels", [1, 2, 6])
def test_the_filter_path_gives_the_same_bytes_with_and_without_the_kernel(monkeypatch, channels):
    rng = np.random.default_rng(11)
    sos = random_cascade(rng)
    blocks = [65535, 2, 40001, 1]                      # across the 65536-frame denormal flush point
    x = 0.25 * rng.standard_normal((channels, sum(blocks)))
    with_kernel, y_k = _filter_signal(sos, channels, x, blocks)
    assert with_kernel._sosfilt is (kernel.cascade or filter_sosfilt)
    monkeypatch.setattr(kernel, "cascade", None)       # as when the extension is not built
    without, y_s = _filter_signal(sos, channels, x, blocks)
    assert without._sosfilt is filter_sosfilt
    assert y_k.tobytes() == y_s.tobytes()
    # scipy.signal (reference library): the whole signal at once, no state carried by chainrun
    assert np.array_equal(y_s, signal.sosfilt(sos, x, axis=-1))


# --------------------------------------------------------------------------- lfilter's loop

def _lfilter_both(b, a, blocks, channels):
    """The compiled loop and scipy.signal.lfilter (reference library) over the same blocks, each with
    its own carried state; every block's output and state compared byte for byte."""
    zk = zs = zq = np.zeros((channels, len(a) - 1))
    for x in blocks:
        yk, zk = kernel.linear(b, a, x, zk)
        ys, zs = signal.lfilter(b, a, x, axis=-1, zi=zs)
        assert yk.tobytes() == ys.tobytes() and zk.tobytes() == np.ascontiguousarray(zs).tobytes()
        # the squares the loudness meter asks for: numpy.square of lfilter's output (reference libraries)
        yq, zq = kernel.linear(b, a, x, zq, square=True)
        with np.errstate(over="ignore"):                # huge outputs square to inf in both
            assert yq.tobytes() == np.square(ys).tobytes() and zq.tobytes() == zk.tobytes()


@built
@pytest.mark.parametrize("order", range(1, 9))
def test_the_linear_loop_gives_lfilters_bytes_at_every_order_it_takes(order):
    # _cascade.c has loops per order from 1 to 8 (one, two and four signals side by side); each against
    # scipy.signal.lfilter (reference library) with poles drawn inside the unit circle (stable), odd blocks
    rng = np.random.default_rng(2000 + order)
    poles = rng.uniform(0.2, 0.95, order) * np.exp(1j * rng.uniform(0, np.pi, order))
    poles[order % 2:] = np.concatenate([poles[order % 2::2], poles[order % 2::2].conj()])[: order - order % 2]
    poles[: order % 2] = poles[: order % 2].real
    a = np.real(np.poly(poles))
    b = rng.uniform(-1, 1, order + 1)
    for channels in (1, 2, 3, 4, 5, 6, 9):             # four side by side, then two, then one
        x = rng.standard_normal((channels, 3001))
        _lfilter_both(b, a, np.split(x, [1, 2, 700, 2999], axis=1), channels)


@built
@pytest.mark.parametrize("seed", range(24))
def test_the_linear_loop_gives_lfilters_bytes_for_cascades_folded_into_one_filter(seed):
    # a cascade of 1-4 cookbook biquads folded into one filter of order 2-8 (scipy.signal.sos2tf), as
    # the loudness meter folds its two K-weighting stages; 1-5 channels, odd blocks, state carried
    rng = np.random.default_rng(1000 + seed)
    sos = random_cascade(rng)[: int(rng.integers(1, 5))]
    b, a = signal.sos2tf(sos)
    channels = int(rng.integers(1, 6))
    x = rng.standard_normal((channels, 5000)) * 10.0 ** rng.uniform(-6, 1)
    cuts = sorted(set(rng.integers(1, 5000, 4).tolist()))
    _lfilter_both(b, a, np.split(x, cuts, axis=1), channels)


@built
def test_the_linear_loop_gives_lfilters_bytes_through_the_subnormal_range_and_at_huge_values():
    from chainrun.meters.weighting import k_weighting_sos
    b, a = signal.sos2tf(k_weighting_sos(48000))
    x = np.zeros((2, 20000))
    x[:, 0] = 1e-300                  # the state decays through the subnormal range
    _lfilter_both(b, a, [x[:, :7001], x[:, 7001:]], 2)
    big = np.full((3, 500), 1e300)    # overflow to inf, then inf - inf
    big[1, ::2] = -1e300
    _lfilter_both(b, a, [big], 3)


@built
def test_the_linear_loop_leaves_other_filters_to_scipy_and_modifies_no_input():
    rng = np.random.default_rng(8)
    b, a = signal.sos2tf(random_cascade(rng)[:2])
    x, zi = rng.standard_normal((2, 100)), rng.standard_normal((2, len(a) - 1))
    copies = [v.copy() for v in (b, a, x, zi)]
    kernel.linear(b, a, x, zi)
    assert all(c.tobytes() == v.tobytes() for c, v in zip(copies, (b, a, x, zi)))
    assert kernel.linear(b, a * 2.0, x, zi) is None                     # a[0] != 1
    assert kernel.linear(b.astype(np.float32), a, x, zi) is None        # not float64 throughout
    assert kernel.linear(np.ones(10), np.r_[1.0, np.zeros(9)], x, np.zeros((2, 9))) is None   # order 9


# --- PCM_24 packing and unpacking (Quantiser.packed24, reader.unpack24) -----------------------------
# The reference is each function's numpy form (the compiled names set to None, as without a build),
# whose bytes tests/unit/audio/test_formats.py checks against libsndfile and numpy's byte views.

def _packed_both(monkeypatch, y, counted=None, peak=None, big_endian=False, dither=False, seed=3):
    """(bytes, clipped) of packed24 with the compiled loop, then with the numpy form."""
    got, compiled_loop = [], kernel.pack24_row
    assert compiled_loop is not None                                     # the compiled loop is in use
    for loop in (compiled_loop, None):
        monkeypatch.setattr(kernel, "pack24_row", loop)
        q = Quantiser("PCM_24", dither, seed)
        n = 3 * y.size
        out = q.packed24(y, counted, peak, big_endian, out=np.full(n + 5, 0xAA, dtype=np.uint8))
        assert (out[n:] == 0xAA).all()                                   # nothing written past the samples
        got.append((out[:n].tobytes(), q.clipped, q.rng.random() if dither else None))   # draws used alike
    monkeypatch.setattr(kernel, "pack24_row", compiled_loop)
    return got


@built
@pytest.mark.parametrize("channels", [1, 2, 3, 4, 5, 6])
@pytest.mark.parametrize("frames", [0, 1, 7, 1001])
@pytest.mark.parametrize("dither", [False, True])
@pytest.mark.parametrize("big_endian", [False, True])
def test_pack24_gives_the_numpy_forms_bytes_and_counts(monkeypatch, channels, frames, dither, big_endian):
    rng = np.random.default_rng(channels * 1000 + frames + 7 * dither + big_endian)
    y = rng.uniform(-1.1, 1.1, (channels, frames))                 # beyond full scale too: codes clip
    if frames:
        y[0, 0] = -1.0                                              # the lowest code
        y[-1, -1] = (2 ** 23 - 0.5) / 2 ** 23                       # a tie just above the top code
    counted = rng.random((channels, frames)) < 0.3                  # some already counted by the clip policy
    for marks in (None, counted):
        compiled_form, numpy_form = _packed_both(monkeypatch, y, marks, big_endian=big_endian, dither=dither)
        assert compiled_form == numpy_form
    # a true peak lets the search be skipped; the bytes and counts stay the numpy form's
    quiet = y * 0.5
    peak = float(np.abs(quiet).max()) if frames else None
    compiled_form, numpy_form = _packed_both(monkeypatch, quiet, peak=peak, big_endian=big_endian, dither=dither)
    assert compiled_form == numpy_form


@built
@pytest.mark.parametrize("big_endian", [False, True])
def test_pack24_rounds_exact_halves_to_even(monkeypatch, big_endian):
    # IEEE 754 roundTiesToEven (numpy.rint's rounding in the default mode): k + 0.5 goes to whichever of
    # k and k + 1 is even. Rounding half away from zero would give 3 for 2.5, -3 for -2.5, and
    # -2**23 - 1 (a clip, counted) for -2**23 - 0.5.
    halves = np.array([0.5, 1.5, 2.5, -0.5, -1.5, -2.5, 4096.5, -4097.5, 2 ** 23 - 2.5, 2 ** 23 - 1.5,
                       -2 ** 23 + 0.5, -2 ** 23 - 0.5, 2 ** 23 - 0.5])
    even = [0, 2, 2, 0, -2, -2, 4096, -4098, 2 ** 23 - 2, 2 ** 23 - 2, -2 ** 23, -2 ** 23, 2 ** 23 - 1]
    clipped = 1                        # 2**23 - 0.5 rounds to 2**23, one above the top code: clipped, counted
    y = (halves / 2 ** 23)[None, :]    # exact: halves of codes are multiples of 2**-24, well inside float64
    # analytic: the little-endian 24-bit sample is the low three bytes of the two's-complement code
    want = np.array(even, dtype="<i4").view(np.uint8).reshape(-1, 4)[:, :3]
    want = np.ascontiguousarray(want[:, ::-1] if big_endian else want).tobytes()
    compiled_form, numpy_form = _packed_both(monkeypatch, y, big_endian=big_endian)
    assert compiled_form == numpy_form == (want, clipped, None)
    # the raw loop too, on a stereo layout: row 1 alone, three bytes every six
    out = np.zeros(6 * y.shape[1], dtype=np.uint8)
    n = kernel.pack24_row(np.ascontiguousarray(y[0]), 2.0 ** 23, None, 0, None, False, -2.0 ** 23, 2.0 ** 23 - 1,
                          out, 3, 6, big_endian)
    assert n == clipped and out.reshape(-1, 6)[:, 3:].tobytes() == want
    assert not out.reshape(-1, 6)[:, :3].any()                              # the other channel untouched


@built
def test_pack24_sends_rows_with_nan_or_infinity_to_the_numpy_form(monkeypatch):
    y = np.array([[0.25, np.nan, -0.5, 0.1], [np.inf, -np.inf, 0.75, 0.0], [0.1, 0.2, 0.3, 1.5]])
    out = np.zeros(12, dtype=np.uint8)
    assert kernel.pack24_row(y[0], 2.0 ** 23, None, 0, None, False, -2.0 ** 23, 2.0 ** 23 - 1, out, 0, 3, False) == -1
    with np.errstate(invalid="ignore"):                   # numpy's cast of NaN warns; both paths take it
        compiled_form, numpy_form = _packed_both(monkeypatch, y, counted=np.zeros(y.shape, dtype=bool))
    assert compiled_form == numpy_form


@built
@pytest.mark.parametrize("channels", [1, 2, 3, 4, 5, 6])
@pytest.mark.parametrize("frames", [0, 1, 7, 1001])
def test_unpack24_gives_the_numpy_forms_values(monkeypatch, channels, frames):
    rng = np.random.default_rng(channels * 100 + frames)
    raw = np.frombuffer(rng.bytes(3 * channels * frames + 1), dtype=np.uint8)
    got, compiled_loop = [], kernel.unpack24_rows
    assert compiled_loop is not None                                     # the compiled loop is in use
    for loop in (compiled_loop, None):
        monkeypatch.setattr(kernel, "unpack24_rows", loop)
        out = np.full((channels, frames + 3), np.nan)
        ext = np.full((2, channels), np.nan)
        got.append(unpack24(raw, frames, channels, out, extremes=ext).tobytes())
        assert np.isnan(out[:, frames:]).all()                            # nothing written past the frames
        if frames:                                  # each row's max and min, numpy's (from the registry)
            assert np.array_equal(ext, [out[:, :frames].max(axis=1), out[:, :frames].min(axis=1)])
    assert got[0] == got[1]
    with pytest.raises(ValueError, match="raw"):
        compiled_loop(raw[:3 * channels * frames], frames, channels, np.empty((channels, frames)))


@built
@pytest.mark.parametrize("rows", [(2, 2), (1, 2), (3, 3), (2, 0), (5, 1)])
def test_the_linear_loop_on_two_blocks_at_once_gives_lfilters_bytes_for_each(rows):
    # the loudness meters of a file's input and output K-weight their blocks in one pass (their rows
    # side by side); each block's squares and state against scipy.signal.lfilter (reference library)
    rng = np.random.default_rng(sum(rows))
    b, a = signal.sos2tf(random_cascade(rng)[:2])
    x1, x2 = rng.standard_normal((rows[0], 4001)), rng.standard_normal((rows[1], 4001))
    z1, z2 = rng.standard_normal((rows[0], len(a) - 1)), rng.standard_normal((rows[1], len(a) - 1))
    y1, f1, y2, f2 = kernel.linear_two(b, a, x1, z1, x2, z2, square=True)
    for x, z, y, f in ((x1, z1, y1, f1), (x2, z2, y2, f2)):
        ys, zs = signal.lfilter(b, a, x, axis=-1, zi=z)
        assert y.tobytes() == np.square(ys).tobytes() and f.tobytes() == np.ascontiguousarray(zs).tobytes()
    assert kernel.linear_two(b, a, x1, z1, x2[:, :4000], z2) is None          # not the same frames


@built
@pytest.mark.parametrize("n", [0, 1, 7, 31, 32, 33, 64, 4097, 65536])
def test_the_rms_sums_give_their_numpy_forms_bits_and_stay_near_the_exact_sums(n):
    import math

    from chainrun.dsp import sums
    rng = np.random.default_rng(n)
    x = rng.standard_normal(n) * 10.0 ** rng.uniform(-3, 3, n)
    if n > 3:
        x[:3] = [-0.0, 1e-310, -1e300 ** 0.5]
    got, want = kernel.row_sums(x), sums._row_sums_numpy(x)
    assert np.array([got]).tobytes() == np.array([want]).tobytes()     # the same bits
    # math.fsum (Python standard library): the correctly rounded sums; the module's bound
    exact1, exact2 = math.fsum(x.tolist()), math.fsum((x * x).tolist())
    scale1, scale2 = float(np.abs(x).sum()), float((x * x).sum())
    assert abs(got[0] - exact1) <= (n / 32 + 40) * 2.0 ** -53 * scale1
    assert abs(got[1] - exact2) <= (n / 32 + 40) * 2.0 ** -53 * scale2 * 2


@built
@pytest.mark.parametrize("seed", range(6))
def test_the_segment_sums_give_numpys_reduceat_bits(seed):
    # the reference is numpy's own add.reduceat (numpy, from the registry): the loudness meter's
    # sub-block sums must not move by a bit when the compiled loop takes them over
    from chainrun.dsp import sums
    rng = np.random.default_rng(seed)
    rows, n = int(rng.integers(1, 6)), int(rng.integers(1, 6000))
    x = rng.standard_normal((rows, n)) * 10.0 ** rng.uniform(-150, 150, (rows, n))
    if seed % 2:
        x *= x                                                   # squares, as the meter sums
    x[:, :: max(n // 7, 1)] = -0.0 if seed % 2 == 0 else 0.0
    stop = int(rng.integers(1, n + 1))
    k = int(rng.integers(1, min(stop, 40) + 1))
    starts = np.sort(rng.choice(stop, size=k, replace=False)).astype(np.int64)
    if seed == 3 and k > 2:
        starts[1] = starts[2]                                    # an empty segment: its first value, as numpy
    out = np.empty((rows, k))
    kernel.segment_sums(x, starts, stop, out)
    assert out.tobytes() == np.add.reduceat(x[:, :stop], starts, axis=1).tobytes()
    assert sums.segment_sums(x, starts, stop).tobytes() == out.tobytes()


@built
def test_the_segment_sums_cover_every_length_and_refuse_starts_outside_the_row():
    rng = np.random.default_rng(48000)
    for n in [*range(1, 140), 255, 256, 257, 441, 480, 960, 1920, 3840]:
        x = rng.standard_normal((2, n + 3)) ** 2
        starts = np.array([0, 1, 1 + n // 2], dtype=np.int64)[: 1 + (n > 1) + (n > 3)]
        out = np.empty((2, starts.shape[0]))
        kernel.segment_sums(x, starts, n, out)
        assert out.tobytes() == np.add.reduceat(x[:, :n], starts, axis=1).tobytes(), n
    with pytest.raises(ValueError, match="segment_sums"):
        kernel.segment_sums(np.ones((2, 8)), np.array([0, 8], dtype=np.int64), 8, np.empty((2, 2)))


def test_segment_sums_step_aside_for_a_loop_that_does_not_give_numpys_bits(monkeypatch):
    from chainrun.dsp import sums

    def off_by_a_bit(x, starts, stop, out):
        out[...] = np.nextafter(np.add.reduceat(x[:, :stop], starts, axis=1), np.inf)

    monkeypatch.setattr(sums.compiled, "segment_sums", off_by_a_bit)
    monkeypatch.setattr(sums, "_compiled_segments", [])
    x = np.random.default_rng(5).random((2, 2000))
    starts = np.arange(0, 2000, 480, dtype=np.int64)
    assert sums.segment_sums(x, starts, 2000).tobytes() == np.add.reduceat(x, starts, axis=1).tobytes()
    assert sums._compiled_segments == [None]


@built
@pytest.mark.parametrize("n", [1, 7, 8, 31, 32, 33, 65, 4099, 65536])
def test_the_row_extremes_are_numpys_max_and_min(n):
    # the reference is numpy's own max and min (from the registry), NaN propagating as there
    from chainrun.dsp.sums import row_extremes
    rng = np.random.default_rng(n)
    x = rng.standard_normal((4, n)) * 10.0 ** rng.uniform(-300, 300, (4, n))
    x[1, n // 2] = np.inf
    x[2, n - 1] = -np.inf
    x[3, n // 3] = np.nan
    for rows in (x, x[:3], np.ascontiguousarray(x[:, ::-1])):
        hi, lo = row_extremes(rows)
        want_hi, want_lo = rows.max(axis=1), rows.min(axis=1)
        assert np.array_equal(hi, want_hi, equal_nan=True) and np.array_equal(lo, want_lo, equal_nan=True)
    with pytest.raises(ValueError, match="row_extremes"):
        kernel._module.row_extremes(np.ones((2, 0)), np.empty(2), np.empty(2))
