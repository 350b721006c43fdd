"""render: the quantiser (hard clip, TPDF dither), atomic delivery under faults, the runtime guard.

Every check names where its expected value comes from. The oracles are analytic
facts (two's-complement code ranges, the moments of TPDF-dithered rounding),
scipy.signal.sosfilt run over a whole signal at once, and files read back with
soundfile; render's own figures are never the reference.
"""
from __future__ import annotations

import errno
import hashlib
import os

import numpy as np
import pytest
import soundfile as sf
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy import signal

from chainrun.audio import writer
from chainrun.audio.quantise import Quantiser, seed_for
from chainrun.audio.reader import probe
from chainrun.meters import MeterBank
from chainrun.dsp import compiled as kernel
from chainrun.render import Policy, file as render_mod, render_file, scan_file
from chainrun.render import filter as filter_mod

RATE = 48000
# A hand-typed stable resonance, poles at radius 0.99 and angle 0.1 rad (about 764 Hz at 48 kHz),
# its numerator chosen so the peak gain is a few dB: any stable SOS serves the runner's tests.
_R, _TH = 0.99, 0.1
RESONANCE = np.array([[0.05, 0.0, -0.05, 1.0, -2 * _R * np.cos(_TH), _R * _R]])
UNITY = np.array([[1.0, 0.0, 0.0, 1.0, 0.0, 0.0]])


def sha(path) -> str:
    return hashlib.sha256(open(path, "rb").read()).hexdigest()


def files_in(folder) -> list[str]:
    return sorted(os.listdir(folder))


def l1_norm(sos: np.ndarray, n: int = 1 << 15) -> tuple[float, np.ndarray]:
    """Sum of |h| of the impulse response, computed with scipy.signal.sosfilt (reference library)."""
    imp = np.zeros(n)
    imp[0] = 1.0
    h = signal.sosfilt(sos, imp)
    assert abs(h[-64:]).max() < 1e-12          # decayed: the tail left out cannot matter
    return float(np.abs(h).sum()), h


# =========================================================================== Quantiser: hard clip


@pytest.mark.parametrize("subtype, bits", [("PCM_16", 16), ("PCM_24", 24), ("PCM_32", 32)])
def test_quantiser_clips_to_the_code_range_and_never_wraps(tmp_path, read_codes, subtype, bits):
    top, bottom = 2 ** (bits - 1) - 1, -(2 ** (bits - 1))
    x = np.array([[2.0, -2.0, 1.0, -1.0, 1e9, -1e9, top / 2 ** (bits - 1), 0.5, -0.5, 0.0]])
    q = Quantiser(subtype, dither=False, seed=0)
    data, clipped = q(x)
    # analytic: a b-bit two's-complement word holds [-2^(b-1), 2^(b-1) - 1]; a clip stops there, never wraps
    expected = np.array([top, bottom, top, bottom, top, bottom, top, 2 ** (bits - 2), -(2 ** (bits - 2)), 0])
    shift = 8 if bits == 24 else 0             # libsndfile takes the top 24 bits of an int32 for PCM_24
    np.testing.assert_array_equal(np.asarray(data)[:, 0].astype(np.int64) >> shift, expected)
    # analytic: 2.0, -2.0, 1.0 (= 2^(b-1), one past the top code), 1e9 and -1e9 are beyond the range;
    # -1.0 is exactly the bottom code and is not clipped
    assert clipped == 5
    # and libsndfile stores those codes unchanged: read back as integers
    path = tmp_path / f"q-{subtype}.wav"
    sf.write(str(path), data, RATE, subtype=subtype)
    codes, _ = read_codes(path)
    np.testing.assert_array_equal(codes[:, 0], expected)
    if subtype == "PCM_16":
        back, _ = sf.read(str(path), dtype="int16")
        assert back[0] == 32767 and back[1] == -32768          # analytic: +2.0 -> 32767, -2.0 -> -32768


def test_quantiser_float_outputs_are_not_clipped():
    x = np.array([[2.0, -3.5, 0.25]])
    for subtype, dtype in (("FLOAT", np.float32), ("DOUBLE", np.float64)):
        data, clipped = Quantiser(subtype, dither=True, seed=1)(x)
        # analytic: float words hold values beyond +-1, so nothing is clipped and no dither is added
        assert clipped == 0 and data.dtype == dtype
        np.testing.assert_array_equal(data[:, 0], x[0].astype(dtype))


