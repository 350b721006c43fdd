"""Designer functions: one section's parameters at one sample rate -> second-order sections.

Every function here is pure: a mapping of validated parameters (as the recipe loader
leaves them, defaults filled in) and a rate in Hz go in; an array of rows
``[b0, b1, b2, 1, a1, a2]`` comes out. No I/O, no printing, no recipe objects. The
transfer function of a row is, in the convention of scipy.signal and the Audio EQ
Cookbook::

    H(z) = (b0 + b1 z^-1 + b2 z^-2) / (1 + a1 z^-1 + a2 z^-2)

so a first-order row is ``y[n] = b0 x[n] + b1 x[n-1] - a1 y[n-1]``. Each designer
has one row in the catalogue (:mod:`chainrun.section_types`).

References
----------
.. [1] R. Bristow-Johnson, "Audio EQ Cookbook", W3C Working Group Note, 2021
   (https://www.w3.org/TR/audio-eq-cookbook/).
.. [2] scipy.signal.butter (Butterworth design by the bilinear transform with
   prewarping; ported to numpy in :mod:`chainrun.dsp.butter`, bit for bit) and
   scipy.signal.tf2sos.
"""
from __future__ import annotations

import math
import warnings
from typing import Any, Mapping

import numpy as np

from .dsp import butter_sos

__all__ = ["highpass", "lowpass", "low_shelf", "high_shelf", "peak", "notch", "bandpass", "allpass",
           "gain", "iir"]

Params = Mapping[str, Any]


def _angular(freq: float, rate: float) -> tuple[float, float, float]:
    w0 = 2.0 * math.pi * freq / rate
    return w0, math.cos(w0), math.sin(w0)


def _alpha(p: Params, w0: float, sin_w0: float) -> float:
    """Cookbook alpha from q or from bw (octaves, with the bilinear correction)."""
    if "bw" in p:
        return sin_w0 * math.sinh(math.log(2.0) / 2.0 * p["bw"] * w0 / sin_w0)
    return sin_w0 / (2.0 * p["q"])


def _row(b: tuple[float, float, float], a: tuple[float, float, float]) -> np.ndarray:
    a0 = a[0]
    return np.array([[b[0] / a0, b[1] / a0, b[2] / a0, 1.0, a[1] / a0, a[2] / a0]])


def _pass(p: Params, rate: float, btype: str) -> np.ndarray:
    if "q" not in p:     # scipy.signal.butter's rows, to the last bit, without importing scipy.signal
        return butter_sos(p["order"], p["freq"], rate, btype)
    w0, c, s = _angular(p["freq"], rate)
    alpha = s / (2.0 * p["q"])
    if btype == "lowpass":   # Cookbook LPF
        b = ((1 - c) / 2, 1 - c, (1 - c) / 2)
    else:                    # Cookbook HPF
        b = ((1 + c) / 2, -(1 + c), (1 + c) / 2)
    return _row(b, (1 + alpha, -2 * c, 1 - alpha))


def highpass(p: Params, rate: float) -> np.ndarray:
    """High-pass: Butterworth of ``order`` 1..8, or the cookbook biquad when ``q`` is given.

    Parameters
    ----------
    p
        ``freq`` (Hz, below Nyquist), ``order``, and optionally ``q`` (order 2 only).
    rate
        Sample rate in Hz.

    Returns
    -------
    ndarray, shape (ceil(order / 2), 6)

    References
    ----------
    .. [1] scipy.signal.butter (``btype="highpass"``, ``output="sos"``).
    .. [2] W3C Audio EQ Cookbook, Working Group Note 2021, HPF.
    """
    return _pass(p, rate, "highpass")


def lowpass(p: Params, rate: float) -> np.ndarray:
    """Low-pass: Butterworth of ``order`` 1..8, or the cookbook biquad when ``q`` is given.

    Parameters and returns as :func:`highpass`.

    References
    ----------
    .. [1] scipy.signal.butter (``btype="lowpass"``, ``output="sos"``).
    .. [2] W3C Audio EQ Cookbook, Working Group Note 2021, LPF.
    """
    return _pass(p, rate, "lowpass")


def _shelf_first_order(p: Params, rate: float, high: bool) -> np.ndarray:
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


def _shelf(p: Params, rate: float, high: bool) -> np.ndarray:
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


