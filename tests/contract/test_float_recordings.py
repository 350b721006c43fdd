"""32-bit float recordings over full scale (issue 18, item 2), through the command line.

A float recorder keeps a shout on the marsh at +19 dBFS as it is: those samples are over full scale,
not clipped, and a gain brings them back. ``scan`` reports them as "over full scale (float)" with
their count and peak and exits 0; integer PCM at its largest code is still clipped (exit 1). Under
``run`` the ceiling still decides delivery, and ``on_over: clip`` on a float output is warned about.
"""
from __future__ import annotations

import csv
import io
import json
import math

import numpy as np

from support import report_of

HOT = 10 ** (19 / 20)          # analytic: +19 dBFS = 10**(19/20) = 8.9125 (1.0 = 0 dBFS)


def hot_take(n: int = 48000) -> np.ndarray:
    """A quiet float take with 7 samples at +19 dBFS and 3 at -19 dBFS... that is, -HOT (frames constructed)."""
    x = 0.05 * np.sin(2 * np.pi * 440 * np.arange(n) / 48000)
    x[1000:1007] = HOT
    x[30000:30003] = -HOT
    return x


def test_scan_reports_float_overs_with_count_and_peak_and_exits_0(tmp_path, write_audio, run_cli, tree_hashes):
    write_audio("in/marsh_shout.wav", hot_take(), 48000, "FLOAT")
    before = tree_hashes(tmp_path / "in")
    status, out, err = run_cli("scan", tmp_path / "in")
    assert status == 0, err                    # README 'Commands': float overs are not clipping
    assert err == ""
    # analytic: 7 + 3 samples constructed past 1.0; their peak is +19 dBFS (float32 rounding < 1e-6 dB)
    assert "10 sample(s) over full scale (float), peak +19.00 dBFS" in out
    row = next(ln for ln in out.splitlines() if ln.endswith("marsh_shout.wav"))
    assert row.split()[0] == "ok" and " 0 " in row          # status ok, 0 clipped
    status, out, err = run_cli("scan", tmp_path / "in", "--json")
    assert status == 0, err
    (f,) = json.loads(out)["files"]
    assert f["status"] == "ok" and "over full scale (float)" in f["message"]
    head = f["input_meters"]["headline"]
    assert head["over_samples"] == 10 and head["clipped_samples"] == 0
    assert math.isclose(head["peak_dbfs"], 19.0, abs_tol=1e-5)
    assert tree_hashes(tmp_path / "in") == before


def test_a_float_sine_touching_full_scale_is_not_flagged(tmp_path, write_audio, run_cli):
    # analytic: a 997 Hz sine divided by its own largest magnitude touches exactly 1.0
    x = np.sin(2 * np.pi * 997 * np.arange(48000) / 48000)
    x /= np.max(np.abs(x))
    write_audio("in/tone.wav", x, 48000, "FLOAT")
    status, out, err = run_cli("scan", tmp_path / "in", "--json")
    assert status == 0, err
    (f,) = json.loads(out)["files"]
    ch = f["input_meters"]["channels"][0]
    assert ch["peak"] == 1.0 and ch["clipped_samples"] == 0 and ch["over_samples"] == 0
    assert f["status"] == "ok" and f["message"] == ""


def test_pcm24_clipped_runs_are_still_clipped_and_exit_1(tmp_path, write_audio, run_cli):
    top = 2 ** 23 - 1
    codes = np.full(20000, 1000, dtype=np.int64)
    codes[500:508] = top                 # a run of 8 at the largest 24-bit code
    codes[9000:9002] = -(2 ** 23)        # a run of 2 at the smallest
    write_audio("in/boathouse_clap.wav", codes, 48000, "PCM_24")
    status, out, err = run_cli("scan", tmp_path / "in", "--json")
    assert status == 1                   # README 'Commands': 1 if any file is clipped
    (f,) = json.loads(out)["files"]
    ch = f["input_meters"]["channels"][0]
    # analytic: the runs written into the file (start frame, length)
    assert f["status"] == "clipped" and ch["clipped_regions"] == [[500, 8], [9000, 2]]
    assert ch["clipped_samples"] == 10 and ch["over_samples"] == 0
    assert "boathouse_clap.wav: clipped: 10 sample(s) at or beyond full scale" in err


