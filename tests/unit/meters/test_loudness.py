"""Tests of chainrun.meters.loudness: K-weighting, EBU Tech 3341/3342 cases, pyloudnorm, block-split exactness.

Each expected value names its source beside the check.  The Tech 3341 / 3342 signals are
synthesised here from their published descriptions as remembered (the documents themselves could
not be read from this machine): every such case says "from memory; verify".  Where the
expected value also follows analytically from BS.1770-4's definitions, the comment says so.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy import signal

from chainrun.meters.loudness import LoudnessMeter, LoudnessReading, k_weighting_sos
from chainrun.meters import MeterBank as Meter     # the standard bank, holding the true-peak meter

# ITU-R BS.1770-4 Annex 1, Table 1 (stage 1) and Table 2 (stage 2), 48 kHz, [b0, b1, b2, 1, a1, a2]
# (written from memory of ITU-R BS.1770-4 Tables 1/2; confirmed to 1.1e-12 by an independent
# derivation, pyloudnorm's "DeMan" filter, and by the shelf's unity gain at DC: see the tests below)
BS1770_TABLE = np.array([
    [1.53512485958697, -2.69169618940638, 1.19839281085285, 1.0, -1.69065929318241, 0.73248077421585],
    [1.0, -2.0, 1.0, 1.0, -1.99004745483398, 0.99007225036621],
])
TOL_MSI = 0.1     # EBU Tech 3341 (2016) Table 1: +-0.1 LU for M, S, I (from memory; public transcriptions of the table agree)
TOL_LRA = 1.0     # EBU Tech 3342 (2016) Table 1: +-1 LU (from memory; public transcriptions of the table agree)


def meter(x: np.ndarray, rate: int = 48000, block: int = 65536, mask=None) -> LoudnessReading:
    x = np.atleast_2d(np.asarray(x, dtype=np.float64))
    m = LoudnessMeter(rate, x.shape[0], channel_mask=mask)
    for i in range(0, x.shape[1], block):
        m.update(x[:, i:i + block])
    return m.reading()


def tone(level_dbfs: float, seconds: float, rate: int = 48000, freq: float = 1000.0,
         start: int = 0) -> np.ndarray:
    """A sine of peak amplitude ``level_dbfs`` (0 dBFS = 1.0), phase running from sample ``start``."""
    n = np.arange(start, start + int(round(seconds * rate)))
    return 10.0 ** (level_dbfs / 20.0) * np.sin(2.0 * np.pi * freq * n / rate)


def stereo_steps(steps, rate: int = 48000) -> np.ndarray:
    """Stereo 1 kHz tone made of (dBFS, seconds) steps, phase continuous."""
    parts, pos = [], 0
    for level, secs in steps:
        p = tone(level, secs, rate, start=pos) if level is not None else np.zeros(int(round(secs * rate)))
        parts.append(p)
        pos += p.shape[0]
    x = np.concatenate(parts)
    return np.vstack([x, x])


# --- K-weighting ------------------------------------------------------------------------------

def test_k_weighting_reproduces_the_48k_table():
    # ITU-R BS.1770-4 Annex 1 Tables 1 and 2
    assert_allclose(k_weighting_sos(48000), BS1770_TABLE, rtol=0, atol=1e-12)


@pytest.mark.parametrize("rate", [44100, 96000])
@pytest.mark.parametrize("freq", [100.0, 1000.0, 10000.0])
def test_k_weighting_response_at_other_rates(rate, freq):
    # analytic: the prewarped bilinear transform keeps the analog prototype's response exactly at
    # the two prewarp frequencies and warps frequency by under 1 % below 10 kHz at 44.1 kHz, where the
    # shelf is flat to 0.01 dB over that span; so within 0.01 dB of the 48 kHz table's response.
    ref = signal.sosfreqz(BS1770_TABLE, worN=[freq], fs=48000)[1]     # scipy.signal (reference library)
    got = signal.sosfreqz(k_weighting_sos(rate), worN=[freq], fs=rate)[1]
    assert abs(20 * np.log10(abs(got[0]) / abs(ref[0]))) < 0.01


def test_k_weighting_table_matches_an_independent_derivation():
    # pyloudnorm (reference library, test extra) designs the two stages from analog parameters fitted
    # to the standard's filter (its filter_class "DeMan", after B. De Man's 2018 AES paper evaluating
    # R 128 implementations: citation from memory); at 48 kHz that design
    # must give the table of BS.1770-4 Annex 1 to rounding. Measured: 1.05e-12. This confirms the
    # remembered table digits (and so every rate's derivation from them) without reading the standard.
    pyln = pytest.importorskip("pyloudnorm")
    ref = [np.r_[f.b, f.a] for f in pyln.Meter(48000, filter_class="DeMan")._filters.values()]
    assert_allclose(np.array(ref), BS1770_TABLE, rtol=0, atol=2e-12)


def test_k_weighting_table_shelf_is_unity_at_dc_and_4db_at_nyquist():
    # analytic: the stage-1 shelf of BS.1770-4 passes DC unchanged, so b0+b1+b2 == 1+a1+a2 (a typo in
    # any one of its five coefficients breaks this); its high-frequency gain, (b0-b1+b2)/(1-a1+a2) at
    # the Nyquist frequency, is the +4 dB of the shelf (BS.1770-4 Annex 1 describes stage 1 as a
    # +4 dB high shelf: from memory; the table gives +3.99984 dB). Stage 2's numerator is (1, -2, 1):
    # a double zero at DC, exactly.
    b, a = BS1770_TABLE[0, :3], BS1770_TABLE[0, 3:]
    assert abs(b.sum() / a.sum() - 1.0) < 1e-12
    assert abs(20 * np.log10((b[0] - b[1] + b[2]) / (a[0] - a[1] + a[2])) - 4.0) < 0.001
    assert BS1770_TABLE[1, :3].tolist() == [1.0, -2.0, 1.0]


def test_k_weighting_at_1k_is_cancelled_by_the_offset():
    # ITU-R BS.1770-4 Annex 1: the -0.691 offset compensates the K-weighting gain at 1 kHz; the table's
    # filter gives +0.698 dB there (scipy.signal), so a 1 kHz tone reads 0.007 LU above its level
    h = signal.sosfreqz(BS1770_TABLE, worN=[1000.0], fs=48000)[1]
    assert abs(20 * np.log10(abs(h[0])) - 0.691) < 0.01


def steps_model(steps, window_s: float, rate: int = 48000) -> np.ndarray:
    """Mean squares of a steps signal's windows every 100 ms, from the step levels alone (analytic).

    BS.1770-4 Annex 1: a stereo sine of peak amplitude A at 1 kHz has, after K-weighting, a mean
    square of A**2/2 * |K(1 kHz)|**2 per channel, summed over the two channels; a window's mean
    square is the time-weighted mean of the steps it covers (the filter's settling and the partial
    cycles at the window edges are left out: they move a figure by about 1e-5 LU here).
    """
    k2 = abs(signal.sosfreqz(BS1770_TABLE, worN=[1000.0], fs=rate)[1][0]) ** 2
    bounds = np.cumsum([0] + [int(round(secs * rate)) for _, secs in steps])
    power = [0.0 if level is None else 10.0 ** (level / 10.0) * k2 for level, _ in steps]
    window, hop = int(round(window_s * rate)), rate // 10
    return np.array([sum(p * max(0, min(start + window, b1) - max(start, b0))
                         for p, b0, b1 in zip(power, bounds[:-1], bounds[1:])) / window
                     for start in range(0, bounds[-1] - window + 1, hop)])


def model_lufs(z):
    return -0.691 + 10.0 * np.log10(z)          # BS.1770-4 Annex 1, eq. 2


def model_integrated(steps) -> float:
    """BS.1770-4 gating applied to the analytic 400 ms blocks: -70 LUFS, then -10 LU."""
    z = steps_model(steps, 0.4)
    z = z[z > 10.0 ** ((-70.0 + 0.691) / 10.0)]
    return float(model_lufs(z[z > z.mean() / 10.0].mean()))


def model_range(steps) -> float:
    """EBU Tech 3342 on the analytic 3 s windows: -70 LUFS, -20 LU, 95th minus 10th percentile."""
    z = steps_model(steps, 3.0)
    z = z[z > 10.0 ** ((-70.0 + 0.691) / 10.0)]
    v = np.sort(model_lufs(z[z > z.mean() / 100.0]))
    return float(v[math.floor((v.size - 1) * 0.95 + 0.5)] - v[math.floor((v.size - 1) * 0.10 + 0.5)])


# --- EBU Tech 3341 (2016) minimum requirements ----------------------------------------------

@pytest.mark.parametrize("case, steps, expect", [
    # (case, [(dBFS, s)...], expected I), stereo 1 kHz sine; EBU Tech 3341 (2016) Table 1, signals and
    # values from memory (verify the signals against the published text); each expected value is
    # confirmed analytically from its signal (model_integrated, in the test)
    (1, [(-23, 20)], -23.0),
    (2, [(-33, 20)], -33.0),
    (3, [(-36, 10), (-23, 60), (-36, 10)], -23.0),
    (4, [(-72, 10), (-36, 10), (-23, 60), (-36, 10), (-72, 10)], -23.0),
    (5, [(-26, 20), (-20, 20.1), (-26, 20)], -23.0),
])
def test_tech3341_integrated(case, steps, expect):
    r = meter(stereo_steps(steps))
    assert abs(r.integrated_lufs - expect) <= TOL_MSI        # EBU Tech 3341 case `case`
    # analytic (BS.1770-4 gating on the step levels, steps_model): the remembered expected value
    # follows from the remembered signal within the standard's tolerance (model: -22.993, -32.993,
    # -23.014, -23.014, -22.979), and the meter reads the model within 1e-4 LU (seen: 2e-6)
    model = model_integrated(steps)
    assert abs(model - expect) <= TOL_MSI
    assert abs(r.integrated_lufs - model) < 1e-4
    if case in (1, 2):
        # analytic: a steady tone's M and S equal its I
        assert abs(r.max_momentary_lufs - expect) <= TOL_MSI
        assert abs(r.max_short_term_lufs - expect) <= TOL_MSI


@pytest.mark.parametrize("freq, level", [(997.0, -20.0), (100.0, -20.0), (5000.0, -30.0)])
def test_steady_sine_reads_its_level_through_the_k_filter(freq, level):
    # analytic, BS.1770-4 Annex 1 eq. 2: a stereo sine of peak amplitude A has mean square A**2/2 per
    # channel, so it reads 20*log10(A) + 20*log10(|K(f)|) - 0.691 (K from the 48 kHz table, scipy),
    # -19.994 LUFS for 997 Hz at -20 dBFS (EBU Tech 3341 case 1 asks -23.0 +-0.1 at 1 kHz, -23 dBFS).
    # A window of T seconds holds a non-whole number of periods, which moves its mean square by at
    # most a factor 1 +- 1/(2*pi*f*T): that bounds the 400 ms and 3 s maxima; the integrated
    # loudness averages 197 blocks and must be within 0.001 LU.
    x = tone(level, 20.0, freq=freq)
    r = meter(np.vstack([x, x]))
    k = abs(signal.sosfreqz(BS1770_TABLE, worN=[freq], fs=48000)[1][0])
    expect = level + 20 * np.log10(k) - 0.691
    assert abs(r.integrated_lufs - expect) < 0.001
    assert abs(r.max_momentary_lufs - expect) <= 10 * np.log10(1 + 1 / (2 * np.pi * freq * 0.4)) + 1e-4
    assert abs(r.max_short_term_lufs - expect) <= 10 * np.log10(1 + 1 / (2 * np.pi * freq * 3.0)) + 1e-4


@pytest.mark.parametrize("rate", [44100, 96000])
def test_tech3341_case1_at_other_rates(rate):
    r = meter(stereo_steps([(-23, 20)], rate), rate)
    for v in (r.integrated_lufs, r.max_momentary_lufs, r.max_short_term_lufs):
        assert abs(v + 23.0) <= TOL_MSI                      # EBU Tech 3341 case 1, at another rate


@pytest.mark.parametrize("mask", [None, 0x3F])
def test_tech3341_case6_five_channels(mask):
    # EBU Tech 3341 case 6 (public copies of Table 1 agree): 5.0, 1 kHz, L/R -28 dBFS, C -24 dBFS, Ls/Rs -30 dBFS,
    # 20 s -> I = -23.0.  (analytic check of the memory: 2*10^-3.1 + 10^-2.7 + 2*1.41*10^-3.3 -> -23.02)
    t = {lv: tone(lv, 20) for lv in (-28, -24, -30)}
    chans = [t[-28], t[-28], t[-24], t[-30], t[-30]]
    if mask == 0x3F:                                         # the 6-channel WAVE_FORMAT_EXTENSIBLE file
        chans.insert(3, np.zeros_like(t[-28]))
    r = meter(np.vstack(chans), mask=mask)
    assert abs(r.integrated_lufs + 23.0) <= TOL_MSI
    # analytic, BS.1770-4 Annex 1 eq. 2 with the weights G (1.0 for L, R, C; 1.41 for Ls, Rs): a
    # steady sine of amplitude A adds G * A**2/2 * |K(1 kHz)|**2 (model: -23.016 LUFS)
    k2 = abs(signal.sosfreqz(BS1770_TABLE, worN=[1000.0], fs=48000)[1][0]) ** 2
    power = sum(g * 10.0 ** (lv / 10.0) / 2 * k2 for g, lv in
                [(1.0, -28), (1.0, -28), (1.0, -24), (1.41, -30), (1.41, -30)])
    assert abs(r.integrated_lufs - model_lufs(power)) < 1e-4


def test_tech3341_case9_short_term_constant():
    # EBU Tech 3341 case 9 (public copies of Table 1; verify): 1.34 s at -20 dBFS, 1.66 s at -30 dBFS,
    # repeated 5 times;
    # S = -23.0 once 3 s are in.  analytic: every 3 s window holds one period: 10log10((1.34*0.01+1.66*0.001)/3)
    steps = [(-20, 1.34), (-30, 1.66)] * 5
    r = meter(stereo_steps(steps))
    assert abs(r.max_short_term_lufs + 23.0) <= TOL_MSI
    z = steps_model(steps, 3.0)                 # analytic: every full window the same (model: -22.986)
    assert np.ptp(z) < 1e-12 * z[0]
    assert abs(r.max_short_term_lufs - model_lufs(z[0])) < 1e-4


def test_tech3341_case12_momentary_constant():
    # EBU Tech 3341 case 12 (public copies of Table 1; verify): 0.18 s at -20 dBFS, 0.22 s at -30 dBFS,
    # repeated 25 times;
    # M = -23.0.  analytic: 10log10((0.18*0.01 + 0.22*0.001)/0.4) = -22.97
    steps = [(-20, 0.18), (-30, 0.22)] * 25
    r = meter(stereo_steps(steps))
    assert abs(r.max_momentary_lufs + 23.0) <= TOL_MSI
    z = steps_model(steps, 0.4)                 # analytic: every full window the same (model: -22.960)
    assert np.ptp(z) < 1e-12 * z[0]
    assert abs(r.max_momentary_lufs - model_lufs(z[0])) < 1e-4


# EBU Tech 3341 (2016) Table 1, cases 9 to 23: signal descriptions as transcribed in public copies of
# the table (the published text itself is not at hand; verify). "Similar to #1": stereo 1 kHz sine,
# the signal in phase in both channels.

@pytest.mark.parametrize("case, seconds, step, attr", [(10, 3.0, 0.15, "max_short_term_lufs"),
                                                       (13, 0.4, 0.02, "max_momentary_lufs")])
@pytest.mark.parametrize("i", [0, 1, 7, 13, 19])
def test_tech3341_cases10_13_each_segment(case, seconds, step, attr, i):
    # cases 10 / 13 (file-based meters): 20 segments (i*0.15 s / i*20 ms of silence; 3 s / 400 ms at
    # -23.0 dBFS; 1 s of silence), i = 0 .. 19, each metered from a reset: Max S / Max M = -23.0 +-0.1.
    # With a 10 ms hop the best window misses at most 5 ms of a 0.4 s burst: analytic bound
    # 10log10(0.395/0.4) = -0.055 LU, inside +-0.1.
    r = meter(stereo_steps([(None, i * step), (-23, seconds), (None, 1.0)]))
    assert abs(getattr(r, attr) + 23.0) <= TOL_MSI          # EBU Tech 3341 case `case`, segment i + 1


@pytest.mark.parametrize("case, seconds, step, attr", [(11, 3.0, 0.15, "max_short_term_lufs"),
                                                       (14, 0.4, 0.02, "max_momentary_lufs")])
def test_tech3341_cases11_14_successive_maxima(case, seconds, step, attr):
    # cases 11 / 14 ('live' meters): 20 tones (i*0.15 s / i*20 ms of silence; 3 s / 400 ms at -38.0+i
    # dBFS; 3 - i*0.15 s / 400 - i*20 ms of silence), i = 0 .. 19, one stream: Max S / Max M = -38.0,
    # -37.0, ..., -19.0 LUFS +-0.1, successive values. The levels rise, so the maximum read at the end of
    # each segment is that segment's value.
    m = LoudnessMeter(48000, 2)
    for i in range(20):
        m.update(stereo_steps([(None, i * step), (-38 + i, seconds), (None, seconds - i * step)]))
        assert abs(getattr(m.reading(), attr) - (-38 + i)) <= TOL_MSI   # EBU Tech 3341 case `case`


def _taper(x: np.ndarray, seconds: float, rate: int) -> np.ndarray:
    """A sin**2 fade-in and fade-out of ``seconds`` (the shape is chosen here; the table gives none)."""
    k = int(seconds * rate)
    ramp = np.sin(np.linspace(0.0, np.pi / 2, k)) ** 2
    x = x.copy()
    x[:k] *= ramp
    x[-k:] *= ramp[::-1]
    return x


@pytest.mark.parametrize("case, period, phase_deg, amp, expect", [
    # stereo sine of frequency fs/period, amplitude in FFS (1.0 = full scale), phase, 48 kHz, tapered
    # with a 10 ms fade-in and fade-out; expected Max true-peak +0.2/-0.4 dBTP
    (15, 4, 0.0, 0.50, -6.0),      # fs/4, 0 deg
    (16, 4, 45.0, 0.50, -6.0),     # fs/4, 45 deg: samples at -9.03 dBFS
    (17, 6, 60.0, 0.50, -6.0),     # fs/6, 60 deg
    (18, 8, 67.5, 0.50, -6.0),     # fs/8, 67.5 deg
    (19, 4, 45.0, 1.41, 3.0),      # fs/4, 45 deg, samples at 0 dBFS: true peak +3 dBTP
])
def test_tech3341_true_peak(case, period, phase_deg, amp, expect):
    n = np.arange(48000)
    x = _taper(amp * np.sin(2 * np.pi * n / period + math.radians(phase_deg)), 0.01, 48000)
    m = Meter(48000, 2)
    m.update(np.vstack([x, x]))
    tp = m.result().channels[0].true_peak_dbtp
    assert -0.4 <= tp - expect <= 0.2                      # EBU Tech 3341 case `case`: +0.2 / -0.4 dB


def _tech3341_case20(offset: int, fs: int = 48000) -> np.ndarray:
    """EBU Tech 3341 cases 20 to 23: a sine of fs/6 at 0.50 FFS holding one period of a sine of fs/4 at
    1.00, continuous in phase at both sides of that period, synthesised at 4*fs, low-pass (anti-alias)
    filtered and taken down to fs from sample ``offset`` (0 to 3) of the 4*fs signal, tapered.

    Chosen here (the table leaves them open): 1 s of tone, the single period inserted at a zero
    crossing of the fs/6 tone (rising), which then goes on from phase 0; a 1023-tap Kaiser (beta 10)
    low-pass from scipy.signal.firwin at 0.9 of fs/2, applied with zero phase; 10 ms sin**2 fades.
    """
    up = 4 * fs
    base, single = up // (fs // 6), up // (fs // 4)       # 4*fs samples per period: fs/6 -> 24, fs/4 -> 16
    start = (up // 2) // base * base                       # a rising zero crossing of the fs/6 tone
    head = 0.5 * np.sin(2 * np.pi * np.arange(start) / base)
    one = np.sin(2 * np.pi * np.arange(single) / single)
    tail = 0.5 * np.sin(2 * np.pi * np.arange(up - start - single) / base)
    x = _taper(np.concatenate([head, one, tail]), 0.01, up)
    y = np.convolve(x, signal.firwin(1023, 0.9 / 4, window=("kaiser", 10.0)), mode="same")
    return y[offset::4]


@pytest.mark.parametrize("case, offset", [(20, 0), (21, 1), (22, 2), (23, 3)])
def test_tech3341_cases20_23_true_peak_between_samples(case, offset):
    # cases 20 to 23: as described above, down-sampled with a 0 / 1 / 2 / 3 sample offset at 4*fs;
    # Max true-peak 0.0 +0.2/-0.4 dBTP. The offsets move the single period's crest between the
    # samples: the sample peak falls (-2.6 dBFS at offset 2, seen) while the true peak must not.
    x = _tech3341_case20(offset)
    m = Meter(48000, 2)
    m.update(np.vstack([x, x]))
    ch = m.result().channels[0]
    assert -0.4 <= ch.true_peak_dbtp - 0.0 <= 0.2          # EBU Tech 3341 case `case`: +0.2 / -0.4 dB
    if offset == 2:
        assert ch.peak_dbfs < -1.0                          # the crest lies between two samples here


# --- EBU Tech 3342 (2016) -------------------------------------------------------------------

@pytest.mark.parametrize("case, steps, expect", [
    # stereo 1 kHz sine, EBU Tech 3342 Table 1 (signals and values from memory; verify the signals
    # against the published text); each expected range is confirmed analytically (model_range)
    (1, [(-20, 20), (-30, 20)], 10.0),
    (2, [(-20, 20), (-15, 20)], 5.0),
    (3, [(-40, 20), (-20, 20)], 20.0),
    (4, [(-50, 20), (-35, 20), (-20, 20), (-35, 20), (-50, 20)], 15.0),
])
def test_tech3342_loudness_range(case, steps, expect):
    r = meter(stereo_steps(steps))
    assert abs(r.loudness_range_lu - expect) <= TOL_LRA      # EBU Tech 3342 case `case`
    # analytic (Tech 3342 on the step levels, model_range): the remembered expected ranges are the
    # model's to 1e-9 LU, and the meter reads the model within 1e-4 LU (seen: 3e-6)
    model = model_range(steps)
    assert abs(model - expect) < 1e-6
    assert abs(r.loudness_range_lu - model) < 1e-4


# --- reference library and exact computation --------------------------------------------------

def programme(seconds: float, rate: int, seed: int, channels: int = 2) -> np.ndarray:
    """Programme-like material: band-limited noise in steps of 0.5..4 s at -45..-12 dBFS, a few gaps."""
    rng = np.random.default_rng(seed)
    n = int(seconds * rate)
    x = rng.standard_normal((channels, n))
    x = signal.sosfilt(signal.butter(2, [80, 8000], "bandpass", fs=rate, output="sos"), x, axis=1)
    x /= np.sqrt(np.mean(x ** 2))
    pos = 0
    while pos < n:
        length = int(rng.uniform(0.5, 4.0) * rate)
        level = 0.0 if rng.random() < 0.1 else 10 ** (rng.uniform(-45, -12) / 20)
        x[:, pos:pos + length] *= level
        pos += length
    return x


def exact_list(x: np.ndarray, rate: int = 48000):
    """BS.1770-4 integrated loudness and Tech 3342 range from an explicit list of every block."""
    y = signal.sosfilt(BS1770_TABLE, x, axis=1)      # 48 kHz table coefficients, scipy.signal
    ms = (y ** 2).sum(axis=0)
    cs = np.concatenate([[0.0], np.cumsum(ms)])
    hop = rate // 10

    def blocks(length):
        starts = np.arange(0, x.shape[1] - length + 1, hop)
        return (cs[starts + length] - cs[starts]) / length

    def lufs(z):
        with np.errstate(divide="ignore"):                       # silent blocks: -inf, gated out
            return -0.691 + 10 * np.log10(z)

    z = blocks(int(0.4 * rate))
    z = z[lufs(z) > -70]                                          # BS.1770-4 absolute gate
    z = z[lufs(z) > lufs(z.mean()) - 10]                          # BS.1770-4 relative gate
    integrated = lufs(z.mean())
    s = blocks(3 * rate)
    s = s[lufs(s) > -70]                                          # Tech 3342 absolute gate
    s = np.sort(lufs(s[lufs(s) > lufs(s.mean()) - 20]))           # Tech 3342 relative gate
    n = s.size
    lra = s[int(math.floor((n - 1) * 0.95 + 0.5))] - s[int(math.floor((n - 1) * 0.10 + 0.5))]
    return integrated, lra


@pytest.mark.slow
@pytest.mark.parametrize("seed", [1, 2, 3])
def test_histogram_matches_exact_list(seed):
    # analytic bound of the module notes, checked against an explicit list of all blocks: < 0.01 LU
    x = programme(240, 48000, seed)
    r = meter(x)
    integrated, lra = exact_list(x)
    assert abs(r.integrated_lufs - integrated) < 0.01
    assert abs(r.loudness_range_lu - lra) < 0.01


@pytest.mark.parametrize("seed", [4, 5])
def test_integrated_against_pyloudnorm(seed):
    pyln = pytest.importorskip("pyloudnorm")
    x = programme(120, 48000, seed)
    ref = pyln.Meter(48000).integrated_loudness(x.T)              # pyloudnorm (reference library)
    # pyloudnorm's default "K-weighting" filter is designed from its own analog parameters (not the
    # table) and its gating is the same BS.1770-4 scheme, so they agree within ~0.05 LU at 48 kHz.
    # Measured with pyloudnorm 0.2.0: chainrun reads 0.043 LU higher on both seeds, a steady offset.
    assert abs(meter(x).integrated_lufs - ref) < 0.05
    # The offset is the filter alone: with pyloudnorm's "DeMan" filter, which reproduces the table of
    # BS.1770-4 (test above), the same gating gives the same figure to rounding (measured 3.3e-12 LU).
    exact = pyln.Meter(48000, filter_class="DeMan").integrated_loudness(x.T)
    assert abs(meter(x).integrated_lufs - exact) < 1e-9


# --- properties ---------------------------------------------------------------------------------

SPLIT_SIGNALS = {rate: programme(6.5, rate, 7) for rate in (48000, 22050)}


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(rate=st.sampled_from([48000, 22050]),
       cuts=st.lists(st.integers(min_value=0, max_value=6 * 22050), max_size=12))
def test_block_split_is_bit_identical(rate, cuts):
    # common practice, no published source: a streaming meter must not depend on the block split;
    # 22050 Hz has 220.5 samples per 10 ms, so sub-block edges fall at fractional positions.
    x = SPLIT_SIGNALS[rate]
    whole = meter(x, rate, block=x.shape[1])
    m = LoudnessMeter(rate, 2)
    edges = [0, *sorted(set(cuts)), x.shape[1]]
    for a, b in zip(edges[:-1], edges[1:]):
        m.update(x[:, a:b])
    assert m.reading() == whole                               # exact equality of every float


def test_lfe_is_left_out_and_surrounds_weigh_141():
    t = tone(-23, 5)
    quiet = np.zeros_like(t)
    base = [quiet, quiet, quiet, quiet, t, quiet]            # L R C LFE Ls Rs: tone in Ls only
    loud_lfe = [quiet, quiet, quiet, 0.5 * np.random.default_rng(0).standard_normal(t.size), t, quiet]
    a = meter(np.vstack(base))
    b = meter(np.vstack(loud_lfe))
    c = meter(np.vstack(loud_lfe), mask=0x60F)                # 5.1 with side surrounds in the mask
    assert a.integrated_lufs == b.integrated_lufs == c.integrated_lufs   # BS.1770-4: LFE not measured
    assert a.channel_weights == (1.0, 1.0, 1.0, 0.0, 1.41, 1.41)
    # ITU-R BS.1770-4 Table 3, G = 1.41 for Ls: -23 dBFS sine in one channel -> -23 - 3.01 + 10log10(1.41)
    assert abs(a.integrated_lufs - (-23 - 10 * math.log10(2) + 10 * math.log10(1.41))) < 0.02


def test_silence_and_short_streams_read_none():
    # BS.1770-4: no block above the -70 LUFS gate -> no integrated loudness (None here, never a number)
    r = meter(np.zeros((2, 48000 * 5)))
    assert (r.integrated_lufs, r.loudness_range_lu, r.max_momentary_lufs, r.max_short_term_lufs) == (None,) * 4
    short = meter(stereo_steps([(-23, 0.39)]))                # shorter than one 400 ms block
    assert short.integrated_lufs is None and short.max_momentary_lufs is None
    two = meter(stereo_steps([(-23, 2.0)]))                   # shorter than one 3 s window
    assert abs(two.integrated_lufs + 23) <= TOL_MSI and two.max_short_term_lufs is None
    assert two.loudness_range_lu is None
    assert meter(np.zeros((2, 0))).integrated_lufs is None


def test_nonfinite_samples_count_and_read_as_zero():
    x = stereo_steps([(-23, 10)])
    y = x.copy()
    y[0, 1000:1010] = np.nan
    y[1, 5000] = np.inf
    z = x.copy()
    z[0, 1000:1010] = 0.0
    z[1, 5000] = 0.0
    ry, rz = meter(y), meter(z)
    assert ry.nonfinite_samples == 11                         # analytic: 10 NaN + 1 Inf
    assert ry.integrated_lufs == rz.integrated_lufs           # metered as 0.0, documented behaviour
    assert abs(ry.integrated_lufs + 23) <= TOL_MSI


def test_reading_round_trips_through_json():
    r = meter(stereo_steps([(-23, 4)]))
    d = json.loads(json.dumps(r.to_dict()))
    assert {"integrated_lufs", "loudness_range_lu", "max_momentary_lufs", "max_short_term_lufs"} <= set(d)
    assert LoudnessReading.from_dict(d) == r


@pytest.mark.parametrize("shape", ["steps", "loud then quiet", "quiet then loud"])
def test_maxima_match_every_window_summed(shape):
    # EBU Tech 3341: momentary (400 ms) and short-term (3 s) windows every 10 ms (from memory; verify);
    # every window summed here by numpy from scipy.signal.sosfilt of the 48 kHz table (reference library)
    x = programme(12, 48000, 11)
    if shape == "loud then quiet":
        x[:, 48000 * 4:] *= 1e-3
    elif shape == "quiet then loud":
        x[:, :48000 * 6] *= 1e-3
    r = meter(x, block=30011)
    y = signal.sosfilt(BS1770_TABLE, x, axis=1)
    sub = (y ** 2).sum(axis=0).reshape(-1, 480).sum(axis=1)              # 10 ms sub-blocks at 48 kHz

    def max_lufs(span):
        sums = np.convolve(sub, np.ones(span), mode="valid") / (480 * span)
        return -0.691 + 10 * np.log10(sums.max())                       # BS.1770-4 Annex 1, eq. 2

    assert abs(r.max_momentary_lufs - max_lufs(40)) < 1e-6
    assert abs(r.max_short_term_lufs - max_lufs(300)) < 1e-6


@pytest.mark.parametrize("block", [10000, 65536])
def test_state_left_by_loud_content_is_flushed_in_silence(block):
    # analytic: after the last loud sample the K-weighting state decays as r**n, r < 0.9951 at 48 kHz
    # (the high-pass pole), so it is below 1e-200 after about 95,000 samples (2 s); at the flush points
    # (every 65536 frames from the start; the one at 196608 comes 3.1 s after the noise) it becomes
    # exactly zero instead of sinking into the
    # subnormal range, where arithmetic is many times slower. The readings cannot change: a value
    # below 1e-200 adds nothing a float64 sum of squares could hold.
    rng = np.random.default_rng(5)
    x = np.concatenate([rng.uniform(-0.5, 0.5, (2, 48000)), np.zeros((2, 48000 * 5))], axis=1)
    m = LoudnessMeter(48000, 2)
    # blocks of 65536 frames end exactly on the flush points (the renderer's block size): the flush
    # then happens after the block's one filter call
    for i in range(0, x.shape[1], block):
        m.update(x[:, i:i + block])
    assert np.all(m._kw.zi == 0.0)
    whole = LoudnessMeter(48000, 2)
    whole.update(x)
    assert whole.reading() == m.reading()


def test_a_reading_in_mid_stream_sees_every_window_so_far_and_the_meter_goes_on():
    # The meter evaluates its windows 10 s at a time (chainrun's own batching, no published source):
    # a reading taken with windows still waiting must equal a meter fed only that prefix, bit for
    # bit, and the stream must go on to the reading of a meter fed everything in one block.
    # The analytic anchor: stereo 1 kHz steps, EBU Tech 3341 style (levels chosen here).
    x = stereo_steps([(-30, 6.0), (-20, 7.3), (-26, 9.0), (-18, 4.0)])
    cut = int(12.3 * 48000)
    a = LoudnessMeter(48000, 2)
    for i in range(0, cut, 65536):
        a.update(x[:, i:min(i + 65536, cut)])
    prefix = LoudnessMeter(48000, 2)
    prefix.update(x[:, :cut])
    for got, want in zip(a.gating_histogram(), prefix.gating_histogram()):   # before any reading
        assert got.tobytes() == want.tobytes()
    assert a.reading() == prefix.reading()
    for i in range(cut, x.shape[1], 4097):
        a.update(x[:, i:i + 4097])
    whole = LoudnessMeter(48000, 2)
    whole.update(x)
    assert a.reading() == whole.reading()
    for got, want in zip(a.gating_histogram(), whole.gating_histogram()):
        assert got.tobytes() == want.tobytes()
    # analytic (BS.1770-4 gating on the step levels, model_integrated): the reading is the model's
    assert abs(whole.reading().integrated_lufs - model_integrated([(-30, 6.0), (-20, 7.3), (-26, 9.0),
                                                                    (-18, 4.0)])) < 1e-4


# --- windows evaluated in batches: long streams, several batches ----------------------------------

LONG_SIGNAL = programme(40, 48000, 8)       # 4000 sub-blocks: several batches of deferred windows


def _fed(x: np.ndarray, sizes) -> LoudnessMeter:
    """A meter fed ``x`` in blocks of the given sizes, cycled until the end."""
    m, pos, k = LoudnessMeter(48000, 2), 0, 0
    while pos < x.shape[1]:
        m.update(x[:, pos:pos + sizes[k % len(sizes)]])
        pos += sizes[k % len(sizes)]
        k += 1
    return m


def _figures(m: LoudnessMeter):
    count, power = m.gating_histogram()
    return m.reading(), count.tobytes(), power.tobytes()


def test_long_stream_is_bit_identical_in_any_split_with_windows_deferred():
    # common practice, no published source: a streaming meter must not depend on the block split. The
    # meter evaluates its windows in batches of sub-blocks; each reading must take the pending ones too.
    x = LONG_SIGNAL
    whole = _figures(_fed(x, [x.shape[1]]))
    assert whole[0].integrated_lufs is not None and whole[0].loudness_range_lu is not None
    for sizes in ([65536], [997, 1, 3001, 480, 2207], [48000 * 13 + 5, 65536]):
        # each of reading() and gating_histogram() is asked first once: each must take the pending windows
        m, histogram_first = _fed(x, sizes), sizes[0] != 65536
        if histogram_first:
            count, power = m.gating_histogram()
            assert (count.tobytes(), power.tobytes()) == whole[1:]
        else:
            assert m.reading() == whole[0]
        assert _figures(m) == whole                              # exact equality of every float and count


@pytest.mark.parametrize("cut", [48000 * 7 + 11, 48000 * 17 + 4000, 48000 * 31])
def test_reading_mid_stream_takes_the_pending_windows_and_the_meter_goes_on(cut):
    # common practice, no published source: a reading at any time is that of the stream so far, and
    # taking it changes nothing that follows
    x = LONG_SIGNAL
    m = LoudnessMeter(48000, 2)
    for i in range(0, cut, 65536):
        m.update(x[:, i:min(i + 65536, cut)])
    prefix = _figures(_fed(x[:, :cut], [cut]))                  # its histogram asked first, then its reading
    assert prefix[0].integrated_lufs is not None
    assert m.reading() == prefix[0]
    count, power = m.gating_histogram()
    assert (count.tobytes(), power.tobytes()) == prefix[1:]
    for i in range(cut, x.shape[1], 65536):
        m.update(x[:, i:i + 65536])
    assert _figures(m) == _figures(_fed(x, [x.shape[1]]))
