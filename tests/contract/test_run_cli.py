"""`chainrun run` and `chainrun scan` end to end: gains, oracle equality, block size, meters, policies.

Files are synthetic (sines, noise, constructed clip runs) and small. Expected
values come from the W3C Audio EQ Cookbook, from scipy.signal.sosfilt over the
whole signal (with the chain chainrun designs, so the runner's block handling,
state carry and quantisation are what is checked), from analytic facts, and
from files read back with soundfile; never from figures chainrun printed.
"""
from __future__ import annotations

import json
import math
import os
import re
import subprocess
import sys

import numpy as np
import pytest
import soundfile as sf
from scipy import signal

from chainrun import design, load
from support import by_rel, report_of

SQRT_HALF_DB = 20 * math.log10(math.sqrt(0.5))     # analytic: -3.0103 dB


def sine_amplitude(y: np.ndarray, freq: float, rate: int, start: int) -> float:
    """Amplitude of the ``freq`` component of ``y[start:]`` by a least-squares fit of sin, cos and DC."""
    n = np.arange(start, len(y))
    w = 2 * np.pi * freq / rate
    basis = np.stack([np.sin(w * n), np.cos(w * n), np.ones(len(n))], axis=1)
    coef, *_ = np.linalg.lstsq(basis, y[start:], rcond=None)
    return float(math.hypot(coef[0], coef[1]))


def audio_files(folder) -> list[str]:
    """Files under ``folder``, relative, leaving out the reports and chainrun's dot files."""
    found = []
    for root, dirs, files in os.walk(folder):
        for f in files:
            if f.startswith(".") or f.startswith("chainrun-report"):
                continue
            found.append(os.path.relpath(os.path.join(root, f), folder))
    return sorted(found)


# =========================================================================== 1. peak gain at f0


@pytest.mark.parametrize("gain_db, q", [(6.0, 2.0), (-9.5, 0.7), (2.5, 8.0)])
def test_sine_at_f0_shows_the_peak_gain(tmp_path, write_recipe, write_audio, run_cli, gain_db, q):
    f0 = 1000.0
    recipe = write_recipe(f"""
        format: 1
        name: presence test
        chain:
          - {{type: peak, freq: {f0}, gain_db: {gain_db}, q: {q}}}
    """)
    inputs = {}
    for name, rate, subtype in (("d48.wav", 48000, "DOUBLE"), ("f44.wav", 44100, "FLOAT")):
        n = np.arange(rate)                                   # 1 s
        inputs[name] = (write_audio(f"in/{name}", 0.25 * np.sin(2 * np.pi * f0 / rate * n), rate, subtype), rate)
    out = tmp_path / "out"
    status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", out, "--workers", "1")
    assert status == 0, err
    for name, (path, rate) in inputs.items():
        x, _ = sf.read(str(path), dtype="float64")
        y, _ = sf.read(str(out / name), dtype="float64")
        settle = rate // 5          # the peak's poles decay within a few ms; 0.2 s is long settled
        measured = 20 * math.log10(sine_amplitude(y, f0, rate, settle) / sine_amplitude(x, f0, rate, settle))
        # W3C Audio EQ Cookbook: peakingEQ gain at f0 equals dBgain
        assert abs(measured - gain_db) < 0.01, (name, measured)


# =========================================================================== 2. oracle: sosfilt over the file

ORACLE_RECIPE = """
    format: 1
    name: Wrenmouth take, oracle chain
    chain:
      - {type: highpass, freq: 45, order: 4}
      - {type: notch, freq: 50, q: 20}
      - {type: low_shelf, freq: 180, gain_db: -3, slope: 0.8}
      - {type: peak, freq: 2800, gain_db: 3, q: 1.2}
      - {type: high_shelf, freq: 7000, gain_db: 2, order: 1}
      - {type: iir, b: [0.6, 0.2], a: [1, -0.2]}
      - {type: gain, gain_db: -4}
    output: {dither: none}
"""


