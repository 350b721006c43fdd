"""`chainrun check`: exit codes, folder search, one-line located errors, --json, --rate."""
from __future__ import annotations

import json
import math
import os
import re
import subprocess
import sys
import warnings

import pytest

from chainrun.cli import main

LOCATED = re.compile(r"^[^\n]+:\d+:\d+: error: [^\n]+$")
UNSTABLE_LINE = re.compile(r"^(?P<path>[^\n]*unstable-hand-typed\.yaml):11:41: error: chain\[1\] iir is unstable: "
                           r"its denominator has a root at radius 1\.00499 [^\n]*$")
# README.md 'Commands': `chainrun check`'s common rates, for a recipe without rates:
DEFAULT_RATES = [8000, 16000, 22050, 32000, 44100, 48000, 88200, 96000, 176400, 192000]
HOUSE_RATES = [44100, 48000, 88200, 96000]    # recipes/house/boathouse-house-eq.yaml's rates: (and its includers')
OWN_RATES = ("the rates each recipe declares, else the common rates (8, 16, 22.05, 32, 44.1, 48, 88.2, 96, 176.4, "
             "192 kHz)")


def run_main(argv, capsys):
    """Run ``main`` in-process; returns (status, stdout, stderr). argparse usage errors exit via SystemExit."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            status = main([str(a) for a in argv])
        except SystemExit as exc:
            status = exc.code
    out, err = capsys.readouterr()
    assert not caught, [str(w.message) for w in caught]     # no numpy/scipy warnings reach the user
    assert "Traceback" not in err and "internal error" not in err, err
    return status, out, err


def err_lines(err: str) -> list[str]:
    return [line for line in err.splitlines() if line.strip()]


# --------------------------------------------------------------------------- exit status

def test_all_accepted_exit_0(repo_root, capsys):
    status, out, err = run_main(["check", repo_root / "recipes" / "boathouse-stems.yaml",
                                 repo_root / "recipes" / "marsh-cleanup.yaml"], capsys)
    assert status == 0
    assert err == ""
    assert out.splitlines()[-1] == f"2 recipe(s) checked at {OWN_RATES}: 2 accepted, 0 rejected"
    for rate in DEFAULT_RATES:
        assert re.search(rf"^\s+{rate} Hz .* accepted$", out, re.M)


def test_folder_search_finds_bundled_recipes_and_rejects_unstable(repo_root, capsys):
    status, out, err = run_main(["check", repo_root / "recipes"], capsys)
    assert status == 1
    for name in ("boathouse-stems.yaml", "marsh-cleanup.yaml", "unstable-hand-typed.yaml",
                 os.path.join("house", "boathouse-house-eq.yaml")):
        assert name in out
    assert out.splitlines()[-1] == f"4 recipe(s) checked at {OWN_RATES}: 3 accepted, 1 rejected"
    lines = err_lines(err)
    assert len(lines) == 1, lines                     # the same problem at ten rates: said once
    m = UNSTABLE_LINE.match(lines[0])
    assert m, lines[0]
    assert os.path.samefile(m["path"], repo_root / "recipes" / "unstable-hand-typed.yaml")
    assert len(re.findall(r"REJECTED", out)) == 10    # each common rate of the unstable recipe


def test_folder_search_suffixes_and_hidden(tmp_path, capsys):
    good = "format: 1\nchain:\n  - {type: gain, gain_db: -1}\n"
    bad = "format: 1\nchain:\n  - {type: gain, gain_db: nope}\n"
    (tmp_path / "a.yml").write_text(good)
    (tmp_path / "sub").mkdir()
    (tmp_path / "sub" / "b.yaml").write_text(good)
    (tmp_path / ".hidden.yaml").write_text(bad)
    (tmp_path / ".git").mkdir()
    (tmp_path / ".git" / "c.yaml").write_text(bad)
    (tmp_path / "notes.txt").write_text(bad)
    status, out, err = run_main(["check", tmp_path], capsys)
    assert status == 0 and err == ""
    assert out.splitlines()[-1].startswith("2 recipe(s) checked")


def test_missing_path_is_usage_error(tmp_path, capsys):
    status, out, err = run_main(["check", tmp_path / "no-such.yaml"], capsys)
    assert status == 2
    (line,) = err_lines(err)
    assert line == f"{tmp_path / 'no-such.yaml'}: error: no such file or folder; give recipe files or folders of them"


def test_folder_without_recipes_is_usage_error(tmp_path, capsys):
    (tmp_path / "readme.txt").write_text("nothing")
    status, _, err = run_main(["check", tmp_path], capsys)
    assert status == 2
    assert "no recipes (*.yaml, *.yml) found" in err


@pytest.mark.parametrize("rate", ["abc", "0", "44100.5", "999", "1e9", "nan", "-48000"])
def test_bad_rate_is_usage_error(repo_root, capsys, rate):
    status, out, err = run_main(["check", repo_root / "recipes", f"--rate={rate}"], capsys)
    assert status == 2
    assert out == ""
    assert "argument --rate" in err and ("is not a sample rate" in err or "is out of range" in err)


def test_no_recipe_argument_is_usage_error(capsys):
    status, _, err = run_main(["check"], capsys)
    assert status == 2 and "required" in err


# --------------------------------------------------------------------------- --rate and Nyquist

def test_rate_8000_rejects_section_above_4khz(write_recipe, capsys):
    path = write_recipe("""
        format: 1
        name: Phone-line promo
        chain:
          - {type: highpass, freq: 300, order: 2}
          - {type: peak, freq: 5000, gain_db: 3, q: 1.4}
    """)
    status, out, err = run_main(["check", path, "--rate", "8000"], capsys)
    assert status == 1
    (line,) = err_lines(err)
    assert line == (f"{path}:5:24: error: chain[1].freq 5000 Hz is at or above Nyquist (4000 Hz) "
                    "for 8000 Hz files")
    assert "checked at 8000 Hz: 0 accepted, 1 rejected" in out
    # the same recipe passes at 16 kHz, where 5 kHz is below Nyquist
    status, _, err = run_main(["check", path, "--rate", "16000"], capsys)
    assert status == 0 and err == ""


def test_repeated_rates_and_json_per_rate(write_recipe, capsys):
    path = write_recipe("format: 1\nchain:\n  - {type: high_shelf, freq: 6000, gain_db: 2}\n")
    status, out, err = run_main(["check", path, "--json", "--rate", "8000", "--rate", "48000",
                                 "--rate", "8000"], capsys)
    assert status == 1
    doc = json.loads(out)
    assert doc["rates"] == [8000, 48000] and doc["accepted"] is False
    (entry,) = doc["recipes"]
    low, high = entry["rates"]
    assert low["rate"] == 8000 and low["accepted"] is False and low["rows"] is None
    assert set(low) == set(high)          # every rate entry has the same keys
    assert "at or above Nyquist (4000 Hz) for 8000 Hz files" in low["error"]
    assert high["rate"] == 48000 and high["accepted"] is True and high["error"] is None
    # W3C Audio EQ Cookbook: a high shelf reaches its full gain at Nyquist
    assert math.isclose(high["max_gain_db"], 2.0, abs_tol=1e-6)
    # the shelf is flat at Nyquist (zero slope), so its location is defined only to ~0.1 %
    assert math.isclose(high["max_gain_hz"], 24000.0, rel_tol=1e-3)
    (problem,) = entry["problems"]        # an object, not a flat line (README.md 'Commands')
    assert problem["severity"] == "error" and problem["rate"] == 8000
    assert (problem["path"], problem["line"], problem["col"]) == (str(path), 3, 30)
    assert err_lines(err) == [f"{path}:3:30: error: {problem['message']}"]
    assert "at or above Nyquist (4000 Hz) for 8000 Hz files" in problem["message"]
    assert low["problems"] == [problem] and high["problems"] == []


# --------------------------------------------------------------------------- --json

def test_json_output_parses_with_per_rate_assessments(repo_root, capsys):
    status, out, err = run_main(["check", "--json", repo_root / "recipes"], capsys)
    assert status == 1
    doc = json.loads(out)
    assert doc["accepted"] is False and doc["rates"] is None          # no --rate: each recipe's own
    by_name = {os.path.basename(e["path"]): e for e in doc["recipes"]}
    assert set(by_name) == {"boathouse-stems.yaml", "marsh-cleanup.yaml", "unstable-hand-typed.yaml",
                            "boathouse-house-eq.yaml"}
    for name, entry in by_name.items():
        assert [r["rate"] for r in entry["rates"]] == (HOUSE_RATES if "boathouse" in name else DEFAULT_RATES)
        assert re.fullmatch(r"[0-9a-f]{64}", entry["digest"])
        for r in entry["rates"]:
            for key in ("max_pole_radius", "decay_60db_s", "max_gain_db", "max_gain_hz", "min_gain_db",
                        "worst_case_peak_gain", "worst_case_peak_gain_db", "problems", "rows"):
                assert key in r, (name, key)
            if r["accepted"]:
                assert r["max_pole_radius"] < 1.0
                # analytic (BIBO): the L1 bound is never below the steady-state maximum
                assert r["worst_case_peak_gain"] >= 10 ** (r["max_gain_db"] / 20) * (1 - 1e-9)
    unstable = by_name["unstable-hand-typed.yaml"]
    assert unstable["accepted"] is False
    # the same problem at each of the ten rates: one object per rate, one line on stderr
    assert [p["rate"] for p in unstable["problems"]] == DEFAULT_RATES
    assert {(p["line"], p["col"], p["severity"], p["message"]) for p in unstable["problems"]} == {
        (11, 41, "error", unstable["problems"][0]["message"])}
    first = unstable["problems"][0]
    assert UNSTABLE_LINE.match(f"{first['path']}:{first['line']}:{first['col']}: error: {first['message']}")
    for r in unstable["rates"]:
        # analytic: 1 - 1.95 z^-1 + 1.01 z^-2 has complex roots of radius sqrt(1.01)
        assert math.isclose(r["max_pole_radius"], math.sqrt(1.01), rel_tol=1e-9)
        assert r["accepted"] is False and r["worst_case_peak_gain"] is None   # unbounded -> null in JSON
    assert by_name["boathouse-stems.yaml"]["sections"] == 7          # 4 included + 3 own
    assert by_name["marsh-cleanup.yaml"]["accepted"] is True
    (line,) = err_lines(err)
    assert line == f"{first['path']}:11:41: error: {first['message']}"


# --------------------------------------------------------------------------- bad input never shows a traceback

BAD_INPUTS = {
    "deep.yaml": "format: 1\nnotes: " + "[" * 3000 + "]" * 3000 + "\nchain:\n  - {type: gain, gain_db: 1}\n",
    "self-alias.yaml": "format: 1\nnotes: &a [*a, *a]\nchain:\n  - {type: gain, gain_db: 1}\n",
    "latin1.yaml": b"format: 1\nname: Caf\xe9\nchain:\n  - {type: gain, gain_db: 1}\n",
    "tag.yaml": "format: 1\nname: !shout x\nchain:\n  - {type: gain, gain_db: 1}\n",
    "control.yaml": "format: 1\nname: a\x01b\nchain:\n  - {type: gain, gain_db: 1}\n",
    "pole-on-circle.yaml": "format: 1\nchain:\n  - {type: iir, b: [1], a: [1, -1]}\n",
    "pole-at-nyquist.yaml": "format: 1\nchain:\n  - {type: iir, b: [1], a: [1, 1]}\n",
    "garbage.yaml": b"\x00\xff\xfe{[}]::--\n",
    "list.yaml": "- 1\n- 2\n",
    "missing-include.yaml": "format: 1\ninclude: ../elsewhere/house.yaml\n",
    "nan.yaml": "format: 1\nchain:\n  - {type: peak, freq: .nan, gain_db: 1, q: 1}\n",
    "folder.yaml/inner.yaml": "format: 1\nchain:\n  - {type: gain, gain_db: 1}\n",
}


@pytest.fixture
def bad_dir(tmp_path):
    for name, text in BAD_INPUTS.items():
        path = tmp_path / "bad" / name
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(text if isinstance(text, bytes) else text.encode("utf-8"))
    return tmp_path / "bad"


def test_bad_inputs_in_process_give_one_line_errors(bad_dir, capsys):
    status, out, err = run_main(["check", bad_dir], capsys)
    assert status == 1
    lines = err_lines(err)
    assert lines and all(LOCATED.match(line) for line in lines), lines
    flagged = {os.path.basename(line.split(":", 1)[0]) for line in lines}
    expected = {os.path.basename(n) for n in BAD_INPUTS if not n.startswith("folder.yaml/")}
    assert flagged == expected
    assert "checked" in out and f"{len(BAD_INPUTS) - 1} rejected" in out


def test_subprocess_bundled_recipes(repo_root):
    proc = subprocess.run([sys.executable, "-m", "chainrun", "check", "recipes"], cwd=repo_root,
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 1
    assert "Traceback" not in proc.stderr
    lines = err_lines(proc.stderr)
    assert len(lines) == 1 and UNSTABLE_LINE.match(lines[0]), proc.stderr
    assert lines[0].startswith(os.path.join("recipes", "unstable-hand-typed.yaml") + ":11:41: error: ")
    assert "3 accepted, 1 rejected" in proc.stdout


def test_subprocess_bad_inputs_no_traceback_no_warnings(bad_dir):
    proc = subprocess.run([sys.executable, "-m", "chainrun", "check", str(bad_dir), "--rate", "48000"],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 1
    assert "Traceback" not in proc.stderr and "Warning" not in proc.stderr, proc.stderr
    lines = err_lines(proc.stderr)
    assert all(LOCATED.match(line) for line in lines), proc.stderr


def test_subprocess_usage_errors(repo_root, tmp_path):
    for argv, needle in ((["check", str(tmp_path / "absent")], "no such file or folder"),
                         (["check", "recipes", "--rate", "fast"], "is not a sample rate")):
        proc = subprocess.run([sys.executable, "-m", "chainrun", *argv], cwd=repo_root,
                              capture_output=True, text=True, timeout=60)
        assert proc.returncode == 2, proc.stderr
        assert needle in proc.stderr and "Traceback" not in proc.stderr


# --------------------------------------------------------------------------- limits kept in an included file

def _marsh_house(repo_root, write_recipe, top_text: str):
    """The bundled marsh clean-up as a team's house file, and a recipe that includes it."""
    marsh = (repo_root / "recipes" / "marsh-cleanup.yaml").read_text(encoding="utf-8")
    house = write_recipe(marsh, "house/marsh.yaml")
    top = write_recipe(top_text, "boosted.yaml")
    row = next(n for n, line in enumerate(marsh.split("\n"), 1) if "max_gain_db:" in line)
    col = marsh.split("\n")[row - 1].index("max_gain_db:") + len("max_gain_db: ") + 1
    return top, f"{house}:{row}:{col}", house


