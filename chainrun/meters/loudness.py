"""Streaming loudness meter: ITU-R BS.1770-4 loudness, EBU Tech 3341 maxima, EBU Tech 3342 range.

A :class:`LoudnessMeter` is fed one channel-major block at a time (``update``)
and keeps a fixed amount of state, so a file of any length is metered in
constant memory; ``reading()`` may be called at any time.

How the figures are built
-------------------------
1. Each channel is K-weighted (:func:`k_weighting_sos`, its two stages run as
   one 4th-order filter, state carried across blocks) and squared.
2. The squares are summed over 10 ms sub-blocks at absolute sample positions:
   sub-block ``k`` holds samples ``floor(k*rate/100)`` up to (not including)
   ``floor((k+1)*rate/100)``, so rates not divisible by 100 are handled exactly.
   A sub-block is summed only once all its samples are in (the incomplete one
   waits in a carry buffer), and the channels' sums are combined with the
   channel weights in channel order.  Every sub-block energy is therefore
   computed from the same numbers in the same order whatever the block split,
   and so is every figure below: the reading is bit-for-bit independent of
   how the stream was cut into blocks.
3. A window is a run of consecutive sub-blocks; its mean square is the sum of
   its sub-block energies over its exact number of samples, and its loudness
   is ``-0.691 + 10*log10(mean square)`` (BS.1770-4 Annex 1, eq. 2).
   Momentary: 40 sub-blocks (400 ms); short-term: 300 sub-blocks (3 s); both
   evaluated at every sub-block, a hop of 10 ms, for the maxima (Tech 3341).
4. Integrated loudness (BS.1770-4 Annex 1): gating blocks are the momentary
   windows starting at multiples of 100 ms (400 ms, 75 % overlap); absolute
   gate -70 LUFS, relative gate 10 LU below the power mean of the blocks above
   the absolute gate.
5. Loudness range (Tech 3342): short-term windows starting at multiples of
   100 ms (a 10 Hz hop, the minimum the 2016 revision asks for: an overlap of
   at least 2.9 s), absolute gate -70 LUFS, relative gate 20 LU below their
   power mean, then the 95th minus the 10th percentile (rank
   ``round((n-1)*p)`` of the sorted values, as in Tech 3342's reference code;
   from memory, verify).

Windows in batches
------------------
The windows ending in new sub-blocks are evaluated 1000 sub-blocks (10 s) at
a time, and for those still pending before anything reads the figures
(``reading``, ``gating_histogram``), which saves numpy's per-call cost on each
block and changes no figure: a window's mean square is the row sum of the same
energies in any batch, the histograms take the same values in stream order,
and a window is left out of the maxima only when a rounding bound that holds
for a batch of any length shows it cannot be one (``_windows``).  At most a
batch plus one block's sub-block energies wait.

Memory: histograms instead of lists
-----------------------------------
Gating blocks and short-term windows above -70 LUFS go into histograms of
bins 0.005 LU wide from -70 to +40 LUFS (windows louder than +40 LUFS fall
in the top bin).  Each bin keeps a count and the sum of its blocks' mean
squares (added one by one in stream order).  The integrated loudness is the
power mean of the bins above the relative gate, taken from those sums, so it
is exact except for the blocks in the one bin that holds the gate: that bin
is taken whole or not at all (whole when its own power mean is above the
gate).  Those blocks lie within 0.005 LU of the gate, itself at least 10 LU
below the result, so a fraction ``f`` of them (relative to the blocks kept)
moves the result by at most ``10*log10((1+f)/(1+f/10))`` LU: below 0.01 LU
while ``f < 0.25 %``, which programme material meets (tests compare with an
exact list of blocks).  The loudness range reads its percentiles at bin
power means (loudness of the bin's mean square): within 0.005 LU of each
percentile, 0.01 LU on the range (exact when the bin holds equal values), with the
same one-bin rule at its relative gate.

Readings of None
----------------
Every figure is None ("below the gate") when no window of its kind reaches
above -70 LUFS -- silence, or a stream shorter than one window: 400 ms for
the integrated and momentary figures, 3 s for the short-term maximum and the
loudness range.

Non-finite samples
------------------
NaN and +-Inf samples are counted (``nonfinite_samples``) and metered as 0.0,
so they keep their place in time and do not poison the filter state.  Finite
samples beyond +-1e100 are clamped there for metering only.
"""

