"""The true-peak meter's interpolator (ITU-R BS.1770-4 Annex 2): its branches and folded weights.

The polyphase branches come from a Kaiser-windowed sinc prototype (chainrun.dsp.fir); the meter
(chainrun.meters.truepeak) runs them as matrix products on folded rows of samples, and this
module gives those products their weights, computed once per oversampling factor and shared.
"""
from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

from ..dsp.fir import kaiser_lowpass

# --- true-peak interpolator -------------------------------------------------
# Sample rate -> oversampling factor, ITU-R BS.1770-4 Annex 2: x4 below 88.2 kHz,
# x2 below 176.4 kHz, x1 (true peak = sample peak) from 176.4 kHz up.
_OVERSAMPLING_STEPS = ((88200, 4), (176400, 2))
_TP_TAPS = 38           # taps per polyphase branch (input samples under one interpolated value)
_TP_BETA = 5.75         # Kaiser beta: lowest worst-case branch gain error up to 0.45*rate for 38 taps
_TP_ROW = 32            # interpolated instants per branch computed by one row of the matrix products (even)
_TP_ROWS_PER_CALL = 512  # rows in every matrix product: one shape whatever the block split (see TruePeakMeter
                         # notes); folded rows of 32 instants ran 15-25 % faster than of 16, 24 or 40, and
                         # products of 512 rows 16 % faster than of 128
_TP_GROUP = 2           # products whose rows are made ready together
_TP_DTYPE = np.float32  # arithmetic of the interpolation (the sample peak is always float64)
_TP_CLAMP = 1.0e30      # finite samples beyond +-this are clamped for interpolation only
_SCREEN_EPS = 2.0e-5    # the screen's allowance for the rounding of a computed value (at most 1.15e-5 of its
                        # samples' peak, TruePeakMeter notes), with a margin
_TP_SPAN = _TP_TAPS + _TP_ROW - 1          # input samples under one row (odd: 69)
_TP_HALF = _TP_SPAN // 2                   # mirrored pairs of samples in a row; the middle one stands alone
_TP_CALL_OUT = _TP_ROW * _TP_ROWS_PER_CALL  # interpolated instants per branch in one product
# The skip bound in TruePeakMeter._interpolate assumes a product reads at most two stretches of samples.
if _TP_TAPS - 1 > _TP_CALL_OUT or _TP_ROW % 2 or _TP_SPAN % 2 == 0:
    raise RuntimeError("meters: a product's samples must span at most two stretches, rows be even, spans odd")


def _oversampling(rate: int) -> int:
    """BS.1770-4 Annex 2 oversampling factor for ``rate`` (4, 2 or 1)."""
    for limit, factor in _OVERSAMPLING_STEPS:
        if rate < limit:
            return factor
    return 1


def _interpolation_branches(factor: int) -> np.ndarray:
    """Polyphase branches 1..factor-1 of the true-peak interpolator, shape (factor-1, 38).

    The prototype is ``scipy.signal.firwin(2*19*factor + 1, 1/factor,
    window=('kaiser', 5.75))`` scaled by ``factor`` (cutoff at the input's
    Nyquist frequency, unity gain per branch).  Row ``p-1`` holds the weights
    of branch ``p``: the value at instant ``s + p/factor`` is
    ``sum(row[k] * x[s - 18 + k] for k in range(38))``.  Branch 0 of a
    windowed-sinc prototype is the identity and is not returned: the samples
    themselves stand for it.
    """
    half = _TP_TAPS // 2
    proto = kaiser_lowpass(2 * half * factor + 1, 1.0 / factor, _TP_BETA) * factor   # firwin's taps, bit for bit
    k = np.arange(_TP_TAPS)
    centre = half * factor
    return np.array([proto[centre + (half - 1 - k) * factor + p] for p in range(1, factor)])


