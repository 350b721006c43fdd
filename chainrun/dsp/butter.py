"""Butterworth low- and high-pass sections with numpy alone: scipy.signal.butter(..., output="sos").

The steps and the order of every floating-point operation are scipy's (scipy 1.17,
``scipy/signal/_filter_design.py``: buttap, iirfilter's prewarp, lp2lp_zpk / lp2hp_zpk,
bilinear_zpk, zpk2sos with ``pairing="nearest"``, _cplxreal, zpk2tf), so the rows come out
bit for bit as scipy's (tests/unit/test_dsp.py compares every order at many frequencies and
rates) and a recipe's output does not change by a bit. Only what a digital low- or high-pass
Butterworth reaches is kept: no band types, no analog output, no other pairings.
"""
from __future__ import annotations

import numpy as np

__all__ = ["butter_sos"]

_TOL = 100 * np.finfo(np.float64).eps       # _cplxreal's default tolerance for float64


def butter_sos(order: int, freq: float, rate: float, btype: str) -> np.ndarray:
    """Rows ``[b0, b1, b2, 1, a1, a2]`` of an ``order``-th order Butterworth at ``freq`` Hz.

    ``btype`` is ``"lowpass"`` or ``"highpass"``; ``0 < freq < rate / 2`` (the caller checks).
    Equal to ``scipy.signal.butter(order, freq, btype=btype, fs=rate, output="sos")``.
    """
    n = int(order)
    # buttap: poles on the left half of the unit circle; the middle one exactly real
    m = np.arange(-n + 1, n, 2, dtype=np.float64)
    p = -np.exp(1j * np.pi * m / (2 * n))
    z = np.asarray([], dtype=np.float64)
    k = 1.0
    # iirfilter: normalise to Nyquist, then prewarp for the bilinear transform at fs = 2
    wn = np.asarray(freq, dtype=np.float64) / (float(rate) / 2)
    fs = 2.0
    wo = float(2 * fs * np.tan(np.pi * wn / fs))
    degree = p.shape[0] - z.shape[0]
    if btype == "lowpass":                                      # lp2lp_zpk
        z, p, k = wo * z, wo * p, k * wo ** degree
    elif btype == "highpass":                                   # lp2hp_zpk
        z_hp, p_hp = wo / z, wo / p
        k = k * np.real(np.prod(-z) / np.prod(-p))
        z, p = np.concatenate((z_hp, np.zeros(degree))), p_hp
    else:
        raise ValueError(f"btype must be 'lowpass' or 'highpass', not {btype!r}")
    # bilinear_zpk at fs = 2
    degree = p.shape[0] - z.shape[0]
    fs2 = 2.0 * fs
    z_z = (fs2 + z) / (fs2 - z)
    p_z = (fs2 + p) / (fs2 - p)
    z_z = np.concatenate((z_z, -np.ones(degree)))
    k_z = k * np.real(np.prod(fs2 - z) / np.prod(fs2 - p))
    return _zpk2sos(z_z, p_z, k_z)


