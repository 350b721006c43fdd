"""The guard: stability, gain extremes, the L1 worst-case bound, decay, located problems.

Independent oracles: analytic results for first-order sections, scipy.signal for
frequency responses and Butterworth poles, numpy.roots for pole radii.
"""
from __future__ import annotations

import json
import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy import signal

from chainrun.design import Chain, design
from chainrun.guard import FLOOR_DB, assess
from chainrun.recipe import Guard, load

_freqz_sos = getattr(signal, "freqz_sos", None) or signal.sosfreqz


def dense_max_abs_h(sos: np.ndarray, rate: float, n: int = 1 << 15) -> tuple[float, float]:
    """max |H| and its frequency on a dense linear + log grid (scipy.signal, reference library)."""
    f = np.unique(np.concatenate([np.linspace(0.0, rate / 2, n), np.geomspace(1.0, rate / 2, n)]))
    _, h = _freqz_sos(sos, worN=f, fs=rate)
    i = int(np.argmax(np.abs(h)))
    return float(np.abs(h[i])), float(f[i])


def assess_text(path, text: str, rate: int):
    path.write_text(text, encoding="utf-8")
    recipe = load(path)
    chain = design(recipe, rate)
    return recipe, chain, assess(chain, recipe.guard, recipe)


@pytest.fixture
def run(tmp_path):
    """``run(text, rate)`` -> (recipe, chain, assessment) for recipe ``text``."""
    return lambda text, rate=48000: assess_text(tmp_path / "r.yaml", text, rate)


def iir_recipe(c: float, guard: str = "max_gain_db: 120") -> str:
    return f"format: 1\nchain:\n  - {{type: iir, b: [1], a: [1, {c}]}}\nguard: {{{guard}}}\n"


# --------------------------------------------------------------------------- first-order feedback

@pytest.mark.parametrize("rate", [44100, 48000])
@pytest.mark.parametrize("c", [0.5, 0.9, -0.5, -0.9, 0.25, -0.999, 0.999])
def test_first_order_feedback_assessment(run, rate, c):
    _, _, a = run(iir_recipe(c), rate)
    nyq = rate / 2
    hi_hz, lo_hz = (nyq, 0.0) if c > 0 else (0.0, nyq)
    # analytic: H(z) = 1/(1 + c z^-1); |H| peaks at z = -sign(c) with 1/(1-|c|), dips to 1/(1+|c|)
    assert_allclose(a.max_gain_db, 20 * math.log10(1 / (1 - abs(c))), atol=1e-6)
    assert_allclose(a.max_gain_hz, hi_hz, atol=1e-3)
    assert_allclose(a.min_gain_db, 20 * math.log10(1 / (1 + abs(c))), atol=1e-6)
    assert_allclose(a.min_gain_hz, lo_hz, atol=1e-3)
    # analytic (geometric series): h[n] = (-c)^n, sum |h[n]| = 1/(1-|c|)
    assert_allclose(a.peak_gain, 1 / (1 - abs(c)), rtol=1e-9)
    assert a.peak_gain_exact
    assert_allclose(a.max_pole_radius, abs(c), rtol=1e-12)     # analytic: the pole is at z = -c
    # analytic: |h[n]| = |c|^n falls 60 dB after ln(1e-3)/ln|c| samples
    n60 = math.log(1e-3) / math.log(abs(c))
    assert a.decay_s * rate == pytest.approx(n60, rel=1e-9) and a.decay_exact
    assert a.accepted and a.problems == ()


@pytest.mark.parametrize("c,dc_db,nyq_db", [(0.5, -3.52, 6.02), (0.9, -5.58, 20.00)])
def test_first_order_feedback_rounded_values(run, c, dc_db, nyq_db):
    _, _, a = run(iir_recipe(c), 44100)
    # analytic: 20 log10(1/(1+c)) and 20 log10(1/(1-c)), rounded to 0.01 dB
    assert_allclose([a.min_gain_db, a.max_gain_db], [dc_db, nyq_db], atol=0.005)


