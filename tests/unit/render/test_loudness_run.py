"""Loudness through a real render: metering in the bank and the reports, and the loudness target.

Material is the boathouse/marsh programme's kind: band-limited noise in steps of level, written to
48 kHz PCM_24 files and rendered with :func:`chainrun.render.render_file`. Every expected value names
its source beside the check.
"""
from __future__ import annotations

import csv
import io
import dataclasses
import json
import math
from types import SimpleNamespace

import numpy as np
import pytest
import soundfile as sf
from scipy import signal

from chainrun.meters.loudness import LoudnessMeter
from chainrun.audio.reader import probe
from chainrun.render import Policy, render_file, scan_file
from chainrun.report.document import file_dict, headline_fields
from chainrun.report.html import render_html
from chainrun.report.table import console_summary, csv_text, error_lines
from chainrun.results import FileResult

RATE = 48000
UNITY = np.array([[1.0, 0.0, 0.0, 1.0, 0.0, 0.0]])
# a 2nd-order Butterworth high-pass at 80 Hz, designed by scipy.signal (reference library)
HIGHPASS = signal.butter(2, 80, "highpass", fs=RATE, output="sos")


def l1_bound(sos: np.ndarray) -> float:
    """sum |h| of the impulse response by scipy.signal.sosfilt (reference library), with room for rounding."""
    imp = np.zeros(1 << 15)
    imp[0] = 1.0
    return float(np.abs(signal.sosfilt(sos, imp)).sum()) * 1.001


def programme(seconds: float, seed: int, channels: int = 2, scale: float = 1.0) -> np.ndarray:
    """(frames, channels) band-limited noise in level steps of 0.5..3 s at -40..-20 dBFS RMS."""
    rng = np.random.default_rng(seed)
    n = int(seconds * RATE)
    x = signal.sosfilt(signal.butter(2, [100, 6000], "bandpass", fs=RATE, output="sos"),
                       rng.standard_normal((channels, n)), axis=1)
    x /= np.sqrt(np.mean(x ** 2))
    pos = 0
    while pos < n:
        length = int(rng.uniform(0.5, 3.0) * RATE)
        x[:, pos:pos + length] *= 10 ** (rng.uniform(-40, -20) / 20)
        pos += length
    return (scale * x).T


def render(write_audio, tmp_path, data, policy, name="take.wav", sos=HIGHPASS, subtype="PCM_24",
           source=None, outdir="out"):
    path = write_audio(f"in/{name}", data, RATE, subtype)
    src = probe(str(path)) if source is None else source(probe(str(path)))
    out = tmp_path / outdir
    out.mkdir(exist_ok=True)
    return render_file(src, str(out / name), sos, l1_bound(sos), policy, name)


def reread(path) -> np.ndarray:
    y, rate = sf.read(str(path), dtype="float64", always_2d=True)
    assert rate == RATE
    return y


def ref_lufs(y: np.ndarray) -> float:
    pyln = pytest.importorskip("pyloudnorm")
    # pyloudnorm (reference library). Its "K-weighting" is designed from its own analog parameters rather
    # than BS.1770-4's 48 kHz table; on noise it reads about 0.04 LU below chainrun (tests/unit/meters/test_loudness.py),
    # so it is held to the same +-0.1 LU as the meter, not closer.
    return float(pyln.Meter(RATE).integrated_loudness(y))


def independent_lufs(y: np.ndarray) -> float:
    """The output file metered afresh, in one block (the meter's own figures are checked in test_loudness.py)."""
    m = LoudnessMeter(RATE, y.shape[1])
    m.update(np.ascontiguousarray(y.T))
    return m.reading().integrated_lufs


def true_peak_8x(y: np.ndarray) -> float:
    """Peak of the signal interpolated 8x by scipy.signal.resample_poly (reference library), in dBTP."""
    up = signal.resample_poly(y, 8, 1, axis=0)
    return 20 * math.log10(max(np.abs(up).max(), np.abs(y).max()))


# --- the target -----------------------------------------------------------------------------------