def test_quantiser_without_dither_rounds_to_nearest():
    k = 1000 + np.array([0.0, 0.25, 0.49, 0.51, -0.25, -0.51])
    data, _ = Quantiser("PCM_16", dither=False, seed=0)(k[np.newaxis, :] / 32768.0)
    # analytic: rounding to the nearest code
    np.testing.assert_array_equal(data[:, 0], [1000, 1000, 1000, 1001, 1000, 999])


# =========================================================================== Quantiser: TPDF dither

N_DITHER = 1 << 18
OFFSETS = (0.0, 0.25, 0.5)


def _dither_error(offset: float, seed: int, dither: bool = True) -> np.ndarray:
    """Total error (output code - input) in LSB for a constant input ``1000 + offset`` LSB."""
    level = 1000.0 + offset
    x = np.full((1, N_DITHER), level / 32768.0)
    data, clipped = Quantiser("PCM_16", dither=dither, seed=seed)(x)
    assert clipped == 0
    return data[:, 0].astype(np.float64) - level


def test_tpdf_total_error_has_mean_zero_and_variance_one_quarter_lsb():
    seed = seed_for("marsh/dawn_ambience.wav")
    # value from memory of Lipshitz, Wannamaker & Vanderkooy, "Quantization and dither: a theoretical
    # survey", JAES 40(5), 1992 (and Wannamaker et al., IEEE Trans. SP 48(2), 2000); verify. TPDF dither
    # of 2 LSB peak to peak (sum of two independent RPDF of 1 LSB) makes the first and second moments of
    # the total error independent of the input: mean 0 and variance 1/12 (rounding) + 1/6 (dither)
    # = 1/4 LSB^2. (Analytic: the variance of the difference of two uniform(0, 1) values is 2/12.)
    # Tolerances: about 6 standard errors of the estimates over 2^18 samples.
    moments = []
    for offset in OFFSETS:
        e = _dither_error(offset, seed)
        moments.append((e.mean(), (e ** 2).mean()))
        assert abs(e.mean()) < 0.006, offset
        assert abs((e ** 2).mean() - 0.25) < 0.006, offset
        # analytic: |dither| < 1 LSB and rounding adds at most 1/2 LSB
        assert np.abs(e).max() <= 1.5
    means, powers = zip(*moments)
    # same reference: error independent of the input level (moments equal across offsets)
    assert max(means) - min(means) < 0.01
    assert max(powers) - min(powers) < 0.01


def test_tpdf_error_distribution_on_a_code():
    # analytic: for an input exactly on a code, the output moves one code up only when the triangular
    # dither on (-1, 1) LSB exceeds +1/2, probability (1/2)^2 / 2 = 1/8; down likewise; else it stays.
    e = _dither_error(0.0, seed_for("boathouse/host_stem.wav"))
    assert set(np.unique(e)) <= {-1.0, 0.0, 1.0}
    assert abs(np.mean(e == 1.0) - 0.125) < 0.004
    assert abs(np.mean(e == -1.0) - 0.125) < 0.004


def test_without_dither_the_error_follows_the_input():
    # analytic: plain rounding of a constant leaves a constant error -offset (mod 1): this is the input
    # dependence that the dither removes, so the tests above can tell dither from no dither
    assert np.all(_dither_error(0.25, 0, dither=False) == -0.25)
    assert np.all(_dither_error(0.0, 0, dither=False) == 0.0)


def test_dither_reruns_identical_and_keys_differ():
    x = np.full((2, 5000), 1000.25 / 32768.0)
    a = Quantiser("PCM_16", True, seed_for("boathouse/guest_stem.wav"))(x)[0]
    b = Quantiser("PCM_16", True, seed_for("boathouse/guest_stem.wav"))(x)[0]
    c = Quantiser("PCM_16", True, seed_for("boathouse/host_stem.wav"))(x)[0]
    # contract (README, "Output and reports"): the dither is seeded by the relative path, reruns bit-identical
    np.testing.assert_array_equal(a, b)
    # analytic: at 1000.25 LSB the triangular dither gives code 1001 with probability 0.28125, 1000 with
    # 0.6875 and 999 with 0.03125, so two independent sequences differ on a sample with probability 0.447
    assert abs(np.mean(a != c) - 0.447) < 0.03