@pytest.mark.parametrize("c", [1, 1.5, -1, -1.0001, 2.5])
def test_first_order_feedback_unstable_rejected_at_a(run, tmp_path, c):
    _, _, a = run(iir_recipe(c), 48000)
    assert not a.accepted
    errors = [p for p in a.problems if p.severity == "error"]
    first = errors[0]
    assert "iir is unstable" in first.message
    assert f"radius {abs(c):.6g}" in first.message           # analytic: the root of 1 + c z^-1 is -c
    # located at the value of key `a` in line 3: "  - {type: iir, b: [1], a: [1, c]}"
    assert (first.where.path, first.where.line, first.where.col) == (str(tmp_path / "r.yaml"), 3, 28)
    assert str(first).startswith(f"{tmp_path / 'r.yaml'}:3:28: error: chain[0] iir is unstable")
    assert math.isinf(a.peak_gain) and not a.peak_gain_exact
    json.dumps(a.to_dict(), allow_nan=False)                 # JSON-safe even when unstable


@pytest.mark.parametrize("c", [0.999, -0.999, 0.9999, -0.99999])
def test_first_order_feedback_just_inside_is_stable(run, c):
    _, _, a = run(iir_recipe(c), 48000)
    assert a.accepted, [str(p) for p in a.problems]
    assert_allclose(a.peak_gain, 1 / (1 - abs(c)), rtol=1e-6)   # analytic: geometric series


def test_pole_margin_applies_to_raw_iir(run):
    # 1 - 0.999 = 1e-3 < pole_margin 2e-3 -> rejected; the same section passes at the default margin
    _, _, a = run(iir_recipe(0.999, "max_gain_db: 120, pole_margin: 2.0e-3"))
    assert not a.accepted
    assert any("iir is unstable" in p.message and "0.998" in p.message for p in a.problems)


# --------------------------------------------------------------------------- property tests

_rates = st.sampled_from([44100, 48000, 96000])
_freq = st.floats(30.0, 15000.0)
_gain = st.floats(-15.0, 15.0).map(lambda g: round(g, 3))
_q = st.floats(0.3, 10.0).map(lambda q: round(q, 3))


def _section_text():
    peak = st.builds(lambda f, g, q: f"{{type: peak, freq: {f!r}, gain_db: {g}, q: {q}}}", _freq, _gain, _q)
    peak_bw = st.builds(lambda f, g, b: f"{{type: peak, freq: {f!r}, gain_db: {g}, bw: {b}}}",
                        _freq, _gain, st.floats(0.1, 3.0).map(lambda b: round(b, 3)))
    shelf = st.builds(lambda k, f, g, s: f"{{type: {k}, freq: {f!r}, gain_db: {g}, slope: {s}}}",
                      st.sampled_from(["low_shelf", "high_shelf"]), _freq, _gain,
                      st.floats(0.2, 1.0).map(lambda s: round(s, 3)))
    shelf_q = st.builds(lambda k, f, g, q: f"{{type: {k}, freq: {f!r}, gain_db: {g}, q: {q}}}",
                        st.sampled_from(["low_shelf", "high_shelf"]), _freq, _gain, _q)
    shelf1 = st.builds(lambda k, f, g: f"{{type: {k}, freq: {f!r}, gain_db: {g}, order: 1}}",
                       st.sampled_from(["low_shelf", "high_shelf"]), _freq, _gain)
    butter = st.builds(lambda k, f, n: f"{{type: {k}, freq: {f!r}, order: {n}}}",
                       st.sampled_from(["highpass", "lowpass"]), st.floats(20.0, 18000.0), st.integers(1, 8))
    passq = st.builds(lambda k, f, q: f"{{type: {k}, freq: {f!r}, q: {q}}}",
                      st.sampled_from(["highpass", "lowpass"]), _freq, st.floats(0.3, 3.0).map(lambda q: round(q, 3)))
    return st.one_of(peak, peak_bw, shelf, shelf_q, shelf1, butter, passq)


def _chain_recipe(sections: list[str]) -> str:
    body = "".join(f"  - {s}\n" for s in sections)
    return f"format: 1\nchain:\n{body}guard: {{max_gain_db: 120}}\n"


