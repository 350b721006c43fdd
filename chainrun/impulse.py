"""Worst-case peak gain: the L1 norm of a cascade's impulse response, bounded from above.

:func:`_impulse` runs one cascade's impulse response and bounds what is left after the run from
the filter state (:func:`_cascade_tail`); :func:`_midside_l1` does the same for the output
channels of a mid/side chain. Both are used by :mod:`chainrun.guard`.
"""
from __future__ import annotations

import math

import numpy as np

from .dsp import sosfilt
from .dsp.flush import DENORMAL_FLOOR

__all__ = ["IMPULSE_BLOCK", "IMPULSE_CAP", "IMPULSE_WORK", "TAIL_REL"]

IMPULSE_BLOCK = 1 << 16     # impulse response computed in blocks of this many samples
IMPULSE_CAP = 1 << 27       # ... up to this many samples
IMPULSE_WORK = 1 << 29      # ... and this many row-samples (rows x samples); then the tail is bounded
TAIL_REL = 1e-10            # the run stops once the tail's bound is below this fraction of the sum
FLUSH_FLOOR = DENORMAL_FLOOR  # every FLUSH_EVERY samples, state values below this are set to zero (_run_block)
FLUSH_EVERY = 1 << 13
_EPS = float(np.finfo(np.float64).eps)


def _tail_factors(sos: np.ndarray) -> tuple[np.ndarray, ...]:
    """Per row, what :func:`_zero_input_l1` needs: ``||u||_1``, ``w`` and ``1 - r``.

    ``u`` is the impulse response of ``1 / (1 + a1 z^-1 + a2 z^-2)``, ``u[n] = sum_j p1^j p2^(n-j)``
    over the poles, so ``||u||_1 <= 1 / ((1 - |p1|)(1 - |p2|))``, whatever the poles (equal ones
    too). That product is taken from the coefficients without finding roots: ``(1 - r)**2`` with
    ``1 - r = (1 - a2) / (1 + sqrt(a2))`` for a complex pair, ``D(1) D(-1) / (1 + |p1| + |p2| + |a2|)``
    for real poles (``D`` the denominator), so that a pole near 1 costs no cancellation; each is
    too large for the other kind, so both are taken where rounding could mistake one for the
    other (the smaller is kept). For a
    complex pair ``|u[n]| = r^n |sin((n+1) theta)| / sin(theta)`` also gives ``r / (w (1 - r))``,
    with ``w = r sin(theta) = sqrt(4 a2 - a1**2) / 2`` taken low by its rounding error.
    """
    a1, a2 = sos[:, 4] / sos[:, 3], sos[:, 5] / sos[:, 3]
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        disc = a1 * a1 - 4.0 * a2
        pair = disc < 0.0
        root_a2 = np.sqrt(np.abs(a2))
        one_minus_r = np.where(pair, (1.0 - a2) / (1.0 + root_a2), np.nan)
        moduli = np.where(a2 >= 0.0, np.maximum(np.abs(a1), 2.0 * root_a2), np.sqrt(np.abs(disc)))
        real = ((1.0 + a1) + a2) * ((1.0 - a1) + a2) / (1.0 + moduli + np.abs(a2))
        # a double pole may read as a pair or as real by rounding: then the smaller one is kept
        prod = np.where(a2 >= 0.0, np.fmin(((1.0 - a2) / (1.0 + root_a2)) ** 2, real), real)
        u_l1 = np.where(prod > 0.0, 1.0 / prod, np.inf)
        w = np.sqrt(np.maximum(-disc - 8.0 * _EPS * (a1 * a1 + 4.0 * np.abs(a2)), 0.0)) / 2.0
        usable = pair & (w > 0.0) & (one_minus_r > 0.0)
        u_l1 = np.where(usable, np.minimum(u_l1, root_a2 / (w * one_minus_r)), u_l1)
    return a1, u_l1, np.where(usable, w, 0.0), np.where(usable, one_minus_r, np.nan)


def _zero_input_l1(z: np.ndarray, factors: tuple[np.ndarray, ...]) -> np.ndarray:
    """Per row, an upper bound of ``sum_n |e[n]|`` for the row left to ring from state ``z``.

    In the transposed direct form (scipy.signal.sosfilt's) a row with state ``(z1, z2)`` and no
    input rings ``e[n] = z1 u[n] + z2 u[n-1]``, so ``||e||_1 <= (|z1| + |z2|) ||u||_1``. For a
    complex pair ``e[n] = 2 Re(c p^n)`` also gives ``2|c| / (1 - r)``, with
    ``2|c| = sqrt((z2 - a1 z1 / 2)**2 / w**2 + z1**2)``; the smaller of the two is kept.
    """
    a1, u_l1, w, one_minus_r = factors
    z1, z2 = z[:, 0], z[:, 1]
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        bound = (np.abs(z1) + np.abs(z2)) * u_l1
        modal = np.sqrt(((z2 - 0.5 * a1 * z1) / w) ** 2 + z1 ** 2) / one_minus_r
        bound = np.where(w > 0.0, np.fmin(bound, modal), bound)
    return np.where((z1 == 0.0) & (z2 == 0.0), 0.0, bound)


