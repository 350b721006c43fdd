"""What the meters take from chainrun.dsp instead of scipy.signal, against scipy itself (the reference
library): the true-peak interpolator's prototype is scipy.signal.firwin's Kaiser-window low-pass to the
last bit; the K-weighting filter runs scipy's compiled lfilter loop with scipy.signal.lfilter's bytes,
or falls back to the public function; sos2tf is scipy.signal.sos2tf's polynomials.
"""
from __future__ import annotations

import sys

import numpy as np
import pytest
from scipy import signal

from chainrun.dsp import kernel as adapter
from chainrun.dsp.fir import kaiser_lowpass
from chainrun.meters.weighting import k_weighting_sos


@pytest.mark.parametrize("factor", range(2, 17))
@pytest.mark.parametrize("half", [12, 19, 24])
def test_the_kaiser_lowpass_is_firwins_bit_for_bit(factor, half):
    # scipy.signal.firwin (reference library), as the true-peak meter designs its interpolator:
    # 2*half*factor + 1 taps, cutoff at the input's Nyquist frequency, Kaiser beta 5.75
    taps = 2 * half * factor + 1
    want = signal.firwin(taps, 1.0 / factor, window=("kaiser", 5.75))
    assert kaiser_lowpass(taps, 1.0 / factor, 5.75).tobytes() == want.tobytes()


@pytest.mark.parametrize("beta", [0.0, 3.0, 8.6, 14.0])
def test_the_kaiser_lowpass_is_firwins_for_other_windows_and_cutoffs(beta):
    # scipy.signal.firwin (reference library): both branches of the Bessel function (argument <= 8, > 8)
    for taps, cutoff in ((31, 0.3), (101, 0.05), (7, 0.9), (1, 0.5)):
        want = signal.firwin(taps, cutoff, window=("kaiser", beta))
        assert kaiser_lowpass(taps, cutoff, beta).tobytes() == want.tobytes()


def test_a_cutoff_outside_zero_to_nyquist_is_refused():
    for cutoff in (0.0, 1.0, -0.2):
        with pytest.raises(ValueError, match="cutoff"):
            kaiser_lowpass(31, cutoff, 5.75)


@pytest.mark.parametrize("rate", [8000, 44100, 48000, 96000, 192000])
def test_sos2tf_is_scipys(rate):
    # scipy.signal.sos2tf (reference library) on the K-weighting cascade the loudness meter folds
    sos = k_weighting_sos(rate)
    b, a = adapter.sos2tf(sos)
    want_b, want_a = signal.sos2tf(sos)
    assert b.tobytes() == want_b.tobytes() and a.tobytes() == want_a.tobytes()


def _through(fn, b, a, x, block):
    zi = np.zeros((x.shape[0], len(a) - 1))
    out = []
    for start in range(0, x.shape[-1], block):
        y, zi = fn(b, a, x[:, start:start + block], zi)
        out.append(y)
    return np.concatenate(out, axis=-1), zi


def _public(b, a, x, zi):
    return signal.lfilter(b, a, x, axis=-1, zi=zi)


def _cases():
    rng = np.random.default_rng(17)
    for rate in (44100, 48000, 192000):
        b, a = signal.sos2tf(k_weighting_sos(rate))
        for x in (0.3 * rng.standard_normal((2, 7000)), 1e-310 * rng.standard_normal((6, 3000)),
                  np.asfortranarray(rng.standard_normal((3, 5000)))):
            yield b, a, x


@pytest.mark.parametrize("optional_loop", [True, False])
def test_the_compiled_lfilter_gives_scipys_lfilter_bytes(monkeypatch, optional_loop):
    # scipy.signal.lfilter (reference library): outputs and carried states, byte for byte, over odd blocks,
    # with chainrun's optional compiled loop (dsp/compiled.py) and with scipy's own loaded directly
    if not optional_loop:
        monkeypatch.setattr(adapter.compiled, "linear", None)
    adapter._get_linear()                       # scipy's own loop, loaded whatever serves first
    if not adapter._linear:
        pytest.skip("scipy's compiled lfilter loop cannot be loaded here; the fallback is tested below")
    for b, a, x in _cases():
        for block in (4096, 997, x.shape[-1]):
            y1, z1 = _through(adapter.lfilter, b, a, x, block)
            y2, z2 = _through(_public, b, a, x, block)
            assert y1.tobytes() == y2.tobytes() and z1.tobytes() == z2.tobytes()


@pytest.mark.parametrize("fault", [ImportError("no compiled _sigtools module"), OSError("failed to map segment"),
                                   ValueError("did not give the expected result")])
def test_a_linear_filter_that_cannot_be_loaded_falls_back_to_scipys_function(monkeypatch, fault):
    def fail():
        raise fault
    monkeypatch.setattr(adapter.compiled, "linear", None)       # as when the optional loop is not built
    monkeypatch.setattr(adapter, "_linear", None)
    monkeypatch.setattr(adapter, "_load_linear", fail)
    for b, a, x in _cases():
        y1, z1 = _through(adapter.lfilter, b, a, x, 1024)
        assert adapter._linear is False
        y2, z2 = _through(_public, b, a, x, 1024)
        assert y1.tobytes() == y2.tobytes() and z1.tobytes() == z2.tobytes()


def test_a_linear_filter_that_misbehaves_on_the_probe_is_not_used(monkeypatch):
    class Stub:                       # a module whose loop returns zeros: another signature or layout
        @staticmethod
        def _linear_filter(b, a, x, axis, zi):
            return np.zeros_like(x), np.zeros_like(zi)
    monkeypatch.setattr(adapter, "_linear", None)
    monkeypatch.setattr(adapter.compiled, "linear", None)
    monkeypatch.setitem(sys.modules, "scipy.signal._sigtools", Stub)
    b, a, x = next(_cases())
    y, _ = adapter.lfilter(b, a, x, np.zeros((2, len(a) - 1)))
    assert adapter._linear is False
    assert y.tobytes() == _public(b, a, x, np.zeros((2, len(a) - 1)))[0].tobytes()
