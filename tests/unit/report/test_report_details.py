"""Report details (issue 18, items 9 and 10): an interrupted run's statuses and closing line, the three
reports written together, no output clip count without an output, clip times as h:mm:ss.mmm, rate,
channels and duration in every file table, the --report suffix rule and the dated reports of an earlier run."""
from __future__ import annotations

import csv
import io
import json
import os
import re

import numpy as np
import pytest

from chainrun.text import clock

BOOST = """\
format: 1
name: {name}
chain:
  - {{type: peak, freq: 1000, gain_db: 5, q: 1}}
guard:
  max_gain_db: 6
  ceiling_dbfs: -1.0
  on_over: reject
"""
REPORTS = ("json", "csv", "html")


def sine(seconds, rate, amplitude, freq=1000.0, channels=1):
    t = np.arange(int(seconds * rate)) / rate
    x = amplitude * np.sin(2 * np.pi * freq * t)
    return np.column_stack([x] * channels)


@pytest.fixture
def batch(tmp_path, write_audio):
    """Four quiet takes (ok under the boost) and one hot take (rejected: +5 dB at 1 kHz passes the ceiling)."""
    write_audio("in/a quiet.wav", sine(1.0, 48000, 0.1, channels=2), 48000, "PCM_24")
    write_audio("in/b quiet.wav", sine(0.5, 44100, 0.1), 44100, "PCM_16")
    write_audio("in/c quiet.wav", sine(0.5, 48000, 0.1), 48000, "PCM_16")
    write_audio("in/d quiet.wav", sine(0.5, 48000, 0.1), 48000, "PCM_16")
    write_audio("in/hot.wav", sine(1.5, 48000, 0.9, channels=2), 48000, "PCM_24")
    recipe = tmp_path / "boost.yaml"
    recipe.write_text(BOOST.format(name="Boathouse boost"), encoding="utf-8")
    return recipe, tmp_path / "in", tmp_path / "out"


def reports(folder, base="chainrun-report"):
    texts = {k: (folder / f"{base}.{k}").read_text(encoding="utf-8") for k in REPORTS}
    return json.loads(texts["json"]), list(csv.DictReader(io.StringIO(texts["csv"]))), texts["html"]


# --------------------------------------------------------------------------- item 9: an interrupted run

def test_files_a_stop_left_are_not_rendered_and_the_closing_line_says_what_was_delivered(batch, run_cli,
                                                                                       monkeypatch):
    # A Ctrl-C once the first file is delivered (the stop flag, as the SIGINT handler sets it)
    from chainrun import interrupt
    from chainrun.batch import executors

    recipe, src, out = batch
    real, done = executors.render_task, []

    def render_then_stop(task):
        r = real(task)
        done.append(r)
        if r.status == "ok":
            interrupt.stop_rendering()
        return r

    monkeypatch.setattr(executors, "render_task", render_then_stop)
    status, stdout, err = run_cli("run", recipe, src, "-o", out, "--workers", "1")
    assert status == 1, err
    data, rows, page = reports(out)
    statuses = {f["relpath"]: f["status"] for f in data["files"]}
    assert len(done) == 2 and sorted(statuses.values()) == ["not rendered"] * 3 + ["ok", "rejected"], statuses
    assert data["summary"]["not rendered"] == 3 and data["summary"]["failed"] == 0
    # the closing line: what was delivered, what was not, where the three reports are
    paths = ", ".join(str(out / f"chainrun-report.{k}") for k in REPORTS)
    assert err.splitlines()[-1] == ("chainrun: interrupted: 1 file delivered, 1 rejected, 3 not rendered (no partial file was "
                                    f"left; the next run renders them); reports written to {paths}")
    assert not any(": not rendered:" in ln for ln in err.splitlines())     # one closing line, not one per file
    # the three reports describe the same run
    assert {r["input"]: r["status"] for r in rows} == {f["input"]: f["status"] for f in data["files"]}
    assert page.count('<span class="status st-not-rendered">not rendered</span>') == 3 + 1   # 3 rows, the summary
    assert data["created"] in page
    assert "not rendered" in stdout and "; INTERRUPTED" in stdout


def test_a_ctrl_c_while_the_reports_are_written_replaces_none_of_them(batch, run_cli, monkeypatch):
    # The defect: a late Ctrl-C left the new run's JSON and CSV beside the previous run's HTML page.
    from chainrun.report import write

    recipe, src, out = batch
    assert run_cli("run", recipe, src, "-o", out, "--workers", "1", "--report", out / "night.json")[0] == 1
    before = {k: (out / f"night.{k}").read_bytes() for k in REPORTS}
    recipe.write_text(BOOST.format(name="Marsh boost"), encoding="utf-8")

    def interrupted_drawing(document):
        raise KeyboardInterrupt                    # Ctrl-C while the HTML page is drawn (the last and slowest)

    monkeypatch.setattr(write, "render_html", interrupted_drawing)
    status, _, err = run_cli("run", recipe, src, "-o", out, "--workers", "1", "--report", out / "night.json")
    assert status == 1, err
    assert {k: (out / f"night.{k}").read_bytes() for k in REPORTS} == before    # all three still the first run's
    assert not [n for n in os.listdir(out) if ".chainrun-part-" in n]          # no temporary left
    assert err.splitlines()[-1] == ("chainrun: interrupted after the last file was rendered: 4 files delivered, "
                                    "1 rejected; no report was written or replaced (an earlier run's reports are "
                                    "left as they were)")