@pytest.mark.parametrize("block", [None, "4096", "777"])
def test_output_equals_sosfilt_over_the_whole_file(tmp_path, write_recipe, write_audio, read_codes, run_cli, block):
    recipe = write_recipe(ORACLE_RECIPE)
    rng = np.random.default_rng(2024)
    specs = {"p16.wav": (48000, "PCM_16", 2), "p24.flac": (44100, "PCM_24", 1), "dbl.wav": (96000, "DOUBLE", 2),
             "p24.aiff": (48000, "PCM_24", 2)}
    for name, (rate, subtype, ch) in specs.items():
        n = 30000
        t = np.arange(n) / rate
        x = 0.3 * rng.uniform(-1, 1, (n, ch)) + 0.2 * np.sin(2 * np.pi * 50 * t)[:, None]
        write_audio(f"in/{name}", x, rate, subtype)
    out = tmp_path / "out"
    extra = ["--block-size", block] if block else []
    status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", out, "--workers", "1", *extra)
    assert status == 0, err
    rec = load(str(recipe))
    for name, (rate, subtype, ch) in specs.items():
        x, _ = sf.read(str(tmp_path / "in" / name), dtype="float64", always_2d=True)
        # scipy.signal.sosfilt (reference library) over the whole signal at once, with the chain
        # chainrun designs at this file's rate
        expected = signal.sosfilt(design(rec, rate).sos, x, axis=0)
        got, info = read_codes(out / name)
        assert (info.samplerate, info.channels, info.subtype) == (rate, ch, subtype)
        if subtype == "DOUBLE":
            np.testing.assert_array_equal(got, expected)            # exactly, for DOUBLE
        else:
            scale = 2.0 ** (23 if subtype == "PCM_24" else 15)
            # rounded to the nearest code (no dither): within half an LSB, so within 1 LSB
            assert np.abs(got - expected * scale).max() <= 0.5 + 1e-6, name


def test_double_output_after_a_long_decay_differs_from_sosfilt_only_below_1e_200(tmp_path, write_recipe,
                                                                                 write_audio, run_cli):
    # render flushes filter state below 1e-200 to zero every 65536 frames (against denormal slowdown), so a
    # DOUBLE output equals sosfilt exactly up to the first flush and only to within the flushed amounts after
    recipe = write_recipe("format: 1\nchain:\n  - {type: peak, freq: 760, gain_db: 12, q: 20}\n")
    x = np.zeros(140_000)
    x[0] = 0.5                                       # an impulse, then a long ringing decay into silence
    path = write_audio("in/ring.wav", x, 48000, "DOUBLE")
    status, _, err = run_cli("run", recipe, path, "-o", tmp_path / "out", "--workers", "1")
    assert status == 0, err
    y, _ = sf.read(str(tmp_path / "out" / "ring.wav"), dtype="float64")
    ref = signal.sosfilt(design(load(str(recipe)), 48000).sos, x)    # scipy.signal.sosfilt (reference library)
    np.testing.assert_array_equal(y[:65536], ref[:65536])
    # analytic: zeroing state values below 1e-200 moves later outputs by at most (gain) x 1e-200
    assert np.abs(y - ref).max() < 1e-190


# =========================================================================== 3. block size


def _blocks_case(tmp_path, write_recipe, write_audio, run_cli, recipe_text, files, sizes):
    recipe = write_recipe(recipe_text)
    for name, (data, rate, subtype) in files.items():
        write_audio(f"in/{name}", data, rate, subtype)
    outputs = {}
    for size in sizes:
        out = tmp_path / f"out-{size}"
        status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", out, "--workers", "1",
                                 "--block-size", size)
        assert status == 0, err
        outputs[size] = {name: (out / name).read_bytes() for name in files}
        rep = by_rel(report_of(out))
        assert all(rep[name]["status"] == "ok" for name in files)
    first = outputs[sizes[0]]
    for size in sizes[1:]:
        for name in files:
            # contract (DEVELOPERS.md): bit-identical output whatever the block size
            assert outputs[size][name] == first[name], (name, size)
    return first


