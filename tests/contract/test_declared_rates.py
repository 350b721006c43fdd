"""The gate's rates (issue 18 item 3): `rates:` in a recipe, check's common rates, run's undeclared rates,
check --json's problem objects, and sections that drop out above Nyquist."""
from __future__ import annotations

import json
import re

import pytest

from chainrun.recipe import RecipeError, load, loads

# README.md 'Commands': without rates: and without --rate, check assesses the common rates
COMMON_RATES = [8000, 16000, 22050, 32000, 44100, 48000, 88200, 96000, 176400, 192000]
SHELF_9K = "format: 1\n{rates}chain:\n  - {{type: high_shelf, freq: 9000, gain_db: 3, label: air}}\n"


# --------------------------------------------------------------------------- A: rates: and check's rates

def test_a_9khz_shelf_fails_check_at_the_common_rates(write_recipe, run_cli):
    path = write_recipe(SHELF_9K.format(rates=""))
    status, out, err = run_cli("check", path)
    assert status == 1
    rows = re.findall(r"^\s+(\d+) Hz .* (accepted|REJECTED)$", out, re.M)
    assert [int(r) for r, _ in rows] == COMMON_RATES
    # analytic: 9000 Hz is at or above Nyquist (rate / 2) at 8000 and 16000 Hz only
    assert [int(r) for r, v in rows if v == "REJECTED"] == [8000, 16000]
    assert "9000 Hz is at or above Nyquist (4000 Hz) for 8000 Hz files" in err


def test_declared_rates_are_the_rates_checked(write_recipe, run_cli):
    path = write_recipe(SHELF_9K.format(rates="rates: [44100, 48000]\n"))
    status, out, err = run_cli("check", path)
    assert status == 0 and err == ""
    assert [int(r) for r in re.findall(r"^\s+(\d+) Hz ", out, re.M)] == [44100, 48000]
    # --rate on the command line still wins over the declared rates
    status, out, err = run_cli("check", path, "--rate", "8000")
    assert status == 1 and [int(r) for r in re.findall(r"^\s+(\d+) Hz ", out, re.M)] == [8000]


@pytest.mark.parametrize("value, col, says", [
    ("[44100, loud]", 16, "rates[1] must be a number"),
    ("[0]", 9, "rates[0] 0 Hz is not a sample rate"),
    ("[48000, -44100]", 16, "rates[1] -44100 Hz is not a sample rate"),
    ("[44100.5]", 9, "rates[0] 44100.5 Hz is not a sample rate"),
    ("[48000, 44100, 48000]", 23, "rates[2] 48000 Hz is already listed at x.yaml:2:9"),
    ("[]", 8, "rates is an empty list"),
    ("48000", 8, "rates must be a list of sample rates"),
])
def test_bad_rates_get_located_errors(value, col, says):
    with pytest.raises(RecipeError) as info:
        loads(f"format: 1\nrates: {value}\nchain:\n  - {{type: gain, gain_db: -1}}\n", "x.yaml")
    assert (info.value.line, info.value.col) == (2, col)
    assert str(info.value).startswith(f"x.yaml:2:{col}: error: {says}")


def test_included_rates_apply_unless_the_including_file_sets_them(write_recipe):
    write_recipe("format: 1\nrates: [44100, 48000]\nchain:\n  - {type: gain, gain_db: -1}\n", "house/h.yaml")
    write_recipe("format: 1\nrates: [96000]\nchain:\n  - {type: gain, gain_db: -1}\n", "house/g.yaml")
    top = write_recipe("format: 1\ninclude: house/h.yaml\nchain:\n  - {type: gain, gain_db: -1}\n", "a.yaml")
    assert load(top).rates == (44100, 48000)
    own = write_recipe("format: 1\ninclude: house/h.yaml\nrates: [32000]\nchain: []\n", "b.yaml")
    assert load(own).rates == (32000,)
    both = write_recipe("format: 1\ninclude: [house/h.yaml, house/g.yaml]\nchain: []\n", "c.yaml")
    with pytest.raises(RecipeError, match=r"g\.yaml:2:8: error: rates \[96000\] conflicts with \[44100, 48000\]"):
        load(both)
    assert load(write_recipe("format: 1\nchain:\n  - {type: gain, gain_db: -1}\n", "d.yaml")).rates is None