@pytest.fixture(scope="module")
def scratch(tmp_path_factory):
    return tmp_path_factory.mktemp("guard-props") / "r.yaml"


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(sections=st.lists(_section_text(), min_size=1, max_size=6), rate=_rates)
def test_l1_bound_never_below_max_gain(scratch, sections, rate):
    _, chain, a = assess_text(scratch, _chain_recipe(sections), rate)
    peak_h, _ = dense_max_abs_h(chain.sos, rate)
    # analytic (Oppenheim & Schafer, BIBO): |H(e^jw)| <= sum |h[n]| for every w
    assert a.peak_gain >= peak_h * (1 - 1e-9)
    # the guard's max gain is no lower than the dense scipy grid (its grid is refined), and
    # never above the L1 bound; tolerance 0.01 dB, common practice, no published source
    assert a.max_gain_db >= 20 * math.log10(peak_h) - 0.01
    # (the guard floors gains at guard.FLOOR_DB, -300 dB, so a chain muted below that reads -300)
    assert a.max_gain_db <= max(20 * math.log10(a.peak_gain), FLOOR_DB) + 1e-9
    # numpy.roots (reference library): radius of every row's denominator
    radius = max(np.max(np.abs(np.roots(row[3:]))) if np.any(row[4:]) else 0.0 for row in chain.sos)
    assert_allclose(a.max_pole_radius, radius, rtol=1e-12)
    assert a.max_pole_radius < 1.0 and a.accepted


@settings(max_examples=60, deadline=None)
@given(gain_db=st.floats(-119.0, 119.0), rate=_rates)
def test_l1_of_pure_gain_is_its_magnitude(scratch, gain_db, rate):
    _, _, a = assess_text(scratch, f"format: 1\nchain:\n  - {{type: gain, gain_db: {gain_db!r}}}\n"
                                   "guard: {max_gain_db: 120}\n", rate)
    g = 10 ** (gain_db / 20)
    assert_allclose(a.peak_gain, g, rtol=1e-12)                 # analytic: h = g delta, sum |h| = |g|
    assert_allclose([a.max_gain_db, a.min_gain_db], gain_db, atol=1e-9)   # analytic: flat
    assert a.max_pole_radius == 0.0                             # analytic: no feedback, no poles


@settings(max_examples=100, deadline=None)
@given(b0=st.floats(-4.0, 4.0).filter(lambda v: abs(v) > 1e-3),
       a0=st.floats(0.25, 4.0), sign=st.sampled_from([1.0, -1.0]),
       ratio=st.floats(-0.995, 0.995), rate=_rates)
def test_l1_of_first_order_iir_is_geometric_series(scratch, b0, a0, sign, ratio, rate):
    a0 *= sign
    a1 = ratio * a0
    text = f"format: 1\nchain:\n  - {{type: iir, b: [{b0!r}], a: [{a0!r}, {a1!r}]}}\nguard: {{max_gain_db: 120}}\n"
    _, _, a = assess_text(scratch, text, rate)
    c = a1 / a0
    # analytic (geometric series): h[n] = (b0/a0)(-c)^n, sum |h| = |b0/a0| / (1 - |c|)
    assert_allclose(a.peak_gain, abs(b0 / a0) / (1 - abs(c)), rtol=1e-9)
    # numpy.roots (reference library) of the denominator as typed
    assert_allclose(a.max_pole_radius, np.max(np.abs(np.roots([a0, a1]))), rtol=1e-9, atol=1e-15)


@settings(max_examples=80, deadline=None)
@given(r=st.floats(0.05, 0.999), theta=st.floats(0.01, 3.1), b=st.lists(st.floats(-2, 2), min_size=1, max_size=3)
       .filter(lambda v: any(abs(x) > 1e-3 for x in v)), rate=_rates)
def test_pole_radius_of_second_order_iir(scratch, r, theta, b, rate):
    a = [1.0, -2 * r * math.cos(theta), r * r]
    text = f"format: 1\nchain:\n  - {{type: iir, b: {b!r}, a: {a!r}}}\nguard: {{max_gain_db: 120}}\n"
    _, chain, asmt = assess_text(scratch, text, rate)
    # numpy.roots (reference library); analytic: roots r e^{+-j theta}
    assert_allclose(asmt.max_pole_radius, np.max(np.abs(np.roots(a))), rtol=1e-9)
    assert_allclose(asmt.max_pole_radius, r, rtol=1e-9)
    peak_h, _ = dense_max_abs_h(chain.sos, rate, n=1 << 13)
    assert asmt.peak_gain >= peak_h * (1 - 1e-9)   # analytic (BIBO): L1 >= max |H|


# --------------------------------------------------------------------------- guard decisions

