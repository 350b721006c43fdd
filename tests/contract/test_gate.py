"""The gate's figures and warnings: the same verdict at every rate, hints for typed mistakes.

Independent oracles: the W3C Audio EQ Cookbook's coefficients, analytic pole radii and decay
times, scipy.signal for pole radii.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from chainrun.design import design
from chainrun.guard import assess
from chainrun.recipe import load

RATES = (44100, 48000, 96000, 192000)


def _assess(path, text, rate):
    path.write_text(text, encoding="utf-8")
    recipe = load(path)
    chain = design(recipe, rate)
    return chain, assess(chain, recipe.guard, recipe)


def _cookbook_peak_radius(f0, q, gain_db, rate):
    # W3C Audio EQ Cookbook, peakingEQ: a0 = 1 + alpha/A, a2 = 1 - alpha/A, so |p|^2 = a2/a0
    a = 10 ** (gain_db / 40)
    alpha = math.sin(2 * math.pi * f0 / rate) / (2 * q)
    return math.sqrt((1 - alpha / a) / (1 + alpha / a))


def test_decay_of_a_q200_peak_at_40hz_is_the_same_at_every_rate(tmp_path):
    text = "format: 1\nchain:\n  - {type: peak, freq: 40, q: 200, gain_db: 6}\nguard: {max_decay_s: 3600}\n"
    decays = {}
    for rate in RATES:
        chain, a = _assess(tmp_path / "r.yaml", text, rate)
        r = _cookbook_peak_radius(40.0, 200.0, 6.0, rate)
        # scipy.signal (reference library): the pole radius of the designed row
        assert float(np.max(np.abs(signal.sos2zpk(chain.sos)[1]))) == pytest.approx(r, rel=1e-12)
        # analytic: the envelope r**n falls 60 dB after ln(1000) / -ln(r) samples
        assert a.decay_s == pytest.approx(math.log(1000) / (-math.log(r) * rate), rel=1e-9)
        assert a.decay_exact
        decays[rate] = a.decay_s
    # analytic: -ln r ~ pi f0 / (Q A fs), so the time is ~ ln(1000) Q A / (pi f0) at every rate
    expected = math.log(1000) * 200 * 10 ** (6 / 40) / (math.pi * 40)
    for rate, d in decays.items():
        assert d == pytest.approx(expected, rel=0.01), rate
    assert max(decays.values()) / min(decays.values()) - 1 < 0.01


@pytest.mark.parametrize("rate", RATES)
def test_ringing_notch_warns_at_every_rate(tmp_path, rate):
    # analytic: a cookbook notch at 40 Hz, Q 200 has -ln r ~ pi 40 / (200 fs): about 11 s to fall
    # 60 dB, above the default guard.max_decay_s of 5 s at every rate
    _, a = _assess(tmp_path / "r.yaml", "format: 1\nchain:\n  - {type: notch, freq: 40, q: 200, label: hum}\n", rate)
    assert a.accepted
    (warn,) = [p for p in a.problems if p.severity == "warning"]
    assert "longer than guard.max_decay_s 5 s" in warn.message and "hum" in warn.message
    assert (warn.where.line, warn.where.col) == (3, 5)


# --------------------------------------------------------------------------- kilohertz typed as hertz

@pytest.mark.parametrize("section,kind", [
    ("{type: peak, freq: 3.2, gain_db: 3, q: 1}", "peak"),
    ("{type: high_shelf, freq: 10, gain_db: 2}", "high shelf"),
    ("{type: low_shelf, freq: 10, gain_db: 2}", "low shelf"),
    ("{type: notch, freq: 5, q: 10}", "notch"),
])
def test_peak_shelf_or_notch_below_20hz_warns_located(tmp_path, section, kind):
    # common practice, no published source: audio-band EQ sits at 20 Hz and above
    path = tmp_path / "r.yaml"
    path.write_text(f"format: 1\nchain:\n  - {{type: gain, gain_db: -1}}\n  - {section}\n", encoding="utf-8")
    (warn,) = load(path).warnings
    col = 4 + section.index("freq") + len("freq: ") + 1     # the value's column, 1-based; "  - " before
    assert warn.startswith(f"{path}:4:{col}: warning: chain[1].freq ")
    assert f"for a {kind}" in warn
    f = float(section.split("freq: ")[1].split(",")[0])
    assert f"write {f * 1000:g}" in warn      # analytic: 1 kHz = 1000 Hz


def test_highpass_below_20hz_and_a_peak_at_20hz_do_not_warn(tmp_path):
    path = tmp_path / "r.yaml"
    path.write_text("format: 1\nchain:\n  - {type: highpass, freq: 15}\n"
                    "  - {type: peak, freq: 20, gain_db: 1, q: 1}\n", encoding="utf-8")
    assert load(path).warnings == ()


@pytest.mark.parametrize("value,hint", [
    ("3kHz", "write the plain number 3000 "), ("3.2 kHz", "write the plain number 3200 "),
    ('"1000"', "write the plain number 1000, without quotes"), ("250Hz", "write the plain number 250 "),
])
def test_number_written_as_text_gets_the_number_to_type(tmp_path, value, hint):
    from chainrun.recipe import RecipeError
    path = tmp_path / "r.yaml"
    path.write_text(f"format: 1\nchain:\n  - type: peak\n    freq: {value}\n    gain_db: 3\n", encoding="utf-8")
    with pytest.raises(RecipeError) as info:
        load(path)
    msg = str(info.value)
    assert msg.startswith(f"{path}:4:11: error: chain[0].freq must be a number; found text")
    assert hint in msg and "\n" not in msg       # analytic: 1 kHz = 1000 Hz


def test_swapped_arguments_say_the_first_is_audio(tmp_path, run_cli, write_recipe, write_audio):
    take = write_audio("take.wav", np.zeros((480, 1)))
    recipe = write_recipe("format: 1\nchain:\n  - {type: gain, gain_db: -1}\n")
    status, out, err = run_cli("run", take, recipe, "-o", tmp_path / "out")
    assert status == 2 and out == ""
    assert err.strip().splitlines() == [f"{take}: error: the first argument is audio (WAV), not a recipe: "
                                        "chainrun run RECIPE INPUT...; no audio was touched"]
    assert not (tmp_path / "out").exists()


# --------------------------------------------------------------------------- check: width, load failures, --strict

def test_check_table_fits_80_columns_and_a_load_failure_gets_a_verdict_row(tmp_path, run_cli):
    good = tmp_path / "good.yaml"
    good.write_text("format: 1\nchain:\n  - {type: highpass, freq: 10, order: 8}\n"
                    "  - {type: peak, freq: 19000, gain_db: -20.5, q: 0.7}\n", encoding="utf-8")
    bad = tmp_path / "bad.yaml"
    bad.write_text("format: 1\nchain:\n  - {type: peak, freq: 1000}\n", encoding="utf-8")
    status, out, err = run_cli("check", good, bad, "--rate", "192000", "--rate", "44100")
    assert status == 1
    # common practice, no published source: a terminal is 80 columns wide
    table = [line for line in out.splitlines() if line.startswith("  ")]       # titles carry the path
    assert len(table) == 4 and max(len(line) for line in table) <= 80, out
    lines = out.splitlines()
    i = lines.index(str(bad))
    assert "REJECTED" in lines[i + 1]


def test_strict_makes_warnings_fail(tmp_path, run_cli):
    path = tmp_path / "r.yaml"
    path.write_text("format: 1\nchain:\n  - {type: peak, freq: 3.2, gain_db: 3, q: 1}\n", encoding="utf-8")
    assert run_cli("check", path)[0] == 0
    status, out, err = run_cli("check", "--strict", path)
    assert status == 1 and "warning:" in err and "1 rejected" in out


def test_recipe_path_that_is_a_pipe_is_not_opened_by_the_audio_check(tmp_path):
    import os
    import threading

    from chainrun.app import refuse_audio_recipe
    fifo = tmp_path / "recipe.yaml"
    os.mkfifo(fifo)                   # POSIX: opening a FIFO to read waits for a writer
    t = threading.Thread(target=refuse_audio_recipe, args=(fifo,), daemon=True)
    t.start()
    t.join(5.0)
    blocked = t.is_alive()
    if blocked:                       # let the thread go: open the other end
        fd = os.open(fifo, os.O_WRONLY | os.O_NONBLOCK)
        os.close(fd)
    assert not blocked