def test_a_plan_checks_each_recipe_at_its_own_rates(write_recipe, run_cli):
    write_recipe(SHELF_9K.format(rates="rates: [44100]\n"), "one.yaml")
    write_recipe(SHELF_9K.format(rates="rates: [22050, 32000]\n"), "two.yaml")
    plan = write_recipe("format: 1\nbatch:\n  - {inputs: \"a/*.wav\", recipe: one.yaml}\n"
                        "  - {inputs: \"b/*.wav\", recipe: two.yaml}\n",
                        "plan.yaml")
    status, out, err = run_cli("check", "--json", plan)
    assert status == 0, err
    rates = {e["path"].rsplit("/", 1)[-1]: [r["rate"] for r in e["rates"]] for e in json.loads(out)["recipes"]}
    assert rates == {"one.yaml": [44100], "two.yaml": [22050, 32000]}


# --------------------------------------------------------------------------- B: run refuses an undeclared rate

def test_run_rejects_a_file_at_an_undeclared_rate_and_writes_nothing_for_it(tmp_path, write_recipe, write_audio,
                                                                            run_cli):
    import numpy as np
    from support import by_rel, report_of

    recipe = write_recipe("format: 1\nrates: [44100, 48000]\nchain:\n  - {type: gain, gain_db: -1}\n")
    x = np.random.default_rng(3).uniform(-0.25, 0.25, 4800)
    write_audio("in/ok.wav", x, rate=48000)
    write_audio("in/phone.wav", x, rate=22050)
    status, out, err = run_cli("run", recipe, tmp_path / "in", "-o", tmp_path / "out", "--workers", "1")
    assert status == 1, err
    lines = [line for line in err.splitlines() if "phone.wav" in line]     # the file table lists it on stdout
    assert len(lines) == 1 and lines[0].startswith(f"{tmp_path / 'in' / 'phone.wav'}: rejected: "), lines
    assert "22050 Hz, is not among the rates the recipe declares (44100, 48000 Hz)" in lines[0]
    files = by_rel(report_of(tmp_path / "out"))
    assert files["phone.wav"]["status"] == "rejected" and files["ok.wav"]["status"] == "ok"
    assert "22050 Hz, is not among the rates the recipe declares (44100, 48000 Hz)" in files["phone.wav"]["message"]
    assert (tmp_path / "out" / "ok.wav").exists() and not (tmp_path / "out" / "phone.wav").exists()
    # without rates: the same file is rendered, as before
    anyrate = write_recipe("format: 1\nchain:\n  - {type: gain, gain_db: -1}\n", "any.yaml")
    status, out, err = run_cli("run", anyrate, tmp_path / "in" / "phone.wav", "-o", tmp_path / "out2")
    assert status == 0, err
    assert (tmp_path / "out2" / "phone.wav").exists()


def test_filter_file_rejects_a_file_at_an_undeclared_rate(tmp_path, write_recipe, write_audio):
    import numpy as np

    import chainrun

    recipe = write_recipe("format: 1\nrates: [48000]\nchain:\n  - {type: gain, gain_db: -1}\n")
    phone = write_audio("phone.wav", np.zeros(2205), rate=22050)
    r = chainrun.filter_file(str(recipe), str(phone), str(tmp_path / "phone-out.wav"))
    assert r.status == "rejected" and "22050 Hz, is not among the rates the recipe declares (48000 Hz)" in r.message
    assert not (tmp_path / "phone-out.wav").exists()


# --------------------------------------------------------------------------- C: check --json problem objects

def test_check_json_gives_each_problem_as_an_object(write_recipe, run_cli):
    path = write_recipe("format: 1\nchain:\n  - {type: peak, freq: 3.2, gain_db: 1, q: 1}\n"
                        "  - {type: high_shelf, freq: 9000, gain_db: 3}\n")
    status, out, err = run_cli("check", "--json", path, "--rate", "8000", "--rate", "48000")
    assert status == 1
    (entry,) = json.loads(out)["recipes"]
    for p in entry["problems"]:
        assert set(p) == {"path", "line", "col", "severity", "message", "rate"}
    warning, error = entry["problems"]
    assert warning == {"path": str(path), "line": 3, "col": 24, "severity": "warning", "rate": None,
                       "message": "chain[0].freq 3.2 Hz is below 20 Hz for a peak; frequencies are in hertz: "
                                  "for 3.2 kHz write 3200"}
    # analytic: 9000 Hz is above Nyquist (4000 Hz) at 8000 Hz, below it at 48000 Hz
    assert (error["path"], error["line"], error["col"], error["severity"], error["rate"]) == \
        (str(path), 4, 30, "error", 8000)
    assert error["message"].startswith("chain[1].freq 9000 Hz is at or above Nyquist (4000 Hz)")
    # stderr keeps the one-line form, errors first
    assert err.splitlines() == [f"{path}:4:30: error: {error['message']}",
                                f"{path}:3:24: warning: {warning['message']}"]