@pytest.mark.parametrize("target", [-23.0, -16.0])
def test_output_reaches_the_target_within_a_tenth(tmp_path, write_audio, target):
    x = programme(20, seed=1)
    res = render(write_audio, tmp_path, x, Policy(on_over="scale", target_lufs=target,
                                                 true_peak_ceiling_dbtp=-1.0))
    assert res.status == "ok" and res.loudness_shortfall_lu is None
    y = reread(res.output)
    # ITU-R BS.1770-4 / EBU R 128: integrated loudness of the delivered file; target within +-0.1 LU
    assert abs(independent_lufs(y) - target) <= 0.1
    assert abs(res.output_meters.loudness.integrated_lufs - target) <= 0.1
    assert abs(ref_lufs(y) - target) <= 0.1
    # analytic: one gain G moves the integrated loudness by exactly G (mean squares scale by G**2)
    filtered = signal.sosfilt(HIGHPASS, reread(tmp_path / "in" / "take.wav"), axis=0)
    assert abs(res.loudness_gain_db - (target - ref_lufs(filtered))) <= 0.1
    assert "loudness gain" in res.message


def test_no_target_means_no_gain_and_unchanged_bytes(tmp_path, write_audio):
    x = programme(6, seed=2)
    res = render(write_audio, tmp_path, x, Policy(on_over="scale"), sos=UNITY)
    # analytic: a unity chain into the same subtype (no dither) gives back the input samples exactly
    assert np.array_equal(reread(res.output), reread(tmp_path / "in" / "take.wav"))
    assert res.loudness_gain_db is None
    assert res.input_meters.loudness.integrated_lufs == pytest.approx(res.output_meters.loudness.integrated_lufs)


@pytest.mark.parametrize("on_over", ["scale", "clip"])
def test_ceiling_holds_the_gain_back_and_the_shortfall_is_said(tmp_path, write_audio, on_over):
    x = programme(12, seed=3)
    policy = Policy(on_over=on_over, target_lufs=-8.0, ceiling_dbfs=-1.0, true_peak_ceiling_dbtp=-1.5)
    res = render(write_audio, tmp_path, x, policy)
    assert res.status == "ok" and res.clipped_by_chainrun == 0         # no limiter, no clipping: one gain
    y = reread(res.output)
    # never over the ceilings: sample peak by numpy, true peak by scipy.signal.resample_poly 8x; the 8x
    # interpolation may read a little above BS.1770-4 Annex 2's 4x estimate, hence 0.05 dB of room
    assert 20 * math.log10(np.abs(y).max()) <= -1.0
    assert true_peak_8x(y) <= -1.5 + 0.05
    measured = ref_lufs(y)
    assert measured < -8.0 - 1.0                                      # it really fell short
    # analytic: shortfall = target - delivered loudness (pyloudnorm reads within 0.1 LU of the meter)
    assert abs(res.loudness_shortfall_lu - (-8.0 - measured)) <= 0.1
    assert "short of the loudness target" in res.message and f"{res.loudness_gain_db:+.2f}" in res.message
    # one of the two ceilings is reached within the fit margin (0.01 dB) and rounding
    tp_gap = -1.5 - res.output_meters.headline()["true_peak_dbtp"]
    sample_gap = -1.0 - 20 * math.log10(np.abs(y).max())
    assert min(tp_gap, sample_gap) <= 0.02


def test_reject_names_the_shortfall_and_the_largest_gain_that_fits(tmp_path, write_audio):
    x = programme(12, seed=3)
    res = render(write_audio, tmp_path, x, Policy(on_over="reject", target_lufs=-8.0, ceiling_dbfs=-1.0))
    assert res.status == "rejected" and res.output is None
    assert list((tmp_path / "out").iterdir()) == []                   # nothing delivered, no scratch left
    filtered = signal.sosfilt(HIGHPASS, reread(tmp_path / "in" / "take.wav"), axis=0)
    peak_db = 20 * math.log10(np.abs(filtered).max())                 # scipy.signal (reference library)
    fits = -1.0 - peak_db                                             # analytic: the gain that puts the peak at -1
    assert fits - 0.02 <= res.trim_db <= fits                          # the largest gain that fits, 0.01 dB margin
    wanted = -8.0 - ref_lufs(filtered)
    assert abs(res.loudness_shortfall_lu - (wanted - res.trim_db)) <= 0.1
    assert "not delivered" in res.message and f"{res.trim_db:+.2f}" in res.message
    assert f"{res.loudness_shortfall_lu:.2f} LU short" in res.message


def test_delivered_bytes_do_not_depend_on_the_block_size(tmp_path, write_audio):
    # common practice, no published source: block size must never change an output
    x = programme(8, seed=4)
    digests = []
    for block in (1000, 4096, 65536):
        policy = Policy(on_over="scale", target_lufs=-18.0, block_size=block, true_peak_ceiling_dbtp=-1.0,
                        subtype="PCM_16", dither="tpdf")
        res = render(write_audio, tmp_path, x, policy, outdir=f"b{block}")   # same name: same dither seed
        assert res.status == "ok"
        digests.append((reread(res.output).tobytes(), res.loudness_gain_db))
    assert digests[0] == digests[1] == digests[2]


