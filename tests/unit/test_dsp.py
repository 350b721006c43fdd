"""chainrun.dsp against its reference library, scipy: the numpy Butterworth rows, the guard's response
and bounded minimiser are scipy's to the last bit, and the sosfilt adapter gives scipy.signal.sosfilt's
bytes whether it runs the compiled kernel or falls back to the public function.
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize, signal

from chainrun import designers
from chainrun.dsp import butter_sos, freqz_sos, minimize_bounded, point_response, sosfilt
from chainrun.dsp import kernel as adapter

RATES = (8000, 22050, 44100, 48000, 88200, 96000, 192000)


def _freqs(rate: int) -> list[float]:
    nyq = rate / 2
    rng = np.random.default_rng(rate)
    return sorted(set(np.geomspace(1e-3, nyq * 0.9999, 40).tolist() + rng.uniform(1e-3, nyq, 20).tolist()
                      + [20.0, 45.0, 70.0, 1000.0, rate / 4, nyq - 1e-6]))


@pytest.mark.parametrize("rate", RATES)
@pytest.mark.parametrize("btype", ["lowpass", "highpass"])
def test_butterworth_rows_are_scipys_bit_for_bit(rate, btype):
    # scipy.signal.butter (reference library): same rows, same pairing and order, every bit
    for order in range(1, 9):
        for freq in _freqs(rate):
            want = signal.butter(order, freq, btype=btype, fs=rate, output="sos")
            got = butter_sos(order, freq, rate, btype)
            assert got.shape == want.shape, (order, freq)
            assert got.tobytes() == want.tobytes(), (order, freq, np.max(np.abs(got - want)))


def test_the_pass_designers_give_scipys_butterworth_rows():
    # scipy.signal.butter (reference library), through the designers a recipe reaches
    for kind, design in (("highpass", designers.highpass), ("lowpass", designers.lowpass)):
        for order in (1, 4, 7):
            want = signal.butter(order, 45.0, btype=kind, fs=48000, output="sos")
            assert design({"freq": 45.0, "order": order}, 48000).tobytes() == want.tobytes()


def test_an_unknown_band_type_is_refused():
    with pytest.raises(ValueError, match="btype"):
        butter_sos(2, 100.0, 48000, "bandpass")


def _chains():
    rng = np.random.default_rng(3)
    yield signal.butter(8, 30.0, btype="highpass", fs=48000, output="sos")
    yield np.vstack([designers.peak({"freq": 3000.0, "gain_db": 6.0, "q": 2.0}, 48000),
                     designers.notch({"freq": 50.0, "q": 30.0}, 48000),
                     designers.low_shelf({"freq": 120.0, "gain_db": -3.0, "slope": 1.0, "order": 2}, 48000)])
    for _ in range(5):
        r, th = rng.uniform(0.2, 0.999, 3), rng.uniform(0.0, np.pi, 3)
        yield np.column_stack([rng.standard_normal((3, 3)), np.ones(3), -2 * r * np.cos(th), r * r])


def test_the_response_is_scipys_freqz_sos_bit_for_bit():
    # scipy.signal.freqz_sos (reference library), at the guard's kind of grid and at single points
    grid = np.unique(np.concatenate([[0.0], np.geomspace(1.0, 24000.0, 4096), [50.0, 3000.0, 24000.0]]))
    for sos in _chains():
        _, want = signal.freqz_sos(sos, worN=grid, fs=48000)
        assert freqz_sos(sos, grid, 48000).tobytes() == want.tobytes()
        _, one = signal.freqz_sos(sos, worN=[1234.5], fs=48000)
        assert freqz_sos(sos, [1234.5], 48000).tobytes() == one.tobytes()


def test_the_response_at_one_point_is_scipys_bit_for_bit():
    # scipy.signal.freqz_sos (reference library) at single frequencies, as the guard's minimiser asks
    rng = np.random.default_rng(8)
    for sos in _chains():
        at = point_response(sos)
        for f in np.concatenate([rng.uniform(0.0, 24000.0, 200), np.geomspace(1e-3, 24000.0, 50)]):
            _, want = signal.freqz_sos(sos, worN=[f], fs=48000)
            assert np.complex128(at(f, 48000)).tobytes() == want[0].tobytes(), f


def test_a_pole_on_the_unit_circle_gives_what_scipy_gives():
    # scipy.signal.freqz_sos (reference library): inf or nan at the pole, the same values elsewhere
    sos = np.array([[1.0, 0.0, 0.0, 1.0, -1.0, 0.0]])          # a pole at z = 1: infinite gain at DC
    f = np.array([0.0, 10.0, 1000.0])
    with np.errstate(all="ignore"):
        _, want = signal.freqz_sos(sos, worN=f, fs=48000)
        got = freqz_sos(sos, f, 48000)
    np.testing.assert_array_equal(got, want)


def test_the_bounded_minimiser_steps_as_scipys():
    # scipy.optimize.minimize_scalar(method="bounded") (reference library): the same x and value, bit for bit
    sos = signal.butter(4, 1000.0, btype="lowpass", fs=48000, output="sos")
    peakq = designers.peak({"freq": 3000.0, "gain_db": 9.0, "q": 4.0}, 48000)

    def db(s, f):
        _, h = signal.freqz_sos(s, worN=[f], fs=48000)
        return 20 * np.log10(np.abs(h[0]))

    cases = [(lambda x: (x - 0.3) ** 2, 0.0, 1.0, 1e-5), (lambda x: np.cos(x), 2.0, 4.5, 1e-9),
             (lambda x: -db(peakq, x), 2900.0, 3100.0, 2900.0 * 1e-7), (lambda x: db(sos, x), 900.0, 1100.0, 1e-4),
             (lambda x: abs(x - 1.0), 1.0, 1.0, 1e-5), (lambda x: x ** 3, -1.0, 2.0, 1e-7)]
    for func, lo, hi, xatol in cases:
        want = optimize.minimize_scalar(func, bounds=(lo, hi), method="bounded", options={"xatol": xatol})
        x, fun = minimize_bounded(func, lo, hi, xatol=xatol)
        assert (float(x), float(fun)) == (float(want.x), float(want.fun)), (lo, hi)


def test_the_bounded_minimiser_refuses_bad_bounds():
    with pytest.raises(ValueError, match="lower bound"):
        minimize_bounded(abs, 2.0, 1.0)
    with pytest.raises(ValueError, match="finite"):
        minimize_bounded(abs, 0.0, np.inf)


# --- the sosfilt adapter -------------------------------------------------------------------------------

def _blocks_through(filter_fn, sos, x, block):
    """Filter ``x`` (..., N) block by block with the state carried; the output and final state."""
    zi = np.zeros((len(sos),) + x.shape[:-1] + (2,))
    out = []
    for start in range(0, x.shape[-1], block):
        y, zi = filter_fn(sos, x[..., start:start + block], zi)
        out.append(y)
    return np.concatenate(out, axis=-1), zi


def _public(sos, x, zi):
    return signal.sosfilt(sos, x, axis=-1, zi=zi)


def _cases():
    rng = np.random.default_rng(11)
    chains = [signal.butter(8, 40.0, btype="highpass", fs=48000, output="sos"),
              np.vstack([designers.peak({"freq": 250.0, "gain_db": -3.0, "q": 1.2}, 48000),
                         designers.notch({"freq": 50.0, "q": 20.0}, 48000)]),
              designers.gain({"gain_db": -1.5}, 48000)]
    signals = [rng.standard_normal(5000), rng.standard_normal((2, 5000)) * 0.3,
               np.asfortranarray(rng.standard_normal((3, 5000))), rng.standard_normal((2, 1, 5000))]
    for sos in chains:
        for x in signals:
            yield sos, x


def test_the_kernel_gives_scipys_sosfilt_bytes():
    # scipy.signal.sosfilt (reference library): the adapter's compiled-kernel path, byte for byte,
    # with the state carried over odd block sizes
    if not adapter.kernel_loaded():
        pytest.skip("scipy's compiled sosfilt kernel cannot be loaded here; the fallback is tested below")
    for sos, x in _cases():
        for block in (4096, 999, x.shape[-1]):
            y1, z1 = _blocks_through(sosfilt, sos, x, block)
            y2, z2 = _blocks_through(_public, sos, x, block)
            assert y1.tobytes() == y2.tobytes() and z1.tobytes() == z2.tobytes() and z1.shape == z2.shape


def test_the_adapter_modifies_none_of_its_inputs():
    rng = np.random.default_rng(2)
    sos = signal.butter(4, 100.0, fs=48000, output="sos")
    for x, zi in ((rng.standard_normal(300), rng.standard_normal((2, 2))),            # zi already (1 signal) contiguous
                  (rng.standard_normal((2, 300)), rng.standard_normal((2, 2, 2)))):
        copies = [a.copy() for a in (sos, x, zi)]
        sosfilt(sos, x, zi)
        for before, after in zip(copies, (sos, x, zi)):
            assert before.tobytes() == after.tobytes()


def test_a_bad_state_shape_or_a_row_without_a0_1_is_refused():
    sos = signal.butter(2, 100.0, fs=48000, output="sos")
    with pytest.raises(ValueError, match="zi"):
        sosfilt(sos, np.zeros((2, 10)), np.zeros((2, 2, 2)))          # one row, not two
    if adapter.kernel_loaded():
        with pytest.raises(ValueError, match="sos"):
            sosfilt(sos * 2.0, np.zeros((2, 10)), np.zeros((1, 2, 2)))


@pytest.fixture
def fresh_adapter(monkeypatch):
    """The adapter as if nothing were loaded yet; restored afterwards."""
    monkeypatch.setattr(adapter, "_kernel", None)
    return adapter


@pytest.mark.parametrize("fault", [ImportError("no compiled _sosfilt module"), AttributeError("_sosfilt"),
                                   OSError("failed to map segment")])
def test_a_kernel_that_cannot_be_loaded_falls_back_to_scipys_function(fresh_adapter, monkeypatch, fault):
    # scipy.signal.sosfilt (reference library): the fallback's bytes are the public function's
    def fail():
        raise fault
    monkeypatch.setattr(fresh_adapter, "_load_kernel", fail)
    assert not fresh_adapter.kernel_loaded()
    for sos, x in _cases():
        y1, z1 = _blocks_through(fresh_adapter.sosfilt, sos, x, 1024)
        y2, z2 = _blocks_through(_public, sos, x, 1024)
        assert y1.tobytes() == y2.tobytes() and z1.tobytes() == z2.tobytes()


def test_a_kernel_that_misbehaves_on_the_probe_is_not_used(fresh_adapter, monkeypatch):
    class Stub:                       # a module whose _sosfilt leaves its buffers alone: a changed signature
        @staticmethod
        def _sosfilt(sos, x, zi):
            return None
    monkeypatch.setitem(__import__("sys").modules, adapter._NAME, Stub)
    assert not fresh_adapter.kernel_loaded()
    sos = signal.butter(2, 100.0, fs=48000, output="sos")
    x = np.random.default_rng(4).standard_normal((2, 100))
    y, _ = fresh_adapter.sosfilt(sos, x, np.zeros((1, 2, 2)))
    assert y.tobytes() == signal.sosfilt(sos, x, axis=-1).tobytes()        # scipy.signal.sosfilt (reference library)


def test_other_dtypes_go_to_scipys_function():
    # scipy.signal.sosfilt (reference library): float32 is filtered in float32, as scipy does
    sos = signal.butter(2, 100.0, fs=48000, output="sos").astype(np.float32)
    x = np.random.default_rng(5).standard_normal((2, 100)).astype(np.float32)
    zi = np.zeros((1, 2, 2), dtype=np.float32)
    y, z = sosfilt(sos, x, zi)
    want_y, want_z = signal.sosfilt(sos, x, axis=-1, zi=zi)
    assert y.dtype == np.float32 and y.tobytes() == want_y.tobytes() and z.tobytes() == want_z.tobytes()


@pytest.mark.parametrize("seed", range(5))
def test_unique_sorted_is_numpys_unique_on_frequency_grids(seed):
    # numpy.unique (reference library): the same values in the same order, duplicates and an extra
    # point that falls on the grid included
    from chainrun.dsp import unique_sorted
    rng = np.random.default_rng(seed)
    grid = np.concatenate([[0.0], np.geomspace(1.0, 24000.0, 4096), rng.uniform(1, 24000, 7),
                           np.geomspace(1.0, 24000.0, 4096)[rng.integers(0, 4096, 5)], [-0.0, 0.0]])
    rng.shuffle(grid)
    got, want = unique_sorted(grid), np.unique(grid)
    assert got.tobytes() == want.tobytes()
    assert unique_sorted([]).size == 0 and unique_sorted([3.0]).tolist() == [3.0]