def _cplxreal(z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """scipy.signal._filter_design._cplxreal: one of each conjugate pair (averaged), and the reals."""
    z = np.atleast_1d(z)
    if z.size == 0:
        return z, z
    z = z[np.lexsort((abs(z.imag), z.real))]
    real_indices = abs(z.imag) <= _TOL * abs(z)
    zr = z[real_indices].real
    if len(zr) == len(z):
        return np.array([]), zr
    z = z[~real_indices]
    zp = z[z.imag > 0]
    zn = z[z.imag < 0]
    if len(zp) != len(zn):
        raise ValueError("Array contains complex value with no matching conjugate.")
    same_real = np.diff(zp.real) <= _TOL * abs(zp[:-1])
    diffs = np.diff(np.concatenate(([0], same_real, [0])))
    run_starts = np.nonzero(diffs > 0)[0]
    run_stops = np.nonzero(diffs < 0)[0]
    for i in range(len(run_starts)):
        start, stop = run_starts[i], run_stops[i] + 1
        for chunk in (zp[start:stop], zn[start:stop]):
            chunk[...] = chunk[np.lexsort([abs(chunk.imag)])]
    if any(abs(zp - zn.conj()) > _TOL * abs(zn)):
        raise ValueError("Array contains complex value with no matching conjugate.")
    zc = (zp + zn.conj()) / 2
    return zc, zr


def _poly(roots) -> np.ndarray:
    """scipy.signal._polyutils.poly: coefficients from roots by repeated convolution."""
    roots = np.atleast_1d(np.asarray(roots))
    if roots.shape[0] == 0:
        return np.asarray(1.0, dtype=np.real(roots).dtype)
    a = np.ones((1,), dtype=roots.dtype)
    one = np.ones_like(roots[0])
    for zero in roots:
        a = np.convolve(a, np.stack((one, -zero)), mode="full")
    if np.iscomplexobj(a):
        r = np.asarray(roots, dtype=np.complex128)
        if np.all(np.sort(np.imag(r)) == np.sort(np.imag(np.conj(r)))):
            a = np.array(np.real(a), copy=True)
    return a


def _single_zpksos(z, p) -> np.ndarray:
    """scipy's _single_zpksos with k = 1: one row from up to two zeros and two poles."""
    sos = np.zeros(6)
    z, p = np.asarray(z), np.asarray(p)
    k = np.asarray(1, dtype=np.result_type(np.real(z), np.real(p), 1))
    b = np.atleast_1d(np.multiply(np.atleast_1d(k), _poly(z)))
    a = np.atleast_1d(_poly(p))
    sos[3 - len(b):3] = b
    sos[6 - len(a):6] = a
    return sos


def _nearest_idx(fro: np.ndarray, to, which: str):
    order = np.argsort(np.abs(fro - to))
    if which == "any":
        return order[0]
    mask = np.isreal(fro[order])
    if which == "complex":
        mask = ~mask
    return order[np.nonzero(mask)[0][0]]


def _idx_worst(p: np.ndarray):
    """Digital: the pole closest to the unit circle."""
    return np.argmin(np.abs(1 - np.abs(p)))


def _zpk2sos(z: np.ndarray, p: np.ndarray, k) -> np.ndarray:
    """scipy.signal.zpk2sos(z, p, k) with its digital default, ``pairing="nearest"``."""
    z, p, k = np.asarray(z), np.asarray(p), np.asarray(k)
    if len(z) == len(p) == 0:
        return np.asarray([[k, 0., 0., 1., 0., 0.]])
    p = np.concatenate((p, np.zeros(max(len(z) - len(p), 0))))
    z = np.concatenate((z, np.zeros(max(len(p) - len(z), 0))))
    n_sections = (max(len(p), len(z)) + 1) // 2
    if len(p) % 2 == 1:
        p = np.concatenate((p, [0.]))
        z = np.concatenate((z, [0.]))
    z = np.concatenate(_cplxreal(z))
    p = np.concatenate(_cplxreal(p))
    k = k.real
    sos = np.zeros((n_sections, 6))
    for si in range(n_sections - 1, -1, -1):     # the "worst" poles go last
        p1_idx = _idx_worst(p)
        p1 = p[p1_idx]
        p = np.delete(p, p1_idx)
        if np.isreal(p1) and np.isreal(p).sum() == 0:
            # the last real pole: paired with the nearest real zero, padded with zeros at the origin
            z1_idx = _nearest_idx(z, p1, "real")
            z1 = z[z1_idx]
            z = np.delete(z, z1_idx)
            sos[si] = _single_zpksos([z1, 0], [p1, 0])
        elif (len(p) + 1 == len(z) and not np.isreal(p1)
              and np.isreal(p).sum() == 1 and np.isreal(z).sum() == 1):
            # one real pole and one real zero left: this pair must take a complex zero
            z1_idx = _nearest_idx(z, p1, "complex")
            z1 = z[z1_idx]
            z = np.delete(z, z1_idx)
            sos[si] = _single_zpksos([z1, z1.conj()], [p1, p1.conj()])
        else:
            if np.isreal(p1):
                prealidx = np.flatnonzero(np.isreal(p))
                p2_idx = prealidx[_idx_worst(p[prealidx])]
                p2 = p[p2_idx]
                p = np.delete(p, p2_idx)
            else:
                p2 = p1.conj()
            if len(z) > 0:
                z1_idx = _nearest_idx(z, p1, "any")
                z1 = z[z1_idx]
                z = np.delete(z, z1_idx)
                if not np.isreal(z1):
                    sos[si] = _single_zpksos([z1, z1.conj()], [p1, p2])
                elif len(z) > 0:
                    z2_idx = _nearest_idx(z, p1, "real")
                    z2 = z[z2_idx]
                    z = np.delete(z, z2_idx)
                    sos[si] = _single_zpksos([z1, z2], [p1, p2])
                else:
                    sos[si] = _single_zpksos([z1], [p1, p2])
            else:
                sos[si] = _single_zpksos([], [p1, p2])
    sos[0][:3] *= k
    return sos
