"""The windowed-sinc low-pass the true-peak meter interpolates with, without scipy.signal.

:func:`kaiser_lowpass` is ``scipy.signal.firwin(numtaps, cutoff, window=("kaiser", beta))`` (a
low-pass with unity gain at DC, cutoff as a fraction of Nyquist), ported operation for operation
so that the taps are scipy's to the last bit (tests/unit/test_dsp.py compares them). The Kaiser
window needs the modified Bessel function I0; it is evaluated as the Cephes Math Library does
(S. L. Moshier, ``i0.c``: Chebyshev expansions on [0, 8] and (8, inf), the coefficients below,
which are also numpy's and scipy.special's), one value at a time with the C library's ``exp``:
numpy's vectorised ``exp`` differs from it in the last bit for some arguments, which moved a tap
by one unit in the last place.
"""
from __future__ import annotations

import math

import numpy as np

__all__ = ["kaiser_lowpass"]

_I0_A = (
    -4.4153416464793395e-18, 3.3307945188222384e-17, -2.431279846547955e-16,
    1.715391285555133e-15, -1.1685332877993451e-14, 7.676185498604936e-14,
    -4.856446783111929e-13, 2.95505266312964e-12, -1.726826291441556e-11,
    9.675809035373237e-11, -5.189795601635263e-10, 2.6598237246823866e-09,
    -1.300025009986248e-08, 6.046995022541919e-08, -2.670793853940612e-07,
    1.1173875391201037e-06, -4.4167383584587505e-06, 1.6448448070728896e-05,
    -5.754195010082104e-05, 0.00018850288509584165, -0.0005763755745385824,
    0.0016394756169413357, -0.004324309995050576, 0.010546460394594998,
    -0.02373741480589947, 0.04930528423967071, -0.09490109704804764,
    0.17162090152220877, -0.3046826723431984, 0.6767952744094761,
)
_I0_B = (
    -7.233180487874754e-18, -4.830504485944182e-18, 4.46562142029676e-17,
    3.461222867697461e-17, -2.8276239805165836e-16, -3.425485619677219e-16,
    1.7725601330565263e-15, 3.8116806693526224e-15, -9.554846698828307e-15,
    -4.150569347287222e-14, 1.54008621752141e-14, 3.8527783827421426e-13,
    7.180124451383666e-13, -1.7941785315068062e-12, -1.3215811840447713e-11,
    -3.1499165279632416e-11, 1.1889147107846439e-11, 4.94060238822497e-10,
    3.3962320257083865e-09, 2.266668990498178e-08, 2.0489185894690638e-07,
    2.8913705208347567e-06, 6.889758346916825e-05, 0.0033691164782556943,
    0.8044904110141088,
)


def _chbevl(x: float, coefficients: tuple[float, ...]) -> float:
    """Clenshaw's sum of a Chebyshev series, in Cephes' operation order."""
    b0, b1, b2 = coefficients[0], 0.0, 0.0
    for c in coefficients[1:]:
        b2 = b1
        b1 = b0
        b0 = x * b1 - b2 + c
    return 0.5 * (b0 - b2)


def _i0(x: float) -> float:
    """Modified Bessel function of the first kind, order 0 (Cephes ``i0``)."""
    x = abs(x)
    if x <= 8.0:
        return math.exp(x) * _chbevl(x / 2.0 - 2, _I0_A)
    return math.exp(x) * _chbevl(32.0 / x - 2.0, _I0_B) / math.sqrt(x)


def _kaiser(numtaps: int, beta: float) -> np.ndarray:
    """The symmetric Kaiser window of ``numtaps`` points (scipy.signal.windows.kaiser, sym=True)."""
    if numtaps == 1:
        return np.ones(1)
    n = np.arange(0, numtaps, dtype=np.float64)
    alpha = (numtaps - 1) / 2.0
    arg = beta * np.sqrt(1 - ((n - alpha) / alpha) ** 2.0)
    return np.array([_i0(float(v)) for v in arg]) / _i0(float(beta))


def kaiser_lowpass(numtaps: int, cutoff: float, beta: float) -> np.ndarray:
    """``scipy.signal.firwin(numtaps, cutoff, window=("kaiser", beta))``: taps of a linear-phase low-pass.

    ``cutoff`` is a fraction of the Nyquist frequency, 0 < cutoff < 1; the taps are scaled to unity
    gain at DC.
    """
    if not 0.0 < cutoff < 1.0:
        raise ValueError(f"cutoff must lie strictly between 0 and 1 (Nyquist), got {cutoff!r}")
    alpha = 0.5 * (numtaps - 1)
    m = np.arange(0, numtaps, dtype=np.float64) - alpha
    h = cutoff * np.sinc(cutoff * m)
    h -= 0.0 * np.sinc(0.0 * m)               # the band's left edge, at 0, as scipy subtracts it
    h *= _kaiser(numtaps, beta)
    h /= np.sum(h * np.cos(np.pi * m * 0.0))  # unity gain at DC, scipy's scale step
    return h
