"""Names and messages on the console and in the reports: nothing a file name holds can steer a
terminal, reorder a line, crash a strict UTF-8 stdout, or run as a spreadsheet formula; and a
report never replaces a file chainrun did not write.

Expected values: the Unicode Character Database as Python's unicodedata has it (bidirectional
classes, Unicode Standard Annex #9), the OWASP "CSV Injection" guidance, Python's csv and json
modules (reference libraries), and analytic facts.
"""
from __future__ import annotations

import csv
import io
import json
import os
import re
import subprocess
import sys
import unicodedata

import numpy as np

from chainrun.text import one_line, shown
from support import REPO

# Unicode Standard Annex #9, Table 4: the explicit directional formatting characters' classes.
_EXPLICIT_BIDI = {"LRE", "RLE", "PDF", "LRO", "RLO", "LRI", "RLI", "FSI", "PDI"}
# Unicode Standard Annex #9, 2.6: the implicit directional marks.
_MARKS = ("LEFT-TO-RIGHT MARK", "RIGHT-TO-LEFT MARK", "ARABIC LETTER MARK")


def _disguising() -> list[str]:
    """Every character one line of text must not carry as it is, from the UCD (not from chainrun)."""
    chars = [chr(c) for c in range(0x10000) if unicodedata.bidirectional(chr(c)) in _EXPLICIT_BIDI]
    chars += [unicodedata.lookup(n) for n in _MARKS]
    chars += [chr(c) for c in range(0x80, 0xA0) if unicodedata.category(chr(c)) == "Cc"]   # C1 controls
    return chars


def test_disguising_characters_are_shown_as_u_escapes():
    chars = _disguising()
    # UAX #9: 9 explicit formatting characters (U+202A-U+202E, U+2066-U+2069), 3 marks; 32 C1 controls
    assert len(chars) == 9 + 3 + 32
    for c in chars:
        for f in (one_line, shown):
            out = f(f"take{c}1.wav")
            assert out == f"take\\u{ord(c):04x}1.wav", (hex(ord(c)), out)
            assert out.isascii()
    # the "Trojan Source" example shape (Boucher & Anderson 2021): an override reverses what follows
    assert shown("night\u202evaw.exe") == "night\\u202evaw.exe"
    # line and paragraph separators (UCD categories Zl, Zp) and zero-width characters
    for c in "\u2028\u2029\u200b\u2060\ufeff":
        assert one_line(c) == f"\\u{ord(c):04x}"


def test_old_escapes_and_ordinary_names_are_unchanged():
    # analytic: the escapes chainrun wrote before, as Python's repr() writes them
    assert one_line("a\nb\tc\rd\x1b[31me\x7ff\x00") == "a\\nb\\tc\\rd\\x1b[31me\\x7ff\\x00"
    assert shown("m\udce9t\udce9o.wav") == "m\\xe9t\\xe9o.wav"       # bytes that are not UTF-8
    # ordinary names of many scripts, with the joiners they need, pass through as they are
    for name in ("météo_marée.wav", "ساحل\u200cها.flac", "हिन्दी.wav", "👩\u200d🎤 take.aiff", "潮汐.wav",
                 "back\\slash.wav", "Ωmega ½.wav"):
        assert one_line(name) == name and shown(name) == name


# --------------------------------------------------------------------------- a strict UTF-8 console

GENTLE = """\
format: 1
name: Boathouse Hour gentle pass
chain:
  - {type: highpass, freq: 60, order: 2}
  - {type: gain, gain_db: -3}
"""


def _strict_env() -> dict:
    root = str(REPO)
    return dict(os.environ, PYTHONIOENCODING="utf-8:strict",      # as with a strict UTF-8 terminal or CI log
                PYTHONPATH=root + os.pathsep + os.environ.get("PYTHONPATH", ""))


def _chainrun(*argv, cwd=None) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "chainrun", *map(os.fsdecode, argv)], capture_output=True,
                          env=_strict_env(), timeout=300, cwd=cwd)