def test_max_gain_exceeded_names_the_culprit(run, tmp_path):
    _, chain, a = run("""format: 1
chain:
  - {type: peak, freq: 1000, gain_db: 3, q: 1}
  - {type: peak, freq: 5000, gain_db: 10, q: 2, label: sibilance lift}
  - {type: gain, gain_db: -1}
guard:
  max_gain_db: 6
""")
    assert not a.accepted
    (err,) = [p for p in a.problems if p.severity == "error"]
    assert (err.where.path, err.where.line, err.where.col) == (str(tmp_path / "r.yaml"), 4, 5)
    assert "above guard.max_gain_db 6 dB" in err.message
    assert "chain[1] peak 5000 Hz (sibilance lift) contributes +10.0 dB" in err.message
    peak_h, f_h = dense_max_abs_h(chain.sos, 48000)
    # scipy.signal.freqz_sos (reference library) on a dense grid; 0.01 dB / 1 % in frequency
    assert_allclose(a.max_gain_db, 20 * math.log10(peak_h), atol=0.01)
    assert_allclose(a.max_gain_hz, f_h, rtol=0.01)


def test_max_gain_just_below_limit_accepted(run):
    # W3C Audio EQ Cookbook: a lone peak reaches exactly gain_db at f0
    _, _, a = run("format: 1\nchain:\n  - {type: peak, freq: 2000, gain_db: 5.9, q: 3}\nguard: {max_gain_db: 6}\n")
    assert a.accepted
    assert_allclose(a.max_gain_db, 5.9, atol=1e-6)
    assert_allclose(a.max_gain_hz, 2000.0, rtol=1e-4)


def test_culprit_inside_an_included_recipe_points_into_that_file(tmp_path):
    (tmp_path / "house.yaml").write_text("format: 1\nchain:\n  - {type: high_shelf, freq: 8000, gain_db: 9}\n")
    (tmp_path / "top.yaml").write_text("format: 1\ninclude: house.yaml\nchain:\n  - {type: gain, gain_db: -1}\n"
                                       "guard: {max_gain_db: 3}\n")
    recipe = load(tmp_path / "top.yaml")
    a = assess(design(recipe, 48000), recipe.guard, recipe)
    (err,) = a.problems
    assert err.where.path.endswith("house.yaml") and (err.where.line, err.where.col) == (3, 5)
    # W3C Audio EQ Cookbook: high shelf reaches its full gain at Nyquist: 9 - 1 = 8 dB
    assert_allclose(a.max_gain_db, 8.0, atol=1e-6)
    # flat (zero slope) at Nyquist: the location is defined only to ~0.1 %
    assert_allclose(a.max_gain_hz, 24000.0, rtol=1e-3)


def test_long_ringing_chain_is_a_warning_not_a_rejection(run, tmp_path):
    rate, f0, q = 48000, 1000.0, 200.0
    _, _, a = run(f"""format: 1
chain:
  - {{type: gain, gain_db: -3}}
  - {{type: bandpass, freq: {f0}, q: {q}, label: resonance}}
guard: {{max_decay_s: 0.1}}
""", rate)
    assert a.accepted
    (warn,) = a.problems
    assert warn.severity == "warning"
    assert "longer than guard.max_decay_s 0.1 s" in warn.message and "resonance" in warn.message
    assert (warn.where.line, warn.where.col) == (4, 5)
    # analytic: cookbook BPF a2 = (1 - alpha)/(1 + alpha) = r^2; the envelope r^n falls 60 dB
    # after ln(1e-3)/ln(r) samples. Tolerance 5 %: the sinusoid's first peak is not exactly at n = 0.
    alpha = math.sin(2 * math.pi * f0 / rate) / (2 * q)
    r = math.sqrt((1 - alpha) / (1 + alpha))
    assert_allclose(a.max_pole_radius, r, rtol=1e-12)
    assert_allclose(a.decay_s, math.log(1e-3) / math.log(r) / rate, rtol=0.05)


def test_short_chain_has_no_decay_warning(run):
    _, _, a = run("format: 1\nchain:\n  - {type: bandpass, freq: 1000, q: 2}\nguard: {max_decay_s: 0.1}\n")
    assert a.accepted and a.problems == ()


