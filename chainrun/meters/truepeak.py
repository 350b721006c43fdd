"""True-peak meter, ITU-R BS.1770-4 Annex 2: a polyphase interpolator run as folded, banded matrix products."""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..dsp.fold import absmax_runs, absmax_sum, fold_rows, prescreen_rows, screen_picked
from .interpolator import (_SCREEN_EPS, _TP_CALL_OUT, _TP_CLAMP, _TP_DTYPE, _TP_GROUP, _TP_HALF, _TP_ROW, _TP_ROWS_PER_CALL,
                           _TP_TAPS, _oversampling, _weights)

__all__ = ["TruePeakMeter", "TruePeakReading"]

# The prescreen's allowance, times the row's sample peak X, for its own arithmetic: its weights rounded to
# float32 (at most 2**-24 of their L1 norm, 2.2: 1.3e-7) and its sums of 8 float32 products (at most
# 8 * 2**-24 / (1 - 8 * 2**-24) of the sum of their magnitudes, 2.2 X: 1.1e-6), with a margin.
_PRESCREEN_EPS = 2.0e-6

def _products(s: np.ndarray, d: np.ndarray, e: np.ndarray, o: np.ndarray, a: np.ndarray, b: np.ndarray,
              products: list[int]) -> None:
    """``s @ e`` into ``a`` and ``d @ o`` into ``b`` for the runs of 512 rows listed in ``products``,
    one BLAS call per product whatever the run (the same shape, so the same bits)."""
    rpc = _TP_ROWS_PER_CALL
    if len(products) * rpc == s.shape[0]:                    # all: numpy makes one BLAS call per product
        stack = (len(products), rpc, -1)
        np.matmul(s.reshape(stack), e, out=a.reshape(stack))
        np.matmul(d.reshape(stack), o, out=b.reshape(stack))
        return
    for k in products:
        np.matmul(s[k * rpc:(k + 1) * rpc], e, out=a[k * rpc:(k + 1) * rpc])
        np.matmul(d[k * rpc:(k + 1) * rpc], o, out=b[k * rpc:(k + 1) * rpc])


@dataclass(frozen=True)
class TruePeakReading:
    """Per channel, the larger of the sample peak and max |interpolated| (linear); the oversampling factor."""

    true_peak: tuple[float, ...]
    oversampling: int

    def to_dict(self) -> dict:
        return {"true_peak": [float(v) if math.isfinite(v) else None for v in self.true_peak],
                "true_peak_oversampling": self.oversampling}