def test_a_report_that_cannot_be_written_keeps_all_three_out_of_place(batch, run_cli, monkeypatch, tmp_path):
    # The HTML page cannot be written: the JSON and CSV are not put in place either (they would describe a
    # run that the page beside them does not); the three go to the temporary folder instead
    import tempfile

    from chainrun.report import write

    recipe, src, out = batch
    monkeypatch.setattr(tempfile, "tempdir", str(tmp_path))
    real = write._write_temp

    def full_disk_for_html(path, text):
        if path.endswith(".html"):
            raise OSError(28, "No space left on device", path)
        return real(path, text)

    monkeypatch.setattr(write, "_write_temp", full_disk_for_html)
    status, stdout, err = run_cli("run", recipe, src, "-o", out, "--workers", "1")
    assert status == 1
    assert not any((out / f"chainrun-report.{k}").exists() for k in REPORTS)
    aside = sorted(tmp_path.glob("chainrun-report-*"))
    assert [p.suffix for p in aside] == [".csv", ".html", ".json"]
    assert f"report: {aside[2]}, {aside[0]}, {aside[1]}" in stdout
    assert "no space left on device; the reports were written to" in err


# --------------------------------------------------------------------------- item 10: report details

def test_a_rejected_file_has_no_output_clip_count(batch, run_cli):
    recipe, src, out = batch
    run_cli("run", recipe, src, "-o", out, "--workers", "1")
    data, rows, page = reports(out)
    hot = next(f for f in data["files"] if f["relpath"] == "hot.wav")
    assert hot["status"] == "rejected" and hot["output"] is None
    assert hot["clipped_by_chainrun"] is None                                   # null, not 0
    for ch in hot["output_meters"]["channels"]:
        assert ch["clipped_samples"] is None and ch["clipped_regions"] == [] and ch["clipped_regions_at"] == []
        assert ch["peak_dbfs"] > -1.0                                           # the level it would have had stays
    row = next(r for r in rows if r["input"].endswith("hot.wav"))
    assert row["out_clipped_samples"] == "" and row["clipped_by_chainrun"] == ""
    ok = next(r for r in rows if r["input"].endswith("a quiet.wav"))
    assert ok["out_clipped_samples"] == "0" and ok["clipped_by_chainrun"] == "0"   # a delivered file counts
    hot_row = page[page.index('<tr id="first-rejected"'):].split("</tr>")[0]
    assert 'title="no output: not delivered">&ndash;' in hot_row


def test_clock_is_exact_for_whole_frames():
    # analytic: 178 800 024 frames at 48 kHz = 3725.0005 s = 1 h 2 min 5.0005 s, cut to the millisecond
    assert clock(178_800_024, 48000) == "1:02:05.000"
    assert clock(178_800_048, 48000) == "1:02:05.001"
    assert clock(44_099, 44100) == "0:00:00.999"                # never rounded up into the next second
    assert clock(44_100 * 36_000, 44100, 0) == "10:00:00"
    assert clock(None, 48000) == "-" and clock(10, None) == "-"


def test_file_tables_show_rate_channels_and_duration(batch, run_cli):
    recipe, src, out = batch
    _, stdout, _ = run_cli("run", recipe, src, "-o", out, "--workers", "1")
    lines = stdout.splitlines()
    # common practice, no published source: a terminal is 80 columns wide; the table up to the file name fits
    assert lines[0].endswith("  file") and len(lines[0]) <= 80, lines[0]
    assert all(len(ln.split("  a quiet.wav")[0]) <= 80 for ln in lines if "a quiet.wav" in ln)
    assert re.match(r"ok +48000 +2 +0:00:01\.0 ", next(ln for ln in lines if "a quiet.wav" in ln))
    assert re.match(r"ok +44100 +1 +0:00:00\.5 ", next(ln for ln in lines if "b quiet.wav" in ln))
    assert re.match(r"rejected +48000 +2 +0:00:01\.5 ", next(ln for ln in lines if "hot.wav" in ln))
    data, rows, page = reports(out)
    row = next(r for r in rows if r["input"].endswith("b quiet.wav"))
    assert (row["rate_hz"], row["channels"], row["duration_s"]) == ("44100", "1", "0.5")
    b = next(f for f in data["files"] if f["relpath"] == "b quiet.wav")
    assert (b["rate_hz"], b["channels"], b["duration_s"]) == (44100, 1, 0.5)
    assert ('<td class="num">44100</td><td class="num">1</td><td class="num" title="0.500 s">0:00:00.500</td>'
            in page)