def test_pole_margin_rejects_low_butterworth_at_high_rate(tmp_path):
    # scipy.signal.butter(output='zpk') (reference library): the largest pole radius at each rate
    def radius(rate):
        _, p, _ = signal.butter(8, 10.0, btype="highpass", fs=rate, output="zpk")
        return float(np.max(np.abs(p)))

    r_low, r_high = radius(44100), radius(192000)
    assert r_low < r_high < 1.0      # analytic: the same corner sits closer to z = 1 at a higher rate
    margin = math.sqrt((1 - r_low) * (1 - r_high))     # between the two
    (tmp_path / "r.yaml").write_text(
        f"format: 1\nchain:\n  - {{type: highpass, freq: 10, order: 8, label: sub}}\n"
        f"guard: {{pole_margin: {margin!r}}}\n")
    recipe = load(tmp_path / "r.yaml")
    low = assess(design(recipe, 44100), recipe.guard, recipe)
    high = assess(design(recipe, 192000), recipe.guard, recipe)
    assert low.accepted
    assert_allclose(low.max_pole_radius, r_low, rtol=1e-12)
    assert not high.accepted
    assert_allclose(high.max_pole_radius, r_high, rtol=1e-12)
    (err,) = high.problems
    assert err.severity == "error" and (err.where.line, err.where.col) == (3, 5)
    assert err.message.startswith("at 192000 Hz chain[0] highpass 10 Hz (sub)")
    assert f"allowed: inside {1 - margin:.9g} (1 - guard.pole_margin)" in err.message
    assert math.isinf(high.peak_gain)


def test_huge_pole_margin_rejects_ordinary_butterworth(run):
    # pole_margin 0.5 allows only radii <= 0.5; a 20 Hz Butterworth at 96 kHz has poles near z = 1
    _, _, a = run("format: 1\nchain:\n  - {type: highpass, freq: 20, order: 4}\nguard: {pole_margin: 0.5}\n", 96000)
    # scipy.signal.butter(output='zpk') (reference library): the largest pole radius, about 0.9995
    _, poles, _ = signal.butter(4, 20.0, btype="highpass", fs=96000, output="zpk")
    r_ref = float(np.max(np.abs(poles)))
    assert r_ref > 0.5
    assert_allclose(a.max_pole_radius, r_ref, rtol=1e-12)
    assert not a.accepted
    assert "has a pole at radius" in a.problems[0].message
    assert "allowed: inside 0.5 (1 - guard.pole_margin)" in a.problems[0].message   # 1 - 0.5, analytic


def test_notch_minimum_is_deep_and_at_f0(run):
    _, _, a = run("format: 1\nchain:\n  - {type: notch, freq: 50, q: 25}\n")
    # W3C Audio EQ Cookbook: the notch has its zero at f0
    assert a.min_gain_db < -100.0
    assert_allclose(a.min_gain_hz, 50.0, rtol=1e-6)
    assert_allclose(a.max_gain_db, 0.0, atol=1e-6)   # W3C Audio EQ Cookbook: 0 dB far away


def test_assessment_to_dict_is_json_safe_and_complete(run):
    _, _, a = run("format: 1\nchain:\n  - {type: peak, freq: 500, gain_db: -4, q: 2}\n")
    d = json.loads(json.dumps(a.to_dict(), allow_nan=False))
    for key in ("rate", "accepted", "rows", "max_pole_radius", "decay_60db_s", "max_gain_db", "max_gain_hz",
                "min_gain_db", "min_gain_hz", "worst_case_peak_gain", "worst_case_peak_gain_db", "problems"):
        assert key in d
    assert d["rate"] == 48000 and d["accepted"] is True and d["rows"] == 1
    assert_allclose(d["min_gain_db"], -4.0, atol=1e-6)   # W3C Audio EQ Cookbook: peak gain at f0
    # W3C Audio EQ Cookbook peakingEQ coefficients, written out here, and scipy.signal.lfilter
    # (reference library) for the impulse response: the worst-case peak gain is sum |h[n]|
    rate, f0, q, big_a = 48000, 500.0, 2.0, 10 ** (-4.0 / 40)
    w0 = 2 * math.pi * f0 / rate
    alpha = math.sin(w0) / (2 * q)
    b = [1 + alpha * big_a, -2 * math.cos(w0), 1 - alpha * big_a]
    a_ = [1 + alpha / big_a, -2 * math.cos(w0), 1 - alpha / big_a]
    impulse = np.zeros(1 << 16)                       # h has fallen below 1e-300 long before the end
    impulse[0] = 1.0
    l1 = float(np.sum(np.abs(signal.lfilter(b, a_, impulse))))
    assert_allclose(d["worst_case_peak_gain"], l1, rtol=1e-9)
    # analytic: the dB field is 20 log10 of the linear field (the two JSON fields agree)
    assert_allclose(d["worst_case_peak_gain_db"], 20 * math.log10(l1), rtol=1e-9)