@pytest.mark.parametrize("splits", [[1], [1, 999], [4096, 4095, 1], [2500]])
def test_dither_does_not_depend_on_block_split(splits):
    rng = np.random.default_rng(7)
    x = rng.uniform(-0.5, 0.5, (2, 5000))
    whole = Quantiser("PCM_24", True, 1234)(x)[0]
    q = Quantiser("PCM_24", True, 1234)
    parts, at = [], 0
    for n in splits + [x.shape[1]]:
        parts.append(q(x[:, at:at + n])[0])
        at += n
        if at >= x.shape[1]:
            break
    # contract (DEVELOPERS.md): draws are made frame by frame, so any split gives the same codes
    np.testing.assert_array_equal(np.concatenate(parts), whole)


@settings(max_examples=60, deadline=None)
@given(seed=st.integers(0, 2 ** 32 - 1), subtype=st.sampled_from(["PCM_16", "PCM_24", "PCM_32"]),
       dither=st.booleans(), level=st.sampled_from([0.5, 0.99, 0.9999, 1.0, 1.5]))
def test_known_peak_never_changes_the_codes(seed, subtype, dither, level):
    # property: the peak handed to the quantiser only lets it skip looking for codes out of range when
    # none can be; codes and clip counts are those of the quantiser left to find out for itself
    rng = np.random.default_rng(seed)
    y = rng.uniform(-level, level, (2, 3000))
    peak = float(np.max(np.abs(y)))
    a = Quantiser(subtype, dither, 99).codes(y)
    b = Quantiser(subtype, dither, 99).codes(y, peak=peak)
    np.testing.assert_array_equal(a[0], b[0])
    assert a[1] == b[1]


def test_blas_runs_on_the_calling_thread_while_a_file_is_metered(tmp_path, write_audio, monkeypatch):
    # --workers grants cores; BLAS (the true-peak meter's matrix products) must not take more of them
    from threadpoolctl import threadpool_info

    seen = []
    real = MeterBank.update

    def spy(self, block, extremes=None):
        seen.extend(lib["num_threads"] for lib in threadpool_info() if lib["user_api"] == "blas")
        return real(self, block, extremes)

    monkeypatch.setattr(MeterBank, "update", spy)
    src = probe(str(_noise_file(write_audio)))
    out = tmp_path / "out"
    out.mkdir()
    for threads in (1, 2):
        res = render_file(src, str(out / f"take{threads}.wav"), UNITY, 1.0, Policy(threads=threads), "take.wav")
        assert res.status == "ok"
    assert seen and set(seen) == {1}


# =========================================================================== render_file: faults


def _noise_file(write_audio, name="in/take.wav", frames=10000, channels=2, subtype="PCM_24", amp=0.2):
    rng = np.random.default_rng(11)
    return write_audio(name, rng.uniform(-amp, amp, (frames, channels)), RATE, subtype)


def _older_output(path) -> bytes:
    old = b"an older output from an earlier run"
    path.write_bytes(old)
    return old


@pytest.mark.parametrize("on_over", ["reject", "clip", "scale"])
@pytest.mark.parametrize("older", [False, True])
def test_disk_full_on_the_third_block_delivers_nothing(tmp_path, write_audio, monkeypatch, on_over, older):
    src = probe(str(_noise_file(write_audio)))
    out = tmp_path / "out"
    out.mkdir()
    dst = out / "take.wav"
    old = _older_output(dst) if older else None
    real_write, real_raw = sf.SoundFile.write, writer._write_raw
    calls = []

    def full_disk(self, data):
        calls.append(len(data))
        if len(calls) == 3:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return real_write(self, data)

    def full_disk_raw(f, words, nbytes):      # PCM_24 is packed by chainrun and written raw
        calls.append(nbytes)
        if len(calls) == 3:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return real_raw(f, words, nbytes)

    monkeypatch.setattr(sf.SoundFile, "write", full_disk)
    monkeypatch.setattr(writer, "_write_raw", full_disk_raw)
    res = render_file(src, str(dst), RESONANCE, 50.0, Policy(on_over=on_over, block_size=1000), "take.wav")
    assert len(calls) == 3
    assert res.status == "failed" and res.output is None
    assert "\n" not in res.message and "no space left on device" in res.message
    if older:
        # what the code does: the final name is replaced only by os.replace after a complete write, so an
        # older output from an earlier run stays there untouched (the report says this run failed)
        assert dst.read_bytes() == old
        assert files_in(out) == ["take.wav"]
    else:
        assert files_in(out) == []                 # nothing under the final name, no temporary or scratch file


