"""The guard's frequency response and bounded minimiser with numpy alone.

:func:`freqz_sos` is scipy.signal.freqz_sos at given frequencies and :func:`minimize_bounded` is
scipy.optimize.minimize_scalar(method="bounded") (Brent's bounded minimisation, as in fminbound),
both ported operation for operation from scipy 1.17 (``_filter_design.freqz`` / ``freqz_sos``,
``_polyutils.npp_polyval``, ``_optimize._minimize_scalar_bounded``), so the guard's figures do not
move (tests/unit/test_dsp.py compares them with scipy).
"""
from __future__ import annotations

import math

import numpy as np

__all__ = ["freqz_sos", "point_response", "minimize_bounded", "unique_sorted"]


def _polyval(x: np.ndarray, c: np.ndarray) -> np.ndarray:
    """Horner's rule in scipy's order: ``c[0] + x (c[1] + x c[2])``, complex ``x``."""
    c0 = np.broadcast_to(np.asarray(c[-1], dtype=np.result_type(c.dtype, x.dtype)), x.shape)
    for i in range(2, c.shape[0] + 1):
        c0 = c[-i, ...] + c0 * x
    return c0


def freqz_sos(sos: np.ndarray, freqs, rate: float) -> np.ndarray:
    """Complex response of the cascade ``sos`` at ``freqs`` Hz; scipy.signal.freqz_sos(sos, worN=freqs,
    fs=rate)[1]. A pole on the unit circle gives inf or nan there (with numpy's warnings, as scipy)."""
    sos = np.atleast_2d(np.asarray(sos))
    if sos.ndim != 2 or sos.shape[1] != 6 or sos.shape[0] == 0:
        raise ValueError("sos must have shape (n_sections, 6), n_sections >= 1")
    fs = float(rate)
    w = np.atleast_1d(np.asarray(freqs, dtype=np.result_type(sos.dtype, np.float64)))
    w = 2 * math.pi * w / fs
    zm1 = np.exp(-1j * w)
    h = 1.
    for row in sos:
        h *= _polyval(zm1, row[:3]) / _polyval(zm1, row[3:])
    return h


def unique_sorted(values) -> np.ndarray:
    """``numpy.unique`` of finite float frequencies: sorted, each value once (0.0 and -0.0 one value,
    the first kept), the same array; without ``numpy.unique``'s import of ``numpy.ma`` on its
    first call (7 ms of every ``run`` and ``check``)."""
    a = np.sort(np.asarray(values, dtype=np.float64).ravel())
    if a.size > 1:
        keep = np.empty(a.size, dtype=bool)
        keep[0] = True
        np.not_equal(a[1:], a[:-1], out=keep[1:])
        a = a[keep]
    return a


def point_response(sos: np.ndarray):
    """A function ``at(freq, rate)``: the complex response of ``sos`` at one frequency, the same
    number as ``freqz_sos(sos, [freq], rate)[0]`` (the same operations on each row, all rows at
    once), about ten times faster: the guard's minimiser asks for one frequency at a time."""
    sos = np.atleast_2d(np.asarray(sos, dtype=np.float64))
    b0, b1, b2 = sos[:, 0], sos[:, 1], sos[:, 2].astype(np.complex128)
    a0, a1, a2 = sos[:, 3], sos[:, 4], sos[:, 5].astype(np.complex128)

    def at(freq: float, rate: float) -> complex:
        zm1 = np.exp(-1j * np.atleast_1d(2 * math.pi * np.float64(freq) / float(rate)))
        rows = (b0 + (b1 + b2 * zm1) * zm1) / (a0 + (a1 + a2 * zm1) * zm1)
        h = 1.
        for r in rows:
            h *= r
        return h
    return at


def minimize_bounded(func, lo: float, hi: float, xatol: float = 1e-5, maxiter: int = 500) -> tuple[float, float]:
    """``(x, func(x))`` at a local minimum of ``func`` on ``[lo, hi]``: Brent's bounded method, step for
    step as scipy.optimize.minimize_scalar(func, bounds=(lo, hi), method="bounded",
    options={"xatol": xatol}) returns ``res.x, res.fun``."""
    if not (np.isfinite(lo) and np.isfinite(hi)):
        raise ValueError("Optimization bounds must be finite scalars.")
    if lo > hi:
        raise ValueError("The lower bound exceeds the upper bound.")
    sqrt_eps = math.sqrt(2.2e-16)
    golden_mean = 0.5 * (3.0 - math.sqrt(5.0))
    a, b = lo, hi
    fulc = a + golden_mean * (b - a)
    nfc, xf = fulc, fulc
    rat = e = 0.0
    x = xf
    fx = func(x)
    num = 1
    ffulc = fnfc = fx
    xm = 0.5 * (a + b)
    tol1 = sqrt_eps * np.abs(xf) + xatol / 3.0
    tol2 = 2.0 * tol1
    while np.abs(xf - xm) > (tol2 - 0.5 * (b - a)):
        golden = 1
        if np.abs(e) > tol1:                     # try a parabolic fit
            golden = 0
            r = (xf - nfc) * (fx - ffulc)
            q = (xf - fulc) * (fx - fnfc)
            p = (xf - fulc) * q - (xf - nfc) * r
            q = 2.0 * (q - r)
            if q > 0.0:
                p = -p
            q = np.abs(q)
            r = e
            e = rat
            if (np.abs(p) < np.abs(0.5 * q * r)) and (p > q * (a - xf)) and (p < q * (b - xf)):
                rat = (p + 0.0) / q
                x = xf + rat
                if ((x - a) < tol2) or ((b - x) < tol2):
                    si = np.sign(xm - xf) + ((xm - xf) == 0)
                    rat = tol1 * si
            else:
                golden = 1
        if golden:                               # a golden-section step
            e = a - xf if xf >= xm else b - xf
            rat = golden_mean * e
        si = np.sign(rat) + (rat == 0)
        x = xf + si * np.maximum(np.abs(rat), tol1)
        fu = func(x)
        num += 1
        if fu <= fx:
            if x >= xf:
                a = xf
            else:
                b = xf
            fulc, ffulc = nfc, fnfc
            nfc, fnfc = xf, fx
            xf, fx = x, fu
        else:
            if x < xf:
                a = x
            else:
                b = x
            if (fu <= fnfc) or (nfc == xf):
                fulc, ffulc = nfc, fnfc
                nfc, fnfc = x, fu
            elif (fu <= ffulc) or (fulc == xf) or (fulc == nfc):
                fulc, ffulc = x, fu
        xm = 0.5 * (a + b)
        tol1 = sqrt_eps * np.abs(xf) + xatol / 3.0
        tol2 = 2.0 * tol1
        if num >= maxiter:
            break
    return xf, fx