def low_shelf(p: Params, rate: float) -> np.ndarray:
    """Low shelf: ``gain_db`` below ``freq``, 0 dB far above it; half the dB gain at ``freq``.

    Order 2 (the default) is the cookbook lowShelf with ``slope`` S (default 1) or ``q``;
    order 1 is the bilinear transform of the analog first-order shelf
    H(s) = (s/w0 + sqrt(G)) / (s/w0 + 1/sqrt(G)), prewarped at ``freq``.

    Parameters
    ----------
    p
        ``freq`` (Hz), ``gain_db``, ``order`` (1 or 2), ``slope`` or ``q`` (order 2).
    rate
        Sample rate in Hz.

    Returns
    -------
    ndarray, shape (1, 6)

    References
    ----------
    .. [1] W3C Audio EQ Cookbook, Working Group Note 2021, lowShelf.
    .. [2] Bilinear transform with prewarping, K = tan(pi f0 / fs): analytic, as in
       scipy.signal.bilinear (reference library).
    """
    return _shelf(p, rate, high=False)


def high_shelf(p: Params, rate: float) -> np.ndarray:
    """High shelf: the mirror of :func:`low_shelf` (``gain_db`` above ``freq``).

    References
    ----------
    .. [1] W3C Audio EQ Cookbook, Working Group Note 2021, highShelf.
    .. [2] Bilinear transform with prewarping, as for :func:`low_shelf`.
    """
    return _shelf(p, rate, high=True)


def peak(p: Params, rate: float) -> np.ndarray:
    """Peaking EQ: ``gain_db`` at ``freq``, 0 dB far from it; width from ``q`` or ``bw`` (octaves).

    References
    ----------
    .. [1] W3C Audio EQ Cookbook, Working Group Note 2021, peakingEQ.
    """
    A = 10.0 ** (p["gain_db"] / 40.0)
    w0, c, s = _angular(p["freq"], rate)
    alpha = _alpha(p, w0, s)
    return _row((1 + alpha * A, -2 * c, 1 - alpha * A), (1 + alpha / A, -2 * c, 1 - alpha / A))


def notch(p: Params, rate: float) -> np.ndarray:
    """Notch: a zero pair on the unit circle at ``freq``; width from ``q`` or ``bw``.

    References
    ----------
    .. [1] W3C Audio EQ Cookbook, Working Group Note 2021, notch.
    """
    w0, c, s = _angular(p["freq"], rate)
    alpha = _alpha(p, w0, s)
    return _row((1.0, -2 * c, 1.0), (1 + alpha, -2 * c, 1 - alpha))


def bandpass(p: Params, rate: float) -> np.ndarray:
    """Band-pass with constant 0 dB peak gain at ``freq``; width from ``q`` or ``bw``.

    References
    ----------
    .. [1] W3C Audio EQ Cookbook, Working Group Note 2021, BPF (constant 0 dB peak gain).
    """
    w0, c, s = _angular(p["freq"], rate)
    alpha = _alpha(p, w0, s)
    return _row((alpha, 0.0, -alpha), (1 + alpha, -2 * c, 1 - alpha))


def allpass(p: Params, rate: float) -> np.ndarray:
    """All-pass: unit magnitude, phase turning through -180 degrees at ``freq``.

    References
    ----------
    .. [1] W3C Audio EQ Cookbook, Working Group Note 2021, APF.
    """
    w0, c, s = _angular(p["freq"], rate)
    alpha = _alpha(p, w0, s)
    return _row((1 - alpha, -2 * c, 1 + alpha), (1 + alpha, -2 * c, 1 - alpha))


def gain(p: Params, rate: float) -> np.ndarray:
    """Flat gain of ``gain_db``: the single row ``[10^(gain_db/20), 0, 0, 1, 0, 0]``.

    References
    ----------
    .. [1] analytic: amplitude ratio 10^(dB/20).
    """
    return np.array([[10.0 ** (p["gain_db"] / 20.0), 0.0, 0.0, 1.0, 0.0, 0.0]])


def iir(p: Params, rate: float) -> np.ndarray:
    """Raw coefficients ``b`` and ``a``, normalised by a[0] and factored with scipy.signal.tf2sos.

    Leading zeros of ``b`` are a pure delay (``b: [0, 1]`` is z^-1). tf2sos would drop
    them, with a BadCoefficients warning, and so shift the output earlier; they are kept
    here as delay rows ``[0, 0, 1, 1, 0, 0]`` (z^-2) and ``[0, 1, 0, 1, 0, 0]`` (z^-1)
    after the factored sections. ``rate`` is not used: the coefficients are the filter.

    References
    ----------
    .. [1] scipy.signal.tf2sos and scipy.signal.normalize (reference library).
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
