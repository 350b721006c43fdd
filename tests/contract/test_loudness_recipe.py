"""Loudness and metadata reached from recipes and the command line: the ``loudness:`` block (target and link),
``output.metadata``, ``--no-loudness``, the scan table's loudness column and the bext v2 loudness fields.

Every check runs ``chainrun run`` / ``chainrun scan`` on real files. Expected values come from outside the
project: pyloudnorm (reference library) for integrated loudness, ITU-R BS.1770-4 for the sine reference
point, EBU Tech 3285 v2 (2011, 2.3) for the bext byte layout, parsed here with struct.
"""
from __future__ import annotations

import json
import struct

import numpy as np
import pytest
from scipy import signal

from chainrun.recipe import RecipeError, load

pyln = pytest.importorskip("pyloudnorm")

RATE = 48000
HIGHPASS = "  - {type: highpass, freq: 80, order: 2}\n"


def programme(seconds: float, seed: int, scale: float = 1.0, channels: int = 2) -> np.ndarray:
    """(frames, channels) band-limited noise (100 Hz .. 6 kHz, scipy.signal) at about -26 dBFS RMS, times ``scale``."""
    rng = np.random.default_rng(seed)
    x = signal.sosfilt(signal.butter(2, [100, 6000], "bandpass", fs=RATE, output="sos"),
                       rng.standard_normal((channels, int(seconds * RATE))), axis=1)
    x *= 0.05 / np.sqrt(np.mean(x ** 2))
    return (scale * x).T


def lufs(y: np.ndarray) -> float:
    return float(pyln.Meter(RATE).integrated_loudness(y))      # pyloudnorm (reference library)


def reread(path) -> np.ndarray:
    import soundfile as sf

    y, rate = sf.read(str(path), dtype="float64", always_2d=True)
    assert rate == RATE
    return y


def run(run_cli, tmp_path, recipe_text: str, *extra, name="recipe.yaml"):
    recipe = tmp_path / name
    recipe.write_text(recipe_text)
    status, out, err = run_cli("run", recipe, tmp_path / "in", "-o", tmp_path / "out", "--workers", 1, *extra)
    doc = json.loads((tmp_path / "out" / "chainrun-report.json").read_text())
    return status, {f["relpath"]: f for f in doc["files"]}, err


def recipe(link: str | None, target: float = -20.0, extra: str = "") -> str:
    block = "" if link is None else f"loudness: {{target_lufs: {target}, link: {link}}}\n"
    return "format: 1\nchain:\n" + HIGHPASS + "guard: {on_over: scale}\n" + block + extra


# --------------------------------------------------------------------------- linked gain through a run

def stems(write_audio):
    """Two stems 8 dB apart in one folder, and a third in another folder 4 dB below the loud one."""
    loud = programme(12, seed=3)
    write_audio("in/boathouse/host.wav", loud, RATE, "PCM_24")
    write_audio("in/boathouse/guest.wav", programme(12, seed=4, scale=10 ** (-8 / 20)), RATE, "PCM_24")
    write_audio("in/marsh/ambience.wav", programme(12, seed=5, scale=10 ** (-4 / 20)), RATE, "PCM_24")