BOOSTED = """
    format: 1
    include: house/marsh.yaml
    chain:
      - {type: peak, freq: 1000, gain_db: 12, q: 1, label: presence}
    guard:
      max_gain_db: 24
"""


def test_included_max_gain_rejects_a_boost(repo_root, write_recipe, capsys):
    # the marsh case: the house file says max_gain_db 1 ("a cleanup pass must never boost"); a recipe
    # that includes it, adds a +12 dB peak and writes max_gain_db 24 is rejected all the same
    top, house_at, _ = _marsh_house(repo_root, write_recipe, BOOSTED)
    status, out, err = run_main(["check", "--rate", "48000", top], capsys)
    assert status == 1
    assert "checked at 48000 Hz: 0 accepted, 1 rejected" in out
    error, warning = err_lines(err)
    # analytic: the cookbook peaking EQ has gain_db at f0, +12 dB > 1 dB; the 45 Hz high-pass and the
    # Q 30 notches at 50..200 Hz move it by far less than 0.01 dB at 1 kHz
    assert error == (f"{top}:4:5: error: at 48000 Hz the chain's gain reaches +12.00 dB at 1000.0 Hz, above "
                     "guard.max_gain_db 1 dB; chain[0] peak 1000 Hz (presence) contributes +12.0 dB there")
    assert warning == (f"{top}:6:16: warning: guard.max_gain_db 24 is looser than 1 set in {house_at}; "
                       "the stricter value applies")
    # without the include the same boost is within the recipe's own 24 dB
    alone = write_recipe(BOOSTED.replace("    include: house/marsh.yaml\n", ""), "alone.yaml")
    status, _, err = run_main(["check", "--rate", "48000", alone], capsys)
    assert status == 0 and err == ""


