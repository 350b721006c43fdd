"""Streaming level meters: sample peak, true peak, RMS, DC offset, clipping, non-finite samples.

A :class:`Meter` is fed one block at a time (``update``) and keeps only a small,
fixed amount of state between blocks, so a file of any length is metered in
constant memory.  Every figure it reports is independent of how the file was
split into blocks (exactly for counts and regions, up to float rounding for
the sums; the true-peak figure is bit-for-bit independent, see :class:`Meter`).
``result()`` may be called at any time and does not disturb the meter.

Conventions
-----------
* Sample values are floats with 0 dBFS = 1.0, the convention of soundfile's
  float reading of PCM.  Every dB figure is ``20*log10(value)`` with that
  reference; silence gives ``-inf`` (``None`` in ``to_dict()``).
* RMS is referenced to a full-scale **square** wave: a square wave of
  amplitude 1.0 reads 0 dBFS RMS and a sine of amplitude 1.0 reads
  20*log10(1/sqrt(2)) = -3.01 dBFS RMS.  (Some measurement standards put the
  full-scale sine at 0 dB instead -- AES17, from memory; verify -- chainrun
  does not.)
* Non-finite samples (NaN, +-Inf) are counted and otherwise left out: they do
  not enter the peak, true peak, RMS, DC offset or clip figures, and RMS and
  DC offset are means over the finite samples only.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

from .text import db as _db

__all__ = ["Meter", "MeterReading", "ChannelReading"]

# --- true-peak interpolator -------------------------------------------------
# Sample rate -> oversampling factor, ITU-R BS.1770-4 Annex 2: x4 below 88.2 kHz,
# x2 below 176.4 kHz, x1 (true peak = sample peak) from 176.4 kHz up.
_OVERSAMPLING_STEPS = ((88200, 4), (176400, 2))
_TP_TAPS = 38           # taps per polyphase branch (input samples under one interpolated value)
_TP_BETA = 5.75         # Kaiser beta: lowest worst-case branch gain error up to 0.45*rate for 38 taps
_TP_ROW = 16            # interpolated instants per branch computed by one row of the matrix product
_TP_ROWS_PER_CALL = 256  # rows in every matrix product: one shape whatever the block split (see Meter
                         # notes); rows of 8 to 24 instants ran within 10 % of each other on one thread
_TP_GROUP = 4           # products whose rows are copied together
_TP_DTYPE = np.float32  # arithmetic of the interpolation (the sample peak is always float64)
_TP_CLAMP = 1.0e30      # finite samples beyond +-this are clamped for interpolation only
_TP_SPAN = _TP_TAPS + _TP_ROW - 1          # input samples under one row
_TP_CALL_OUT = _TP_ROW * _TP_ROWS_PER_CALL  # interpolated instants per branch in one product
# The skip bound in Meter._interpolate assumes a product reads at most two stretches of samples.
if _TP_TAPS - 1 > _TP_CALL_OUT:
    raise RuntimeError("meters: a product's samples must span at most two stretches")


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
    from scipy import signal              # imported on first use: see chainrun/__init__.py
    half = _TP_TAPS // 2
    proto = signal.firwin(2 * half * factor + 1, 1.0 / factor, window=("kaiser", _TP_BETA)) * factor
    k = np.arange(_TP_TAPS)
    centre = half * factor
    return np.array([proto[centre + (half - 1 - k) * factor + p] for p in range(1, factor)])


def _toeplitz_weights(branches: np.ndarray) -> np.ndarray:
    """Matrix W (span, row*branches) so that one row of input samples times W gives a row of outputs.

    Output ``j`` of branch ``p`` of a row that starts at input sample ``o``
    uses samples ``o + j .. o + j + taps - 1``; column ``j*P + p`` of W holds
    that branch's weights at rows ``j .. j + taps - 1`` and zeros elsewhere.
    """
    n_br, taps = branches.shape
    w = np.zeros((_TP_SPAN, _TP_ROW, n_br))
    for j in range(_TP_ROW):
        w[j:j + taps, j, :] = branches.T
    return np.ascontiguousarray(w.reshape(_TP_SPAN, _TP_ROW * n_br), dtype=_TP_DTYPE)


@functools.lru_cache(maxsize=None)
def _weights(factor: int) -> tuple[np.ndarray, float]:
    """Banded weight matrix (read-only, shared by all meters) and bound factor for ``factor``.

    The bound factor is the largest L1 norm of a branch as used (single-precision
    weights) with a margin for the rounding of the products, so that
    |interpolated| <= factor * max |samples under it|.
    """
    w = _toeplitz_weights(_interpolation_branches(factor))
    w.setflags(write=False)
    l1 = float(np.abs(w.astype(np.float64)).sum(axis=0).max()) * (1.0 + 1e-4)
    return w, l1


def _json_float(value: float | None) -> float | None:
    """A float for JSON: None for None, -inf, +inf and NaN."""
    if value is None or not math.isfinite(value):
        return None
    return float(value)


# --- readings ---------------------------------------------------------------

@dataclass(frozen=True)
class ChannelReading:
    """Meter figures of one channel.

    Attributes
    ----------
    peak : float
        Sample peak, max |x| over the finite samples (linear, 1.0 = 0 dBFS).
    true_peak : float or None
        Estimated peak of the reconstructed signal, ITU-R BS.1770-4 Annex 2
        (linear); never below ``peak``.  None when the meter ran with
        ``true_peak=False``.
    rms : float
        sqrt(mean x**2) over the finite samples; 0.0 when there are none.
    dc_offset : float
        Mean of the finite samples; 0.0 when there are none.
    clipped_samples : int
        Number of samples with |x| >= the meter's ``full_scale``.
    clipped_regions : tuple of (int, int)
        ``(start_frame, length)`` of the first ``max_regions`` runs of
        consecutive clipped samples, in order; frames count from 0 at the
        first sample given to the meter.
    clipped_region_count : int
        Total number of such runs (may exceed ``len(clipped_regions)``).
    nonfinite_samples : int
        Number of NaN and +-Inf samples (left out of every other figure).
    """

    peak: float
    true_peak: float | None
    rms: float
    dc_offset: float
    clipped_samples: int
    clipped_regions: tuple[tuple[int, int], ...]
    clipped_region_count: int
    nonfinite_samples: int

    @property
    def peak_dbfs(self) -> float:
        """Sample peak in dBFS (0 dBFS = 1.0); -inf for silence."""
        return _db(self.peak)

    @property
    def true_peak_dbtp(self) -> float | None:
        """True peak in dBTP (0 dBTP = 1.0); -inf for silence, None if not metered."""
        return None if self.true_peak is None else _db(self.true_peak)

    @property
    def rms_dbfs(self) -> float:
        """RMS in dBFS, referenced to a full-scale square wave (full-scale sine: -3.01); -inf for silence."""
        return _db(self.rms)

    def to_dict(self) -> dict:
        """The reading as JSON-safe plain types.

        dB figures of silence (and any non-finite float) become None; regions
        become lists ``[start_frame, length]``.
        """
        return {
            "peak": _json_float(self.peak),
            "peak_dbfs": _json_float(self.peak_dbfs),
            "true_peak": _json_float(self.true_peak),
            "true_peak_dbtp": _json_float(self.true_peak_dbtp),
            "rms": _json_float(self.rms),
            "rms_dbfs": _json_float(self.rms_dbfs),
            "dc_offset": _json_float(self.dc_offset),
            "clipped_samples": int(self.clipped_samples),
            "clipped_regions": [[int(s), int(n)] for s, n in self.clipped_regions],
            "clipped_region_count": int(self.clipped_region_count),
            "nonfinite_samples": int(self.nonfinite_samples),
        }

    @classmethod
    def from_dict(cls, d: dict) -> "ChannelReading":
        """Inverse of :meth:`to_dict` (a journal keeps readings of files delivered earlier)."""
        return cls(peak=float(d["peak"] or 0.0), true_peak=d["true_peak"], rms=float(d["rms"] or 0.0),
                   dc_offset=float(d["dc_offset"] or 0.0), clipped_samples=int(d["clipped_samples"]),
                   clipped_regions=tuple((int(a), int(b)) for a, b in d["clipped_regions"]),
                   clipped_region_count=int(d["clipped_region_count"]),
                   nonfinite_samples=int(d["nonfinite_samples"]))


@dataclass(frozen=True)
class MeterReading:
    """Meter figures of a whole stream, one :class:`ChannelReading` per channel.

    Attributes
    ----------
    channels : tuple of ChannelReading
        In channel order.
    frames : int
        Frames metered.
    rate : int
        Sample rate in Hz.
    true_peak_oversampling : int or None
        Oversampling factor of the true-peak meter (4, 2 or 1); None when
        true peak was not metered.
    """

    channels: tuple[ChannelReading, ...]
    frames: int
    rate: int
    true_peak_oversampling: int | None

    def to_dict(self) -> dict:
        """The reading as JSON-safe plain types (see :meth:`ChannelReading.to_dict`)."""
        return {
            "frames": int(self.frames),
            "rate": int(self.rate),
            "true_peak_oversampling": self.true_peak_oversampling,
            "channels": [c.to_dict() for c in self.channels],
        }

    @classmethod
    def from_dict(cls, d: dict) -> "MeterReading":
        """Inverse of :meth:`to_dict`."""
        return cls(tuple(ChannelReading.from_dict(c) for c in d["channels"]), int(d["frames"]),
                   int(d["rate"]), d["true_peak_oversampling"])


# --- the meter --------------------------------------------------------------

class Meter:
    """Streaming meter of sample peak, true peak, RMS, DC offset, clipping and non-finite samples.

    Parameters
    ----------
    rate : int
        Sample rate in Hz (> 0); chooses the true-peak oversampling factor.
    channels : int
        Number of channels (>= 1); every block must have this many rows.
    full_scale : float, optional
        Samples with |x| >= full_scale count as clipped (> 0, finite).  For
        b-bit PCM pass ``(2**(b-1) - 1) / 2**(b-1)`` so that the largest code
        counts as at full scale.  The dB figures are always relative to 1.0.
    true_peak : bool, optional
        Meter the true peak (default True).  When False no interpolation is
        computed and ``true_peak`` readings are None.
    max_regions : int, optional
        How many clipped regions per channel to keep (>= 0, default 20); all
        are counted.

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

    The interpolation runs as matrix products, one per channel per 4096
    instants: 256 rows of 53 samples (16 instants each) times a banded
    53 x 16*(F-1) weight matrix, in single precision.  The rounding error of
    an interpolated value is at most 6.2e-6 of the largest of its 38 samples
    (bound (38 + 2) * 2**-24 times the branch's L1 norm 2.6; about 6e-8 seen
    on noise), far below the filter's own 0.015 dB.  Every product has the
    same shape and starts at an absolute multiple of 4096 instants, whatever
    the block sizes, so each interpolated value is computed from the same
    numbers in the same order and the true-peak reading is bit-for-bit
    independent of the block split.  OpenBLAS spreads even products this
    small over its own worker threads (measured: 2.3 cores busy for one
    256 x 53 x 48 product on a 2-core machine), which takes cores the batch's
    ``--workers`` did not grant and stalls when they are busy; the renderer
    therefore keeps BLAS on the calling thread while it meters (threadpoolctl),
    and a batch gets its parallelism from its own workers and threads.

    A product is skipped when it provably cannot raise the reading: every
    interpolated value is at most the branch's L1 norm (2.6) times the
    largest of its samples, so a stretch of 4096 instants whose samples stay
    below 1/2.6 (-8.3 dB) of the reading so far is not computed.  This is
    exact (the reading is the same as with every product computed) and makes
    quiet passages cheap.  Finite samples beyond +-1e30 are clamped to +-1e30
    for the interpolation only (single precision cannot hold them).

    **Cost and memory.**  No per-sample Python code.  Per block: two
    reductions (max, min) for the peak, a sum and a sum of squares for DC and
    RMS; a clip mask is built only for channels whose peak reaches
    ``full_scale`` and a finiteness mask only for channels whose max or min is
    not finite.  State between blocks is at most channels * (4096 + 37)
    samples plus ``max_regions`` regions per channel, whatever the length of
    the stream.

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

    Examples
    --------
    >>> import numpy as np
    >>> m = Meter(48000, 1)
    >>> n = np.arange(48000)
    >>> m.update(np.sin(np.pi / 2 * n + np.pi / 4)[np.newaxis, :])   # rate/4, 45 degrees
    >>> r = m.result().channels[0]
    >>> round(r.peak_dbfs, 2), round(r.true_peak_dbtp, 2), round(r.rms_dbfs, 2)
    (-3.01, 0.0, -3.01)
    """

    def __init__(self, rate: int, channels: int, *, full_scale: float = 1.0,
                 true_peak: bool = True, max_regions: int = 20) -> None:
        if isinstance(rate, bool) or not isinstance(rate, (int, np.integer)) or rate <= 0:
            raise ValueError(f"rate must be a positive integer number of Hz, got {rate!r}")
        if isinstance(channels, bool) or not isinstance(channels, (int, np.integer)) or channels < 1:
            raise ValueError(f"channels must be an integer >= 1, got {channels!r}")
        if not isinstance(full_scale, (int, float, np.floating, np.integer)) or isinstance(full_scale, bool) \
                or not math.isfinite(full_scale) or full_scale <= 0:
            raise ValueError(f"full_scale must be a finite number > 0, got {full_scale!r}")
        if isinstance(max_regions, bool) or not isinstance(max_regions, (int, np.integer)) or max_regions < 0:
            raise ValueError(f"max_regions must be an integer >= 0, got {max_regions!r}")
        self._rate = int(rate)
        self._channels = int(channels)
        self._full_scale = float(full_scale)
        self._max_regions = int(max_regions)
        c = self._channels
        self._frames = 0
        self._peak = np.zeros(c)
        self._sum = [0.0] * c                 # Neumaier-compensated sums across blocks
        self._sum_comp = [0.0] * c
        self._sumsq = [0.0] * c
        self._sumsq_comp = [0.0] * c
        self._finite = [0] * c                # finite samples seen
        self._nonfinite = [0] * c
        self._clipped = [0] * c
        self._regions: list[list[tuple[int, int]]] = [[] for _ in range(c)]
        self._region_count = [0] * c          # closed runs
        self._open_start = [-1] * c           # start frame of a run reaching the last block's end, or -1
        self._reading: MeterReading | None = None   # result() since the last non-empty update

        self._tp = bool(true_peak)
        self._factor = _oversampling(self._rate) if self._tp else None
        self._interp = self._tp and self._factor is not None and self._factor > 1
        if self._interp:
            self._w, self._l1 = _weights(self._factor)
            self._n_out_cols = self._w.shape[1]
            self._tp_max = np.zeros(c)                         # max |interpolated| so far
            self._hist = np.zeros((c, 0), dtype=_TP_DTYPE)     # samples from the first pending instant on
            self._hist_bad: np.ndarray | None = None           # non-finite flags of _hist, or None
            self._rows = np.empty((_TP_GROUP * _TP_ROWS_PER_CALL, _TP_SPAN), dtype=_TP_DTYPE)
            self._out = np.empty((_TP_GROUP * _TP_ROWS_PER_CALL, self._n_out_cols), dtype=_TP_DTYPE)

    # -- public -------------------------------------------------------------

    def update(self, block: np.ndarray, extremes: tuple[np.ndarray, np.ndarray] | None = None) -> None:
        """Meter one block.

        Parameters
        ----------
        block : numpy.ndarray
            Shape (channels, frames), channel-major; frames may be 0.  float64
            C-contiguous is used as is; other float types or layouts are
            converted (a copy).  Integer arrays are refused: convert PCM codes
            to floats (1.0 = full scale) first.
        extremes : (numpy.ndarray, numpy.ndarray), optional
            ``(block.max(axis=1), block.min(axis=1))`` when the caller has them
            already (the reader and the filter do); saves two passes over the
            block.  They must be exactly those values.

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
        block = np.ascontiguousarray(block, dtype=np.float64)
        n = block.shape[1]
        if n == 0:
            return
        self._reading = None
        base = self._frames
        if extremes is None:
            hi, lo = block.max(axis=1), block.min(axis=1)
        else:
            hi, lo = extremes
        finite_block = bool(np.isfinite(hi).all() and np.isfinite(lo).all())
        bad = None if finite_block else ~np.isfinite(block)
        fs = self._full_scale
        with np.errstate(over="ignore"):           # |x| > 1e154: RMS reads inf, to_dict() gives None
            for c in range(self._channels):
                self._channel_stats(c, block[c], bad, float(hi[c]), float(lo[c]), base, fs)
        self._frames = base + n
        if self._interp:
            self._interpolate(block, bad, max(float(hi.max()), -float(lo.min())))

    def _channel_stats(self, c: int, row: np.ndarray, bad: np.ndarray | None, h: float, l_: float,
                       base: int, fs: float) -> None:
        """Peak, sums, non-finite count and clips of one channel's block."""
        n = row.shape[0]
        if math.isfinite(h) and math.isfinite(l_):
            cnt = n
        else:
            ok = ~bad[c]
            cnt = int(np.count_nonzero(ok))
            self._nonfinite[c] += n - cnt
            row = np.where(ok, row, 0.0)
            if cnt:
                h, l_ = float(row.max()), float(row.min())
            else:
                h = l_ = 0.0
        self._finite[c] += cnt
        pk = max(h, -l_)
        if pk > self._peak[c]:
            self._peak[c] = pk
        s1, s2 = float(row.sum()), _sum_of_squares(row)
        self._sum[c], self._sum_comp[c] = _neumaier(self._sum[c], self._sum_comp[c], s1)
        self._sumsq[c], self._sumsq_comp[c] = _neumaier(self._sumsq[c], self._sumsq_comp[c], s2)
        if h >= fs or l_ <= -fs:
            self._clips(c, row, base)
        elif self._open_start[c] >= 0:
            self._close(c, base)

    def result(self) -> MeterReading:
        """The figures so far, as a :class:`MeterReading`; the meter can go on being updated.

        Returns
        -------
        MeterReading
            One :class:`ChannelReading` per channel.
        """
        if self._reading is not None:          # nothing metered since the last call
            return self._reading
        tp = self._pending_true_peak() if self._interp else None
        chans = []
        for c in range(self._channels):
            n = self._finite[c]
            mean = (self._sum[c] + self._sum_comp[c]) / n if n else 0.0
            msq = (self._sumsq[c] + self._sumsq_comp[c]) / n if n else 0.0
            peak = float(self._peak[c])
            if not self._tp:
                true_peak = None
            elif tp is None:
                true_peak = peak
            else:
                true_peak = max(peak, float(tp[c]))
            regions = list(self._regions[c])
            count = self._region_count[c]
            if self._open_start[c] >= 0:
                count += 1
                if len(regions) < self._max_regions:
                    regions.append((self._open_start[c], self._frames - self._open_start[c]))
            chans.append(ChannelReading(
                peak=peak, true_peak=true_peak, rms=math.sqrt(max(msq, 0.0)), dc_offset=mean,
                clipped_samples=self._clipped[c], clipped_regions=tuple(regions),
                clipped_region_count=count, nonfinite_samples=self._nonfinite[c]))
        self._reading = MeterReading(channels=tuple(chans), frames=self._frames, rate=self._rate,
                                     true_peak_oversampling=self._factor)
        return self._reading

    # -- clipping -----------------------------------------------------------

    def _record(self, c: int, start: int, length: int) -> None:
        self._region_count[c] += 1
        if len(self._regions[c]) < self._max_regions:
            self._regions[c].append((int(start), int(length)))

    def _close(self, c: int, end: int) -> None:
        self._record(c, self._open_start[c], end - self._open_start[c])
        self._open_start[c] = -1

    def _clips(self, c: int, row: np.ndarray, base: int) -> None:
        """Count clipped samples of one channel's block and track runs across blocks."""
        fs = self._full_scale
        mask = np.abs(row) >= fs
        n = row.shape[0]
        self._clipped[c] += int(np.count_nonzero(mask))
        edges = np.diff(mask.view(np.int8), prepend=np.int8(0), append=np.int8(0))
        starts = np.flatnonzero(edges == 1)
        ends = np.flatnonzero(edges == -1)          # exclusive; same count as starts
        first = 0
        if self._open_start[c] >= 0:
            if starts.size and starts[0] == 0:
                if ends[0] == n:                    # the whole block continues the open run
                    return
                self._close(c, base + int(ends[0]))
                first = 1
            else:
                self._close(c, base)
        last_open = starts.size > first and ends[-1] == n
        stop = starts.size - 1 if last_open else starts.size
        if stop > first:
            self._region_count[c] += stop - first
            room = self._max_regions - len(self._regions[c])
            if room > 0:
                s = starts[first:min(stop, first + room)]
                e = ends[first:first + s.size]
                self._regions[c].extend(zip((s + base).tolist(), (e - s).tolist()))
        if last_open:
            self._open_start[c] = base + int(starts[-1])

    # -- true peak ------------------------------------------------------------

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
            whole = (h + n) // _TP_CALL_OUT
            zz = z[:, :whole * _TP_CALL_OUT].reshape(self._channels, whole, _TP_CALL_OUT)
            stretch = np.zeros((self._channels, whole + 1))
            stretch[:, :whole] = np.maximum(zz.max(axis=2), -zz.min(axis=2))
            if whole * _TP_CALL_OUT < h + n:
                rest = z[:, whole * _TP_CALL_OUT:]
                stretch[:, whole] = np.maximum(rest.max(axis=1), -rest.min(axis=1))
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

        Product ``k`` covers instants ``k*4096 .. k*4096 + 4095`` and reads
        ``z[c, k*4096 : k*4096 + 4096 + 37]``; every product has the shape
        (256, 53) x (53, 16*(F-1)).  A product whose ``bound`` does not exceed
        the reading so far is skipped.  ``into[c]`` takes the max.
        """
        level = max(float(self._peak[c]), float(into[c]))
        todo = [k - k0 for k in range(k0, k1) if bound[k] > level]
        if todo:
            into[c] = max(float(into[c]), self._rows_peak(z, zbad, c, k0 * _TP_CALL_OUT,
                                                          (k1 - k0) * _TP_ROWS_PER_CALL, todo, None))

    def _rows_peak(self, z: np.ndarray, zbad: np.ndarray | None, c: int, start: int, n_rows: int,
                   products: list[int] | None, valid: int | None) -> float:
        """max |interpolated| over instants ``start .. start + 16*n_rows - 1`` of channel ``c``.

        ``products`` lists which runs of 256 rows to compute (None: all rows
        in one product); rows not computed count as 0.  Instants from
        ``start + valid`` on, and instants whose samples include a flagged
        (non-finite) one, are left out.
        """
        itemsize = z.itemsize
        rows, out = self._rows[:n_rows], self._out[:n_rows]
        # rows of _TP_SPAN samples, _TP_ROW apart (a strided view of z, copied for BLAS)
        view = np.ndarray((n_rows, _TP_SPAN), dtype=z.dtype, buffer=z,
                          offset=c * z.strides[0] + start * itemsize,
                          strides=(_TP_ROW * itemsize, itemsize))
        np.copyto(rows, view)
        if products is None:
            np.matmul(rows, self._w, out=out)
        else:
            if len(products) * _TP_ROWS_PER_CALL < n_rows:
                out[...] = 0.0                  # skipped products contribute nothing
            for k in products:
                r = k * _TP_ROWS_PER_CALL
                np.matmul(rows[r:r + _TP_ROWS_PER_CALL], self._w, out=out[r:r + _TP_ROWS_PER_CALL])
        n_inst = n_rows * _TP_ROW
        y = out.reshape(n_inst, -1)             # (instants, branches)
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
        if mask is not None:
            y = np.where(mask[:, np.newaxis], np.float32(0.0), y)
        return max(float(y.max()), -float(y.min()))

    def _pending_true_peak(self) -> np.ndarray:
        """Max |interpolated| including instants still waiting for a full product; state untouched.

        The pending instants depend only on the stream's length (products
        start at absolute multiples of 4096 instants), so whichever way they
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


def _sum_of_squares(row: np.ndarray) -> float:
    """sum(row**2) without a temporary, accurate like numpy's pairwise sum.

    einsum sums each run of 128 squares and numpy's pairwise ``sum`` adds the
    runs up (relative error ~1e-15 where one long einsum gives ~1e-13 on 65536
    equal values).  Not ``np.dot``: a BLAS dot of a long row may wake BLAS
    worker threads, which costs milliseconds when they have to wait for a core.
    """
    m = row.shape[0] // 128 * 128
    total = 0.0
    if m:
        runs = row[:m].reshape(-1, 128)
        total = float(np.einsum("ij,ij->i", runs, runs).sum())
    if m < row.shape[0]:
        rest = row[m:]
        total += float(np.einsum("i,i->", rest, rest))
    return total


def _neumaier(total: float, comp: float, value: float) -> tuple[float, float]:
    """Add ``value`` to a compensated sum (Neumaier's variant of Kahan summation)."""
    t = total + value
    if not math.isfinite(t):
        return t, 0.0
    if abs(total) >= abs(value):
        comp += (total - t) + value
    else:
        comp += (value - t) + total
    return t, comp