def test_folder_link_gives_one_gain_per_folder_and_keeps_the_balance(tmp_path, write_audio, run_cli):
    stems(write_audio)
    status, files, _ = run(run_cli, tmp_path, recipe("folder"))
    assert status == 0 and {f["status"] for f in files.values()} == {"ok"}
    host, guest = files["boathouse/host.wav"], files["boathouse/guest.wav"]
    assert host["loudness_gain_db"] == guest["loudness_gain_db"]                   # one gain for the folder
    ins = {k: reread(tmp_path / "in" / k) for k in files}
    outs = {k: reread(f["output"]) for k, f in files.items()}
    # pyloudnorm (reference library): the balance between the stems is kept (analytic: one gain for both) ...
    before = lufs(ins["boathouse/host.wav"]) - lufs(ins["boathouse/guest.wav"])
    after = lufs(outs["boathouse/host.wav"]) - lufs(outs["boathouse/guest.wav"])
    assert abs(before - 8.0) < 0.1 and abs(after - before) <= 0.05
    # ... and the folder's two files together are at the target (files of whole 100 ms steps: only the three
    # gating blocks straddling the join differ from the group's own, a few hundredths of a LU)
    assert abs(lufs(np.concatenate([outs["boathouse/host.wav"], outs["boathouse/guest.wav"]])) + 20.0) <= 0.1
    assert abs(lufs(outs["boathouse/guest.wav"]) + 20.0) > 2.0          # neither stem alone is at the target
    # the marsh folder is a group of its own: its one file is brought to the target by itself
    assert abs(lufs(outs["marsh/ambience.wav"]) + 20.0) <= 0.1
    assert files["marsh/ambience.wav"]["loudness_gain_db"] != host["loudness_gain_db"]


def test_file_link_brings_each_stem_to_the_target(tmp_path, write_audio, run_cli):
    stems(write_audio)
    status, files, _ = run(run_cli, tmp_path, recipe("file"))
    assert status == 0
    for f in files.values():                                             # pyloudnorm (reference library)
        assert abs(lufs(reread(f["output"])) + 20.0) <= 0.1
    assert files["boathouse/host.wav"]["loudness_gain_db"] != files["boathouse/guest.wav"]["loudness_gain_db"]


def test_batch_link_gives_every_file_the_same_gain(tmp_path, write_audio, run_cli):
    stems(write_audio)
    status, files, _ = run(run_cli, tmp_path, recipe("batch"))
    assert status == 0
    assert len({f["loudness_gain_db"] for f in files.values()}) == 1
    outs = [reread(files[k]["output"]) for k in sorted(files)]
    assert abs(lufs(np.concatenate(outs)) + 20.0) <= 0.1                 # pyloudnorm (reference library)


def test_a_linked_group_held_by_the_ceiling_shares_the_smallest_gain(tmp_path, write_audio, run_cli):
    # the target asks +20 dB or so; the louder stem's peaks meet the -1 dBFS ceiling first, and the quieter
    # stem gets that same gain (on_over: scale), so the balance is kept and both are short of the target
    stems(write_audio)
    text = recipe("folder", target=-3.0).replace("{on_over: scale}", "{on_over: scale, ceiling_dbfs: -1}")
    status, files, _ = run(run_cli, tmp_path, text)
    host, guest = files["boathouse/host.wav"], files["boathouse/guest.wav"]
    assert host["loudness_gain_db"] == guest["loudness_gain_db"]
    assert host["loudness_shortfall_lu"] and guest["loudness_shortfall_lu"]
    outs = [reread(host["output"]), reread(guest["output"])]
    # numpy: the ceiling holds on the louder stem's samples, and the balance is kept (pyloudnorm)
    assert 20 * np.log10(np.abs(outs[0]).max()) <= -1.0 + 1e-9
    assert abs((lufs(outs[0]) - lufs(outs[1])) - 8.0) <= 0.1


def test_resume_measures_a_group_whole_again(tmp_path, write_audio, run_cli):
    stems(write_audio)
    run(run_cli, tmp_path, recipe("folder"))
    gain = json.loads((tmp_path / "out" / "chainrun-report.json").read_text())["files"][0]["loudness_gain_db"]
    (tmp_path / "out" / "boathouse" / "guest.wav").unlink()
    status, files, err = run(run_cli, tmp_path, recipe("folder"))
    guest = files["boathouse/guest.wav"]
    # analytic: the group is unchanged, so the file rendered again gets the gain of the whole group again
    assert guest["loudness_gain_db"] == files["boathouse/host.wav"]["loudness_gain_db"]
    assert "1 file(s) of its loudness group were delivered by an earlier run and kept" in err
    assert gain is not None