from __future__ import annotations

import math

import numpy as np

from ..dsp.sums import row_extremes, segment_sums
from .gating import _GATE_POWER, _REL_GATE_LRA, LoudnessReading, _Histogram, _lufs, integrated_of
from .weighting import KWeighting, channel_weights, k_weighting_sos, squares_together

__all__ = ["LoudnessMeter", "LoudnessReading", "k_weighting_sos", "channel_weights", "integrated_of"]

_SUB_PER_S = 100          # sub-blocks per second (10 ms)
_MOMENTARY = 40           # sub-blocks in a momentary window / gating block (400 ms)
_SHORT = 300              # sub-blocks in a short-term window (3 s)
_STEP = 10                # sub-blocks between gating blocks and between LRA windows (100 ms)
_CLAMP = 1.0e100
_SLACK = 2.0 * np.finfo(np.float64).eps   # per-term rounding bound of a sum, with a factor 2 to spare
_BATCH = 1000             # sub-blocks (10 s) gathered before their windows are evaluated together
_FIRST = np.zeros(1, dtype=np.int64)   # the one segment of the joined carry


class LoudnessMeter:
    """Streaming BS.1770-4 / EBU Tech 3341 / Tech 3342 loudness meter (see the module notes).

    Parameters
    ----------
    rate : int
        Sample rate in Hz (> 0).
    channels : int
        Number of channels (>= 1); every block must have this many rows.
    channel_mask : int, optional
        WAVE_FORMAT_EXTENSIBLE speaker mask; chooses the channel weights
        (:func:`channel_weights`).

    Notes
    -----
    Cost: per block one lfilter (scipy's compiled loop, through chainrun.dsp) (both K-weighting stages as
    one 4th-order filter) over the weighted channels (LFE and other 0-weight
    channels are not filtered) that squares each output as it goes (the
    compiled loop; numpy squares in place without it), a ``numpy.add.reduceat``
    over the 10 ms sub-blocks (no copy of the block: only the sub-block that
    straddles two blocks is joined) and window sums over at most 300 sub-block
    energies per gating window and per window that may hold a maximum, for
    1000 sub-blocks (10 s) at a time and before any reading; no per-sample
    Python code.  The filter is about three quarters of the cost
    (``benchmarks/loudness_cost.py``; figures in ``benchmarks/RESULTS.md``):
    its recurrence is a chain of dependent operations per channel, about
    4 ns a sample whatever the library routine (``sosfilt``, two biquads,
    a complex-valued pair of channels and block matrix forms were measured
    no faster).  A block ending on a flush point (every block of the
    renderer's 65536 frames) is filtered in one call, without a copy.
    State: the filter state, at most one sub-block of filtered samples, the
    last 299 sub-block energies and two histograms of 22,000 bins, whatever
    the length of the stream.

    Examples
    --------
    >>> import numpy as np
    >>> m = LoudnessMeter(48000, 2)
    >>> tone = 10 ** (-23 / 20) * np.sin(2 * np.pi * 1000 * np.arange(48000 * 20) / 48000)
    >>> m.update(np.vstack([tone, tone]))
    >>> round(m.reading().integrated_lufs, 1)
    -23.0
    """

    HEADLINE = (("integrated_lufs", "loudness", "LUFS"), ("loudness_range_lu", "loudness range", "LU"))

    def __init__(self, rate: int, channels: int, channel_mask: int | None = None) -> None:
        if isinstance(channels, bool) or not isinstance(channels, (int, np.integer)) or channels < 1:
            raise ValueError(f"channels must be an integer >= 1, got {channels!r}")
        self._rate = int(rate)
        self._channels = int(channels)
        self._weights, self._note = channel_weights(self._channels, channel_mask)
        self._used = [c for c, g in enumerate(self._weights) if g != 0.0]
        self._kw = KWeighting(self._rate, len(self._used))
        self._follower: LoudnessMeter | None = None       # see follow()
        self._leader: LoudnessMeter | None = None
        self._waiting: tuple[np.ndarray, int] | None = None   # a leader's block, not yet K-weighted
        self._carry = np.zeros((len(self._used), 0))     # filtered samples of the incomplete sub-block
        self._subs = 0                                    # complete sub-blocks so far
        self._tail = np.zeros(0)                          # energies of the last <= 299 sub-blocks
        self._pending: list[np.ndarray] = []              # sub-block energies whose windows wait
        self._pending_n = 0                               # (for a batch, or for the next reading)
        self._frames = 0
        self._nonfinite = 0
        self._max_m = 0.0                                 # largest momentary / short-term mean square
        self._max_s = 0.0
        self._blocks = _Histogram()                       # gating blocks (integrated loudness)
        self._short = _Histogram()                        # short-term windows every 100 ms (LRA)
        self._grid = np.zeros(0, dtype=np.int64)          # _edge of 0, 1, ... (see _edges)

    def _edge(self, k: np.ndarray | int):
        """Absolute sample index where sub-block ``k`` starts."""
        return k * self._rate // _SUB_PER_S

    def _edges(self, k: int, n: int, shift: int = 0) -> np.ndarray:
        """``_edge`` of sub-blocks ``k .. k+n-1``, plus ``shift``: from a table of the edges of a few
        seconds' sub-blocks, as ``_edge(100 j + r) = j * rate + _edge(r)`` exactly."""
        j, r = divmod(k, _SUB_PER_S)
        if r + n > self._grid.shape[0]:
            if r + n > 4 * _BATCH:                        # a long block: no table so long
                return self._edge(np.arange(k, k + n, dtype=np.int64)) + shift
            self._grid = self._edge(np.arange(4 * _BATCH, dtype=np.int64))
        return self._grid[r:r + n] + (j * self._rate + shift)

    def update(self, block: np.ndarray, extremes: tuple[np.ndarray, np.ndarray] | None = None) -> None:
        """Meter one block.

        Parameters
        ----------
        block : numpy.ndarray
            Shape (channels, frames), channel-major floats (1.0 = full scale);
            frames may be 0.
        extremes : (numpy.ndarray, numpy.ndarray), optional
            ``(block.max(axis=1), block.min(axis=1))`` if the caller has them
            (saves a pass); they must be exactly those values.

        Raises
        ------
        TypeError
            If the block is not of a real floating type.
        ValueError
            If the block is not 2-D with ``channels`` rows.
        """
        block = np.asarray(block)
        if block.dtype.kind != "f":
            raise TypeError(f"block must hold floats (1.0 = full scale), got dtype {block.dtype}")
        if block.ndim != 2 or block.shape[0] != self._channels:
            raise ValueError(f"block must have shape ({self._channels}, frames), got {block.shape}")
        n = block.shape[1]
        if n == 0:
            return
        x = block[self._used] if len(self._used) < self._channels else block
        x = np.ascontiguousarray(x, dtype=np.float64)
        if extremes is None:
            extremes = row_extremes(block)                          # NaN shows up in both
        hi = float(np.maximum.reduce(extremes[0], axis=None))     # np.max / np.min without their wrapper
        lo = float(np.minimum.reduce(extremes[1], axis=None))
        if not (math.isfinite(hi) and math.isfinite(lo)):
            ok = np.isfinite(x)
            self._nonfinite += int(np.count_nonzero(~np.isfinite(block)))
            x = np.where(ok, x, 0.0)
            hi, lo = (float(x.max()), float(x.min())) if x.size else (0.0, 0.0)
        if hi > _CLAMP or lo < -_CLAMP:
            x = np.clip(x, -_CLAMP, _CLAMP)
        frame0, self._frames = self._frames, self._frames + n
        if not self._used:
            self._subblocks(np.zeros((1, n)))
            return
        if self._follower is not None:          # a leader: the block waits for the follower's
            self._finish_waiting()
            self._waiting = (x, frame0)
            return
        lead = self._leader
        if lead is not None and lead._waiting is not None:
            lx, lf0 = lead._waiting
            if lf0 == frame0 and lx.shape[1] == n:
                lead._waiting = None
                sq_lead, sq = squares_together(lead._kw, lx, self._kw, x, frame0)
                lead._subblocks(sq_lead)
                self._subblocks(sq)
                return
            lead._finish_waiting()
        self._subblocks(self._kw.squares(x, frame0))

    def follow(self, leader: "LoudnessMeter") -> bool:
        """Take blocks in step with ``leader`` (each block given to the leader first, then the same
        frames here, in one thread), and K-weight both in one pass. True if paired (same rate,
        channels to weight in both); :meth:`unfollow` ends it. The figures are the same bits.

        The leader keeps its block until this meter's arrives, and takes it on alone whenever
        anything asks it for its figures, or a block here does not match.
        """
        if leader is self or leader._rate != self._rate or not (self._used and leader._used) \
                or leader._follower is not None or self._leader is not None:
            return False
        leader._follower, self._leader = self, leader
        return True

    def unfollow(self) -> None:
        """End :meth:`follow`; the leader takes on a block still waiting."""
        lead = self._leader
        if lead is not None:
            lead._follower, self._leader = None, None
            lead._finish_waiting()

    def _finish_waiting(self) -> None:
        if self._waiting is not None:
            x, frame0 = self._waiting
            self._waiting = None
            self._subblocks(self._kw.squares(x, frame0))

    def _subblocks(self, sq: np.ndarray) -> None:
        """Sum the complete 10 ms sub-blocks of the carry followed by ``sq`` (squares of the new samples).

        The sub-block that straddles the carry and ``sq`` is summed from a small joined
        copy; the others straight from ``sq``. ``numpy.add.reduceat`` (or the compiled loop
        that gives its bits, chainrun.dsp.sums.segment_sums) sums each segment the same way
        wherever it lies, so every sub-block sum is the same in any split.
        """
        k0 = self._subs
        start = self._edge(k0)                                   # absolute index of the carry's start
        held = self._carry.shape[1] if self._used else 0
        end = start + held + sq.shape[1]
        k1 = (_SUB_PER_S * (end + 1) - 1) // self._rate          # complete sub-blocks after this block
        if k1 == k0:
            if self._used:
                self._carry = np.concatenate([self._carry, sq], axis=1) if held else sq.copy()
            return
        edges = self._edges(k0, k1 - k0 + 1, -(start + held))    # in sq; edges[0] <= 0
        if held:
            head = np.concatenate([self._carry, sq[:, :edges[1]]], axis=1)
            first = segment_sums(head, _FIRST, head.shape[1])
            sums = (np.concatenate([first, segment_sums(sq, edges[1:-1], edges[-1])], axis=1)
                    if k1 - k0 > 1 else first)
        else:
            sums = segment_sums(sq, edges[:-1], edges[-1])
        energy = None               # channel order: a fixed sum (1.0 * s and 0.0 + s are s, s >= +0)
        for row, c in enumerate(self._used):
            term = sums[row] if self._weights[c] == 1.0 else self._weights[c] * sums[row]
            energy = term if energy is None else energy + term
        if energy is None:
            energy = np.zeros(k1 - k0)
        if self._used:
            self._carry = sq[:, edges[-1]:].copy()
        self._subs = k1
        self._pending.append(energy)
        self._pending_n += energy.shape[0]
        if self._pending_n >= _BATCH:
            self._settle()

    def _settle(self) -> None:
        """Evaluate the windows of the pending sub-blocks (before anything reads the figures).

        The windows are the same whenever they are evaluated: each window's mean square is
        summed from the same energies, and the histograms take the gating blocks in stream order.
        """
        self._finish_waiting()
        if self._pending_n:
            energy = self._pending[0] if len(self._pending) == 1 else np.concatenate(self._pending)
            self._pending, self._pending_n = [], 0
            self._windows(self._subs - energy.shape[0], energy)

    def _windows(self, k0: int, energy: np.ndarray) -> None:
        """Momentary and short-term windows ending in the new sub-blocks ``k0 ..``.

        Every window's mean square that is used is summed exactly as one row (see below);
        but only the gating windows (every 100 ms) and the windows that may hold the maximum
        are summed so.  Which may: a running sum gives each window's mean square to within
        a rounding bound (``_SLACK``), and a window whose estimate plus that bound is below
        the best estimate minus its bound (or below the maximum so far) cannot be the
        maximum.  The figures are those of summing every window.
        """
        first = k0 - self._tail.shape[0]                          # sub-block of e[0]
        e = np.concatenate([self._tail, energy])
        k1 = first + e.shape[0]
        running, edges = None, self._edges(first, e.shape[0] + 1)
        for span, hist, attr in ((_MOMENTARY, self._blocks, "_max_m"), (_SHORT, self._short, "_max_s")):
            o, n = max(k0 - span + 1, 0) - first, k1 - span + 1 - max(k0 - span + 1, 0)   # windows in e
            if n <= 0:
                continue
            off = np.arange(o, o + n, dtype=np.int64)                # each new window's start in e
            lens = edges[o + span:o + span + n] - edges[o:o + n]
            gating = off % _STEP == (-first) % _STEP
            if n > _STEP:
                if running is None:
                    running = np.concatenate([[0.0], np.cumsum(e)])
                guess = (running[o + span:o + span + n] - running[o:o + n]) / lens
                # energies are >= 0: a running sum is off by at most (its length) * eps * its total,
                # and a row's own sum by at most (its length) * eps * that total as well
                slack = (2 * e.shape[0] + span + 4) * _SLACK * running[-1] / lens
                floor = max(float((guess - slack).max()), getattr(self, attr))
                pick = gating | (guess + slack >= floor)
                off, lens, gating = off[pick], lens[pick], gating[pick]
            # a C-contiguous copy, one row per window: numpy then sums each row on its own (pairwise),
            # the same way whatever the number of rows; a strided sliding view may be summed
            # column by column instead, which made the result depend on the block split (the view
            # serves only to take the copy: one row copied at a time, cheaper than an index per value)
            rows = np.ndarray((e.shape[0] - span + 1, span), e.dtype, e, 0, e.strides * 2)[off]
            z = rows.sum(axis=1) / lens
            if z.size:
                setattr(self, attr, max(getattr(self, attr), float(z.max())))
            hist.add(z[gating])
        self._tail = e[-(_SHORT - 1):].copy()

    def gating_histogram(self) -> tuple[np.ndarray, np.ndarray]:
        """Copies of the gating-block histogram: per 0.005 LU bin, the count and the sum of mean squares.

        :func:`integrated_of` combines several streams' histograms into the
        integrated loudness of all their gating blocks together.
        """
        self._settle()
        return self._blocks.count.copy(), self._blocks.power.copy()

    def reading(self) -> LoudnessReading:
        """The figures so far; the meter can go on being updated."""
        self._settle()
        integrated = integrated_of([(self._blocks.count, self._blocks.power)])
        lra = None
        kept = self._short.kept(_REL_GATE_LRA)
        if kept is not None and kept[1]:
            count, n, _ = kept
            cum = np.cumsum(count)
            lo, hi = (int(np.searchsorted(cum, math.floor((n - 1) * p + 0.5) + 1)) for p in (0.10, 0.95))
            power = self._short.power                  # each percentile: its bin's power mean
            lra = _lufs(power[hi] / count[hi]) - _lufs(power[lo] / count[lo])
        return LoudnessReading(
            integrated_lufs=integrated, loudness_range_lu=lra,
            max_momentary_lufs=_lufs(self._max_m) if self._max_m > _GATE_POWER else None,
            max_short_term_lufs=_lufs(self._max_s) if self._max_s > _GATE_POWER else None,
            channel_weights=tuple(self._weights), weights_note=self._note,
            frames=self._frames, nonfinite_samples=self._nonfinite)

    result = reading          # the name chainrun.meters.Meter uses
