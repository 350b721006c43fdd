"""Design: a :class:`~chainrun.recipe.Recipe` at one sample rate -> a :class:`Chain`.

Each section type has one designer function returning second-order sections
(rows ``[b0, b1, b2, 1, a1, a2]``) and one row in ``_DESIGNERS``. The transfer
function of a row is, in the convention of scipy.signal and the Audio EQ
Cookbook::

    H(z) = (b0 + b1 z^-1 + b2 z^-2) / (1 + a1 z^-1 + a2 z^-2)

so a first-order row is ``y[n] = b0 x[n] + b1 x[n-1] - a1 y[n-1]``.

All functions here are pure: numbers in, arrays out, no I/O.

References
----------
.. [1] R. Bristow-Johnson, "Audio EQ Cookbook", W3C Working Group Note, 2021
   (https://www.w3.org/TR/audio-eq-cookbook/).
.. [2] scipy.signal.butter (Butterworth design by the bilinear transform with
   prewarping) and scipy.signal.tf2sos.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from typing import Any, Callable, Mapping

import numpy as np

from .recipe import Recipe, RecipeError, Section

__all__ = ["Chain", "design", "design_section"]


@dataclass(frozen=True, eq=False)
class Chain:
    """A designed chain at one sample rate.

    Attributes
    ----------
    rate : int
        Sample rate in Hz.
    sos : ndarray, shape (S, 6), float64
        Second-order sections, ``a0 == 1`` in every row. Treat as read-only
        (scipy.signal.sosfilt refuses read-only buffers, so it is not locked).
    labels : tuple of str
        One label per row, naming the recipe section it came from.
    rows : tuple of int
        For each row, the index of its section in ``Recipe.sections``.
    """

    rate: int
    sos: np.ndarray
    labels: tuple[str, ...]
    rows: tuple[int, ...]

    def to_dict(self) -> dict:
        return {"rate": self.rate, "labels": list(self.labels),
                "sos": [[float(v) for v in row] for row in self.sos]}


def _angular(freq: float, rate: float) -> tuple[float, float, float]:
    w0 = 2.0 * math.pi * freq / rate
    return w0, math.cos(w0), math.sin(w0)


def _alpha(p: Mapping[str, Any], w0: float, sin_w0: float) -> float:
    """Cookbook alpha from q or from bw (octaves, with the bilinear correction)."""
    if "bw" in p:
        return sin_w0 * math.sinh(math.log(2.0) / 2.0 * p["bw"] * w0 / sin_w0)
    return sin_w0 / (2.0 * p["q"])


def _row(b: tuple[float, float, float], a: tuple[float, float, float]) -> np.ndarray:
    a0 = a[0]
    return np.array([[b[0] / a0, b[1] / a0, b[2] / a0, 1.0, a[1] / a0, a[2] / a0]])


def _pass(p: Mapping[str, Any], rate: float, btype: str) -> np.ndarray:
    """Butterworth of order 1..8 (scipy.signal.butter), or the cookbook biquad when q is given."""
    if "q" not in p:
        from scipy import signal          # imported on first use: see chainrun/__init__.py
        return signal.butter(p["order"], p["freq"], btype=btype, fs=rate, output="sos")
    w0, c, s = _angular(p["freq"], rate)
    alpha = s / (2.0 * p["q"])
    if btype == "lowpass":   # Cookbook LPF
        b = ((1 - c) / 2, 1 - c, (1 - c) / 2)
    else:                    # Cookbook HPF
        b = ((1 + c) / 2, -(1 + c), (1 + c) / 2)
    return _row(b, (1 + alpha, -2 * c, 1 - alpha))


def _highpass(p, rate):
    return _pass(p, rate, "highpass")


def _lowpass(p, rate):
    return _pass(p, rate, "lowpass")


def _shelf_first_order(p: Mapping[str, Any], rate: float, high: bool) -> np.ndarray:
    """First-order shelf by the bilinear transform, prewarped at freq.

    Analog prototype (low shelf) H(s) = (s/w0 + sqrt(G)) / (s/w0 + 1/sqrt(G)):
    gain G at DC, 1 at infinity and sqrt(G) (half the dB gain) at w0. The high
    shelf is its mirror, G * (s/w0 + 1/sqrt(G)) / (s/w0 + sqrt(G)). Prewarping
    with K = tan(pi f0 / fs) keeps the half-gain point exactly at freq.
    """
    gain = 10.0 ** (p["gain_db"] / 20.0)
    g = math.sqrt(gain)
    k = math.tan(math.pi * p["freq"] / rate)
    if high:
        b = (gain * (1 + k / g), gain * (k / g - 1), 0.0)
        a = (1 + k * g, k * g - 1, 0.0)
    else:
        b = (1 + k * g, k * g - 1, 0.0)
        a = (1 + k / g, k / g - 1, 0.0)
    return _row(b, a)


def _shelf(p: Mapping[str, Any], rate: float, high: bool) -> np.ndarray:
    if p["order"] == 1:
        return _shelf_first_order(p, rate, high)
    A = 10.0 ** (p["gain_db"] / 40.0)
    w0, c, s = _angular(p["freq"], rate)
    if "q" in p:
        alpha = s / (2.0 * p["q"])
    else:  # Cookbook shelf slope S
        alpha = s / 2.0 * math.sqrt(max((A + 1 / A) * (1 / p["slope"] - 1) + 2, 0.0))
    r = 2.0 * math.sqrt(A) * alpha
    if high:  # Cookbook highShelf
        b = (A * ((A + 1) + (A - 1) * c + r), -2 * A * ((A - 1) + (A + 1) * c), A * ((A + 1) + (A - 1) * c - r))
        a = ((A + 1) - (A - 1) * c + r, 2 * ((A - 1) - (A + 1) * c), (A + 1) - (A - 1) * c - r)
    else:     # Cookbook lowShelf
        b = (A * ((A + 1) - (A - 1) * c + r), 2 * A * ((A - 1) - (A + 1) * c), A * ((A + 1) - (A - 1) * c - r))
        a = ((A + 1) + (A - 1) * c + r, -2 * ((A - 1) + (A + 1) * c), (A + 1) + (A - 1) * c - r)
    return _row(b, a)


def _low_shelf(p, rate):
    return _shelf(p, rate, high=False)


def _high_shelf(p, rate):
    return _shelf(p, rate, high=True)


def _peak(p, rate):
    """Cookbook peakingEQ: gain_db at freq, 0 dB far from it."""
    A = 10.0 ** (p["gain_db"] / 40.0)
    w0, c, s = _angular(p["freq"], rate)
    alpha = _alpha(p, w0, s)
    return _row((1 + alpha * A, -2 * c, 1 - alpha * A), (1 + alpha / A, -2 * c, 1 - alpha / A))


def _notch(p, rate):
    """Cookbook notch: a zero pair on the unit circle at freq."""
    w0, c, s = _angular(p["freq"], rate)
    alpha = _alpha(p, w0, s)
    return _row((1.0, -2 * c, 1.0), (1 + alpha, -2 * c, 1 - alpha))


def _bandpass(p, rate):
    """Cookbook BPF with constant 0 dB peak gain."""
    w0, c, s = _angular(p["freq"], rate)
    alpha = _alpha(p, w0, s)
    return _row((alpha, 0.0, -alpha), (1 + alpha, -2 * c, 1 - alpha))


def _allpass(p, rate):
    """Cookbook APF: unit magnitude, phase turning through -180 degrees at freq."""
    w0, c, s = _angular(p["freq"], rate)
    alpha = _alpha(p, w0, s)
    return _row((1 - alpha, -2 * c, 1 + alpha), (1 + alpha, -2 * c, 1 - alpha))


def _gain(p, rate):
    return np.array([[10.0 ** (p["gain_db"] / 20.0), 0.0, 0.0, 1.0, 0.0, 0.0]])


def _iir(p, rate):
    """Raw coefficients, normalised by a[0] and factored with scipy.signal.tf2sos.

    Note: leading zeros of ``b`` are a pure delay (``b: [0, 1]`` is z^-1). tf2sos
    would drop them, with a BadCoefficients warning, and so shift the output
    earlier; they are kept here as delay rows ``[0, 0, 1, 1, 0, 0]`` (z^-2) and
    ``[0, 1, 0, 1, 0, 0]`` (z^-1) after the factored sections.
    """
    a0 = p["a"][0]
    b = np.asarray(p["b"], dtype=float) / a0
    a = np.asarray(p["a"], dtype=float) / a0
    from scipy import signal              # imported on first use: see chainrun/__init__.py
    k = 0            # scipy.signal.normalize treats |b[i]| <= 1e-14 as a leading zero
    while k < len(b) - 1 and abs(b[k]) <= 1e-14:
        k += 1
    with warnings.catch_warnings():   # only an all-tiny numerator is left to warn about; it is kept as is
        warnings.simplefilter("ignore", signal.BadCoefficients)
        sos = signal.tf2sos(b[k:], a)
    delay = [[0.0, 0.0, 1.0, 1.0, 0.0, 0.0]] * (k // 2) + [[0.0, 1.0, 0.0, 1.0, 0.0, 0.0]] * (k % 2)
    return np.vstack([sos, np.array(delay)]) if delay else sos


# Section type -> designer(params, rate) -> SOS rows. Adding a type: one function, one row
# here, and its keys in recipe._SECTION_KEYS / recipe._SECTION_RULES.
_DESIGNERS: dict[str, Callable[[Mapping[str, Any], float], np.ndarray]] = {
    "highpass": _highpass,        # Butterworth order 1..8, or cookbook HPF with q
    "lowpass": _lowpass,          # Butterworth order 1..8, or cookbook LPF with q
    "low_shelf": _low_shelf,      # cookbook lowShelf (order 2) / bilinear first order
    "high_shelf": _high_shelf,    # cookbook highShelf (order 2) / bilinear first order
    "peak": _peak,                # cookbook peakingEQ
    "notch": _notch,              # cookbook notch
    "bandpass": _bandpass,        # cookbook BPF, constant 0 dB peak gain
    "allpass": _allpass,          # cookbook APF
    "gain": _gain,                # flat gain
    "iir": _iir,                  # raw b/a, factored into sections
}


def design_section(section: Section, rate: float) -> np.ndarray:
    """Second-order sections for one recipe section at ``rate``.

    Raises
    ------
    RecipeError
        If the section's frequency is at or above Nyquist for ``rate``.
    """
    freq = section.params.get("freq")
    if freq is not None and freq >= rate / 2.0:
        raise RecipeError.at(section.locate("freq"),
                             f"chain[{section.index}].freq {freq:g} Hz is at or above Nyquist "
                             f"({rate / 2:g} Hz) for {rate:g} Hz files")
    try:
        with np.errstate(over="raise", invalid="raise", divide="raise"):
            sos = np.asarray(_DESIGNERS[section.kind](section.params, float(rate)), dtype=np.float64)
    except (OverflowError, FloatingPointError, ZeroDivisionError, ValueError) as exc:
        key = "bw" if "bw" in section.params else ("freq" if freq is not None else None)
        raise RecipeError.at(section.locate(key),
                             f"chain[{section.index}] {section.kind} cannot be designed at {rate:g} Hz "
                             f"({exc}); move freq further below Nyquist ({rate / 2:g} Hz) or narrow the band"
                             ) from None
    if not np.all(np.isfinite(sos)):
        raise RecipeError.at(section.where, f"chain[{section.index}] {section.kind} has non-finite coefficients "
                                            f"at {rate:g} Hz; its values are too extreme to design")
    return np.atleast_2d(sos)


def design(recipe: Recipe, rate: int) -> Chain:
    """Design every section of ``recipe`` at ``rate`` Hz.

    Parameters
    ----------
    recipe
        A loaded recipe.
    rate
        Sample rate in Hz, positive.

    Returns
    -------
    Chain
        ``sos`` of shape (S, 6) with ``a0 == 1`` and one label per row.

    Raises
    ------
    ValueError
        If ``rate`` is not positive.
    RecipeError
        If a section's frequency is at or above Nyquist at ``rate`` (located at that
        section's ``freq``).
    """
    if not rate > 0:
        raise ValueError(f"sample rate must be positive; got {rate}")
    blocks, labels, rows = [], [], []
    for i, section in enumerate(recipe.sections):
        sos = design_section(section, rate)
        blocks.append(sos)
        n = len(sos)
        labels.extend(section.title if n == 1 else f"{section.title} [{k + 1}/{n}]" for k in range(n))
        rows.extend([i] * n)
    sos = np.ascontiguousarray(np.vstack(blocks), dtype=np.float64)
    return Chain(int(rate), sos, tuple(labels), tuple(rows))
