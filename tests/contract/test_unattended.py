"""Runs nobody watches (cron, CI logs): progress as plain lines, ``--quiet``, exit statuses.

Expected values are analytic (a file count, a status a file must have from how it was made)
or read back with soundfile; never figures chainrun printed about itself.
"""
from __future__ import annotations

import re

import numpy as np

RECIPE = """
format: 1
name: marsh evening trim
chain:
  - {type: peak, freq: 1000, gain_db: -3, q: 1}
"""

LINE = re.compile(r"^chainrun: \[(\d+)/(\d+)\] (\S+) (\S+) \((\d+\.\d) s\)$")


def _two_takes(write_audio, write_recipe):
    write_audio("in/boathouse.wav", 0.1 * np.sin(np.arange(4800) * 0.05), 48000, "PCM_16")
    write_audio("in/marsh.wav", 0.1 * np.sin(np.arange(4800) * 0.07), 48000, "PCM_16")
    return write_recipe(RECIPE)


def test_one_plain_line_per_finished_file_when_stderr_is_not_a_terminal(tmp_path, run_cli, write_audio,
                                                                         write_recipe):
    recipe = _two_takes(write_audio, write_recipe)
    status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", tmp_path / "out", "--workers", "1")
    assert status == 0, err
    lines = [m.groups() for m in map(LINE.match, err.splitlines()) if m]
    # analytic: two inputs, each finished once; both are quiet sines, so both are ok
    assert sorted(g[3] for g in lines) == ["boathouse.wav", "marsh.wav"]
    assert [g[0] for g in lines] == ["1", "2"] and {g[1] for g in lines} == {"2"}
    assert {g[2] for g in lines} == {"ok"}
    assert "\r" not in err and "\x1b" not in err           # no bar drawing in a log


def test_quiet_silences_the_progress_lines(tmp_path, run_cli, write_audio, write_recipe):
    recipe = _two_takes(write_audio, write_recipe)
    status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", tmp_path / "out", "--quiet")
    assert status == 0 and err == "", err


def test_a_terminal_keeps_the_bar_and_gets_no_lines(capsys):
    from chainrun.cli.run import _Progress

    class Tty:
        def isatty(self):
            return True

    class Pipe:
        def isatty(self):
            return False

    # common practice, no published source: a bar on a terminal, lines in a log, nothing when quiet
    assert _Progress.for_stream(Tty(), quiet=False).mode == "bar"
    assert _Progress.for_stream(Pipe(), quiet=False).mode == "lines"
    assert _Progress.for_stream(Tty(), quiet=True).mode == "off"
    assert _Progress.for_stream(Pipe(), quiet=True).mode == "off"


def test_an_empty_or_wrong_input_folder_is_not_a_successful_run(tmp_path, run_cli):
    # README "Commands": exit 1 when the run did not do its job; an input folder with no audio in it
    # (empty, or the wrong folder) is such a run, said in one line naming what was searched.
    recipe = tmp_path / "r.yaml"
    recipe.write_text("format: 1\nchain:\n  - {type: gain, gain_db: -1}\n")
    for name, files in (("empty", {}), ("papers", {"notes.txt": "tide tables"})):
        folder = tmp_path / name
        folder.mkdir()
        for f, text in files.items():
            (folder / f).write_text(text)
        status, _, err = run_cli("run", str(recipe), str(folder), "-o", str(tmp_path / f"out-{name}"))
        lines = [l for l in err.splitlines() if "no audio found" in l]
        assert status == 1, err
        assert len(lines) == 1 and str(folder) in lines[0] and "nothing was rendered" in lines[0]