def test_bundled_unstable_recipe_rejected_at_every_rate(repo_root):
    recipe = load(repo_root / "recipes" / "unstable-hand-typed.yaml")
    # analytic: roots of 1 - 1.95 z^-1 + 1.01 z^-2 have |z|^2 = 1.01 (product of the roots)
    for rate in (44100, 48000, 96000):
        a = assess(design(recipe, rate), recipe.guard, recipe)
        assert not a.accepted
        assert_allclose(a.max_pole_radius, math.sqrt(1.01), rtol=1e-9)
        assert (a.problems[0].where.line, a.problems[0].where.col) == (11, 41)   # value of `a`


def _cookbook_peak(f0: float, gain_db: float, q: float, rate: float) -> tuple[list[float], list[float]]:
    """W3C Audio EQ Cookbook peakingEQ, written out here (not from chainrun.design)."""
    a_lin = 10 ** (gain_db / 40)
    w0 = 2 * math.pi * f0 / rate
    alpha = math.sin(w0) / (2 * q)
    b = [1 + alpha * a_lin, -2 * math.cos(w0), 1 - alpha * a_lin]
    a = [1 + alpha / a_lin, -2 * math.cos(w0), 1 - alpha / a_lin]
    return b, a


def test_a_narrow_raw_resonance_between_grid_points_is_found(tmp_path):
    # A +40 dB, Q 2000 cookbook peak at 10023.5 Hz typed as raw coefficients (no freq for the guard to
    # look at), 5 Hz wide, falls between the log grid's points (about 25 Hz apart there); a broad +12 dB
    # peak elsewhere reads higher on the grid. The guard must still find +40 dB and reject the chain.
    b, a = _cookbook_peak(10023.5, 40.0, 2000.0, 48000)
    text = ("format: 1\nchain:\n"
            f"  - {{type: iir, b: [{b[0]!r}, {b[1]!r}, {b[2]!r}], a: [{a[0]!r}, {a[1]!r}, {a[2]!r}]}}\n"
            "  - {type: peak, freq: 300, gain_db: 12, q: 2}\n")
    _, chain, assessment = assess_text(tmp_path / "r.yaml", text, 48000)
    peak, at = dense_max_abs_h(chain.sos, 48000, n=1 << 22)   # scipy.signal.freqz_sos, 4 M points
    assert 20 * math.log10(peak) == pytest.approx(40.0, abs=0.05)             # W3C Audio EQ Cookbook: G at f0
    assert assessment.max_gain_db == pytest.approx(20 * math.log10(peak), abs=0.01)
    assert assessment.max_gain_hz == pytest.approx(at, abs=0.5)
    assert not assessment.accepted


@pytest.mark.slow
def test_l1_bound_holds_for_repeated_poles(tmp_path):
    # Eight identical 20 Hz, Q 1000 band-passes: a pole of multiplicity eight, whose response decays as
    # n**7 * r**n, slower than a geometric series at r. The guard's worst-case peak gain must not be below
    # the L1 norm of the impulse response summed by scipy.signal.sosfilt over 2**24 samples (a lower bound
    # of the true L1: the rest of the tail only adds), and the output of the worst-case input (the sign of
    # the time-reversed response, analytic) must stay within it.
    text = "format: 1\nchain:\n" + "  - {type: bandpass, freq: 20, q: 1000}\n" * 8
    _, chain, assessment = assess_text(tmp_path / "r.yaml", text, 48000)
    x = np.zeros(1 << 24)
    x[0] = 1.0
    h = signal.sosfilt(chain.sos, x)
    l1_seen = float(np.abs(h).sum())
    assert assessment.peak_gain >= l1_seen
    worst = signal.sosfilt(chain.sos, np.sign(h[::-1]))
    assert float(np.abs(worst).max()) <= assessment.peak_gain


# --------------------------------------------------------------------------- the L1 bound's tail (issue 19)

def partial_l1(sos: np.ndarray, n: int, block: int = 1 << 20) -> float:
    """sum_{k<n} |h[k]| of the cascade's impulse response, by scipy.signal.sosfilt (reference library)
    in blocks with carried state. A lower bound of the true L1 norm: the rest of the sum only adds."""
    zi = np.zeros((len(sos), 2))
    sums, done = [], 0
    while done < n:
        x = np.zeros(min(block, n - done))
        if done == 0:
            x[0] = 1.0
        y, zi = signal.sosfilt(sos, x, zi=zi)
        sums.append(float(np.abs(y).sum()))
        done += len(x)
    return math.fsum(sums)