def test_filter_turning_nan_mid_file_delivers_nothing(tmp_path, write_audio, monkeypatch):
    src = probe(str(_noise_file(write_audio)))
    out = tmp_path / "out"
    out.mkdir()
    real = filter_mod.sosfilt
    calls = []

    def nan_on_third(sos, x, zi):
        y, zf = real(sos, x, zi)
        calls.append(1)
        if len(calls) == 3:
            y[1, 17] = np.nan
        return y, zf

    monkeypatch.setattr(filter_mod, "sosfilt", nan_on_third)       # the filter's one call to sosfilt
    monkeypatch.setattr(kernel, "cascade", None)     # the fault goes in where the filter calls sosfilt
    res = render_file(src, str(out / "take.wav"), UNITY, 1.0, Policy(block_size=1000), "take.wav")
    assert res.status == "failed" and res.output is None
    assert "\n" not in res.message and "non-finite" in res.message
    assert "2000" in res.message               # analytic: the third block of 1000 starts at sample 2000
    assert files_in(out) == []


def test_nan_in_the_input_names_sample_and_channel(tmp_path, write_audio):
    x = np.zeros((6000, 2))
    x[:, 0] = 0.1
    x[4321, 1] = np.nan
    src = probe(str(write_audio("in/nan.wav", x, RATE, "FLOAT")))
    out = tmp_path / "out"
    out.mkdir()
    res = render_file(src, str(out / "nan.wav"), UNITY, 1.0, Policy(block_size=1000), "nan.wav")
    assert res.status == "failed" and "\n" not in res.message
    assert "sample 4321 of channel 2" in res.message        # analytic: where the NaN was put
    assert files_in(out) == []


def test_unexpected_fault_is_a_failed_file_not_an_exception(tmp_path, write_audio, monkeypatch):
    src = probe(str(_noise_file(write_audio)))
    out = tmp_path / "out"
    out.mkdir()

    def broken(*args, **kwargs):
        raise ValueError("simulated fault\nsecond line")

    monkeypatch.setattr(filter_mod, "sosfilt", broken)       # the filter's one call to sosfilt
    monkeypatch.setattr(kernel, "cascade", None)     # the fault goes in where the filter calls sosfilt
    res = render_file(src, str(out / "take.wav"), UNITY, 1.0, Policy(block_size=1000), "take.wav")
    # README.md 'Output and reports': failed = "unreadable input, NaN samples, a fault; nothing delivered"; one line
    assert res.status == "failed" and "\n" not in res.message and "simulated fault" in res.message
    assert files_in(out) == []


def test_output_onto_the_input_is_refused(write_audio):
    path = _noise_file(write_audio)
    before = sha(path)
    res = render_file(probe(str(path)), str(path), UNITY, 1.0, Policy(), "take.wav")
    assert res.status == "failed" and "overwrite the input" in res.message
    assert sha(path) == before                  # README.md 'What the guard promises': inputs are never modified


# =========================================================================== runtime guard


def _worst_case_input(write_audio, h: np.ndarray, n: int = 3000, amp: float = 0.01):
    """x[k] = amp * sign(h[n-1-k]): the input whose output at n-1 is amp * sum|h[:n]|."""
    x = np.zeros(n + 1000)
    x[:n] = amp * np.sign(h[:n][::-1])
    return write_audio("in/worst.wav", x, RATE, "DOUBLE"), amp


def test_runtime_guard_stops_an_output_past_the_bound(tmp_path, write_audio):
    l1, h = l1_norm(RESONANCE)
    path, amp = _worst_case_input(write_audio, h)
    out = tmp_path / "out"
    out.mkdir()
    # with the true L1 norm (scipy.signal.sosfilt, reference library) the file passes...
    ok = render_file(probe(str(path)), str(out / "ok.wav"), RESONANCE, l1, Policy(block_size=512), "ok.wav")
    assert ok.status == "ok", ok.message
    y, _ = sf.read(str(out / "ok.wav"), dtype="float64")
    # analytic (Young's inequality): |y| <= L1 * max|x|, with equality approached by the sign-matched input
    assert np.abs(y).max() <= l1 * amp * (1 + 1e-9)
    assert np.abs(y).max() > 0.99 * l1 * amp          # ... so the input really reaches the bound
    # ... and with a bound 3 % too small the runtime guard stops it and nothing is delivered
    bad = render_file(probe(str(path)), str(out / "bad.wav"), RESONANCE, 0.97 * l1, Policy(block_size=512),
                      "bad.wav")
    assert bad.status == "failed" and bad.output is None
    assert "\n" not in bad.message and "worst-case bound" in bad.message
    assert files_in(out) == ["ok.wav"]