def test_block_sizes_give_identical_files(tmp_path, write_recipe, write_audio, run_cli):
    rng = np.random.default_rng(3)
    n = 2000
    files = {
        "stereo24.wav": (rng.uniform(-0.4, 0.4, (n, 2)), 48000, "PCM_24"),
        "mono_float.wav": (rng.uniform(-0.4, 0.4, n), 44100, "FLOAT"),
        "mono16.flac": (rng.uniform(-0.4, 0.4, n), 48000, "PCM_16"),
        "double.aiff": (rng.uniform(-0.4, 0.4, (n, 2)), 96000, "DOUBLE"),
    }
    recipe = """
        format: 1
        chain:
          - {type: highpass, freq: 80, order: 3}
          - {type: peak, freq: 3000, gain_db: 2, q: 1}
          - {type: notch, freq: 50, q: 30}
    """
    _blocks_case(tmp_path, write_recipe, write_audio, run_cli, recipe, files, ["1", "1000", "65536", str(n)])


def test_block_sizes_give_identical_files_with_tpdf_dither(tmp_path, write_recipe, write_audio, run_cli):
    rng = np.random.default_rng(4)
    n = 2000
    files = {"float_stereo.wav": (rng.uniform(-0.4, 0.4, (n, 2)), 48000, "FLOAT"),
             "sub/p24.wav": (rng.uniform(-0.4, 0.4, n), 44100, "PCM_24")}
    recipe = """
        format: 1
        chain:
          - {type: low_shelf, freq: 150, gain_db: -2, slope: 1}
          - {type: high_shelf, freq: 8000, gain_db: 1.5, slope: 1}
        output: {subtype: PCM_16, dither: auto}
    """
    got = _blocks_case(tmp_path, write_recipe, write_audio, run_cli, recipe, files, ["1", "1000", "65536", str(n)])
    rep = by_rel(report_of(tmp_path / "out-1"))
    assert rep["float_stereo.wav"]["dither"] is True and rep["sub/p24.wav"]["dither"] is True
    assert sf.info(str(tmp_path / "out-1" / "float_stereo.wav")).subtype == "PCM_16"
    assert got


def test_block_sizes_on_a_longer_file_across_the_default_block(tmp_path, write_recipe, write_audio, run_cli):
    rng = np.random.default_rng(5)
    n = 100_000
    x = rng.uniform(-0.3, 0.3, (n, 2))
    x[60000:] *= np.exp(-np.arange(n - 60000) / 200.0)[:, None]     # a loud start, then a long fade
    files = {"long.wav": (x, 48000, "FLOAT")}
    recipe = """
        format: 1
        chain:
          - {type: highpass, freq: 30, order: 6}
          - {type: notch, freq: 100, q: 40}
        output: {subtype: PCM_24, dither: tpdf}
    """
    _blocks_case(tmp_path, write_recipe, write_audio, run_cli, recipe, files, ["1000", "65536", str(n), "4194304"])


# =========================================================================== 4. meters: fs/4 sine at 45 degrees