def test_strict_still_fails_on_warnings_with_problem_objects(write_recipe, run_cli):
    path = write_recipe("format: 1\nchain:\n  - {type: peak, freq: 3.2, gain_db: 1, q: 1}\n")
    assert run_cli("check", "--json", path, "--rate", "48000")[0] == 0
    status, out, _ = run_cli("check", "--json", "--strict", path, "--rate", "48000")
    assert status == 1 and json.loads(out)["accepted"] is False


# --------------------------------------------------------------------------- D: dropping out above Nyquist

DROP = ("format: 1\nchain:\n  - {type: highpass, freq: 80}\n"
        "  - {type: high_shelf, freq: 9000, gain_db: 3, label: air, above_nyquist: drop}\n")
DROP_NOTE = ("chain[1] high_shelf 9000 Hz (air) drops out at 16000 Hz: its 9000 Hz is at or above Nyquist "
             "(8000 Hz), and it is marked above_nyquist: drop")


def test_a_dropped_section_gives_a_note_and_an_accepted_chain(write_recipe, run_cli):
    import numpy as np

    from chainrun.design import design

    recipe = load(write_recipe(DROP))
    chain = design(recipe, 16000)
    # at 16 kHz the 9 kHz shelf is above Nyquist (8 kHz): the chain is the high-pass alone
    alone = design(loads("format: 1\nchain:\n  - {type: highpass, freq: 80}\n"), 16000)
    assert np.array_equal(chain.sos, alone.sos) and chain.rows == (0,)
    assert chain.dropped == (DROP_NOTE,)
    assert design(recipe, 48000).dropped == () and len(design(recipe, 48000).sos) == 2
    status, out, err = run_cli("check", "--json", write_recipe(DROP), "--rate", "16000", "--rate", "48000")
    assert status == 0 and err == ""
    (entry,) = json.loads(out)["recipes"]
    assert entry["accepted"] and entry["notes"] == [DROP_NOTE] and entry["problems"] == []
    assert [r["notes"] for r in entry["rates"]] == [[DROP_NOTE], []]
    status, out, err = run_cli("check", write_recipe(DROP), "--rate", "16000")
    assert status == 0 and f"  note: {DROP_NOTE}" in out.splitlines()
    # without the mark, the same shelf rejects the chain at 16 kHz, as before
    status, _, err = run_cli("check", write_recipe(DROP.replace(", above_nyquist: drop", ""), "r.yaml"),
                             "--rate", "16000")
    assert status == 1 and "9000 Hz is at or above Nyquist (8000 Hz) for 16000 Hz files" in err


def test_a_run_at_a_rate_where_a_section_drops_out_says_so_in_its_reports(tmp_path, write_recipe, write_audio,
                                                                         run_cli):
    import numpy as np
    from support import by_rel, report_of

    x = np.random.default_rng(5).uniform(-0.2, 0.2, 16000)
    write_audio("in/phone.wav", x, rate=16000)
    status, out, err = run_cli("run", write_recipe(DROP), tmp_path / "in", "-o", tmp_path / "out")
    assert status == 0, err
    report = report_of(tmp_path / "out")
    assert by_rel(report)["phone.wav"]["status"] == "ok" and DROP_NOTE in report["notes"]
    assert DROP_NOTE in err
    assert DROP_NOTE in (tmp_path / "out" / "chainrun-report.html").read_text(encoding="utf-8")


@pytest.mark.parametrize("text, at, says", [
    ("  - {type: gain, gain_db: -1, above_nyquist: drop}\n", (3, 46),
     "chain[0].above_nyquist applies only to a section with a freq"),
    ("  - {type: peak, freq: 9000, gain_db: 1, q: 1, above_nyquist: skip}\n", (3, 63),
     "chain[0].above_nyquist 'skip' is not known; allowed: reject, drop"),
])
def test_bad_above_nyquist_gets_a_located_error(text, at, says):
    with pytest.raises(RecipeError) as info:
        loads("format: 1\nchain:\n" + text, "x.yaml")
    assert (info.value.line, info.value.col) == at and says in info.value.message


def test_a_chain_that_drops_out_entirely_is_refused_at_that_rate():
    from chainrun.design import design

    recipe = loads("format: 1\nchain:\n  - {type: peak, freq: 9000, gain_db: 1, q: 1, above_nyquist: drop}\n", "x.yaml")
    with pytest.raises(RecipeError, match=r"^x\.yaml:3:63: error: every section of the chain drops out at 16000 Hz"):
        design(recipe, 16000)


def test_plot_at_a_rate_where_a_section_drops_out_says_so(tmp_path, write_recipe, run_cli):
    status, _, err = run_cli("plot", write_recipe(DROP), "--rate", "16000", "-o", tmp_path / "r.svg")
    assert status == 0 and err.splitlines() == [f"note: {DROP_NOTE}"]
    assert (tmp_path / "r.svg").exists()