def _toeplitz_weights(branches: np.ndarray) -> np.ndarray:
    """Matrix W (span, row*branches), float64, so that one row of input samples times W gives a row of outputs.

    Output ``j`` of branch ``p`` of a row that starts at input sample ``o``
    uses samples ``o + j .. o + j + taps - 1``; column ``j*P + p`` of W holds
    that branch's weights at rows ``j .. j + taps - 1`` and zeros elsewhere.
    """
    n_br, taps = branches.shape
    w = np.zeros((_TP_SPAN, _TP_ROW, n_br))
    for j in range(_TP_ROW):
        w[j:j + taps, j, :] = branches.T
    return w.reshape(_TP_SPAN, _TP_ROW * n_br)


@dataclass(frozen=True)
class _Folded:
    """The folded weights of one oversampling factor (read-only, shared by all meters).

    ``e`` (span//2 + 1, pairs) and ``o`` (span//2, pairs), float32: with ``s`` and ``d`` the folded
    rows (chainrun/dsp/fold.py), ``s @ e + d @ o`` are the outputs in columns ``plus`` of W and
    ``s @ e - d @ o`` those in columns ``minus``.  ``l1``: |interpolated| <= l1 * max |samples under it|.
    """

    e: np.ndarray
    o: np.ndarray
    plus: np.ndarray
    minus: np.ndarray
    l1: float
    screen: "_Screen | None" = None


@dataclass(frozen=True)
class _Screen:
    """Factor 4: the weights split into the half-sample branch and the other two, and the screen's constant.

    ``e2``, ``o2``: the columns of ``e`` and ``o`` of branch 2 (the 16 pairs of its own outputs
    ``j`` and ``31 - j``); ``e13``, ``o13``: those of branches 1 and 3 (32 pairs).  ``l13``: for
    every instant of a row, the value of branch 1 (at ``s + 1/4``) minus the mean of the sample at
    ``s`` and the value of branch 2 (at ``s + 1/2``) is a filter ``g1`` of the row's samples, and
    branch 3 (at ``s + 3/4``) minus the mean of branch 2 and the sample at ``s + 1`` is ``g3``;
    ``l13`` is the largest L1 norm of any of them (about 0.39), taken from the float32 weights the
    products use.  So ``|branch 1 or 3| <= (max |samples| + max |branch 2|) / 2 + l13 * max |samples|``
    over a row, in exact arithmetic (chainrun.meters.truepeak says how rounding is allowed for).

    ``centre`` (float32, 8 x 32) and ``tail``, for the prescreen: ``centre[k, j]`` is the weight of
    branch 2's instant ``j`` of a row on the row's sample ``j + 15 + k`` (the 8 samples nearest to
    it, ``s - 3 .. s + 4``), rounded to float32, and ``tail`` the largest L1 norm of the other
    weights of any instant (about 0.51): every value of branch 2 is, in exact arithmetic, the
    instant's sum over ``centre`` plus at most ``tail`` times the row's sample peak, within the
    weights' rounding (at most 2**-24 of their L1 norm, 2.2, times that peak; the prescreen allows
    for it and for its float32 sums, chainrun.meters.truepeak).
    """

    e2: np.ndarray
    o2: np.ndarray
    e13: np.ndarray
    o13: np.ndarray
    l13: float
    centre: np.ndarray
    tail: float