def _cascade_tail(zi: np.ndarray, factors: tuple[np.ndarray, ...], row_l1: np.ndarray) -> float:
    """Upper bound of ``sum_{n >= N} |h[n]|`` from the cascade's state ``zi`` after ``N`` samples.

    With no input left, row ``k``'s output from ``N`` on is its own ringing ``e_k`` plus its
    response to the row before: ``||out_k||_1 <= ||e_k||_1 + ||h_k||_1 ||out_{k-1}||_1``.
    """
    ring = _zero_input_l1(zi, factors)
    tail = 0.0
    for k in range(len(ring)):
        tail = float(ring[k]) + float(row_l1[k]) * tail
    return tail if math.isfinite(tail) else math.inf


def _run_block(sos: np.ndarray, x: np.ndarray, zi: np.ndarray, factors: tuple[np.ndarray, ...],
               row_l1: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
    """One block of the run: ``(y, zf, flushed)``, the state's tiny values set to zero on the way.

    A section whose own poles decay fast and that is fed almost nothing (the first one, after the
    impulse) sinks into the subnormal range while slower sections keep the run going, and IEEE 754
    subnormal arithmetic is many times slower on common processors (measured here: 10 ms for a
    65536-sample block instead of 0.4). So the block runs in stretches of ``FLUSH_EVERY`` samples
    and after each the state values below ``FLUSH_FLOOR`` are set to zero. The cascade is linear
    in its state: what runs on from ``z`` is what runs on from ``z`` without those values plus
    what they alone ring out, whose L1 norm is at most :func:`_cascade_tail` of them; ``flushed``
    sums those bounds (about 1e-196 at most), for the caller to add to the figure, which so stays
    an upper bound.
    """
    y = np.empty(len(x))
    flushed = 0.0
    for k in range(0, len(x), FLUSH_EVERY):
        y[k:k + FLUSH_EVERY], zi = sosfilt(sos, x[k:k + FLUSH_EVERY], zi)
        tiny = (np.abs(zi) < FLUSH_FLOOR) & (zi != 0.0)
        if tiny.any():
            flushed += _cascade_tail(np.where(tiny, zi, 0.0), factors, row_l1)
            zi = np.where(tiny, 0.0, zi)
    return y, zi, flushed


def _impulse(sos: np.ndarray, rate: float, r_max: float) -> tuple[float, bool]:
    """L1 norm of the impulse response, bounded from above, and whether it is exact.

    The response is run block by block with carried state (scipy.signal.sosfilt's kernel through
    :func:`chainrun.dsp.sosfilt`, float64) and
    ``sum |h[n]|`` summed; after each block the rest, ``sum_{n >= N} |h[n]|``, is bounded from the
    state by :func:`_cascade_tail`, without diagonalising anything, so repeated and near-equal
    poles are bounded as safely as any. State values that sink below ``FLUSH_FLOOR`` are set to
    zero on the way and their own bound added (:func:`_run_block`). The run stops when that bound is below ``TAIL_REL`` of the
    sum (the figure is then exact for every purpose: ``exact``) or after ``IMPULSE_CAP`` samples or
    ``IMPULSE_WORK`` row-samples; the bound is added in either case, so the figure is never below
    the L1 norm. A last factor ``1 + kappa`` allows for float64 rounding in the run and the sums,
    ``kappa = S eps (16 + 4 / (1 - r_max))`` for S rows (a first-order allowance, not a proof).
    The figure is ``inf`` only when no finite bound was found. (The 60 dB decay time is not
    measured here: :func:`chainrun.guard.decay_60db` gives it from the largest pole radius.)
    """
    sos = np.asarray(sos, dtype=np.float64)
    factors = _tail_factors(sos)
    after_impulse = np.stack([sos[:, 1] - sos[:, 4] * sos[:, 0], sos[:, 2] - sos[:, 5] * sos[:, 0]], axis=1)
    row_l1 = np.abs(sos[:, 0]) + _zero_input_l1(after_impulse, factors)
    cap = min(IMPULSE_CAP, max(IMPULSE_BLOCK, IMPULSE_WORK // max(len(sos), 1) // IMPULSE_BLOCK * IMPULSE_BLOCK))
    zi = np.zeros((len(sos), 2))
    impulse = np.zeros(IMPULSE_BLOCK)
    impulse[0] = 1.0
    silence = np.zeros(IMPULSE_BLOCK)
    sums: list[float] = []
    n, tail, flushed = 0, math.inf, 0.0
    with np.errstate(over="ignore", invalid="ignore"):
        while True:
            y, zi, more = _run_block(sos, impulse if n == 0 else silence, zi, factors, row_l1)
            flushed += more
            sums.append(float(np.abs(y).sum()))
            n += IMPULSE_BLOCK
            total = math.fsum(sums)
            if not math.isfinite(total):
                break
            tail = _cascade_tail(zi, factors, row_l1) + flushed
            if tail <= TAIL_REL * total or n >= cap:
                break
    exact = math.isfinite(total) and tail <= TAIL_REL * total
    kappa = len(sos) * _EPS * (16.0 + 4.0 / (1.0 - r_max))
    bound = (total + tail) * (1.0 + kappa)
    if not math.isfinite(bound):
        bound, exact = math.inf, False
    return bound, exact


def _midside_l1(sos_m: np.ndarray, sos_s: np.ndarray, r_max: float) -> tuple[float, bool]:
    """Worst-case peak gain of each output channel of a mid/side chain, bounded from above.

    With ``M = (L + R) / 2``, ``S = (L - R) / 2`` filtered by ``h_M`` and ``h_S`` and decoded as
    ``L' = M' + S'``, ``R' = M' - S'``::

        L' = g1 * L + g2 * R,   R' = g2 * L + g1 * R,   g1 = (h_M + h_S) / 2,  g2 = (h_M - h_S) / 2

    so for every input ``max |L'| <= (||g1||_1 + ||g2||_1) max(|L|, |R|)``, and the input
    ``L[N - n] = sign g1[n]``, ``R[N - n] = sign g2[n]`` reaches it at sample N: the bound is
    tight, for R' too. Since ``|a + b| + |a - b| = 2 max(|a|, |b|)`` for reals, it equals
    ``sum_n max(|h_M[n]|, |h_S[n]|)``, summed here without rounding in the combination. It is
    never below the larger of ``||h_M||_1`` and ``||h_S||_1``, and above it whenever the two
    responses' magnitudes cross. Both cascades run side by side as in :func:`_impulse`; the rest
    after N samples is at most the sum of the two tails' bounds (:func:`_cascade_tail`).
    """
    cascades = [np.asarray(s, dtype=np.float64) for s in (sos_m, sos_s)]
    factors, row_l1s = [], []
    for sos in cascades:
        f = _tail_factors(sos)
        after = np.stack([sos[:, 1] - sos[:, 4] * sos[:, 0], sos[:, 2] - sos[:, 5] * sos[:, 0]], axis=1)
        factors.append(f)
        row_l1s.append(np.abs(sos[:, 0]) + _zero_input_l1(after, f))
    rows = max(len(s) for s in cascades)
    cap = min(IMPULSE_CAP, max(IMPULSE_BLOCK, IMPULSE_WORK // (2 * rows) // IMPULSE_BLOCK * IMPULSE_BLOCK))
    zis = [np.zeros((len(s), 2)) for s in cascades]
    impulse = np.zeros(IMPULSE_BLOCK)
    impulse[0] = 1.0
    silence = np.zeros(IMPULSE_BLOCK)
    sums: list[float] = []
    n, total, tail, flushed = 0, 0.0, math.inf, 0.0
    with np.errstate(over="ignore", invalid="ignore"):
        while True:
            ys = []
            for k, sos in enumerate(cascades):
                # max(|a|, |b|) <= |a| + |b|: a flushed part of either adds at most its own bound
                y, zis[k], more = _run_block(sos, impulse if n == 0 else silence, zis[k], factors[k], row_l1s[k])
                flushed += more
                ys.append(np.abs(y))
            sums.append(float(np.maximum(ys[0], ys[1]).sum()))
            n += IMPULSE_BLOCK
            total = math.fsum(sums)
            if not math.isfinite(total):
                break
            tail = sum(_cascade_tail(zis[k], factors[k], row_l1s[k]) for k in range(2)) + flushed
            if tail <= TAIL_REL * total or n >= cap:
                break
    exact = math.isfinite(total) and tail <= TAIL_REL * total
    bound = (total + tail) * (1.0 + rows * _EPS * (16.0 + 4.0 / (1.0 - r_max)))
    return (bound, exact) if math.isfinite(bound) else (math.inf, False)