# --------------------------------------------------------------------------- --no-loudness, scan, bext

def bwf(write_audio, tmp_path, seconds=6.0):
    """A BWF take: libsndfile's WAV with a bext chunk (EBU Tech 3285 v1, 602 bytes) put before its data."""
    path = write_audio("in/take7.wav", programme(seconds, seed=11), RATE, "PCM_24")
    raw = path.read_bytes()
    # EBU Tech 3285, 2.3: Description 256, Originator 32, OriginatorReference 32, Date 10, Time 8, TimeReference
    # 2 x 4, Version 2, UMID 64, five int16 loudness fields, Reserved 180
    bext = struct.pack("<256s32s32s10s8sIIH64s5h180s", b"Marsh dawn chorus, take 7", b"Tide Hour",
                       b"TH-0007", b"2024-05-03", b"05:12:00", 0, 0, 1, bytes(64), 0, 0, 0, 0, 0, bytes(180))
    chunk = b"bext" + struct.pack("<I", len(bext)) + bext
    at = raw.index(b"data")
    body = raw[12:at] + chunk + raw[at:]
    path.write_bytes(b"RIFF" + struct.pack("<I", len(body) + 4) + b"WAVE" + body)
    return path


def bext_fields(path) -> tuple[int, ...]:
    """The five v2 loudness fields (EBU Tech 3285 v2, 2.3: int16 at byte 412 of the chunk), by a RIFF walk."""
    raw = path.read_bytes()
    at = 12
    while at + 8 <= len(raw):
        cid, size = raw[at:at + 4], struct.unpack_from("<I", raw, at + 4)[0]
        if cid == b"bext":
            assert struct.unpack_from("<H", raw, at + 8 + 346)[0] == 2              # Version 2
            return struct.unpack_from("<5h", raw, at + 8 + 412)
        at += 8 + size + (size & 1)
    raise AssertionError("no bext chunk")


def test_bext_loudness_fields_are_the_reports_output_figures(tmp_path, write_audio, run_cli):
    bwf(write_audio, tmp_path)
    status, files, _ = run(run_cli, tmp_path, recipe(None))
    assert status == 0
    f = files["take7.wav"]
    loud = f["output_meters"]["loudness"]
    tp = max(c["true_peak_dbtp"] for c in f["output_meters"]["channels"])
    # EBU Tech 3285 v2: each field is round(100 x value) as int16
    expected = tuple(round(100 * v) for v in (loud["integrated_lufs"], loud["loudness_range_lu"], tp,
                                              loud["max_momentary_lufs"], loud["max_short_term_lufs"]))
    assert bext_fields(tmp_path / "out" / "take7.wav") == expected
    # pyloudnorm (reference library) reads the delivered file's integrated loudness within 0.1 LU of the field
    assert abs(expected[0] / 100 - lufs(reread(tmp_path / "out" / "take7.wav"))) <= 0.1


def test_no_loudness_leaves_the_bext_loudness_unknown(tmp_path, write_audio, run_cli):
    bwf(write_audio, tmp_path)
    status, files, _ = run(run_cli, tmp_path, recipe(None), "--no-loudness")
    assert status == 0
    assert "loudness" not in files["take7.wav"]["output_meters"]
    assert "loudness" not in files["take7.wav"]["input_meters"]
    assert bext_fields(tmp_path / "out" / "take7.wav") == (0x7FFF,) * 5      # EBU Tech 3285 v2: not known


def test_no_loudness_with_a_target_still_reaches_it(tmp_path, write_audio, run_cli):
    bwf(write_audio, tmp_path)
    status, files, _ = run(run_cli, tmp_path, recipe("file", target=-18.0), "--no-loudness")
    f = files["take7.wav"]
    assert status == 0 and "loudness" not in f["input_meters"]
    assert abs(lufs(reread(f["output"])) + 18.0) <= 0.1                      # pyloudnorm (reference library)
    # the output was loudness-metered for the target, so its bext says its integrated loudness
    assert bext_fields(tmp_path / "out" / "take7.wav")[0] == round(100 * f["output_meters"]["loudness"]["integrated_lufs"])


