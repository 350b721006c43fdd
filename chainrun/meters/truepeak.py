"""True-peak meter, ITU-R BS.1770-4 Annex 2: a polyphase interpolator run as folded, banded matrix products."""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..dsp.fold import absmax_runs, absmax_sum, fold_rows, screen_rows
from .interpolator import (_SCREEN_EPS, _TP_CALL_OUT, _TP_CLAMP, _TP_DTYPE, _TP_GROUP, _TP_HALF, _TP_ROW, _TP_ROWS_PER_CALL,
                           _TP_TAPS, _oversampling, _weights)

__all__ = ["TruePeakMeter", "TruePeakReading"]

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

    At 4x the rows of a product are screened as well: branch 2 (the
    half-sample instants, a third of the multiply-adds) is computed for every
    row, and branches 1 and 3 only for the rows where they could pass the
    level reached so far.  Branch 1 at ``s + 1/4`` is the mean of the sample at
    ``s`` and branch 2 at ``s + 1/2`` plus a filter of the row's samples whose
    L1 norm is at most 0.39 (branch 3 likewise, with the sample at ``s + 1``),
    so over a row ``|branch 1 or 3| <= (X + P2) / 2 + 0.39 X`` with ``X`` the
    row's sample peak and ``P2`` its branch-2 peak (chainrun/meters/
    interpolator.py computes the constant from the weights in use; the
    rounding of computed values is allowed for).  On noise, 1-3 % of the rows
    are computed in full.  This is exact too: the skipped values cannot pass
    values already in the reading.  The level it compares with depends only
    on the stream (the interpolated peak of earlier products, this product's
    samples and branch-2 values), so which rows are computed does not depend
    on the blocks either.

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
            if self._fw.screen is not None:                              # branch 2 alone (_screened)
                self._a2 = np.empty((rows, self._fw.screen.e2.shape[1]), dtype=_TP_DTYPE)
                self._b2 = np.empty_like(self._a2)
                self._kept = np.empty(_TP_ROWS_PER_CALL, dtype=np.int64)    # rows the screen keeps
        self.rows_screened = 0      # rows whose branch 2 was computed by the screen, and of those,
        self.rows_computed = 0      # the rows whose branches 1 and 3 were computed too

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
            self._screened(z, c, start, n_rows, todo, into)
        else:
            into[c] = max(float(into[c]), self._rows_peak(z, zbad, c, start, n_rows, todo, None))

    def _screened(self, z: np.ndarray, c: int, start: int, n_rows: int, todo: list[int], into: np.ndarray) -> None:
        """Products ``todo`` of the rows from instant ``start`` on (finite samples, 4x): branch 2 of every
        row, branches 1 and 3 only of the rows the screen cannot clear.

        Of a row, ``X`` is the peak of its samples (of the three runs of 32 under its 69) and ``P2``
        the peak of its branch-2 values as computed; every branch-1 or -3 value of the row, as the
        full products would compute it, is at most ``(X (1 + eps) + P2) / 2 + (l13 + 1.5 eps) X``
        (:class:`~chainrun.meters.interpolator._Screen`; ``eps`` = _SCREEN_EPS covers the rounding
        of the computed values, 1.15e-5 of ``X`` each).  A row whose bound does not pass the level
        (the interpolated peak so far, and this product's own branch-2 values and samples, which
        all count in the reading) cannot raise the reading and is not computed further. The level
        depends only on the stream, not on its blocks, and so does which rows are computed.
        """
        sc, rpc = self._fw.screen, _TP_ROWS_PER_CALL
        s, d = self._s[:n_rows], self._d[:n_rows]
        fold_rows(z[c], start, _TP_ROW, s, d)
        a, b = self._a2[:n_rows], self._b2[:n_rows]
        _products(s, d, sc.e2, sc.o2, a, b, todo)
        kept = self._kept
        one_eps, l13_eps = 1.0 + _SCREEN_EPS, sc.l13 + 1.5 * _SCREEN_EPS
        for k in todo:
            r0, r1 = k * rpc, (k + 1) * rpc
            peak, n = screen_rows(a[r0:r1], b[r0:r1], z[c], start + r0 * _TP_ROW, one_eps, l13_eps, 1.0 + 1e-9,
                                  float(into[c]), kept)
            self.rows_screened += rpc
            if n:
                self.rows_computed += n
                rows = kept[:n] + r0
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