def test_silence_gets_no_gain_and_a_note(tmp_path, write_audio):
    res = render(write_audio, tmp_path, np.zeros((RATE * 3, 2)), Policy(on_over="scale", target_lufs=-16.0))
    # BS.1770-4: no block above the -70 LUFS gate -> no integrated loudness, so no gain can be derived
    assert res.status == "ok" and res.loudness_gain_db == 0.0 and "below the gate" in res.message
    assert res.output_meters.loudness.integrated_lufs is None
    assert not reread(res.output).any()


def test_a_file_shorter_than_one_block_gets_no_gain(tmp_path, write_audio):
    t = np.arange(int(0.2 * RATE)) / RATE
    click = 0.3 * np.sin(2 * np.pi * 1000 * t)                        # 200 ms: shorter than a 400 ms block
    res = render(write_audio, tmp_path, np.column_stack([click, click]),
                 Policy(on_over="scale", target_lufs=-16.0), sos=UNITY)
    assert res.status == "ok" and res.loudness_gain_db == 0.0 and "below the gate" in res.message
    # analytic: a unity chain and no gain give back the input codes
    assert np.array_equal(reread(res.output), reread(tmp_path / "in" / "take.wav"))
    doc = _document([file_dict(res)])
    assert "below gate" in console_summary(doc)
    assert "below gate" in render_html(doc)


def _with_mask(mask):
    """The probed Source with another WAVE_FORMAT_EXTENSIBLE channel mask (as the header would give it)."""
    def make(src):
        return dataclasses.replace(src, channel_mask=mask)
    return make


def test_5_1_with_lfe_by_channel_mask(tmp_path, write_audio):
    n = RATE * 6
    tone = 10 ** (-23 / 20) * np.sin(2 * np.pi * 1000 * np.arange(n) / RATE)
    lfe = 0.05 * np.random.default_rng(5).standard_normal(n)
    quiet = np.zeros(n)
    x = np.column_stack([quiet, quiet, quiet, lfe, tone, quiet])      # L R C LFE SL SR (mask 0x60F)
    res = render(write_audio, tmp_path, x, Policy(on_over="scale", target_lufs=-20.0), sos=UNITY,
                 source=_with_mask(0x60F))
    loud = res.input_meters.loudness
    assert loud.channel_weights == (1.0, 1.0, 1.0, 0.0, 1.41, 1.41) and "0x60f" in loud.weights_note
    # ITU-R BS.1770-4 Table 3: LFE left out, G = 1.41 for a side surround; a -23 dBFS 1 kHz sine in one
    # channel reads -23 - 3.01 + 10 log10(1.41) LUFS, so the gain to -20 LUFS is the difference
    expected = -23 - 10 * math.log10(2) + 10 * math.log10(1.41)
    assert abs(loud.integrated_lufs - expected) <= 0.05
    assert abs(res.loudness_gain_db - (-20.0 - expected)) <= 0.05
    y = reread(res.output)
    gain = 10 ** (res.loudness_gain_db / 20)
    # analytic: one gain on every channel, the LFE too (24-bit rounding: 2**-23)
    assert np.abs(y[:, 3] - lfe * gain).max() <= 2.0 ** -23 * 2
    assert abs(independent_lufs_masked(y, 0x60F) - (-20.0)) <= 0.1


def independent_lufs_masked(y, mask):
    m = LoudnessMeter(RATE, y.shape[1], channel_mask=mask)
    m.update(np.ascontiguousarray(y.T))
    return m.reading().integrated_lufs


def test_channel_mask_decides_the_weights_2_1(tmp_path, write_audio):
    n = RATE * 5
    tone = 10 ** (-23 / 20) * np.sin(2 * np.pi * 1000 * np.arange(n) / RATE)
    lfe = 0.2 * np.sin(2 * np.pi * 60 * np.arange(n) / RATE)
    x = np.column_stack([tone, tone, lfe])
    plain = render(write_audio, tmp_path, x, Policy(), sos=UNITY, name="plain.wav")
    masked = render(write_audio, tmp_path, x, Policy(), sos=UNITY, name="masked.wav", source=_with_mask(0xB))
    # EBU R 128 / BS.1770-4: a -23 dBFS 1 kHz sine in L and R reads -23 LUFS; the LFE (mask bit 0x8) is left out
    assert abs(masked.input_meters.loudness.integrated_lufs - (-23.0)) <= 0.05
    assert plain.input_meters.loudness.integrated_lufs > -23.0 + 1.0      # without a mask the LFE counts