def _raw_document() -> dict:
    """A report document as read back from JSON or built by hand: names not yet escaped."""
    return {
        "summary": {"files": 2, "failed": 1, "ok": 1, "wall_seconds": 0.5},
        "headline_fields": [],
        "files": [
            {"input": "/in/m\udce9t\udce9o.wav", "relpath": "m\udce9t\udce9o.wav", "status": "ok", "message": None,
             "output_meters": None, "duration_s": 1.0},
            {"input": "/in/red\x1b[31m\u202etake.wav", "relpath": "red\x1b[31m\u202etake.wav", "status": "failed",
             "message": "cannot read\n\x9b2J it", "output_meters": None},
        ],
    }


def test_console_summary_and_error_lines_are_strict_utf8_one_line():
    from chainrun.report.table import console_summary, error_lines

    text = console_summary(_raw_document(), {"json": "/out/o\udce9/chainrun-report.json"})
    text.encode("utf-8")                                   # strict: raises on a surrogate
    assert "m\\xe9t\\xe9o.wav" in text and "red\\x1b[31m\\u202etake.wav" in text
    assert "report: /out/o\\xe9/chainrun-report.json" in text
    assert "(cannot read\\n\\u009b2J it)" in text
    assert len(text.splitlines()) == 5                     # heading, 2 files, totals, report paths
    lines = error_lines(_raw_document())
    assert lines == ["/in/red\\x1b[31m\\u202etake.wav: error: cannot read\\n\\u009b2J it"]
    assert shown("\ud800 lone") == "\\ud800 lone"          # a lone surrogate (from JSON) is shown, never raised


def test_run_into_a_folder_whose_name_is_not_utf8_prints_its_summary(tmp_path, write_audio):
    write_audio("in/take.wav", np.full(2000, 0.25), 48000, "PCM_16")
    (tmp_path / "r.yaml").write_text(GENTLE, encoding="utf-8")
    out = os.fsencode(str(tmp_path)) + b"/o\xe9t\xe9"           # Latin-1 bytes, as an old card writes
    proc = _chainrun("run", tmp_path / "r.yaml", tmp_path / "in", "-o", out, "--workers", "1")
    stdout, stderr = proc.stdout.decode("utf-8"), proc.stderr.decode("utf-8")
    assert proc.returncode == 0 and "internal error" not in stderr, stderr
    assert f"report: {tmp_path}/o\\xe9t\\xe9/chainrun-report.json" in stdout
    assert os.path.exists(out + b"/take.wav")


def test_check_of_a_recipe_whose_name_is_not_utf8_prints_every_result(tmp_path):
    (tmp_path / "a.yaml").write_text(GENTLE, encoding="utf-8")
    with open(os.fsencode(str(tmp_path)) + b"/m\xe9t\xe9o.yaml", "w", encoding="utf-8") as fh:
        fh.write(GENTLE.replace("Boathouse Hour gentle pass", '"tide\\e[2J\\u202e pass"'))   # YAML escapes
    proc = _chainrun("check", tmp_path)
    stdout, stderr = proc.stdout.decode("utf-8"), proc.stderr.decode("utf-8")
    assert proc.returncode == 0 and "internal error" not in stderr, stderr
    assert "2 recipe(s) checked" in stdout
    assert "m\\xe9t\\xe9o.yaml" in stdout and '"tide\\x1b[2J\\u202e pass"' in stdout
    assert "\x1b" not in stdout


# --------------------------------------------------------------------------- the CSV report

# OWASP "CSV Injection": cells starting with =, +, -, @, tab or carriage return are formulas to a spreadsheet.
_OWASP_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_FORMULA_NAMES = ('=HYPERLINK("evil.test","y").wav', "-take.wav", "+take.wav", "@take.wav")