CLIP_RECIPE = """\
format: 1
name: marsh level
chain:
  - {type: gain, gain_db: -1}
guard:
  on_over: clip
"""
WARNING = "destroys the headroom a float recording keeps over full scale"


def test_clip_on_a_float_output_warns_once_at_the_recipe_key(tmp_path, write_audio, write_recipe, run_cli):
    recipe = write_recipe(CLIP_RECIPE)
    write_audio("in/a.wav", hot_take(), 48000, "FLOAT")
    write_audio("in/b.wav", hot_take(), 48000, "FLOAT")
    status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", tmp_path / "out", "--workers", "1")
    assert status == 1                   # both are clipped at the 0 dBFS ceiling: delivered, but clipped
    warnings = [ln for ln in err.splitlines() if WARNING in ln]
    assert len(warnings) == 1, err       # once per run, not per file
    assert warnings[0].startswith(f"{recipe}:6:12: warning: on_over: clip")   # the on_over value's line:col
    assert "on_over: scale or a loudness target" in warnings[0]
    assert WARNING in " ".join(report_of(tmp_path / "out")["notes"])


def test_clip_from_the_command_line_on_a_float_output_warns_too(tmp_path, write_audio, write_recipe, run_cli):
    recipe = write_recipe(CLIP_RECIPE.replace("  on_over: clip\n", "  on_over: reject\n"))
    write_audio("in/a.wav", hot_take(), 48000, "DOUBLE")
    status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", tmp_path / "out", "--on-over", "clip")
    warnings = [ln for ln in err.splitlines() if WARNING in ln]
    assert len(warnings) == 1 and warnings[0].startswith("chainrun: warning: --on-over clip"), err


def test_no_clip_warning_for_pcm24_output_or_for_scale(tmp_path, write_audio, write_recipe, run_cli):
    recipe = write_recipe(CLIP_RECIPE)
    write_audio("in/a.wav", 0.99 * np.sin(2 * np.pi * 440 * np.arange(9600) / 48000), 48000, "PCM_24")
    status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", tmp_path / "out", "--workers", "1")
    assert status == 0 and WARNING not in err, err
    write_audio("f/a.wav", hot_take(), 48000, "FLOAT")       # a float take to a PCM_24 output: nothing kept past 1.0
    to24 = write_recipe(CLIP_RECIPE + "output:\n  subtype: PCM_24\n", "to24.yaml")
    status, _, err = run_cli("run", to24, tmp_path / "f", "-o", tmp_path / "o24", "--workers", "1")
    assert WARNING not in err, err
    status, _, err = run_cli("run", recipe, tmp_path / "f", "-o", tmp_path / "o2", "--on-over", "scale")
    assert status == 0 and WARNING not in err, err


def test_a_run_reports_the_float_overs_of_its_input(tmp_path, write_audio, write_recipe, run_cli):
    recipe = write_recipe(CLIP_RECIPE.replace("  on_over: clip\n", "  on_over: scale\n"))
    write_audio("in/marsh_shout.wav", hot_take(), 48000, "FLOAT")
    status, out, err = run_cli("run", recipe, tmp_path / "in", "-o", tmp_path / "out", "--workers", "1")
    assert status == 0, err
    said = "10 sample(s) over full scale (float), peak +19.00 dBFS"
    assert said in out                                        # the console
    doc = report_of(tmp_path / "out")
    (f,) = doc["files"]
    assert said in f["message"] and f["input_meters"]["headline"]["over_samples"] == 10       # the JSON
    assert {"key": "over_samples", "label": "over full scale (float)", "unit": "samples"} in doc["headline_fields"]
    # the scaled output's peak lands on the ceiling, 1.0 at most: at full scale, not over it, not clipped
    assert f["output_meters"]["headline"]["over_samples"] == 0 and f["clipped_by_chainrun"] == 0
    (row,) = csv.DictReader(io.StringIO((tmp_path / "out" / "chainrun-report.csv").read_text()))
    assert row["in_over_samples"] == "10" and row["in_clipped_samples"] == "0"              # the CSV
    assert said in (tmp_path / "out" / "chainrun-report.html").read_text()                     # the HTML