@pytest.mark.parametrize("on_over", ["reject", "clip", "scale"])
def test_runtime_guard_with_too_small_bound_on_unity_chain(tmp_path, write_audio, on_over):
    src = probe(str(_noise_file(write_audio)))
    out = tmp_path / "out"
    out.mkdir()
    # analytic: a unity chain's output peak equals the input peak, which passes 0.5 x input peak
    res = render_file(src, str(out / "take.wav"), UNITY, 0.5, Policy(on_over=on_over, block_size=4096), "t.wav")
    assert res.status == "failed" and "worst-case bound" in res.message
    assert files_in(out) == []


# =========================================================================== policies at the edges


def test_clip_policy_counts_each_clipped_sample_once(tmp_path, write_audio):
    x = np.zeros(4000)
    x[100:110], x[200:205], x[300] = 1.5, -1.5, 2.0
    x[400] = 1.0                       # exactly at the ceiling: not over it, but +1.0 has no 16-bit code
    src = probe(str(write_audio("in/hot.wav", x, RATE, "FLOAT")))
    out = tmp_path / "out"
    out.mkdir()
    res = render_file(src, str(out / "hot.wav"), UNITY, 1.0,
                      Policy(on_over="clip", subtype="PCM_16", dither="none"), "hot.wav")
    assert res.status == "clipped"
    # analytic: 10 + 5 + 1 samples beyond the 0 dBFS ceiling, and the one at +1.0 that the top code
    # 32767 cannot hold: 17 samples hard-clipped, each once
    assert res.clipped_by_chainrun == 17
    back, _ = sf.read(str(out / "hot.wav"), dtype="int16")
    assert back[105] == 32767 and back[202] == -32768 and back[300] == 32767 and back[400] == 32767


def test_a_folder_sync_that_fails_after_the_rename_still_names_the_output(tmp_path, write_audio, monkeypatch):
    # The output is in place once renamed; if syncing its folder then fails (EIO), the file is failed, one
    # line, but the result still names the output it put there, so the batch does not take it for an
    # earlier run's file
    src = probe(str(write_audio("in/take.wav", np.zeros(1000), RATE, "PCM_16")))
    out = tmp_path / "out"
    out.mkdir()
    real = render_mod._fsync_path

    def failing(path, directory=False):
        if directory:
            raise OSError(errno.EIO, "Input/output error", path)
        return real(path, directory)

    monkeypatch.setattr(render_mod, "_fsync_path", failing)
    res = render_file(src, str(out / "take.wav"), UNITY, 1.0, Policy(), "take.wav")
    assert res.status == "failed" and "\n" not in res.message and "input/output error" in res.message
    assert res.output == str(out / "take.wav") and files_in(out) == ["take.wav"]


def test_a_sample_at_full_scale_is_said_to_be_clipped_by_the_word_length_not_the_ceiling(tmp_path, write_audio):
    # analytic: +1.0 (0 dBFS) is on a 0 dBFS ceiling, not past it, so the reject policy delivers the file;
    # but a 16-bit word's largest code is 32767/32768, so that one sample is hard-clipped by the word length
    x = np.zeros(1000)
    x[10], x[20] = 1.0, -0.5
    src = probe(str(write_audio("in/edge.wav", x, RATE, "DOUBLE")))
    out = tmp_path / "out"
    out.mkdir()
    res = render_file(src, str(out / "edge.wav"), UNITY, 1.0,
                      Policy(on_over="reject", subtype="PCM_16", dither="none"), "edge.wav")
    assert res.status == "clipped" and res.clipped_by_chainrun == 1
    assert res.message.startswith("1 sample(s) hard-clipped at the largest PCM_16 code (at full scale")
    assert "ceiling" not in res.message