# --- scan, policy, journal, reports -----------------------------------------------------------------

def test_scan_meters_loudness_and_can_skip_it(write_audio):
    n = RATE * 5
    tone = 10 ** (-23 / 20) * np.sin(2 * np.pi * 1000 * np.arange(n) / RATE)
    src = probe(str(write_audio("in/tone.wav", np.column_stack([tone, tone]), RATE, "PCM_24")))
    # EBU Tech 3341 / R 128: a stereo 1 kHz sine at -23 dBFS reads -23.0 LUFS, within 0.1 LU
    assert abs(scan_file(src).input_meters.loudness.integrated_lufs + 23.0) <= 0.1
    assert scan_file(src, loudness=False).input_meters.loudness is None
    silent = probe(str(write_audio("in/silent.wav", np.zeros((RATE, 2)), RATE, "PCM_24")))
    d = file_dict(scan_file(silent))
    assert d["input_meters"]["loudness"]["integrated_lufs"] is None           # below the gate: null, not a number
    assert d["input_meters"]["headline"]["integrated_lufs"] is None


def test_policy_key_and_recipe_block():
    a, b = Policy(), Policy(target_lufs=-16.0)
    assert a.output_key()["target_lufs"] is None and b.output_key()["target_lufs"] == -16.0
    assert Policy(target_lufs=-16.0, loudness_link="folder").output_key() != b.output_key()
    guard = SimpleNamespace(on_over="scale", ceiling_dbfs=-1.0, true_peak_ceiling_dbtp=None)
    output = SimpleNamespace(subtype="same", dither="auto")
    recipe = SimpleNamespace(guard=guard, output=output, loudness={"target_lufs": -16, "link": "batch"})
    p = Policy.from_recipe(recipe)
    assert (p.target_lufs, p.loudness_link) == (-16.0, "batch")
    p = Policy.from_recipe(SimpleNamespace(guard=guard, output=output), loudness=False)
    assert (p.target_lufs, p.loudness_link, p.loudness) == (None, "file", False)


def test_journal_round_trip_keeps_loudness_and_reads_old_records(tmp_path, write_audio):
    res = render(write_audio, tmp_path, programme(5, seed=6), Policy(on_over="scale", target_lufs=-20.0))
    rec = json.loads(json.dumps(res.to_record()))
    back = FileResult.from_record(rec, res.input, res.relpath, res.output, res.source)
    assert back.output_meters == res.output_meters and back.input_meters == res.input_meters
    assert back.loudness_gain_db == res.loudness_gain_db
    for side in ("input_meters", "output_meters"):                   # a record written before loudness
        del rec[side]["loudness"]
        del rec[side]["headline"]["integrated_lufs"]
    del rec["loudness_gain_db"], rec["loudness_shortfall_lu"]
    old = FileResult.from_record(rec, res.input, res.relpath, res.output, res.source)
    assert old.output_meters.loudness is None and old.loudness_gain_db is None
    assert old.output_meters.channels == res.output_meters.channels


def _document(files):
    return {"summary": {"files": len(files)}, "headline_fields": headline_fields(), "files": files}


def test_reports_show_input_and_output_loudness_and_the_gain(tmp_path, write_audio):
    res = render(write_audio, tmp_path, programme(8, seed=7), Policy(on_over="scale", target_lufs=-18.0,
                                                                   true_peak_ceiling_dbtp=-1.0))
    short = render(write_audio, tmp_path, programme(8, seed=7), Policy(on_over="scale", target_lufs=-5.0),
                   name="short.wav")
    doc = json.loads(json.dumps(_document([file_dict(res), file_dict(short)])))
    f = next(f for f in doc["files"] if f["relpath"] == "take.wav")
    assert abs(f["output_meters"]["loudness"]["integrated_lufs"] + 18.0) <= 0.1
    assert f["output_meters"]["headline"]["integrated_lufs"] == f["output_meters"]["loudness"]["integrated_lufs"]
    assert f["loudness_gain_db"] == pytest.approx(res.loudness_gain_db)
    text = console_summary(doc)
    assert "in LUFS" in text and "out LUFS" in text
    line = next(li for li in text.splitlines() if li.endswith(")") and "take.wav" in li)
    assert f" {res.output_meters.loudness.integrated_lufs:.1f} " in line
    assert f" {res.input_meters.loudness.integrated_lufs:.1f} " in line
    rows = list(csv.DictReader(io.StringIO(csv_text(doc))))
    row = next(r for r in rows if r["input"].endswith("take.wav"))
    assert abs(float(row["out_integrated_lufs"]) + 18.0) <= 0.1 and row["in_integrated_lufs"]
    assert row["loudness_gain_db"] == f"{res.loudness_gain_db:.2f}" and row["loudness_shortfall_lu"] == ""
    assert any("note:" in li and "short of the loudness target" in li for li in error_lines(doc))
    page = render_html(doc)
    assert "output loudness" in page and "loudness gain" in page


