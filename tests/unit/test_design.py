"""Filter design checked against published formulas and scipy.signal as the oracle.

Every frequency response here is computed with scipy.signal (freqz_sos / freqz),
never with chainrun's own response helpers.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from chainrun.design import design
from chainrun.recipe import RecipeError, load

RATES = (44100, 48000, 96000)
_freqz_sos = getattr(signal, "freqz_sos", None) or signal.sosfreqz


def response(sos: np.ndarray, freqs, rate: float) -> np.ndarray:
    """Complex response of an SOS cascade at ``freqs`` Hz (scipy.signal, reference library)."""
    _, h = _freqz_sos(sos, worN=np.atleast_1d(np.asarray(freqs, dtype=float)), fs=rate)
    return h


def db(sos: np.ndarray, freqs, rate: float) -> np.ndarray:
    with np.errstate(divide="ignore"):          # an exact notch zero reads as -inf dB
        return 20.0 * np.log10(np.abs(response(sos, freqs, rate)))


@pytest.fixture
def sos_of(write_recipe):
    """``sos_of("{type: peak, ...}", rate)``: the designed SOS of a one-section recipe."""

    def _design(section: str, rate: float) -> np.ndarray:
        recipe = load(write_recipe(f"format: 1\nchain:\n  - {section}\n"))
        chain = design(recipe, rate)
        assert chain.sos.shape[1] == 6
        # README.md 'Coefficient convention' (a[0] normalised to 1); DEVELOPERS.md 'Rules the code
        # keeps' (SOS rows [b0, b1, b2, 1, a1, a2])
        assert_allclose(chain.sos[:, 3], 1.0, rtol=0, atol=0)
        return chain.sos

    return _design


# --------------------------------------------------------------------------- peak

@pytest.mark.parametrize("rate", RATES)
@pytest.mark.parametrize("gain_db", [-18.0, -6.0, -0.5, 2.5, 6.0, 15.0])
@pytest.mark.parametrize("width", ["q: 0.7", "q: 4.3", "bw: 0.5", "bw: 2"])
def test_peak_gain_at_f0_equals_gain_db(sos_of, rate, gain_db, width):
    for freq in (60.0, 1000.0, 9000.0):
        sos = sos_of(f"{{type: peak, freq: {freq}, gain_db: {gain_db}, {width}}}", rate)
        # W3C Audio EQ Cookbook (Working Group Note 2021): peakingEQ gain at f0 equals dBgain
        assert_allclose(db(sos, freq, rate), gain_db, atol=1e-9)
        # W3C Audio EQ Cookbook: peakingEQ is 0 dB at DC and at Nyquist (H(z=±1) = 1)
        assert_allclose(db(sos, [0.0, rate / 2], rate), 0.0, atol=1e-9)
        # analytic: f0 is the extremum of a peaking section; nothing exceeds |gain_db|
        grid = np.geomspace(1.0, rate / 2, 4000)
        assert np.max(np.abs(db(sos, grid, rate))) <= abs(gain_db) + 1e-9


def test_peak_bw_form_matches_q_form_through_cookbook_relation(sos_of):
    # W3C Audio EQ Cookbook: digital BW form 1/Q = 2 sinh(ln2/2 * BW * w0/sin w0)
    rate, freq, bw = 48000, 2500.0, 1.3
    w0 = 2 * math.pi * freq / rate
    q = 1.0 / (2.0 * math.sinh(math.log(2) / 2 * bw * w0 / math.sin(w0)))
    a = sos_of(f"{{type: peak, freq: {freq}, gain_db: 5, bw: {bw}}}", rate)
    b = sos_of(f"{{type: peak, freq: {freq}, gain_db: 5, q: {q!r}}}", rate)
    assert_allclose(a, b, rtol=1e-12, atol=1e-15)


def test_peak_q_sets_bandwidth_of_analog_prototype(sos_of):
    # W3C Audio EQ Cookbook: peakingEQ prototype H(s) = (s^2 + s A/Q + 1)/(s^2 + s/(A Q) + 1);
    # with bilinear prewarping, digital frequency f maps to Omega = tan(pi f/fs)/tan(pi f0/fs),
    # so the digital response equals the prototype at that Omega (analytic).
    rate, freq, q, gain_db = 44100, 700.0, 2.2, -9.0
    sos = sos_of(f"{{type: peak, freq: {freq}, gain_db: {gain_db}, q: {q}}}", rate)
    f = np.geomspace(5.0, 21000.0, 300)
    big_a = 10 ** (gain_db / 40)
    s = 1j * np.tan(np.pi * f / rate) / np.tan(np.pi * freq / rate)
    proto = (s**2 + s * big_a / q + 1) / (s**2 + s / (big_a * q) + 1)
    assert_allclose(np.abs(response(sos, f, rate)), np.abs(proto), rtol=1e-9)


# --------------------------------------------------------------------------- shelves

SECOND_ORDER_WIDTHS = ["slope: 1", "slope: 0.5", "q: 0.707", "q: 2"]


@pytest.mark.parametrize("rate", RATES)
@pytest.mark.parametrize("gain_db", [-12.0, -3.0, 1.5, 6.0, 12.0])
@pytest.mark.parametrize("kind", ["low_shelf", "high_shelf"])
@pytest.mark.parametrize("form", SECOND_ORDER_WIDTHS + ["order: 1"])
def test_shelf_half_gain_at_f0_full_gain_at_far_end(sos_of, rate, gain_db, kind, form):
    freq = 250.0 if kind == "low_shelf" else 6000.0
    sos = sos_of(f"{{type: {kind}, freq: {freq}, gain_db: {gain_db}, {form}}}", rate)
    far, near = (0.0, rate / 2) if kind == "low_shelf" else (rate / 2, 0.0)
    # W3C Audio EQ Cookbook (Working Group Note 2021): shelf gain at f0 is dBgain/2
    assert_allclose(db(sos, freq, rate), gain_db / 2, atol=1e-9)
    # W3C Audio EQ Cookbook: full dBgain at DC (lowShelf) / Nyquist (highShelf), 0 dB at the other end
    assert_allclose(db(sos, far, rate), gain_db, atol=1e-9)
    assert_allclose(db(sos, near, rate), 0.0, atol=1e-9)


def test_shelf_slope_one_is_steepest_monotone(sos_of):
    # W3C Audio EQ Cookbook: "S = 1 is the steepest the slope can be and remain monotonic"
    rate = 48000
    f = np.geomspace(10.0, rate / 2, 3000)
    for kind, gain_db in (("low_shelf", 9.0), ("high_shelf", -9.0), ("low_shelf", -6.0)):
        g = db(sos_of(f"{{type: {kind}, freq: 1000, gain_db: {gain_db}, slope: 1}}", rate), f, rate)
        d = np.diff(g)
        assert np.all(d <= 1e-9) or np.all(d >= -1e-9)


def test_shelf_q_form_equals_slope_form_through_cookbook_relation(sos_of):
    # W3C Audio EQ Cookbook: 1/Q = sqrt((A + 1/A)(1/S - 1) + 2)
    rate, gain_db, slope = 96000, 7.0, 0.6
    big_a = 10 ** (gain_db / 40)
    q = 1.0 / math.sqrt((big_a + 1 / big_a) * (1 / slope - 1) + 2)
    for kind in ("low_shelf", "high_shelf"):
        a = sos_of(f"{{type: {kind}, freq: 800, gain_db: {gain_db}, slope: {slope}}}", rate)
        b = sos_of(f"{{type: {kind}, freq: 800, gain_db: {gain_db}, q: {q!r}}}", rate)
        assert_allclose(a, b, rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("rate", RATES)
@pytest.mark.parametrize("gain_db", [-15.0, -4.0, 3.0, 10.0])
@pytest.mark.parametrize("kind", ["low_shelf", "high_shelf"])
def test_first_order_shelf_equals_bilinear_of_prewarped_analog_prototype(sos_of, rate, gain_db, kind):
    freq = 180.0 if kind == "low_shelf" else 7000.0
    sos = sos_of(f"{{type: {kind}, freq: {freq}, gain_db: {gain_db}, order: 1}}", rate)
    assert sos.shape == (1, 6)
    gain = 10 ** (gain_db / 20)
    g = math.sqrt(gain)
    wa = 2 * rate * math.tan(math.pi * freq / rate)       # prewarped analog corner, rad/s
    # Analog first-order shelf written here: gain G at one end, 1 at the other, sqrt(G) at wa.
    if kind == "low_shelf":
        b_s, a_s = [1 / wa, g], [1 / wa, 1 / g]             # (s/wa + g) / (s/wa + 1/g)
    else:
        b_s, a_s = [gain / wa, gain / g], [1 / wa, g]       # G (s/wa + 1/g) / (s/wa + g)
    bz, az = signal.bilinear(b_s, a_s, fs=rate)             # scipy.signal.bilinear (reference library)
    bz, az = bz / az[0], az / az[0]
    assert_allclose(sos[0, :2], bz, rtol=1e-10, atol=1e-14)
    assert_allclose(sos[0, 3:5], az, rtol=1e-10, atol=1e-14)
    assert_allclose(sos[0, [2, 5]], 0.0, atol=0)
    # analytic (bilinear transform): prewarping maps wa to freq exactly, so the analog
    # prototype's |H(j wa)| = sqrt(G) appears at freq
    f = np.array([freq])
    _, h = signal.freqz(bz, az, worN=f, fs=rate)            # scipy.signal.freqz (reference library)
    assert_allclose(20 * np.log10(np.abs(h)), gain_db / 2, atol=1e-9)


# --------------------------------------------------------------------------- high/low pass

@pytest.mark.parametrize("rate", RATES)
@pytest.mark.parametrize("btype,freq", [("lowpass", 1200.0), ("highpass", 90.0), ("lowpass", 15000.0)])
def test_order2_q_sqrt_half_equals_butterworth(sos_of, rate, btype, freq):
    sos = sos_of(f"{{type: {btype}, freq: {freq}, q: {1 / math.sqrt(2)!r}}}", rate)
    ref = signal.butter(2, freq, btype=btype, fs=rate, output="sos")   # scipy.signal.butter (reference library)
    f = np.geomspace(1.0, rate / 2, 2000)
    assert_allclose(np.abs(response(sos, f, rate)), np.abs(response(ref, f, rate)), rtol=1e-9, atol=1e-13)


@pytest.mark.parametrize("order", range(1, 9))
@pytest.mark.parametrize("btype", ["lowpass", "highpass"])
def test_butterworth_design_equals_scipy_butter(sos_of, order, btype):
    # chainrun designs Butterworth sections with this same scipy.signal.butter call (README.md
    # 'Recipes'), so this checks only that order, frequency, type and rate are passed through and
    # the rows kept as scipy gives them; the response itself is checked independently of scipy's
    # design in test_butterworth_minus_3db_at_cutoff_and_6n_db_per_octave and
    # test_butterworth_matches_analytic_bilinear_magnitude (analytic magnitude)
    for rate in RATES:
        sos = sos_of(f"{{type: {btype}, freq: 440, order: {order}}}", rate)
        # scipy.signal.butter(output='sos') (reference library)
        ref = signal.butter(order, 440, btype=btype, fs=rate, output="sos")
        assert_allclose(sos, ref, rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("order", range(1, 9))
@pytest.mark.parametrize("btype", ["lowpass", "highpass"])
def test_butterworth_minus_3db_at_cutoff_and_6n_db_per_octave(sos_of, order, btype):
    rate = 192000
    fc = 50.0 if btype == "lowpass" else 3000.0
    sos = sos_of(f"{{type: {btype}, freq: {fc}, order: {order}}}", rate)
    # analytic: Butterworth |H(fc)|^2 = 1/2, i.e. -3.0103 dB at the cutoff, for every order
    assert_allclose(db(sos, fc, rate), 10 * math.log10(0.5), atol=1e-9)
    # analytic: far from the cutoff |H| ~ (f/fc)^(-+n), i.e. 6.0206 n dB per octave. Octaves
    # chosen 16x..32x away from fc and far below Nyquist, where the bilinear warping
    # (tan(pi f/fs) vs pi f/fs) and the 1/(1 + x^2n) term each move the slope by < 0.015 dB.
    f1, f2 = (16 * fc, 32 * fc) if btype == "lowpass" else (fc / 32, fc / 16)
    drop = db(sos, f1, rate) - db(sos, f2, rate)
    expected = 20 * order * math.log10(2) * (1 if btype == "lowpass" else -1)
    assert_allclose(drop, expected, atol=0.03)
    # analytic: bilinear Butterworth |H|^2 = 1/(1 + (tan(pi f/fs)/tan(pi fc/fs))^(+-2n)) everywhere
    f = np.geomspace(5.0, rate / 2 * 0.999, 500)
    x = np.tan(np.pi * f / rate) / np.tan(np.pi * fc / rate)
    x = x if btype == "lowpass" else 1 / x
    expected_db = -10 * np.log10(1 + x ** (2 * order))
    got = db(sos, f, rate)
    mask = expected_db > -250       # beyond that float64 cannot resolve the response
    assert_allclose(got[mask], expected_db[mask], atol=1e-6)


@pytest.mark.parametrize("rate, freqs", [(44100, (31.5, 440.0, 6000.0, 17000.0)),
                                         (96000, (20.0, 1000.0, 12000.0, 40000.0))])
@pytest.mark.parametrize("order", range(1, 9))
@pytest.mark.parametrize("btype", ["lowpass", "highpass"])
def test_butterworth_matches_analytic_bilinear_magnitude(sos_of, rate, freqs, order, btype):
    # analytic (Butterworth magnitude under the bilinear transform): with the cutoff prewarped,
    # |H(e^jw)|^2 = 1/(1 + (tan(w/2)/tan(wc/2))^(2N)) for low-pass, the ratio inverted for
    # high-pass; w = 2 pi f/fs. Cutoffs from the bottom to near the top of the band.
    f = np.geomspace(1.0, rate / 2 * 0.999, 600)
    for fc in freqs:
        sos = sos_of(f"{{type: {btype}, freq: {fc}, order: {order}}}", rate)
        ratio = np.tan(np.pi * f / rate) / np.tan(np.pi * fc / rate)
        ratio = ratio if btype == "lowpass" else 1 / ratio
        expected_db = -10 * np.log10(1 + ratio ** (2 * order))
        got = db(sos, f, rate)                          # scipy.signal.freqz_sos (reference library)
        mask = expected_db > -250       # beyond that float64 cannot resolve the response
        assert_allclose(got[mask], expected_db[mask], atol=1e-6)
        # analytic: -3.0103 dB (|H|^2 = 1/2) exactly at the cutoff, for every order and type
        assert_allclose(db(sos, fc, rate), 10 * math.log10(0.5), atol=1e-9)


def test_butterworth_sections_count(sos_of):
    # analytic: order n needs ceil(n/2) second-order sections
    for order in range(1, 9):
        assert len(sos_of(f"{{type: highpass, freq: 100, order: {order}}}", 48000)) == math.ceil(order / 2)


# --------------------------------------------------------------------------- notch / allpass / bandpass

@pytest.mark.parametrize("rate", RATES)
@pytest.mark.parametrize("width", ["q: 30", "q: 2", "bw: 0.1", "bw: 1"])
def test_notch_depth_at_f0_and_flat_far_away(sos_of, rate, width):
    for freq in (50.0, 1000.0, 12000.0):
        sos = sos_of(f"{{type: notch, freq: {freq}, {width}}}", rate)
        # W3C Audio EQ Cookbook: notch zeros sit on the unit circle at w0 -> |H(f0)| = 0
        assert db(sos, freq, rate)[0] < -100.0
        # W3C Audio EQ Cookbook: notch is exactly 0 dB at DC and Nyquist
        assert_allclose(db(sos, [0.0, rate / 2], rate), 0.0, atol=1e-9)
    # analytic: prototype (s^2+1)/(s^2+s/Q+1) at Omega = 1/20 and 20 is within 0.01 dB of 0 for Q = 30
    sos = sos_of("{type: notch, freq: 1000, q: 30}", 96000)
    assert_allclose(db(sos, [50.0, 20000.0], 96000), 0.0, atol=0.01)


@pytest.mark.parametrize("rate", RATES)
@pytest.mark.parametrize("width", ["q: 0.5", "q: 0.7071", "q: 12", "bw: 1.5"])
def test_allpass_flat_with_minus_180_degrees_at_f0(sos_of, rate, width):
    freq = 2000.0
    sos = sos_of(f"{{type: allpass, freq: {freq}, {width}}}", rate)
    f = np.linspace(0.0, rate / 2, 5001)
    # W3C Audio EQ Cookbook: APF has |H| = 1 at every frequency
    assert_allclose(np.abs(response(sos, f, rate)), 1.0, rtol=0, atol=1e-12)
    # W3C Audio EQ Cookbook: APF prototype (s^2 - s/Q + 1)/(s^2 + s/Q + 1) is -1 at s = j: -180 degrees at f0
    assert_allclose(response(sos, freq, rate), [-1.0 + 0j], atol=1e-12)
    below = np.linspace(0.0, freq, 4001)
    phase = np.unwrap(np.angle(response(sos, below, rate)))
    assert_allclose(np.degrees(phase[-1] - phase[0]), -180.0, atol=1e-6)
    # analytic: a second-order allpass turns through -360 degrees from DC to Nyquist
    full = np.unwrap(np.angle(response(sos, np.linspace(0.0, rate / 2, 20001), rate)))
    assert_allclose(np.degrees(full[-1] - full[0]), -360.0, atol=1e-6)


@pytest.mark.parametrize("rate", RATES)
@pytest.mark.parametrize("width", ["q: 0.8", "q: 10", "bw: 0.3", "bw: 2"])
def test_bandpass_0db_at_f0(sos_of, rate, width):
    for freq in (100.0, 3000.0, 15000.0):
        sos = sos_of(f"{{type: bandpass, freq: {freq}, {width}}}", rate)
        # W3C Audio EQ Cookbook: BPF "constant 0 dB peak gain": |H(f0)| = 1, H(f0) real
        assert_allclose(response(sos, freq, rate), [1.0 + 0j], atol=1e-12)
        # W3C Audio EQ Cookbook: BPF zeros at DC and Nyquist
        assert np.all(np.abs(response(sos, [0.0, rate / 2], rate)) < 1e-12)
        grid = np.geomspace(1.0, rate / 2, 3000)
        assert np.max(db(sos, grid, rate)) <= 1e-9      # analytic: f0 is the maximum


@pytest.mark.parametrize("q", [0.9, 3.0, 25.0])
def test_bandpass_q_sets_minus_3db_points(sos_of, q):
    # analytic: the cookbook BPF is the prewarped bilinear transform of (s/Q)/(s^2 + s/Q + 1),
    # so digital f maps to Omega = tan(pi f/fs)/tan(pi f0/fs); |H| = 1/sqrt(2) where
    # Omega^2 -+ Omega/Q - 1 = 0, i.e. Omega1 = (-1/Q + sqrt(1/Q^2 + 4))/2 and Omega2 = Omega1 + 1/Q
    rate, f0 = 48000, 1000.0
    sos = sos_of(f"{{type: bandpass, freq: {f0}, q: {q}}}", rate)
    om1 = (-1 / q + math.sqrt(1 / q**2 + 4)) / 2
    om2 = om1 + 1 / q
    k = math.tan(math.pi * f0 / rate)
    f1, f2 = rate / math.pi * math.atan(om1 * k), rate / math.pi * math.atan(om2 * k)
    assert_allclose(np.abs(response(sos, [f1, f2], rate)), 1 / math.sqrt(2), rtol=1e-9)


# --------------------------------------------------------------------------- gain / iir / misc

@pytest.mark.parametrize("gain_db", [-40.0, -1.5, 0.0, 6.0])
def test_gain_section_is_flat(sos_of, gain_db):
    sos = sos_of(f"{{type: gain, gain_db: {gain_db}}}", 48000)
    f = np.linspace(0, 24000, 101)
    assert_allclose(db(sos, f, 48000), gain_db, atol=1e-12)   # analytic: a constant gain


@pytest.mark.parametrize("c,dc_db,nyq_db", [
    (0.5, -3.52, 6.02),     # analytic: 1/(1+c) = 2/3 -> -3.52 dB; 1/(1-c) = 2 -> +6.02 dB
    (0.9, -5.58, 20.00),    # analytic: 1/1.9 -> -5.58 dB; 1/0.1 -> +20.00 dB
    (-0.5, 6.02, -3.52),    # analytic: negative c swaps the ends
    (-0.9, 20.00, -5.58),
])
def test_first_order_feedback_iir_response(sos_of, c, dc_db, nyq_db):
    rate = 44100
    sos = sos_of(f"{{type: iir, b: [1], a: [1, {c}]}}", rate)
    g = db(sos, [0.0, rate / 2], rate)
    # analytic: y[n] = x[n] - c y[n-1] has H(z) = 1/(1 + c z^-1): DC 1/(1+c), Nyquist 1/(1-c)
    assert_allclose(g, [20 * math.log10(1 / (1 + c)), 20 * math.log10(1 / (1 - c))], atol=1e-9)
    assert_allclose(g, [dc_db, nyq_db], atol=0.005)   # analytic, rounded to 2 decimals


@pytest.mark.parametrize("b,a", [
    ([0.3, -0.2, 0.05, 0.01], [2.0, -0.9, 0.3, -0.04]),
    ([0, 1], [1, -0.5]),                      # leading zero: a one-sample delay, kept
    ([0, 0, 0, 0.4, 0.2], [1.25, 0.3]),       # three samples of delay
    ([0, 0, 1], [1]),                         # pure two-sample delay
    ([1, 0, 0, 0, 0, 0, 0, 0, 0.5], [1]),     # order-8 FIR comb
])
def test_iir_is_normalised_by_a0_and_matches_direct_filtering(write_recipe, b, a):
    # scipy.signal.lfilter (reference library) on the raw b/a as typed
    recipe = load(write_recipe(f"format: 1\nchain:\n  - {{type: iir, b: {b}, a: {a}}}\n"))
    chain = design(recipe, 48000)
    x = np.random.default_rng(7).standard_normal(2000)
    assert_allclose(signal.sosfilt(chain.sos, x), signal.lfilter(b, a, x), rtol=1e-10, atol=1e-12)


def test_chain_rows_and_labels_follow_sections(write_recipe):
    recipe = load(write_recipe("""
        format: 1
        chain:
          - {type: highpass, freq: 40, order: 5, label: rumble}
          - {type: peak, freq: 1000, gain_db: 3, q: 1}
          - {type: gain, gain_db: -2}
    """))
    chain = design(recipe, 48000)
    assert chain.sos.shape == (5, 6)       # analytic: ceil(5/2) + 1 + 1 rows
    assert chain.rows == (0, 0, 0, 1, 2)
    assert len(chain.labels) == 5 and "rumble" in chain.labels[0] and "[1/3]" in chain.labels[0]
    assert chain.sos.dtype == np.float64 and chain.sos.flags.c_contiguous


# --------------------------------------------------------------------------- Nyquist

@pytest.mark.parametrize("rate,freq", [(44100, 30000), (44100, 22050), (8000, 4000), (48000, 24000.5)])
def test_frequency_at_or_above_nyquist_is_a_located_error(write_recipe, rate, freq):
    path = write_recipe(f"""
        format: 1
        chain:
          - {{type: peak, freq: 1000, gain_db: 2, q: 1}}
          - {{type: lowpass, freq: {freq}}}
    """)
    recipe = load(path)
    with pytest.raises(RecipeError) as err:
        design(recipe, rate)
    e = err.value
    assert (e.path, e.line, e.col) == (str(path), 4, 27)       # the value of chain[1].freq
    nyq = f"{rate / 2:g}"
    assert e.message == (f"chain[1].freq {freq:g} Hz is at or above Nyquist ({nyq} Hz) for {rate} Hz files")
    assert str(e) == f"{path}:4:27: error: {e.message}"


def test_nyquist_message_as_in_conventions(write_recipe):
    recipe = load(write_recipe("format: 1\nchain:\n  - {type: high_shelf, freq: 30000, gain_db: 2}\n"))
    with pytest.raises(RecipeError, match=r"at or above Nyquist \(22050 Hz\) for 44100 Hz files"):
        design(recipe, 44100)
    design(recipe, 96000)          # the same recipe is fine where 30 kHz is below Nyquist


def test_just_below_nyquist_is_designed(write_recipe):
    recipe = load(write_recipe("format: 1\nchain:\n  - {type: lowpass, freq: 22049, order: 3}\n"))
    assert np.all(np.isfinite(design(recipe, 44100).sos))


@pytest.mark.parametrize("rate", [0, -48000])
def test_design_rejects_non_positive_rate(write_recipe, rate):
    recipe = load(write_recipe("format: 1\nchain:\n  - {type: gain, gain_db: 1}\n"))
    with pytest.raises(ValueError, match="sample rate must be positive"):
        design(recipe, rate)