class TruePeakMeter:
    """Streaming true peak, ITU-R BS.1770-4 Annex 2.

    Parameters
    ----------
    rate : int
        Sample rate in Hz (> 0); chooses the oversampling factor.
    channels : int
        Number of channels (>= 1).

    Notes
    -----
    **True peak.**  ITU-R BS.1770-4 Annex 2: the signal is oversampled by 4
    when ``rate < 88200``, by 2 when ``rate < 176400`` and not at all above
    (the true peak is then the sample peak); the reading is the larger of the
    sample peak and max |x| of the interpolated values.

    The interpolator is a polyphase FIR designed with ``scipy.signal.firwin``:
    a windowed-sinc prototype of ``38*F + 1`` taps (153 for F = 2, 305 for
    F = 4), cutoff at the input's Nyquist frequency, Kaiser window with
    beta = 5.75, split into F branches of 38 taps; branch 0 is the identity
    and the samples stand for it.  The transition band runs from 0.45 to 0.55
    of the sample rate, so every branch is flat up to 0.45 * rate: its gain
    error there is at most 0.015 dB (computed from the coefficients with
    ``scipy.signal.freqz``), and images of content up to 0.45 * rate fall in
    the stopband.  A full-scale sine at any frequency up to 0.45 * rate whose
    crest falls on an oversampled instant therefore reads within 0.015 dB of
    its amplitude.  Nothing is evaluated between the oversampled instants, as
    in BS.1770-4, so a peak falling between them is missed: a sine at
    frequency f can read up to ``20*log10(cos(pi*f/(F*rate)))`` low
    (-0.17 dB at rate/4 with F = 4, -0.69 dB at rate/2); long sines whose
    frequency is not locked to the sample clock pass every instant near
    their crests and read their amplitude.

    Only instants whose 38 input samples all exist are evaluated: nothing is
    assumed before the first sample or after the last, so the first 18 and
    the last 18 sample intervals of the stream are not interpolated (the
    sample peak still covers their samples).  Likewise an instant whose 38
    samples include a non-finite one is skipped.

    The interpolation runs as matrix products in single precision, one per
    channel per 16384 instants, on rows of 69 samples (32 instants each).
    The prototype is symmetric, so the outputs of a row come in pairs whose
    weights are each other read backwards (output ``j`` of branch ``p`` and
    output ``31 - j`` of branch ``F - p``).  A row is therefore folded into
    the sums and differences of its mirrored samples (35 and 34 values,
    chainrun/dsp/fold.py); two products with the pairs' symmetric and
    antisymmetric weights, (512, 35) x (35, P) and (512, 34) x (34, P) with
    P = 48 pairs for F = 4 (16 for F = 2), give ``a`` and ``b`` for 512
    rows, and the pair's outputs are ``a + b`` and
    ``a - b``: the larger magnitude of the two is ``|a| + |b|``, so the
    reading needs no more than that.  This does half the multiply-adds of
    one product with the unfolded weights.  The rounding error of an
    interpolated value is at most 1.15e-5 of the largest of its 38 samples
    (bound (35 + 2) * 2**-24 times the sum of 2*(|e| + |o|) over a pair's
    weights, 5.2; about 1e-7 seen on noise), far below the filter's own
    0.015 dB.  Every product has the same shape and starts at an absolute
    multiple of 16384 instants, whatever the block sizes, so each
    interpolated value is computed from the same numbers in the same order
    and the true-peak reading is bit-for-bit independent of the block split.
    OpenBLAS spreads even products this small over its own worker threads
    (measured: 2.3 cores busy for one 256 x 53 x 48 product on a 2-core
    machine), which takes cores the batch's ``--workers`` did not grant and
    stalls when they are busy; the renderer therefore keeps BLAS on the
    calling thread while it meters (threadpoolctl), and a batch gets its
    parallelism from its own workers and threads.

    A product is skipped when it provably cannot raise the reading: every
    interpolated value is at most the weights' L1 norm (2.6) times the
    largest of its samples, so a stretch of 16384 instants whose samples
    stay below 1/2.6 (-8.3 dB) of the reading so far is not computed.  This
    is exact (the reading is the same as with every product computed) and
    makes quiet passages cheap.  Finite samples beyond +-1e30 are clamped to
    +-1e30 for the interpolation only (single precision cannot hold them).

    At 4x the rows of a product are screened as well, so that a row is
    computed only as far as it could pass the level reached so far.  Branch 1
    at ``s + 1/4`` is the mean of the sample at ``s`` and branch 2 at
    ``s + 1/2`` plus a filter of the row's samples whose L1 norm is at most
    0.39 (branch 3 likewise, with the sample at ``s + 1``), so over a row
    ``|branch 1 or 3| <= (X + P2) / 2 + 0.39 X`` with ``X`` the row's sample
    peak and ``P2`` its branch-2 peak.  And every branch-2 value is its 8
    nearest taps' sum plus at most 0.51 X (the other taps' L1 norm), so a
    prescreen that takes only those 8 taps, in single precision, bounds ``P2``
    for every row at a quarter of the multiply-adds of branch 2.  Branch 2 is
    computed only for the rows where that bound could pass the level (about
    6 % of the rows of noise), and branches 1 and 3 only where the bound with
    the computed ``P2`` could (under 1 %).  chainrun/meters/interpolator.py
    computes the constants from the weights in use; the rounding of computed
    values and of the prescreen's own sums is allowed for.  This is exact
    too: the values left out cannot pass values already in the reading.  The
    level it compares with depends only on the stream (the interpolated peak
    of earlier products, this product's samples and computed branch-2 values),
    so which rows are computed does not depend on the blocks either.

    State between blocks is at most channels * (16384 + 37) samples, whatever
    the length of the stream.

    References
    ----------
    .. [1] ITU-R Recommendation BS.1770-4 (10/2015), "Algorithms to measure
       audio programme loudness and true-peak audio level", Annex 2.
    .. [2] EBU Tech 3341 (2016), "Loudness Metering: 'EBU Mode' metering to
       supplement EBU R 128 loudness normalization" (true-peak meter, dBTP).
    .. [3] J. F. Kaiser, "Nonrecursive digital filter design using the
       I0-sinh window function", Proc. IEEE ISCAS, 1974.
    .. [4] R. E. Crochiere and L. R. Rabiner, "Multirate Digital Signal
       Processing", Prentice-Hall, 1983 (polyphase interpolation).
    """

    HEADLINE = (("true_peak_dbtp", "true peak", "dBTP"),)
    SCREEN = True           # screen the rows at 4x (False: compute every row, as a reference for tests)

    def __init__(self, rate: int, channels: int) -> None:
        c = self._channels = int(channels)
        self._factor = _oversampling(int(rate))
        self._interp = self._factor > 1
        self._peak = np.zeros(c)                               # sample peak of the finite samples
        if self._interp:
            self._fw = _weights(self._factor)
            self._l1 = self._fw.l1
            self._tp_max = np.zeros(c)                         # max |interpolated| so far
            self._hist = np.zeros((c, 0), dtype=_TP_DTYPE)     # samples from the first pending instant on
            self._hist_bad: np.ndarray | None = None           # non-finite flags of _hist, or None
            rows, pairs = _TP_GROUP * _TP_ROWS_PER_CALL, self._fw.e.shape[1]
            self._s = np.empty((rows, _TP_HALF + 1), dtype=_TP_DTYPE)   # folded rows of samples
            self._d = np.empty((rows, _TP_HALF), dtype=_TP_DTYPE)
            self._a = np.empty((rows, pairs), dtype=_TP_DTYPE)          # s @ e and d @ o
            self._b = np.empty((rows, pairs), dtype=_TP_DTYPE)
            if self._fw.screen is not None:                              # the prescreen's candidates (_screened)
                rpc = _TP_ROWS_PER_CALL
                self._a2 = np.empty((rpc, self._fw.screen.e2.shape[1]), dtype=_TP_DTYPE)   # their branch 2
                self._b2 = np.empty_like(self._a2)
                self._xs = np.empty(rpc)                                    # their samples' peaks
                self._picked = np.empty(rpc, dtype=np.int64)                # which rows they are
                self._kept = np.empty(rpc, dtype=np.int64)                  # those the screen keeps
        self.rows_screened = 0      # rows the screen looked at; of those, the rows whose branch 2 was
        self.rows_picked = 0        # computed, and of those, the rows whose branches 1 and 3 were
        self.rows_computed = 0      # computed too

    def update(self, block: np.ndarray, extremes: tuple[np.ndarray, np.ndarray] | None = None) -> None:
        """Meter one block (channels x frames, float64, C-contiguous); see :meth:`MeterBank.update`."""
        if block.shape[1] == 0:
            return
        hi, lo = (block.max(axis=1), block.min(axis=1)) if extremes is None else extremes
        bad = None
        if not (np.isfinite(hi).all() and np.isfinite(lo).all()):
            bad = ~np.isfinite(block)
        for c in range(self._channels):
            h, l_ = float(hi[c]), float(lo[c])
            if not (math.isfinite(h) and math.isfinite(l_)):
                row = np.where(bad[c], 0.0, block[c])
                h, l_ = float(row.max()), float(row.min())
            pk = max(h, -l_)
            if pk > self._peak[c]:
                self._peak[c] = pk
        if self._interp:
            self._interpolate(block, bad, max(float(hi.max()), -float(lo.min())))

    def reading(self) -> TruePeakReading:
        """The true peak so far; the meter can go on being updated."""
        peaks = [float(p) for p in self._peak]
        if self._interp:
            tp = self._pending_true_peak()
            peaks = [max(p, float(t)) for p, t in zip(peaks, tp)]
        return TruePeakReading(tuple(peaks), self._factor)

    def _interpolate(self, block: np.ndarray, bad: np.ndarray | None, block_peak: float) -> None:
        """Append a block to the interpolation buffer and run every complete product."""
        h = self._hist.shape[1]
        n = block.shape[1]
        z = np.empty((self._channels, h + n), dtype=_TP_DTYPE)
        z[:, :h] = self._hist
        src = block
        if bad is not None:
            src = np.where(bad, 0.0, block)
            block_peak = float(np.max(np.abs(src)))
        if block_peak > _TP_CLAMP:
            src = np.clip(src, -_TP_CLAMP, _TP_CLAMP)
        np.copyto(z[:, h:], src, casting="same_kind")
        if bad is not None or self._hist_bad is not None:
            zbad = np.zeros(z.shape, dtype=bool)
            if self._hist_bad is not None:
                zbad[:, :h] = self._hist_bad
            if bad is not None:
                zbad[:, h:] = bad
        else:
            zbad = None
        calls = (h + n - _TP_TAPS + 1) // _TP_CALL_OUT if h + n >= _TP_TAPS else 0
        if calls:
            # Peak of each stretch of _TP_CALL_OUT samples; product k reads stretches k and k + 1
            # (the second only partly, or the short remainder), so |interpolated| <= l1 * that peak.
            whole = -(-(h + n) // _TP_CALL_OUT)
            stretch = np.zeros((self._channels, whole + 1))
            for c in range(self._channels):
                absmax_runs(z[c], _TP_CALL_OUT, stretch[c, :whole])
            bound = np.maximum(stretch[:, :-1], stretch[:, 1:]) * self._l1
            for c in range(self._channels):
                for k in range(0, calls, _TP_GROUP):
                    self._group(z, zbad, c, k, min(calls, k + _TP_GROUP), bound[c], self._tp_max)
        used = calls * _TP_CALL_OUT
        self._hist = z[:, used:].copy()
        if zbad is not None and zbad[:, used:].any():
            self._hist_bad = zbad[:, used:].copy()
        else:
            self._hist_bad = None

    def _group(self, z: np.ndarray, zbad: np.ndarray | None, c: int, k0: int, k1: int,
               bound: np.ndarray, into: np.ndarray) -> None:
        """Products ``k0 .. k1-1`` (at most _TP_GROUP) of channel ``c`` of buffer ``z``.

        Product ``k`` covers instants ``k*16384 .. k*16384 + 16383`` and reads
        ``z[c, k*16384 : k*16384 + 16384 + 37]``; every product has the shapes
        (512, 35) x (35, P) and (512, 34) x (34, P).  A product whose ``bound`` does not exceed
        the reading so far is skipped; at 4x, the rows of the others are screened
        (:meth:`_screened`) when their samples are all finite.  ``into[c]`` takes the max.
        """
        level = max(float(self._peak[c]), float(into[c]))
        todo = [k - k0 for k in range(k0, k1) if bound[k] > level]
        if not todo:
            return
        start, n_rows = k0 * _TP_CALL_OUT, (k1 - k0) * _TP_ROWS_PER_CALL
        if self._fw.screen is not None and self.SCREEN and (
                zbad is None or not zbad[c, start:start + n_rows * _TP_ROW + _TP_TAPS - 1].any()):
            self._screened(z, c, start, todo, into)
        else:
            into[c] = max(float(into[c]), self._rows_peak(z, zbad, c, start, n_rows, todo, None))

    def _screened(self, z: np.ndarray, c: int, start: int, todo: list[int], into: np.ndarray) -> None:
        """Products ``todo`` of the rows from instant ``start`` on (finite samples, 4x), screened: a row is
        computed only as far as it could pass the level.

        Of a row, ``X`` is the peak of its samples (of the three runs of 32 under its 69).  The
        prescreen (:func:`~chainrun.dsp.fold.prescreen_rows`) takes, for each instant of branch 2,
        the sum over the 8 samples nearest to it (float32), and ``P2b`` = the largest magnitude of
        those plus ``(tail + eps) X`` (:class:`~chainrun.meters.interpolator._Screen`: the other
        taps' L1 norm, about 0.51; ``eps`` = _SCREEN_EPS covers the rounding of a computed value,
        1.15e-5 of ``X``, and _PRESCREEN_EPS that of the prescreen's float32 weights and sums) is
        at least every branch-2 value the products would compute for the row.  Every branch-1 or
        -3 value is at most ``(X (1 + eps) + P2) / 2 + (l13 + 1.5 eps) X`` with ``P2`` the row's
        computed branch-2 peak, so at most that bound with ``P2b``.  A row where neither ``P2b``
        nor that bound passes the level cannot raise the reading and is left there.  Branch 2 of
        the others (the candidates, about 6 % of the rows of noise) is computed, and their
        branches 1 and 3 only where the bound with their own ``P2`` passes the level
        (:func:`~chainrun.dsp.fold.screen_picked`).

        The level of a product is the interpolated peak so far, the peak of the product's samples
        and of its candidates' branch-2 values; all of them count in the reading (a row left at
        the prescreen has its branch-2 values below the level), so the reading is that of every row
        computed.  The level depends only on the stream, not on its blocks, and so does which rows
        are computed.
        """
        sc, rpc = self._fw.screen, _TP_ROWS_PER_CALL
        s, d, xs, picked, kept = self._s, self._d, self._xs, self._picked, self._kept
        one_eps, l13_eps, one_tiny = 1.0 + _SCREEN_EPS, sc.l13 + 1.5 * _SCREEN_EPS, 1.0 + 1e-9
        tail = sc.tail + _SCREEN_EPS + _PRESCREEN_EPS
        for k in todo:
            level, n = prescreen_rows(z[c], start + k * rpc * _TP_ROW, rpc, sc.centre, tail, one_eps, l13_eps,
                                      one_tiny, float(into[c]), s, d, xs, picked)
            self.rows_screened += rpc
            if not n:
                continue
            self.rows_picked += n
            a, b = self._a2[:n], self._b2[:n]
            np.matmul(s[:n], sc.e2, out=a)
            np.matmul(d[:n], sc.o2, out=b)
            peak, m = screen_picked(a, b, xs[:n], one_eps, l13_eps, one_tiny, level, kept)
            if m:
                self.rows_computed += m
                rows = kept[:m]
                peak = max(peak, absmax_sum(s[rows] @ sc.e13, d[rows] @ sc.o13))
            into[c] = max(float(into[c]), peak)

    def _rows_peak(self, z: np.ndarray, zbad: np.ndarray | None, c: int, start: int, n_rows: int,
                   products: list[int] | None, valid: int | None) -> float:
        """max |interpolated| over instants ``start .. start + 32*n_rows - 1`` of channel ``c``.

        ``products`` lists which runs of 512 rows to compute (None: all rows
        in one product); rows not computed count as 0.  Instants from
        ``start + valid`` on, and instants whose samples include a flagged
        (non-finite) one, are left out.
        """
        fw = self._fw
        s, d = self._s[:n_rows], self._d[:n_rows]
        a, b = self._a[:n_rows], self._b[:n_rows]
        fold_rows(z[c], start, _TP_ROW, s, d)                      # every row: cheap
        runs = [(0, n_rows)]
        if products is None:                                       # one product of its own shape
            np.matmul(s, fw.e, out=a)
            np.matmul(d, fw.o, out=b)
        else:
            _products(s, d, fw.e, fw.o, a, b, products)
            if len(products) * _TP_ROWS_PER_CALL != n_rows:
                runs = [(k * _TP_ROWS_PER_CALL, (k + 1) * _TP_ROWS_PER_CALL) for k in products]
        n_inst = n_rows * _TP_ROW
        mask = None
        if zbad is not None:
            seg = zbad[c, start:start + n_inst + _TP_TAPS - 1]
            if seg.any():
                cs = np.zeros(seg.shape[0] + 1, dtype=np.int64)
                np.cumsum(seg, out=cs[1:])
                mask = (cs[_TP_TAPS:_TP_TAPS + n_inst] - cs[:n_inst]) > 0
        if valid is not None and valid < n_inst:
            tail = np.zeros(n_inst, dtype=bool)
            tail[valid:] = True
            mask = tail if mask is None else (mask | tail)
        if mask is None:                        # the usual case: max(|a + b|, |a - b|) is |a| + |b|
            return max(absmax_sum(a[r0:r1], b[r0:r1]) for r0, r1 in runs)
        y = np.zeros((n_rows, _TP_ROW * (self._factor - 1)), dtype=_TP_DTYPE)
        for r0, r1 in runs:
            y[r0:r1, fw.plus] = a[r0:r1] + b[r0:r1]
            y[r0:r1, fw.minus] = a[r0:r1] - b[r0:r1]
        y = np.where(mask[:, np.newaxis], np.float32(0.0), y.reshape(n_inst, -1))   # (instants, branches)
        return max(float(y.max()), -float(y.min()))

    def _pending_true_peak(self) -> np.ndarray:
        """Max |interpolated| including instants still waiting for a full product; state untouched.

        The pending instants depend only on the stream's length (products
        start at absolute multiples of 16384 instants), so whichever way they
        are computed the reading stays independent of the block split.
        """
        out = self._tp_max.copy()
        h = self._hist.shape[1]
        valid = h - _TP_TAPS + 1
        if valid > 0:
            n_rows = -(-valid // _TP_ROW)
            z = np.zeros((self._channels, n_rows * _TP_ROW + _TP_TAPS - 1), dtype=_TP_DTYPE)
            z[:, :h] = self._hist
            zbad = None
            if self._hist_bad is not None:
                zbad = np.zeros(z.shape, dtype=bool)
                zbad[:, :h] = self._hist_bad
            for c in range(self._channels):
                out[c] = max(float(out[c]), self._rows_peak(z, zbad, c, 0, n_rows, None, valid))
        return out