def test_quarter_rate_sine_reads_minus_3_dbfs_and_0_dbtp(tmp_path, write_recipe, write_audio, run_cli):
    rates = (44100, 48000, 96000)
    for rate in rates:
        n = np.arange(rate // 2)
        x = np.sin(np.pi / 2 * n + np.pi / 4)                 # fs/4, 45 degrees, full scale
        write_audio(f"in/q{rate}.wav", np.stack([x, -x], axis=1), rate, "FLOAT")
    status, out, err = run_cli("scan", tmp_path / "in", "--json")
    assert status == 0, err
    scanned = {os.path.basename(f["input"]): f for f in json.loads(out)["files"]}
    recipe = write_recipe("format: 1\nchain:\n  - {type: gain, gain_db: -6.020599913279624}\n")   # x 0.5
    status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", tmp_path / "out", "--workers", "1")
    assert status == 0, err
    run = by_rel(report_of(tmp_path / "out"))
    for rate in rates:
        name = f"q{rate}.wav"
        for meters in (scanned[name]["input_meters"], run[name]["input_meters"]):
            assert len(meters["channels"]) == 2
            for c in meters["channels"]:
                # analytic: every sample is +-sin(45 deg) = +-0.7071, so the sample peak is -3.01 dBFS ...
                assert abs(c["peak_dbfs"] - SQRT_HALF_DB) < 1e-4
                # ... and the crest 1.0 falls on the oversampled instants (t = n + 1/2): 0 dBTP.
                # ITU-R BS.1770-4 Annex 2 (x4 below 88.2 kHz, x2 below 176.4 kHz); tolerance: common
                # practice, no published source (interpolation filter passband ripple)
                assert abs(c["true_peak_dbtp"]) < 0.02
        for c in run[name]["output_meters"]["channels"]:
            # analytic: a gain of 0.5 lowers both by 6.02 dB
            assert abs(c["peak_dbfs"] - (SQRT_HALF_DB - 6.0206)) < 1e-3
            assert abs(c["true_peak_dbtp"] + 6.0206) < 0.02


# =========================================================================== 5. clips: scan, clip, reject, scale


def test_scan_reports_the_constructed_clip_runs(tmp_path, write_audio, run_cli):
    rate = 48000
    x = np.zeros((100_000, 2), dtype=np.int64)
    x[:, :] = 1000
    x[1000:1010, 0] = 32767            # 10 at the top code
    x[5000:5003, 0] = -32768           # 3 at the bottom code
    x[65530:65542, 0] = 32767          # 12 across the 65536-frame block boundary
    x[70000, 0] = 32766                # one code short of full scale: not a clip
    x[99999, 0] = -32768               # the very last frame
    x[20000:20004, 1] = -32768         # channel 2: one run of 4
    write_audio("in/clips16.wav", x, rate, "PCM_16")
    f = np.zeros(9000)
    f[100:105] = 1.0                   # float file: 1.0 is at full scale, not over it; and not clipped
    f[200:202] = -2.5                  # over full scale, kept by the float file: not clipped either
    f[300] = 0.9999
    write_audio("in/clipsf.wav", f, rate, "FLOAT")
    write_audio("in/clean.wav", np.full(9000, 0.5), rate, "PCM_24")
    status, out, err = run_cli("scan", tmp_path / "in", "--json")
    assert status == 1                 # README.md 'Commands': scan exits 1 if any file is clipped
    files = {os.path.basename(f["input"]): f for f in json.loads(out)["files"]}
    # analytic: the runs written into the files, frame and length (start time = frame / 48000 s)
    c1, c2 = files["clips16.wav"]["input_meters"]["channels"]
    assert c1["clipped_regions"] == [[1000, 10], [5000, 3], [65530, 12], [99999, 1]]
    assert c1["clipped_region_count"] == 4 and c1["clipped_samples"] == 26
    assert c2["clipped_regions"] == [[20000, 4]] and c2["clipped_samples"] == 4
    (cf,) = files["clipsf.wav"]["input_meters"]["channels"]
    # analytic: a float file clips nowhere; two samples of -2.5 lie past full scale (|x| > 1.0)
    assert cf["clipped_regions"] == [] and cf["clipped_samples"] == 0 and cf["over_samples"] == 2
    assert files["clips16.wav"]["status"] == "clipped" and files["clipsf.wav"]["status"] == "ok"
    assert files["clean.wav"]["status"] == "ok"
    assert files["clean.wav"]["input_meters"]["channels"][0]["clipped_samples"] == 0
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1 and "clips16.wav: clipped:" in lines[0]
    assert sorted(audio_files(tmp_path / "in")) == ["clean.wav", "clips16.wav", "clipsf.wav"]   # writes nothing


HOT_GAIN_DB = 6.0
CEILING_DBFS = -1.0


@pytest.fixture
def hot_case(tmp_path, write_recipe, write_audio):
    """A PCM_24 sine at 0.8 and a +6 dB recipe with a -1 dBFS ceiling: the output passes it."""
    rate = 48000
    n = np.arange(24000)
    x = 0.8 * np.sin(2 * np.pi * 440 / rate * n)
    path = write_audio("in/hot.wav", x, rate, "PCM_24")
    xin, _ = sf.read(str(path), dtype="float64")
    g = 10 ** (HOT_GAIN_DB / 20)

    def make(extra_gain_db=None, name="recipe.yaml"):
        trim = "" if extra_gain_db is None else f"\n  - {{type: gain, gain_db: {extra_gain_db}}}"
        return write_recipe(f"format: 1\nchain:\n  - {{type: gain, gain_db: {HOT_GAIN_DB}}}{trim}\n"
                            f"guard: {{ceiling_dbfs: {CEILING_DBFS}, on_over: reject}}\n", name=name)

    recipe = make()
    # analytic: the gain scales the input's sample peak; the over is that peak above the ceiling
    over = 20 * math.log10(g * np.abs(xin).max()) - CEILING_DBFS
    return {"recipe": recipe, "make": make, "input": path, "x": xin, "g": g, "over": over, "rate": rate}


def test_on_over_clip_reports_clipped(tmp_path, hot_case, run_cli, read_codes):
    out = tmp_path / "out"
    status, stdout, err = run_cli("run", hot_case["recipe"], hot_case["input"], "-o", out, "--on-over", "clip",
                                  "--workers", "1")
    assert status == 1                      # README.md 'Commands': 1 when any file is not ok
    (f,) = report_of(out)["files"]
    ceiling = 10 ** (CEILING_DBFS / 20)
    assert f["status"] == "clipped"
    # analytic: every sample whose amplified value passes the ceiling is clipped, each counted once
    assert f["clipped_by_chainrun"] == int(np.count_nonzero(np.abs(hot_case["g"] * hot_case["x"]) > ceiling))
    assert abs(f["over_db"] - hot_case["over"]) < 1e-6
    codes, _ = read_codes(out / "hot.wav")
    assert np.abs(codes).max() <= round(ceiling * 2 ** 23)          # analytic: nothing above the ceiling
    assert "\n" not in f["message"]
    assert re.search(r"^clipped .*hot\.wav", stdout, re.M)        # the summary lists it


def test_on_over_reject_states_over_and_a_trim_that_fits(tmp_path, hot_case, write_recipe, run_cli, read_codes):
    out = tmp_path / "out"
    status, _, err = run_cli("run", hot_case["recipe"], hot_case["input"], "-o", out, "--workers", "1")
    assert status == 1
    (f,) = report_of(out)["files"]
    assert f["status"] == "rejected" and f["output"] is None
    assert not (out / "hot.wav").exists()
    assert audio_files(out) == []
    msg = f["message"]
    assert "\n" not in msg
    # analytic: the over in dB, as the message states it (two decimals)
    assert f"by {hot_case['over']:.2f} dB" in msg
    assert abs(f["over_db"] - hot_case["over"]) < 1e-6
    m = re.search(r"trim of (-?\d+\.\d+) dB", msg)
    assert m, msg
    trim = float(m.group(1))
    assert trim < -hot_case["over"]
    (line,) = [ln for ln in err.splitlines() if "hot.wav" in ln and not ln.startswith("chainrun: [")]
    assert "rejected" in line and f"{hot_case['over']:.2f} dB" in line
    # analytic consequence: the chain is linear, so adding the stated trim as a gain section fits
    trimmed = hot_case["make"](trim, name="trimmed.yaml")
    assert len(load(str(trimmed)).sections) == 2
    out2 = tmp_path / "out2"
    status, _, err = run_cli("run", trimmed, hot_case["input"], "-o", out2, "--workers", "1")
    assert status == 0, err
    (f2,) = report_of(out2)["files"]
    assert f2["status"] == "ok"
    codes, _ = read_codes(out2 / "hot.wav")
    assert 20 * math.log10(np.abs(codes).max() / 2 ** 23) <= CEILING_DBFS


def test_on_over_scale_meets_the_ceiling_and_reports_the_gain(tmp_path, hot_case, run_cli):
    out = tmp_path / "out"
    status, _, err = run_cli("run", hot_case["recipe"], hot_case["input"], "-o", out, "--on-over", "scale",
                             "--workers", "1")
    assert status == 0, err
    (f,) = report_of(out)["files"]
    assert f["status"] == "ok"
    # analytic: the gain that brings the filtered peak to the ceiling is minus the over
    assert abs(f["gain_db"] + hot_case["over"]) < 0.01
    y, _ = sf.read(str(out / "hot.wav"), dtype="float64")
    assert abs(20 * math.log10(np.abs(y).max()) - CEILING_DBFS) < 0.01


@pytest.mark.parametrize("out_subtype", ["PCM_16", "PCM_24"])
@pytest.mark.parametrize("dither", ["none", "tpdf"])
def test_on_over_scale_to_a_0_dbfs_ceiling_fits_the_codes(tmp_path, write_recipe, write_audio, run_cli,
                                                          read_codes, out_subtype, dither):
    rate = 48000
    x = 0.5 * np.sin(2 * np.pi * 1000 / rate * np.arange(12000))       # crests on samples; +8 dB passes 0 dBFS
    path = write_audio("in/s.wav", x, rate, "FLOAT")
    recipe = write_recipe(f"""
        format: 1
        chain:
          - {{type: gain, gain_db: 8}}
        guard: {{ceiling_dbfs: 0, on_over: scale}}
        output: {{subtype: {out_subtype}, dither: {dither}}}
    """)
    out = tmp_path / "out"
    status, _, err = run_cli("run", recipe, path, "-o", out, "--workers", "1")
    (f,) = report_of(out)["files"]
    # README.md 'Recipes' (on_over: scale): scale delivers a file that fits the ceiling, so nothing is hard-clipped
    assert status == 0 and f["status"] == "ok" and f["clipped_by_chainrun"] == 0, (f["message"], err)
    codes, _ = read_codes(out / "s.wav")
    bits = 16 if out_subtype == "PCM_16" else 24
    # analytic: the peak lands within 0.01 dB of 0 dBFS
    assert abs(20 * math.log10(np.abs(codes).max() / 2 ** (bits - 1))) < 0.01


# =========================================================================== 6. +-2.0 to PCM_16 end to end


@pytest.mark.parametrize("dither", ["none", "auto"])
def test_float_beyond_full_scale_to_pcm16_clips_never_wraps(tmp_path, write_recipe, write_audio, read_codes,
                                                            run_cli, dither):
    pattern = np.array([0.5, 2.0, -2.0, 1.5, -1.5, 1.0, -1.0, 0.25, 0.0, -0.75])
    x = np.tile(pattern, 300)
    path = write_audio("in/over.wav", x, 48000, "FLOAT")
    recipe = write_recipe(f"""
        format: 1
        chain:
          - {{type: gain, gain_db: 0}}
        guard: {{on_over: clip}}
        output: {{subtype: PCM_16, dither: {dither}}}
    """)
    out = tmp_path / "out"
    status, _, err = run_cli("run", recipe, path, "-o", out, "--workers", "1")
    assert status == 1
    back, _ = sf.read(str(out / "over.wav"), dtype="int16")
    (f,) = report_of(out)["files"]
    assert f["status"] == "clipped"
    if dither == "none":
        # analytic: +2.0 -> 32767 and -2.0 -> -32768 (the ends of the 16-bit range, no wrap); in-range
        # values k / 32768 land on code k
        np.testing.assert_array_equal(back[:10], [16384, 32767, -32768, 32767, -32768, 32767, -32768, 8192, 0,
                                                  -24576])
        np.testing.assert_array_equal(back.reshape(-1, 10), np.tile(back[:10], (300, 1)))
        # analytic: the samples hard-clipped are those beyond the largest code: 2.0, 1.5, 1.0 above
        # 32767/32768 and -2.0, -1.5 below -1.0; each counted once
        assert f["clipped_by_chainrun"] == 5 * 300
    else:
        # TPDF dither moves a code by at most one; a clipped sample stays at the end of the range it
        # passed, never wrapping to the other sign (analytic)
        cycles = back.reshape(-1, 10)
        assert np.all(cycles[:, 1] == 32767) and np.all(cycles[:, 3] == 32767)
        assert np.all(cycles[:, 2] <= -32767) and np.all(cycles[:, 4] <= -32767)
        assert np.all(np.abs(cycles[:, 0].astype(int) - 16384) <= 1)


# =========================================================================== 8. subtypes round-trip

ROUND_TRIP = {
    # name: (rate, subtype, channels)
    "w16.wav": (44100, "PCM_16", 2),
    "w24.wav": (48000, "PCM_24", 1),
    "w32.wav": (96000, "PCM_32", 3),
    "wf.wav": (22050, "FLOAT", 2),
    "wd.wav": (48000, "DOUBLE", 1),
    "f16.flac": (48000, "PCM_16", 2),
    "f24.flac": (96000, "PCM_24", 1),
    "a16.aiff": (44100, "PCM_16", 1),
    "a24.aiff": (48000, "PCM_24", 2),
}
UNITY_RECIPE = """
    format: 1
    chain:
      - {type: gain, gain_db: 0}
    output: {subtype: %s, dither: none}
"""


def _round_trip_inputs(write_audio, names):
    rng = np.random.default_rng(8)
    data = {}
    for name in names:
        rate, subtype, ch = ROUND_TRIP[name]
        n = 5000
        if subtype.startswith("PCM"):
            bits = int(subtype[4:])
            codes = rng.integers(-(2 ** (bits - 1)), 2 ** (bits - 1), (n, ch), dtype=np.int64)
            codes[0, :], codes[1, :] = 2 ** (bits - 1) - 1, -(2 ** (bits - 1))    # both ends of the range
            data[name] = codes
        else:
            data[name] = rng.uniform(-0.999, 0.999, (n, ch))
        write_audio(f"in/{name}", data[name], rate, subtype)
    return data


def test_every_subtype_round_trips_through_a_0_db_chain(tmp_path, write_recipe, write_audio, read_codes, run_cli):
    data = _round_trip_inputs(write_audio, ROUND_TRIP)
    recipe = write_recipe(UNITY_RECIPE % "same")
    out = tmp_path / "out"
    status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", out, "--workers", "1")
    assert status == 0, err
    rep = by_rel(report_of(out))
    for name, (rate, subtype, ch) in ROUND_TRIP.items():
        got, info = read_codes(out / name)
        ref = sf.info(str(tmp_path / "in" / name))
        # contract (README, "Output and reports"): same container, subtype, rate and channels
        assert (info.format, info.subtype, info.samplerate, info.channels) == \
               (ref.format, subtype, rate, ch), name
        if subtype == "FLOAT":
            expected = data[name].astype(np.float32).astype(np.float64)
        else:
            expected = data[name]
        # analytic: a gain of exactly 1.0 and rounding to the nearest code give back every sample
        np.testing.assert_array_equal(got, expected, err_msg=name)
        assert rep[name]["status"] == "ok" and rep[name]["dither"] is False


def test_output_subtype_override_and_an_impossible_container(tmp_path, write_recipe, write_audio, read_codes,
                                                              run_cli):
    data = _round_trip_inputs(write_audio, ["w16.wav", "f16.flac", "w24.wav"])
    out24 = tmp_path / "out24"
    status, _, err = run_cli("run", write_recipe(UNITY_RECIPE % "PCM_24", name="to24.yaml"), tmp_path / "in",
                             "-o", out24, "--workers", "1")
    assert status == 0, err
    for name in ("w16.wav", "f16.flac"):
        got, info = read_codes(out24 / name)
        assert info.subtype == "PCM_24" and info.format == sf.info(str(tmp_path / "in" / name)).format
        np.testing.assert_array_equal(got, data[name] << 8)      # analytic: 16-bit code k is 24-bit code 256 k

    outf = tmp_path / "outf"
    status, _, err = run_cli("run", write_recipe(UNITY_RECIPE % "FLOAT", name="tofloat.yaml"), tmp_path / "in",
                             "-o", outf, "--workers", "1")
    assert status == 1
    rep = by_rel(report_of(outf))
    got, info = read_codes(outf / "w24.wav")
    assert info.subtype == "FLOAT"
    np.testing.assert_array_equal(got, data["w24.wav"] / 2.0 ** 23)   # analytic: 24-bit codes are exact in float32
    assert rep["w16.wav"]["status"] == "ok"
    bad = rep["f16.flac"]
    # libsndfile's FLAC encoder takes integer samples only: a failed file, one line, nothing delivered
    assert bad["status"] == "failed" and "\n" not in bad["message"]
    assert "FLAC" in bad["message"] and "FLOAT" in bad["message"]
    assert not (outf / "f16.flac").exists()
    (line,) = [ln for ln in err.splitlines() if "f16.flac" in ln and not ln.startswith("chainrun: [")]
    assert "error" in line


# =========================================================================== real processes


def test_run_and_scan_as_real_processes(tmp_path, write_recipe, write_audio):
    rng = np.random.default_rng(9)
    for i, rate in enumerate((44100, 48000, 48000)):
        write_audio(f"in/take{i}.wav", rng.uniform(-0.3, 0.3, (4000, 2)), rate, "PCM_24")
    recipe = write_recipe("format: 1\nchain:\n  - {type: highpass, freq: 60, order: 2}\n")
    env = {k: v for k, v in os.environ.items() if k != "PYTHONWARNINGS"}     # what a user's shell shows
    out = tmp_path / "out"
    proc = subprocess.run([sys.executable, "-m", "chainrun", "run", str(recipe), str(tmp_path / "in"), "-o",
                           str(out), "--workers", "2"], capture_output=True, text=True, env=env, timeout=300)
    assert proc.returncode == 0, proc.stderr
    assert "Traceback" not in proc.stderr and "Warning" not in proc.stderr, proc.stderr
    assert audio_files(out) == ["take0.wav", "take1.wav", "take2.wav"]
    rec = load(str(recipe))
    for i, rate in enumerate((44100, 48000, 48000)):
        x, _ = sf.read(str(tmp_path / "in" / f"take{i}.wav"), dtype="float64")
        y, _ = sf.read(str(out / f"take{i}.wav"), dtype="float64")
        expected = signal.sosfilt(design(rec, rate).sos, x, axis=0)   # scipy.signal.sosfilt (reference library)
        assert np.abs(y - expected).max() <= 0.5 / 2 ** 23 + 1e-12
    proc = subprocess.run([sys.executable, "-m", "chainrun", "scan", str(out), "--json"], capture_output=True,
                          text=True, env=env, timeout=300)
    assert proc.returncode == 0, proc.stderr
    doc = json.loads(proc.stdout)
    metered = sorted(os.path.basename(f["input"]) for f in doc["files"] if f["status"] == "ok")
    assert metered == ["take0.wav", "take1.wav", "take2.wav"]
    skipped = sorted(os.path.basename(f["input"]) for f in doc["files"] if f["status"] == "skipped")
    # not audio; hidden files are listed too (the resume journal)
    assert skipped == [".chainrun-journal.jsonl", "chainrun-report.csv", "chainrun-report.html", "chainrun-report.json"]
    proc = subprocess.run([sys.executable, "-m", "chainrun", "run", str(tmp_path / "nope.yaml"),
                           str(tmp_path / "in"), "-o", str(tmp_path / "o2")], capture_output=True, text=True,
                          env=env, timeout=300)
    assert proc.returncode == 2 and "Traceback" not in proc.stderr
    assert len(proc.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "o2").exists()


def test_scan_table_with_a_name_that_is_not_utf8(tmp_path, write_audio):
    src = write_audio("in/take.wav", np.full(2000, 0.25), 48000, "PCM_16")
    raw = os.fsencode(str(tmp_path / "in")) + b"/m\xe9t\xe9o.wav"
    os.rename(os.fsencode(str(src)), raw)
    env = dict(os.environ, PYTHONIOENCODING="utf-8:strict")      # as with a strict UTF-8 terminal
    proc = subprocess.run([sys.executable, "-m", "chainrun", "scan", str(tmp_path / "in")], capture_output=True,
                          text=True, env=env, timeout=300)
    assert proc.returncode == 0 and "internal error" not in proc.stderr, proc.stderr
    assert "m\\xe9t\\xe9o.wav" in proc.stdout