def _screen(e: np.ndarray, o: np.ndarray) -> _Screen:
    """The :class:`_Screen` of the factor-4 weights ``e``, ``o`` (pairs 0-31: branches 1 and 3, 32-47: branch 2)."""
    h, span, row = _TP_HALF, _TP_SPAN, _TP_ROW
    e64, o64 = e.astype(np.float64), o.astype(np.float64)

    def taps(pair: int, sign: float) -> np.ndarray:
        """The weights on the row's samples of the pair's first (sign +1) or second (-1) output."""
        w = np.empty(span)
        w[:h] = e64[:h, pair] + sign * o64[:, pair]
        w[span - 1:h:-1] = e64[:h, pair] - sign * o64[:, pair]
        w[h] = e64[h, pair]
        return w

    worst, centre, tail = 0.0, np.empty((8, row)), 0.0
    for j in range(row):
        b1, b3 = taps(j, 1.0), taps(row - 1 - j, -1.0)
        b2 = taps(row + j, 1.0) if j < row // 2 else taps(row + row - 1 - j, -1.0)
        near = slice(j + _TP_TAPS // 2 - 4, j + _TP_TAPS // 2 + 4)     # samples s - 3 .. s + 4 (s: j + 18)
        centre[:, j] = b2[near]
        tail = max(tail, float(np.abs(b2).sum() - np.abs(b2[near]).sum()))
        at_s, at_next = np.zeros(span), np.zeros(span)
        at_s[j + _TP_TAPS // 2 - 1] = 1.0             # the sample at s: tap 18 of instant j
        at_next[j + _TP_TAPS // 2] = 1.0              # the sample at s + 1
        g1, g3 = b1 - (at_s + b2) / 2.0, b3 - (b2 + at_next) / 2.0
        worst = max(worst, float(np.abs(g1).sum()), float(np.abs(g3).sum()))
    parts = [np.ascontiguousarray(a[:, cols]) for a in (e, o) for cols in (slice(row, None), slice(0, row))]
    for a in parts:
        a.setflags(write=False)
    centre = centre.astype(np.float32)
    centre.setflags(write=False)
    return _Screen(parts[0], parts[2], parts[1], parts[3], worst * (1.0 + 1e-9), centre, tail * (1.0 + 1e-9))


def _column_pairs(factor: int) -> tuple[np.ndarray, np.ndarray]:
    """Columns of W in pairs, the second the first read backwards: output ``j`` of branch ``p`` with
    output ``row-1-j`` of branch ``factor-p`` (the prototype is symmetric)."""
    n_br, plus, minus = factor - 1, [], []
    for p in range(1, factor):
        q = factor - p
        if p > q:
            continue
        for j in range(_TP_ROW if p < q else _TP_ROW // 2):
            plus.append(j * n_br + p - 1)
            minus.append((_TP_ROW - 1 - j) * n_br + q - 1)
    return np.array(plus), np.array(minus)


@functools.lru_cache(maxsize=None)
def _weights(factor: int) -> _Folded:
    """The folded weights for ``factor`` (see :class:`_Folded`).

    The bound: in exact arithmetic a pair's outputs use the weights ``e + o`` and ``e - o``, whose
    L1 norm is ``sum(2*max(|e|, |o|))`` over the mirrored pairs plus ``|e|`` of the middle sample;
    the largest, with a margin for the rounding of the sums and products (at most about 1e-5 of it).
    """
    w = _toeplitz_weights(_interpolation_branches(factor))
    plus, minus = _column_pairs(factor)
    first, second = w[:, plus], w[:, minus]
    if not np.allclose(second, first[::-1], rtol=0.0, atol=1e-15):
        raise RuntimeError("meters: the true-peak interpolator's prototype is not symmetric")
    h = _TP_HALF
    # C order: BLAS ran these products 25 % slower with the weights in Fortran order
    e = np.ascontiguousarray(np.vstack([(first[:h] + first[:h:-1]) / 2.0, first[h:h + 1]]), dtype=_TP_DTYPE)
    o = np.ascontiguousarray((first[:h] - first[:h:-1]) / 2.0, dtype=_TP_DTYPE)
    e64, o64 = e.astype(np.float64), o.astype(np.float64)
    l1 = float((2.0 * np.maximum(np.abs(e64[:h]), np.abs(o64)).sum(axis=0) + np.abs(e64[h])).max()) * (1.0 + 1e-4)
    for a in (e, o, plus, minus):
        a.setflags(write=False)
    return _Folded(e, o, plus, minus, l1, _screen(e, o) if factor == 4 else None)