def test_a_scale_below_a_hundredth_of_a_db_is_not_shown_as_zero(tmp_path, write_audio):
    # analytic: a peak of 1.0001 over a 0 dBFS ceiling needs 20*log10(1.0001) = 0.00087 dB less gain;
    # at two decimals that would read "-0.00 dB"
    x = np.zeros(1000)
    x[10] = 1.0001
    src = probe(str(write_audio("in/hair.wav", x, RATE, "DOUBLE")))
    out = tmp_path / "out"
    out.mkdir()
    res = render_file(src, str(out / "hair.wav"), UNITY, 1.0, Policy(on_over="scale"), "hair.wav")
    assert res.status == "ok" and res.gain_db == pytest.approx(-20 * np.log10(1.0001), abs=1e-9)
    # analytic: the one sample of 1.0001 lies over full scale, by 20*log10(1.0001) = +0.00 dB at two decimals
    assert res.message == ("scaled by less than 0.01 dB to fit the ceiling; the input has 1 sample(s) over full "
                           "scale (float), peak +0.00 dBFS: recoverable, not clipped")


def test_reject_at_a_peak_one_rounding_above_the_ceiling(tmp_path, write_audio):
    # Two gain sections of -0.4 and -4.5 dB against a -4.9 dBFS ceiling: in floating point the product
    # lands one rounding step above 10^(-4.9/20), while in dB it is exactly on the ceiling (a real case
    # found by search). The file must get one verdict, not a failure about a missing temporary file.
    x = np.zeros(1000)
    x[10], x[20] = 1.0, -1.0
    src = probe(str(write_audio("in/fs.wav", x, RATE, "DOUBLE")))
    sos = np.array([[10 ** (-0.4 / 20), 0, 0, 1, 0, 0], [10 ** (-4.5 / 20), 0, 0, 1, 0, 0]])
    out = tmp_path / "out"
    out.mkdir()
    res = render_file(src, str(out / "fs.wav"), sos, 1.0, Policy(on_over="reject", ceiling_dbfs=-4.9), "fs.wav")
    # analytic: -0.4 + -4.5 = -4.9 dB, on the ceiling, not past it: delivered
    assert res.status == "ok", res.message
    assert files_in(out) == ["fs.wav"]


@pytest.fixture
def intersample_over(write_audio):
    """A sine at rate/4 with phase 45 degrees, amplitude 0.9 (DOUBLE, stereo, 4800 frames).

    analytic: every sample is +-0.9/sqrt(2), a sample peak of -3.93 dBFS, while the continuous
    waveform, and so the true peak of ITU-R BS.1770-4 Annex 2, reaches 0.9: -0.92 dBTP. Against a
    -1 dBTP ceiling it is over by 20*log10(0.9) + 1 = 0.085 dB, and the 0 dBFS ceiling is never passed.
    """
    n = np.arange(4800)
    x = 0.9 * np.sin(2 * np.pi * n / 4 + np.pi / 4)
    return probe(str(write_audio("in/over.wav", np.stack([x, x], axis=1), RATE, "DOUBLE")))


TP_OVER_DB = 20 * np.log10(0.9) + 1.0          # analytic, see intersample_over


@pytest.mark.parametrize("true_peak", [True, False])
@pytest.mark.parametrize("on_over", ["reject", "scale", "clip"])
def test_a_true_peak_ceiling_holds_under_every_policy(tmp_path, intersample_over, on_over, true_peak):
    # The recipe's true_peak_ceiling_dbtp is checked with true-peak metering off too (--no-true-peak skips
    # the input's true peak only). The tolerance 0.02 dB is chainrun's own for its interpolator (flat to
    # 0.45 * rate within 0.015 dB; see tests/unit/meters/test_meters.py), no published source.
    out = tmp_path / "out"
    out.mkdir()
    pol = Policy(on_over=on_over, ceiling_dbfs=0.0, true_peak_ceiling_dbtp=-1.0, true_peak=true_peak,
                 dither="none")
    res = render_file(intersample_over, str(out / "over.wav"), UNITY, 1.0, pol, "over.wav")
    assert res.over_db == pytest.approx(TP_OVER_DB, abs=0.02)
    if on_over == "reject":
        assert res.status == "rejected" and files_in(out) == []
        return
    assert files_in(out) == ["over.wav"]
    tp = max(c.true_peak for c in scan_file(probe(str(out / "over.wav"))).input_meters.channels)
    if on_over == "scale":
        assert res.status == "ok" and res.gain_db == pytest.approx(-TP_OVER_DB, abs=0.02)
        assert 20 * np.log10(tp) <= -1.0 + 1e-9
    else:   # clipping holds the sample ceiling only; the true peak still passes its ceiling, and is said to
        assert res.status == "clipped" and res.clipped_by_chainrun == 0
        assert "true peak passes the true-peak ceiling by 0.0" in res.message
        assert 20 * np.log10(tp) == pytest.approx(-1.0 + TP_OVER_DB, abs=0.02)