def test_json_lists_the_loosening_warning(repo_root, write_recipe, capsys):
    top, house_at, _ = _marsh_house(repo_root, write_recipe, BOOSTED.replace("gain_db: 12", "gain_db: -12"))
    status, out, err = run_main(["check", "--json", "--rate", "48000", top], capsys)
    assert status == 0                                # a cut stays below the house file's 1 dB
    (entry,) = json.loads(out)["recipes"]
    assert entry["problems"] == [{
        "path": str(top), "line": 6, "col": 16, "severity": "warning", "rate": None,   # found loading: no rate
        "message": f"guard.max_gain_db 24 is looser than 1 set in {house_at}; the stricter value applies"}]
    assert err_lines(err) == [
        f"{top}:6:16: warning: guard.max_gain_db 24 is looser than 1 set in {house_at}; the stricter value applies"]


def test_output_conflict_with_an_include_is_rejected_by_check(repo_root, write_recipe, capsys):
    top, _, house = _marsh_house(repo_root, write_recipe, "format: 1\ninclude: house/marsh.yaml\n"
                                                          "output: {subtype: PCM_16}\n")
    status, out, err = run_main(["check", top], capsys)
    assert status == 1
    (line,) = err_lines(err)
    assert LOCATED.match(line)
    # recipes/marsh-cleanup.yaml writes "subtype: same"
    rows = house.read_text(encoding="utf-8").split("\n")
    row = next(n for n, text in enumerate(rows, 1) if "subtype:" in text)
    col = rows[row - 1].index("subtype:") + len("subtype: ") + 1
    assert line.startswith(f"{top}:3:19: error: output.subtype PCM_16 conflicts with same set in "
                           f"{house}:{row}:{col}; ")


def test_run_says_a_loosening_warning_once(repo_root, write_recipe, write_audio, tmp_path, capsys):
    import numpy as np

    top, house_at, _ = _marsh_house(repo_root, write_recipe, BOOSTED.replace("gain_db: 12", "gain_db: -12"))
    write_audio("in/take.wav", 0.1 * np.sin(2 * np.pi * 1000 / 48000 * np.arange(4800)), 48000)
    status, _, err = run_main(["run", top, tmp_path / "in", "-o", tmp_path / "out", "--workers", "1"], capsys)
    assert status == 0 and (tmp_path / "out" / "take.wav").is_file()
    warning = f"{top}:6:16: warning: guard.max_gain_db 24 is looser than 1 set in {house_at}; the stricter value applies"
    assert err_lines(err).count(warning) == 1