@pytest.mark.parametrize("given,base", [("x.csv", "x"), ("x.HTML", "x"), ("x.json", "x"), ("x", "x"),
                                        ("night.2024.06.01", "night.2024.06.01")])
def test_report_names_take_off_only_a_report_suffix(tmp_path, given, base):
    from chainrun.report.write import report_paths

    paths = report_paths(None, str(tmp_path / given))
    assert paths == {k: str(tmp_path / f"{base}.{k}") for k in REPORTS}


def test_report_x_csv_writes_x_json_not_x_csv_json(batch, run_cli):
    recipe, src, out = batch
    run_cli("run", recipe, src, "-o", out, "--workers", "1", "--report", out / "x.csv")
    assert sorted(n for n in os.listdir(out) if n.startswith("x.")) == ["x.csv", "x.html", "x.json"]


def test_a_second_run_keeps_the_first_run_s_reports_under_a_dated_name(batch, run_cli):
    recipe, src, out = batch
    run_cli("run", recipe, src, "-o", out, "--workers", "1")
    first = {k: (out / f"chainrun-report.{k}").read_bytes() for k in REPORTS}
    stamp = 1_780_000_000                       # the first run's reports, dated by their own time
    for k in REPORTS:
        os.utime(out / f"chainrun-report.{k}", (stamp, stamp))
    import time

    dated = f"chainrun-report-{time.strftime('%Y%m%d-%H%M%S', time.localtime(stamp))}"
    (out / f"{dated}.csv").write_text("someone's sheet\n")       # a dated name taken already: never replaced
    run_cli("run", recipe, src, "-o", out, "--workers", "1", "--redo")
    assert (out / f"{dated}.csv").read_text() == "someone's sheet\n"
    assert {k: (out / f"{dated}-2.{k}").read_bytes() for k in REPORTS} == first
    assert (out / "chainrun-report.json").read_bytes() != first["json"]
    # --report naming the reports: replaced there, no dated copy
    run_cli("run", recipe, src, "-o", out, "--workers", "1", "--report", out / "named.json")
    run_cli("run", recipe, src, "-o", out, "--workers", "1", "--report", out / "named.json")
    assert sorted(n for n in os.listdir(out) if n.startswith("named")) == ["named.csv", "named.html", "named.json"]
    assert len([n for n in os.listdir(out) if n.startswith("chainrun-report")]) == 3 + 3 + 1


# --------------------------------------------------------------------------- plot: section numbers

NUMBERED = """\
format: 1
name: Saltings shelves
chain:
  - {type: low_shelf, freq: 120, gain_db: 4}
  - {type: highpass, freq: 40, order: 2}
  - {type: high_shelf, freq: 6000, gain_db: 3}
  - {type: peak, freq: 1000, gain_db: -3, q: 2}
  - {type: notch, freq: 50, q: 10}
"""


def test_section_numbers_sit_at_each_section_s_own_frequency(write_recipe):
    # Before, a shelf was numbered where its plateau began (the first largest boost on the grid: a 6 kHz high
    # shelf near Nyquist) and a high-pass at the far left. Now each number sits at the section's freq.
    from chainrun import assess, design, load
    from chainrun.report import svgchart
    from chainrun.report.figure import response_figure
    from chainrun.report.response import freq_grid

    recipe = load(str(write_recipe(NUMBERED)))
    chain = design(recipe, 48000)
    assessment = assess(chain, recipe.guard, recipe)
    fig = response_figure(recipe, chain, assessment)
    badges = {a.get_text(): a.xy for a in fig.axes[0].texts if a.get_text().isdigit()}
    freqs = [s.params["freq"] for s in recipe.sections]
    assert {k: pytest.approx(x) for k, (x, _) in badges.items()} == {str(i + 1): f for i, f in enumerate(freqs)}
    # the same in the HTML report's inline picture: each circle's centre is the section's freq on the log axis
    svg = svgchart.response_svg(recipe, chain, assessment)
    grid = freq_grid(chain, recipe, assessment)
    lo, hi = np.log(grid[0]), np.log(grid[-1])
    circles = [float(x) for x in re.findall(r'<circle cx="([\d.]+)" cy="[\d.]+" r="8.5"', svg)]
    expected = [svgchart.LEFT + (np.log(f) - lo) / (hi - lo) * (svgchart.RIGHT - svgchart.LEFT) for f in freqs]
    expected[4] += 13                          # the notch's centre runs off the bottom: its number sits beside it
    assert circles == pytest.approx(expected, abs=0.06)