# =========================================================================== block size, render level


@pytest.fixture
def hot_stereo(write_audio):
    """Stereo FLOAT, 3000 frames: quiet noise with a loud burst in the middle of channel 2."""
    rng = np.random.default_rng(5)
    x = rng.uniform(-0.2, 0.2, (3000, 2))
    x[1400:1500, 1] = 0.9 * np.sin(2 * np.pi * 760 / RATE * np.arange(100))
    return probe(str(write_audio("in/hot.wav", x, RATE, "FLOAT")))


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(block=st.integers(1, 3100), on_over=st.sampled_from(["reject", "clip", "scale"]),
       subtype=st.sampled_from(["PCM_16", "FLOAT"]))
def test_block_size_never_changes_the_result(tmp_path, hot_stereo, block, on_over, subtype):
    l1, _ = l1_norm(RESONANCE)
    out = tmp_path / "blocks"
    out.mkdir(exist_ok=True)
    results = {}
    for b in (block, hot_stereo.frames):
        dst = out / f"{on_over}-{subtype}-{b}.wav"
        if dst.exists():
            dst.unlink()
        pol = Policy(on_over=on_over, ceiling_dbfs=-1.0, subtype=subtype, dither="tpdf", block_size=b)
        r = render_file(hot_stereo, str(dst), RESONANCE, l1, pol, "hot.wav")
        results[b] = (r, dst.read_bytes() if dst.exists() else None)
    (r1, bytes1), (r2, bytes2) = results[block], results[hot_stereo.frames]
    # contract (DEVELOPERS.md): bit-identical output whatever the block size; same verdict and figures
    assert bytes1 == bytes2
    assert (r1.status, r1.clipped_by_chainrun, r1.over_db, r1.gain_db) == \
           (r2.status, r2.clipped_by_chainrun, r2.over_db, r2.gain_db)
    assert r1.status in ("ok", "clipped", "rejected")


def test_scan_clip_regions_do_not_depend_on_block_size(write_audio):
    x = np.zeros((20000, 1), dtype=np.int64)
    x[4090:4100] = 32767            # a run across the 4096-frame block boundary
    x[8191:8193] = -32768           # across 8192
    x[15000] = 32767
    src = probe(str(write_audio("in/clips.wav", x, RATE, "PCM_16")))
    readings = [scan_file(src, block=b).input_meters.channels[0] for b in (1, 4096, 8191, 65536)]
    for r in readings:
        # analytic: the runs put into the file, counted at the largest codes (+32767 and -32768)
        assert r.clipped_regions == ((4090, 10), (8191, 2), (15000, 1))
        assert r.clipped_samples == 13 and r.clipped_region_count == 3


@pytest.mark.parametrize("subtype", ["PCM_16", "PCM_24"])
def test_scale_policy_hands_the_quantiser_its_peak_and_no_clip_mask(write_audio, tmp_path, monkeypatch, subtype):
    # contract of Quantiser.codes/packed24: ``counted`` is a bool mask of samples already counted as clipped,
    # ``peak`` is max |y| of the block; the scale pass has no clip mask, and its peak must not land in ``counted``
    src = probe(str(_noise_file(write_audio, amp=0.9)))
    seen = []
    for name in ("codes", "packed24"):
        real = getattr(Quantiser, name)

        def spy(self, y, counted=None, peak=None, *rest, _real=real, **kw):
            seen.append((counted, peak))
            return _real(self, y, counted, peak, *rest, **kw)

        monkeypatch.setattr(Quantiser, name, spy)
    plus_12_db = np.array([[4.0, 0.0, 0.0, 1.0, 0.0, 0.0]])            # 0.9 * 4 must be scaled down
    res = render_file(src, str(tmp_path / "out.wav"), plus_12_db, 4.0,
                      Policy(on_over="scale", subtype=subtype), "take.wav")
    assert res.status in ("ok", "clipped") and res.gain_db < 0       # the scale pass ran
    assert seen and all(counted is None and isinstance(peak, float) for counted, peak in seen)