def _resonator(f0: float, r: float, rate: float) -> list[float]:
    """Poles at r e^{+-j 2 pi f0 / rate}, zeros at z = +-1, scaled to about unit peak gain (analytic)."""
    theta = 2 * math.pi * f0 / rate
    return [1 - r, 0.0, -(1 - r), 1.0, -2 * r * math.cos(theta), r * r]


@pytest.mark.slow
def test_many_narrow_peaks_get_a_finite_bound_close_to_the_l1_norm(tmp_path):
    # 64 peaks of +0.3 dB, Q 900, spread over 25-88 Hz at 48 kHz: the old guard gave +inf dB (its
    # geometric tail estimate saw the block sums of the beating response rise) and accepted.
    body = "".join(f"  - {{type: peak, freq: {25 + i:g}, gain_db: 0.3, q: 900}}\n" for i in range(64))
    _, chain, a = assess_text(tmp_path / "r.yaml", "format: 1\nchain:\n" + body, 48000)
    assert a.accepted and math.isfinite(a.peak_gain)
    seen = partial_l1(chain.sos, 1 << 23)
    assert a.peak_gain >= seen               # scipy.signal.sosfilt partial sum: a lower bound of the L1
    # not absurdly loose: within 0.1 dB of the partial sum (chainrun's own tolerance, no published source)
    assert 20 * math.log10(a.peak_gain / seen) <= 0.1
    assert 20 * math.log10(seen) == pytest.approx(1.12, abs=0.01)   # the figure in issue 19, about +1.1 dB


@pytest.mark.slow
@pytest.mark.parametrize("df", [0.005, 0.006])
def test_two_beating_resonators_are_bounded_from_above(df):
    # Two resonators with poles at radius 1 - 2e-7, df Hz apart: their cascade beats with a period of
    # 1/df s, longer than the old guard's run. The old guard then gave +inf (df 0.006) or a figure
    # below the true L1 norm (df 0.005), and an accepted chain could fail a real file at run time.
    rate, r = 48000, 1 - 2e-7
    sos = np.array([_resonator(1000.0, r, rate), _resonator(1000.0 + df, r, rate)])
    chain = Chain(rate=rate, sos=sos, labels=("a", "b"), rows=(0, 1))
    a = assess(chain, Guard(max_gain_db=120.0, pole_margin=1e-8))
    assert a.accepted and math.isfinite(a.peak_gain)
    # scipy.signal.sosfilt over 2**27 samples; analytic: what is left is below r**(2**27) ~ e**-27 of it
    seen = partial_l1(sos, 1 << 27)
    assert a.peak_gain >= seen
    assert a.peak_gain <= seen * (1 + 1e-6)


@pytest.mark.slow
@pytest.mark.parametrize("freqs", [[20.0] * 8, [20.0 + 0.002 * i for i in range(8)]], ids=["repeated", "near-equal"])
def test_repeated_and_near_equal_poles_at_96k(tmp_path, freqs):
    # Eight 20 Hz, Q 1000 band-passes at 96 kHz (poles at radius 1 - 6.5e-7), identical or 2 mHz apart:
    # the old guard gave +inf and accepted.
    body = "".join(f"  - {{type: bandpass, freq: {f!r}, q: 1000}}\n" for f in freqs)
    _, chain, a = assess_text(tmp_path / "r.yaml",
                              f"format: 1\nchain:\n{body}guard: {{max_gain_db: 120, pole_margin: 1.0e-7}}\n", 96000)
    assert a.accepted and math.isfinite(a.peak_gain)
    seen = partial_l1(chain.sos, 1 << 26)    # scipy.signal.sosfilt: a lower bound of the L1 norm
    assert a.peak_gain >= seen
    assert 20 * math.log10(a.peak_gain / seen) <= 0.1    # chainrun's own tolerance, no published source


@pytest.mark.parametrize("figure", [math.inf, math.nan])
def test_a_worst_case_figure_that_is_not_finite_is_rejected(run, monkeypatch, figure):
    # Whatever the reason, an infinite or NaN bound must never be accepted: it would switch the
    # runtime output guard off (render.py compares each output block with bound x input peak).
    monkeypatch.setattr("chainrun.guard._impulse", lambda sos, rate, r_max: (figure, False))
    _, _, a = run("format: 1\nchain:\n  - {type: peak, freq: 500, gain_db: -4, q: 2}\n")
    assert not a.accepted
    (err,) = [p for p in a.problems if p.severity == "error"]
    assert "worst-case peak gain cannot be bounded" in err.message and "allowed:" in err.message
    assert (err.where.line, err.where.col) == (3, 5)
    json.dumps(a.to_dict(), allow_nan=False)


