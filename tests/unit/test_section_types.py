"""The section catalogue is the single source: the loader takes exactly each row's keys, and
every row designs a filter that an outside reference (the Audio EQ Cookbook, analytic values,
scipy.signal) recognises.

Every frequency response here is computed with scipy.signal, never with chainrun's helpers.
"""
from __future__ import annotations

import re

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from chainrun.design import design
from chainrun.recipe import RecipeError, from_dict
from chainrun.section_types import SECTION_TYPES, SECTIONS, describe, param_text, raw_sections

RATE = 48000
_freqz_sos = getattr(signal, "freqz_sos", None) or signal.sosfreqz

# A valid value for every key some row takes (order 2 is allowed by every type with an order).
SAMPLE = {"freq": 1000.0, "gain_db": 6.0, "q": 0.7071, "bw": 1.0, "slope": 1.0, "order": 2,
          "b": [0.5, 0.25], "a": [1.0, -0.25]}


def _db(sos: np.ndarray, freqs) -> np.ndarray:
    """Magnitude in dB at ``freqs`` Hz (scipy.signal, reference library)."""
    _, h = _freqz_sos(sos, worN=np.atleast_1d(np.asarray(freqs, dtype=float)), fs=RATE)
    return 20.0 * np.log10(np.abs(h))


def _sections(kind: str) -> list[dict]:
    """One section of ``kind`` per way of writing it: the required keys alone (if that is
    allowed) and the required keys with each optional key in turn."""
    row = SECTIONS[kind]
    base = {"type": kind, **{k: SAMPLE[k] for k in row.required}}
    return [base] + [{**base, key: SAMPLE[key]} for key in row.optional]


def _sos(section: dict) -> np.ndarray:
    return design(from_dict({"format": 1, "chain": [section]}), RATE).sos


# Type -> a check of its designed SOS against an outside reference. Every row must have one.
def _check_pass(section, sos):
    btype = section["type"]
    if "q" in section:        # W3C Audio EQ Cookbook: HPF/LPF with Q = 1/sqrt(2) is -3.01 dB at f0
        assert_allclose(_db(sos, SAMPLE["freq"]), 20 * np.log10(section["q"]), atol=1e-6)
    else:                     # scipy.signal.butter (reference library)
        ref = signal.butter(section.get("order", 2), section["freq"], btype=btype, fs=RATE, output="sos")
        freqs = [20.0, 500.0, 1000.0, 2000.0, 20000.0]
        assert_allclose(_db(sos, freqs), _db(ref, freqs), atol=1e-9)


def _check_shelf(section, sos):
    # W3C Audio EQ Cookbook (shelves) and the first-order bilinear shelf: half the dB gain at f0,
    # the full gain at the far end (DC for a low shelf, Nyquist for a high shelf)
    far = 0.0 if section["type"] == "low_shelf" else RATE / 2
    assert_allclose(_db(sos, section["freq"]), section["gain_db"] / 2, atol=1e-9)
    assert_allclose(_db(sos, far), section["gain_db"], atol=1e-9)


def _check_peak(section, sos):
    # W3C Audio EQ Cookbook: peakingEQ gain at f0 equals dBgain, 0 dB at DC and Nyquist
    assert_allclose(_db(sos, [section["freq"], 0.0, RATE / 2]), [section["gain_db"], 0.0, 0.0], atol=1e-9)


def _check_notch(section, sos):
    # W3C Audio EQ Cookbook: notch zeros on the unit circle at f0, 0 dB at DC
    _, h = _freqz_sos(sos, worN=[section["freq"], 0.0], fs=RATE)
    assert abs(h[0]) < 1e-9 and abs(abs(h[1]) - 1.0) < 1e-12


def _check_bandpass(section, sos):
    # W3C Audio EQ Cookbook: BPF (constant 0 dB peak gain) is 0 dB at f0
    assert_allclose(_db(sos, section["freq"]), 0.0, atol=1e-9)


def _check_allpass(section, sos):
    # W3C Audio EQ Cookbook: APF has unit magnitude everywhere, phase -180 degrees at f0
    assert_allclose(_db(sos, [20.0, section["freq"], 15000.0]), 0.0, atol=1e-9)
    _, h = _freqz_sos(sos, worN=[section["freq"]], fs=RATE)
    assert_allclose(abs(np.angle(h[0])), np.pi, atol=1e-9)


def _check_gain(section, sos):
    # analytic: a flat gain of G dB is the amplitude 10^(G/20) at every frequency
    assert_allclose(_db(sos, [0.0, 1000.0, RATE / 2]), section["gain_db"], atol=1e-12)


