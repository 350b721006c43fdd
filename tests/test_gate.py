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