def test_csv_names_are_never_formulas_and_numbers_stay_numbers(tmp_path, write_audio):
    for name in _FORMULA_NAMES + ("tide\u202etake.wav",):
        write_audio(name, np.full(2000, 0.25), 48000, "PCM_16")
    (tmp_path / "r.yaml").write_text(GENTLE, encoding="utf-8")
    proc = _chainrun("run", "-o", "=out", "--workers", "1", "--", "r.yaml", *_FORMULA_NAMES, "tide\u202etake.wav",
                     cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr.decode()
    with open(tmp_path / "=out" / "chainrun-report.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))                    # Python's csv module (reference library)
    assert len(rows) == 5
    inputs = set()
    for row in rows:
        for key in ("input", "output", "status", "message", "format", "subtype", "out_format", "out_subtype"):
            assert not row[key].startswith(_OWASP_FORMULA_START), (key, row[key])
        inputs.add(row["input"])
        # analytic: a constant 0.25 (PCM_16 code 8192 exactly) peaks at 20*log10(0.25) = -12.04 dBFS,
        # written as a plain negative number, not as text
        assert row["in_peak_dbfs"] == "-12.04" and float(row["in_peak_dbfs"]) < 0
        assert float(row["out_peak_dbfs"]) < 0 and not row["out_peak_dbfs"].startswith("'")
        assert row["output"].startswith("'=out" + os.sep)
    assert inputs == {"'" + n for n in _FORMULA_NAMES} | {"tide\\u202etake.wav"}


def test_csv_text_cells_of_a_document_read_back():
    from chainrun.report.table import csv_text

    doc = {"headline_fields": [{"key": "peak_dbfs", "label": "peak", "unit": "dBFS"}],
           "files": [{"input": "\tcmd", "output": "\rx", "status": "failed", "message": "-2+3",
                      "format": "WAV", "input_meters": {"channels": [{"peak": 0.5, "peak_dbfs": -6.0206}]},
                      "trim_db": -3.0103}]}
    row = next(csv.DictReader(io.StringIO(csv_text(doc))))
    # a tab or carriage return is shown escaped (\t, \r), so it can no longer start a formula
    assert row["input"] == "\\tcmd" and row["output"] == "\\rx" and row["message"] == "'-2+3"
    assert row["in_peak_dbfs"] == "-6.02" and row["trim_db"] == "-3.01"       # numbers stay numbers


# --------------------------------------------------------------------------- the HTML report

def _html_page(tmp_path, write_audio, run_cli) -> str:
    write_audio("in/marsh\u2066take.wav", np.full(2000, 0.25), 48000, "PCM_16")
    # YAML double-quoted escapes: U+202E RIGHT-TO-LEFT OVERRIDE, U+009B (C1 CSI), U+200F RIGHT-TO-LEFT MARK
    recipe = GENTLE.replace("Boathouse Hour gentle pass", '"tide\\u202e pass\\x9b2J"').replace(
        "{type: gain, gain_db: -3}", '{type: gain, gain_db: -3, label: "trim\\u200f"}')
    (tmp_path / "r.yaml").write_text(recipe, encoding="utf-8")
    status, _, err = run_cli("run", tmp_path / "r.yaml", tmp_path / "in", "-o", tmp_path / "out", "--workers", "1")
    assert status == 0, err
    return (tmp_path / "out" / "chainrun-report.html").read_text(encoding="utf-8")


def _hidden_in(text: str) -> list[str]:
    return [hex(ord(c)) for c in _disguising() + ["\u2028", "\u2029", "\u200b", "\u2060", "\ufeff"] if c in text]


def test_html_report_shows_c1_and_bidi_characters_escaped(tmp_path, write_audio, run_cli):
    page = _html_page(tmp_path, write_audio, run_cli)
    text = re.sub(r"<svg\b.*?</svg>", "", page, flags=re.S)      # the response pictures: see below
    assert _hidden_in(text) == []
    assert "tide\\u202e pass\\u009b2J" in text and "marsh\\u2066take.wav" in text and "trim\\u200f" in text


def test_html_response_pictures_show_c1_and_bidi_characters_escaped(tmp_path, write_audio, run_cli):
    page = _html_page(tmp_path, write_audio, run_cli)
    pictures = "".join(re.findall(r"<svg\b.*?</svg>", page, flags=re.S))
    assert pictures and _hidden_in(pictures) == []


# --------------------------------------------------------------------------- reports never replace others' files

def _wav_bytes(tmp_path, write_audio) -> bytes:
    return write_audio("rec.wav", np.full(2000, 0.25), 48000, "PCM_16").read_bytes()


def test_report_never_replaces_a_recording_named_like_it(tmp_path, write_audio, run_cli, monkeypatch):
    import tempfile

    monkeypatch.setattr(tempfile, "tempdir", str(tmp_path / "tmp"))
    (tmp_path / "tmp").mkdir()
    write_audio("in/take.wav", np.full(2000, 0.25), 48000, "PCM_16")
    (tmp_path / "r.yaml").write_text(GENTLE, encoding="utf-8")
    rep = tmp_path / "rep"
    rep.mkdir()
    recording = _wav_bytes(tmp_path, write_audio)
    (rep / "night.json").write_bytes(recording)                     # a recording someone named .json
    status, out, err = run_cli("run", tmp_path / "r.yaml", tmp_path / "in", "-o", tmp_path / "out",
                               "--workers", "1", "--report", rep / "night.json")
    assert status == 1 and (tmp_path / "out" / "take.wav").exists()     # the audio was delivered
    assert (rep / "night.json").read_bytes() == recording                 # left as it was
    lines = [ln for ln in err.splitlines() if ln.startswith(f"{rep / 'night.json'}: error:")]
    assert len(lines) == 1 and "not a JSON report chainrun wrote" in lines[0], err
    # none of the three is put beside it (they are written together or not at all): all go to the temporary folder
    fallback = lines[0].split("; the reports were written to ")[1].split(" instead")[0].split(", ")
    assert [os.path.dirname(p) for p in fallback] == [str(tmp_path / "tmp")] * 3
    assert [os.path.splitext(p)[1] for p in fallback] == [".json", ".csv", ".html"]
    with open(fallback[0], encoding="utf-8") as fh:
        assert json.load(fh)["summary"]["ok"] == 1                        # Python's json (reference library)
    assert sorted(os.listdir(rep)) == ["night.json"]
    assert f"report: {', '.join(fallback)}" in out


def test_report_never_replaces_someones_spreadsheet_but_replaces_its_own(tmp_path, write_audio, run_cli,
                                                                          monkeypatch):
    import tempfile

    monkeypatch.setattr(tempfile, "tempdir", str(tmp_path / "tmp"))
    (tmp_path / "tmp").mkdir()
    write_audio("in/take.wav", np.full(2000, 0.25), 48000, "PCM_16")
    (tmp_path / "r.yaml").write_text(GENTLE, encoding="utf-8")
    rep = tmp_path / "rep"
    rep.mkdir()
    sheet = b"take,minutes,presenter\nmarsh dawn,12,Ana\n"
    (rep / "week.csv").write_bytes(sheet)
    argv = ("run", tmp_path / "r.yaml", tmp_path / "in", "-o", tmp_path / "out", "--workers", "1",
            "--report", rep / "week.json")
    status, _, err = run_cli(*argv)
    assert status == 1 and (rep / "week.csv").read_bytes() == sheet
    assert f"{rep / 'week.csv'}: error: the report was not written there: a file is there that is not a CSV " \
           "report chainrun wrote" in err
    assert not (rep / "week.json").exists() and not (rep / "week.html").exists()     # all three, or none
    # its own reports of an earlier run are replaced, quietly
    (rep / "week.csv").unlink()
    assert run_cli(*argv)[0] == 0 and run_cli(*argv, "--redo")[0] == 0
    with open(rep / "week.csv", newline="", encoding="utf-8") as fh:
        assert [row["status"] for row in csv.DictReader(fh)] == ["ok"]
    # an HTML page or a JSON file that is not ours is never replaced either
    for name, body in (("week.html", b"<!DOCTYPE html>\n<html><body>the programme's notes</body></html>\n"),
                       ("week.json", b'{"presenter": "Ana"}\n')):
        (rep / name).write_bytes(body)
        status, _, err = run_cli(*argv)
        assert status == 1 and (rep / name).read_bytes() == body, err
        (rep / name).unlink()
        assert run_cli(*argv)[0] == 0