def test_output_metadata_drop_writes_no_bext(tmp_path, write_audio, run_cli):
    bwf(write_audio, tmp_path)
    status, _, _ = run(run_cli, tmp_path, recipe(None, extra="output: {metadata: drop}\n"))
    assert status == 0
    raw = (tmp_path / "out" / "take7.wav").read_bytes()
    assert b"bext" not in raw and b"bext" in (tmp_path / "in" / "take7.wav").read_bytes()


def test_scan_table_shows_integrated_loudness(tmp_path, write_audio, run_cli):
    t = np.arange(3 * RATE) / RATE
    write_audio("in/tone.wav", 0.1 * np.sin(2 * np.pi * 997 * t), RATE, "PCM_24")
    write_audio("in/blip.wav", 0.1 * np.sin(2 * np.pi * 997 * t[:RATE // 10]), RATE, "PCM_24")
    status, out, _ = run_cli("scan", tmp_path / "in")
    assert status == 0
    rows = {line.split()[-1]: line for line in out.splitlines()[1:]}
    # ITU-R BS.1770-4: a 0 dBFS 1 kHz sine in one channel reads -3.01 LKFS, so -20 dBFS reads -23.0 LUFS
    # (997 Hz: the K-weighting differs from 1 kHz by far less than 0.05 dB)
    assert "-23.0 LUFS" in rows["tone.wav"]
    assert "below gate" in rows["blip.wav"]               # BS.1770-4: shorter than one 400 ms block
    assert max(len(line) for line in out.splitlines()) <= 100
    status, out, _ = run_cli("scan", "--no-loudness", tmp_path / "in")
    assert "LUFS" not in out and "below gate" not in out


# --------------------------------------------------------------------------- recipes

def test_loudness_block_merges_along_includes(write_recipe):
    house = write_recipe("format: 1\nchain:\n" + HIGHPASS + "loudness: {target_lufs: -23}\n", "house.yaml")
    r = load(write_recipe("format: 1\ninclude: house.yaml\nloudness: {link: folder}\n", "top.yaml"))
    assert (r.loudness.target_lufs, r.loudness.link) == (-23.0, "folder")
    assert str(r.loudness.where["target_lufs"]) == f"{house}:4:25"
    assert r.to_dict()["loudness"] == {"target_lufs": -23.0, "link": "folder"}
    same = load(write_recipe("format: 1\ninclude: house.yaml\nloudness: {target_lufs: -23.0}\n", "same.yaml"))
    assert same.loudness.link == "file"
    with pytest.raises(RecipeError) as err:
        load(write_recipe("format: 1\ninclude: house.yaml\nloudness: {target_lufs: -16, link: file}\n", "bad.yaml"))
    assert (err.value.line, err.value.col) == (3, 25) and "conflicts with -23" in err.value.message


def test_digest_changes_only_for_recipes_that_write_the_new_keys(write_recipe):
    plain = load(write_recipe("format: 1\nchain:\n" + HIGHPASS, "plain.yaml"))
    keep = load(write_recipe("format: 1\nchain:\n" + HIGHPASS + "output: {metadata: keep}\n", "keep.yaml"))
    drop = load(write_recipe("format: 1\nchain:\n" + HIGHPASS + "output: {metadata: drop}\n", "drop.yaml"))
    target = load(write_recipe("format: 1\nchain:\n" + HIGHPASS + "loudness: {target_lufs: -23}\n", "t.yaml"))
    assert plain.loudness is None and "loudness" not in plain.to_dict()
    assert "metadata" not in plain.to_dict()["output"]
    assert plain.digest == keep.digest
    assert len({plain.digest, drop.digest, target.digest}) == 3