def _check_iir(section, sos):
    # scipy.signal.freqz of the written b/a (reference library)
    freqs = [0.0, 1000.0, 10000.0, RATE / 2]
    _, h = signal.freqz(section["b"], section["a"], worN=freqs, fs=RATE)
    _, got = _freqz_sos(sos, worN=freqs, fs=RATE)
    assert_allclose(got, h, rtol=1e-12, atol=1e-15)


REFERENCE = {"highpass": _check_pass, "lowpass": _check_pass, "low_shelf": _check_shelf,
             "high_shelf": _check_shelf, "peak": _check_peak, "notch": _check_notch,
             "bandpass": _check_bandpass, "allpass": _check_allpass, "gain": _check_gain, "iir": _check_iir}


def test_every_row_has_an_outside_reference_check():
    assert set(REFERENCE) == set(SECTION_TYPES)


@pytest.mark.parametrize("kind", SECTION_TYPES)
def test_every_row_loads_with_its_keys_and_designs_what_the_reference_expects(kind):
    row = SECTIONS[kind]
    assert row.name == kind and row.description and set(row.required).isdisjoint(row.optional)
    assert ("order" in row.optional) == (row.order is not None)
    designed = 0
    for section in _sections(kind):
        try:
            sos = _sos(section)
        except RecipeError as exc:
            # only the one combination a row's rule rejects: a band section needs q or bw
            assert section == {"type": kind, **{k: SAMPLE[k] for k in row.required}}, exc
            assert f"needs {row.optional[0]} or {row.optional[1]}" in str(exc)
            continue
        assert sos.shape[1] == 6 and np.all(sos[:, 3] == 1.0)
        REFERENCE[kind](section, sos)
        designed += 1
    assert designed >= 1


@pytest.mark.parametrize("kind", SECTION_TYPES)
def test_the_loader_allows_exactly_the_row_keys(kind):
    row = SECTIONS[kind]
    section = {**_sections(kind)[-1], "bogus": 1}
    with pytest.raises(RecipeError) as err:
        from_dict({"format": 1, "chain": [section]})
    allowed = re.search(r"; allowed: (.*)$", str(err.value)).group(1)
    assert allowed.split(", ") == list(row.keys)
    for key in row.required:
        missing = {k: v for k, v in _sections(kind)[-1].items() if k != key}
        with pytest.raises(RecipeError, match=f"needs '{key}'"):
            from_dict({"format": 1, "chain": [missing]})


def test_only_raw_coefficients_are_raw():
    assert [k for k, row in SECTIONS.items() if row.raw] == ["iir"]
    recipe = from_dict({"format": 1, "chain": [{"type": "gain", "gain_db": -1}, {"type": "iir", **{
        k: SAMPLE[k] for k in ("b", "a")}}, {"type": "iir", "b": [1.0], "a": [1.0]}]})
    assert [s.index for s in raw_sections(recipe)] == [1, 2]


@pytest.mark.parametrize("section, text", [
    # common practice, no published source: the short texts the plot legend has always shown
    ({"type": "peak", "freq": 1200, "gain_db": 3, "q": 0.7, "label": "air"}, "peak 1.2 kHz +3 dB Q 0.7 (air)"),
    ({"type": "highpass", "freq": 80, "order": 4}, "highpass 80 Hz order 4"),
    ({"type": "highpass", "freq": 80, "q": 0.5}, "highpass 80 Hz Q 0.5"),
    ({"type": "low_shelf", "freq": 200, "gain_db": -2}, "low_shelf 200 Hz -2 dB slope 1"),
    ({"type": "high_shelf", "freq": 8000, "gain_db": 2, "order": 1}, "high_shelf 8 kHz +2 dB"),
    ({"type": "notch", "freq": 50, "bw": 0.1}, "notch 50 Hz bw 0.1 oct"),
    ({"type": "iir", "b": [1, 0, 0], "a": [1, -0.5]}, "iir order 2"),
])
def test_describe_gives_the_short_text(section, text):
    recipe = from_dict({"format": 1, "chain": [section]})
    assert describe(recipe.sections[0]) == text


def test_param_text_lists_the_written_parameters():
    recipe = from_dict({"format": 1, "chain": [{"type": "peak", "freq": 2500, "gain_db": -1.5, "bw": 2},
                                               {"type": "iir", "b": [0.5, 0.5], "a": [1, 0]}]})
    texts = [param_text(s.to_dict()) for s in recipe.sections]
    assert texts == ["freq 2500 Hz, gain_db -1.5 dB, bw 2 octaves", "b [0.5, 0.5], a [1, 0]"]
