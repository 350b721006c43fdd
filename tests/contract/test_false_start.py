"""An empty false-start file among the inputs (issue 18, item 8): skipped with its reason, not failed.

A recorder that was started and stopped at once leaves a WAV whose header declares no audio and
which holds none. There is nothing to render and nothing wrong: the file is listed as skipped, with
the reason, and the rest of the batch runs as usual; a skipped file is not a failure (exit 0). A
header that declares audio the file does not hold is a copy cut short, and still fails.
"""
from __future__ import annotations

import json

import numpy as np
import soundfile as sf

from support import report_of

RECIPE = """\
format: 1
name: boathouse level
chain:
  - {type: gain, gain_db: -2}
"""


def _folder(tmp_path, write_audio):
    good = write_audio("in/host_take.wav", 0.3 * np.sin(2 * np.pi * 220 * np.arange(9600) / 48000), 48000, "PCM_24")
    empty = write_audio("in/false_start.wav", np.zeros((0, 2)), 48000, "PCM_24")
    assert sf.info(str(empty)).frames == 0        # soundfile (reference library): the file holds no frames
    return good, empty


def test_a_zero_frame_file_is_skipped_with_its_reason_and_the_batch_is_ok(tmp_path, write_audio, write_recipe,
                                                                        run_cli, tree_hashes):
    good, empty = _folder(tmp_path, write_audio)
    recipe = write_recipe(RECIPE)
    before = tree_hashes(tmp_path / "in")
    status, out, err = run_cli("run", recipe, tmp_path / "in", "-o", tmp_path / "out", "--workers", "1")
    assert status == 0, err                       # README 'Commands': 0 when every file is ok (or skipped)
    files = {f["relpath"]: f for f in report_of(tmp_path / "out")["files"]}
    assert files["host_take.wav"]["status"] == "ok"
    assert files["false_start.wav"]["status"] == "skipped"
    assert files["false_start.wav"]["message"].startswith("no audio frames")
    assert f"{empty}: note: skipped: no audio frames" in err
    assert f"{empty}: error" not in err
    assert (tmp_path / "out" / "host_take.wav").is_file()
    assert not (tmp_path / "out" / "false_start.wav").exists()
    assert tree_hashes(tmp_path / "in") == before          # inputs untouched


def test_scan_lists_a_zero_frame_file_as_skipped_and_exits_0(tmp_path, write_audio, run_cli):
    _folder(tmp_path, write_audio)
    status, out, err = run_cli("scan", tmp_path / "in", "--json")
    assert status == 0, err
    files = {f["relpath"]: f for f in json.loads(out)["files"]}
    assert files["false_start.wav"]["status"] == "skipped"
    assert files["false_start.wav"]["message"].startswith("no audio frames")
    assert files["host_take.wav"]["status"] == "ok"


def test_a_header_promising_audio_that_is_not_there_still_fails(tmp_path, write_audio, write_recipe, run_cli):
    good, _ = _folder(tmp_path, write_audio)
    whole = write_audio("cut/tide.wav", np.zeros(4000), 48000, "PCM_16").read_bytes()
    cut = tmp_path / "in" / "tide.wav"
    cut.write_bytes(whole[:44])                   # the 44-byte header declares 8000 bytes; none follow
    status, _, err = run_cli("run", write_recipe(RECIPE), tmp_path / "in", "-o", tmp_path / "out", "--workers", "1")
    assert status == 1, err
    entry = next(f for f in report_of(tmp_path / "out")["files"] if f["relpath"] == "tide.wav")
    # analytic: 4000 frames of 16-bit mono are 8000 bytes of audio
    assert entry["status"] == "failed" and "cut short" in entry["message"] and "declares 8000 bytes" in entry["message"]


def test_a_folder_holding_only_a_false_start_rendered_nothing(tmp_path, write_audio, write_recipe, run_cli):
    # the normal rule for a run that found no audio to render (README 'Commands': 1 ... or no audio found)
    empty = write_audio("in/false_start.wav", np.zeros((0, 1)), 48000, "PCM_24")
    status, _, err = run_cli("run", write_recipe(RECIPE), tmp_path / "in", "-o", tmp_path / "out")
    assert status == 1, err
    assert f"{empty}: note: skipped: no audio frames" in err and "no audio found" in err