# --- linked gain: the pieces the batch calls -------------------------------------------------------

def test_linked_group_gets_one_gain_and_reaches_the_target_together(tmp_path, write_audio):
    from chainrun.render.loudness import group_of, measure_file

    loud, quiet = programme(20, seed=8), programme(20, seed=8, scale=10 ** (-8 / 20))    # 8 dB apart
    paths = [write_audio(f"in/{n}.wav", x, RATE, "PCM_24") for n, x in (("loud", loud), ("quiet", quiet))]
    policy = Policy(on_over="scale", target_lufs=-20.0, loudness_link="folder", true_peak_ceiling_dbtp=-1.0)
    srcs = [probe(str(p)) for p in paths]
    group = group_of([measure_file(s, HIGHPASS, l1_bound(HIGHPASS), policy) for s in srcs])
    assert group.files == 2
    out = tmp_path / "out"
    out.mkdir()
    results = [render_file(s, str(out / f"{n}.wav"), HIGHPASS, l1_bound(HIGHPASS), policy, f"{n}.wav",
                           group=group) for s, n in zip(srcs, ("loud", "quiet"))]
    assert [r.status for r in results] == ["ok", "ok"]
    assert results[0].loudness_gain_db == results[1].loudness_gain_db            # one gain for the group
    ys = [reread(r.output) for r in results]
    # the files keep their 8 dB difference (analytic: one gain), so neither alone is at the target
    assert abs((ref_lufs(ys[0]) - ref_lufs(ys[1])) - 8.0) <= 0.05
    assert abs(ref_lufs(ys[1]) - (-20.0)) > 2.0
    # pyloudnorm (reference library) over the two files end to end: both files are whole multiples of
    # 100 ms, so its gating blocks are the two files' own plus three that straddle the join (~0.05 LU)
    assert abs(ref_lufs(np.concatenate(ys)) - (-20.0)) <= 0.1


def test_group_of_one_file_is_the_file_itself(tmp_path, write_audio):
    from chainrun.render.loudness import group_of, measure_file

    policy = Policy(on_over="scale", target_lufs=-20.0)
    single = render(write_audio, tmp_path, programme(10, seed=10), policy, name="one.wav", outdir="single")
    src = probe(single.input)
    group = group_of([measure_file(src, HIGHPASS, l1_bound(HIGHPASS), policy)])
    # analytic: the group of one file has that file's own loudness, so the gain is the same to the bit
    assert group.integrated_lufs == pytest.approx(-20.0 - single.loudness_gain_db, abs=1e-9)
    linked = render_file(src, str(tmp_path / "linked.wav"), HIGHPASS, l1_bound(HIGHPASS), policy, "one.wav",
                         group=group)
    assert linked.loudness_gain_db == single.loudness_gain_db
    assert reread(linked.output).tobytes() == reread(single.output).tobytes()


def test_unknown_link_is_refused_and_a_lone_linked_file_says_so(tmp_path, write_audio):
    from chainrun.errors import BatchError

    guard = SimpleNamespace(on_over="scale", ceiling_dbfs=-1.0, true_peak_ceiling_dbtp=None)
    output = SimpleNamespace(subtype="same", dither="auto")
    with pytest.raises(BatchError, match="allowed: file, folder, batch"):
        Policy.from_recipe(SimpleNamespace(guard=guard, output=output, loudness={"target_lufs": -16, "link": "x"}))
    res = render(write_audio, tmp_path, programme(5, seed=12),
                 Policy(on_over="scale", target_lufs=-20.0, loudness_link="folder"))
    assert res.status == "ok" and "measured on this file alone" in res.message