@st.composite
def _slow_chains(draw):
    """1-4 rows with poles from radius 0.5 to 1 - 1e-5, some repeated or nearly repeated, random zeros."""
    rows = []
    for _ in range(draw(st.integers(1, 4))):
        kind = draw(st.sampled_from(["new", "repeat", "near"])) if rows else "new"
        if kind == "new":
            r = 1 - 10 ** draw(st.floats(-5.0, -0.3))
            theta = draw(st.floats(1e-3, math.pi - 1e-3))
        else:
            r, theta = rows[-1][0], rows[-1][1]
            if kind == "near":
                theta = min(theta * (1 + draw(st.floats(1e-6, 1e-3))), math.pi - 1e-3)
        b = draw(st.lists(st.floats(-1.0, 1.0), min_size=3, max_size=3).filter(lambda v: max(map(abs, v)) > 0.1))
        rows.append((r, theta, b))
    return np.array([[*b, 1.0, -2 * r * math.cos(theta), r * r] for r, theta, b in rows])


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(sos=_slow_chains())
def test_l1_bound_from_a_short_run_is_finite_and_above_the_l1_norm(sos):
    # The run is cut to one block, so the figure rests on the bound of the tail from the state left.
    import chainrun.impulse as guard_module
    chain = Chain(rate=48000, sos=sos, labels=tuple("r" * len(sos)), rows=tuple(range(len(sos))))
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(guard_module, "IMPULSE_CAP", guard_module.IMPULSE_BLOCK)
        a = assess(chain, Guard(max_gain_db=1000.0, pole_margin=1e-6))   # gain is not at issue here
    assert a.accepted and math.isfinite(a.peak_gain)
    # scipy.signal.sosfilt partial sum over 2**20 samples: a lower bound of the L1 norm
    assert a.peak_gain >= partial_l1(sos, 1 << 20)
    peak_h, _ = dense_max_abs_h(sos, 48000, n=1 << 13)
    assert a.peak_gain >= peak_h * (1 - 1e-9)      # analytic (BIBO): L1 >= max |H|, scipy.signal.freqz_sos


def test_the_impulse_run_keeps_its_state_out_of_the_subnormal_range_and_its_figure_an_upper_bound():
    # A fast first section (poles at radius 0.9) fed only the impulse sinks through the subnormal
    # range (IEEE 754: below 2.2e-308) while a slow second one (radius 0.99999) keeps the run going;
    # subnormal arithmetic is many times slower, so the run sets tiny state values to zero on the way
    # and adds their own bound. The figure must not change, and must stay above the L1 norm even
    # when far larger values are set to zero.
    import chainrun.impulse as imp
    sos = np.array([[1.0, 0.3, 0.2, 1.0, -2 * 0.9 * math.cos(0.5), 0.81],
                    [0.01, 0.0, -0.01, 1.0, -2 * 0.99999 * math.cos(0.01), 0.99999 ** 2]])
    real = imp.sosfilt

    def run(floor):
        """(figure, exact, how many stretches ended with a subnormal state value)"""
        seen = []

        def watch(s, x, zi):
            y, zf = real(s, x, zi)
            seen.append(bool(((np.abs(zf) < np.finfo(np.float64).tiny) & (zf != 0.0)).any()))
            return y, zf

        with pytest.MonkeyPatch.context() as mp:
            mp.setattr(imp, "sosfilt", watch)
            mp.setattr(imp, "FLUSH_FLOOR", floor)
            figure, exact = imp._impulse(sos, 48000, 0.99999)
        return figure, exact, sum(seen)

    figure, exact, subnormal = run(imp.FLUSH_FLOOR)
    plain, _, subnormal_plain = run(0.0)                # nothing set to zero: the plain run
    coarse, _, _ = run(1e-3)                            # values far from negligible set to zero
    assert exact and figure == plain
    assert subnormal_plain > 10 and subnormal <= 1      # at most the one stretch before a flush
    # scipy.signal.sosfilt partial sum over 2**22 samples: a lower bound of the L1 norm
    assert coarse >= partial_l1(sos, 1 << 22) and coarse >= plain * (1 - 1e-12)
