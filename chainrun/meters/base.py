"""The meter protocol, the standard bank of meters, and the readings every report reads.

A meter (:class:`Meter`) is fed one block at a time (``update``) and keeps only a small,
fixed amount of state between blocks, so a file of any length is metered in constant
memory; ``reading()`` returns its figures as a frozen dataclass with ``to_dict()``.
:class:`MeterBank` is the standard bank: it checks each block once, takes its per-channel
max and min once, hands both to every meter, and puts their readings together as one
:class:`MeterReading`. Every figure is independent of how the file was split into blocks
(exactly for counts and regions, up to float rounding for the sums; the true-peak figure
is bit-for-bit independent, see :class:`~chainrun.meters.truepeak.TruePeakMeter`).

Conventions
-----------
* Sample values are floats with 0 dBFS = 1.0, the convention of soundfile's
  float reading of PCM.  Every dB figure is ``20*log10(value)`` with that
  reference; silence gives ``-inf`` (``None`` in ``to_dict()``).
* RMS is referenced to a full-scale **square** wave: a square wave of
  amplitude 1.0 reads 0 dBFS RMS and a sine of amplitude 1.0 reads
  20*log10(1/sqrt(2)) = -3.01 dBFS RMS.  (AES17 and IEC 61606 put the
  full-scale sine at 0 dB FS instead: their full scale is the RMS value of a
  sine whose positive peak reaches digital full scale.  chainrun does not.)
* Non-finite samples (NaN, +-Inf) are counted and otherwise left out: they do
  not enter the peak, true peak, RMS, DC offset or clip figures, and RMS and
  DC offset are means over the finite samples only.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Protocol

import numpy as np

from ..text import db as _db
from .clipping import ClippingMeter
from .level import PeakMeter, RMSMeter
from .loudness import LoudnessMeter, LoudnessReading
from .truepeak import TruePeakMeter

__all__ = ["Meter", "MeterBank", "MeterReading", "ChannelReading", "HEADLINE_FIELDS"]


class Meter(Protocol):
    """What every meter offers.

    ``HEADLINE`` names the figures a report shows for a whole file, as ``(key, label,
    unit)`` rows; ``key`` is a field or property of :class:`ChannelReading`.
    """

    HEADLINE: tuple[tuple[str, str, str], ...]

    def update(self, block: np.ndarray, extremes: tuple[np.ndarray, np.ndarray] | None = None) -> None:
        """Meter one block (channels x frames, float64); ``extremes`` are its per-channel max and min."""

    def reading(self) -> Any:
        """The figures so far, a frozen dataclass with ``to_dict()``; the meter can go on being updated."""


# The standard bank's meters, in the order their headline figures are shown.
_BANK_METERS = (PeakMeter, TruePeakMeter, RMSMeter, ClippingMeter, LoudnessMeter)
# (key, label, unit) of every headline figure, in order: the ordered union over the bank's meters.
HEADLINE_FIELDS: tuple[tuple[str, str, str], ...] = tuple(dict.fromkeys(
    field for meter in _BANK_METERS for field in meter.HEADLINE))
# Headline keys that are figures of the whole stream (the loudness meter's), not of each channel.
_WHOLE_STREAM = frozenset(key for key, _, _ in LoudnessMeter.HEADLINE)


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
    over_samples : int
        Number of finite samples past the bank's ``over_level`` (a float
        stream's: over full scale, kept by the float encoding and recoverable
        by a gain, so not clipped); 0 for other streams.  Their peak is
        ``peak``.
    """

    peak: float
    true_peak: float | None
    rms: float
    dc_offset: float
    clipped_samples: int
    clipped_regions: tuple[tuple[int, int], ...]
    clipped_region_count: int
    nonfinite_samples: int
    over_samples: int = 0

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
            "over_samples": int(self.over_samples),
        }

    @classmethod
    def from_dict(cls, d: dict) -> "ChannelReading":
        """Inverse of :meth:`to_dict` (a journal keeps readings of files delivered earlier)."""
        return cls(peak=float(d["peak"] or 0.0), true_peak=d["true_peak"], rms=float(d["rms"] or 0.0),
                   dc_offset=float(d["dc_offset"] or 0.0), clipped_samples=int(d["clipped_samples"]),
                   clipped_regions=tuple((int(a), int(b)) for a, b in d["clipped_regions"]),
                   clipped_region_count=int(d["clipped_region_count"]),
                   nonfinite_samples=int(d["nonfinite_samples"]), over_samples=int(d.get("over_samples", 0)))


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
    loudness : LoudnessReading or None
        Loudness of the whole stream (BS.1770-4, EBU Tech 3341/3342), not per
        channel; None when loudness was not metered.  Its figures are None
        when below the gate (silence, or shorter than a window).
    """

    channels: tuple[ChannelReading, ...]
    frames: int
    rate: int
    true_peak_oversampling: int | None
    loudness: LoudnessReading | None = None

    def headline(self) -> dict:
        """The figures of :data:`HEADLINE_FIELDS` for the whole stream, JSON-safe.

        A level is the loudest channel's (the largest value; None when no channel has
        one, as for silence in dB or a true peak not metered); a count is the sum over
        the channels.  A loudness figure is the whole stream's (None when not metered
        or below the gate).
        """
        out: dict = {}
        for key, _, _ in HEADLINE_FIELDS:
            if key in _WHOLE_STREAM:
                out[key] = None if self.loudness is None else _json_float(getattr(self.loudness, key))
                continue
            values = [getattr(c, key) for c in self.channels]
            if all(isinstance(v, (int, np.integer)) and not isinstance(v, bool) for v in values):
                out[key] = int(sum(values))
            else:
                known = [v for v in values if v is not None]
                out[key] = _json_float(max(known)) if known else None
        return out

    def to_dict(self) -> dict:
        """The reading as JSON-safe plain types (see :meth:`ChannelReading.to_dict`), with ``headline``.

        ``loudness`` (present only when loudness was metered) holds
        :meth:`LoudnessReading.to_dict`: ``integrated_lufs``, ``loudness_range_lu``,
        ``max_momentary_lufs``, ``max_short_term_lufs`` (None: below the gate) and how
        the channels were weighted.
        """
        d = {
            "frames": int(self.frames),
            "rate": int(self.rate),
            "true_peak_oversampling": self.true_peak_oversampling,
            "channels": [c.to_dict() for c in self.channels],
        }
        if self.loudness is not None:
            d["loudness"] = self.loudness.to_dict()
        d["headline"] = self.headline()
        return d

    @classmethod
    def from_dict(cls, d: dict) -> "MeterReading":
        """Inverse of :meth:`to_dict` (``headline`` is derived, so it is not read; a reading
        written before loudness was metered has no ``loudness`` and loads with None)."""
        loud = d.get("loudness")
        return cls(tuple(ChannelReading.from_dict(c) for c in d["channels"]), int(d["frames"]),
                   int(d["rate"]), d["true_peak_oversampling"],
                   LoudnessReading.from_dict(loud) if loud else None)


class MeterBank:
    """The standard bank: sample peak, true peak, RMS, DC offset, clipping and non-finite samples.

    Named ``MeterBank`` so that :class:`Meter` can name the protocol every meter in it keeps.

    Parameters
    ----------
    rate : int
        Sample rate in Hz (> 0); chooses the true-peak oversampling factor.
    channels : int
        Number of channels (>= 1); every block must have this many rows.
    full_scale : float, optional
        Samples with |x| >= full_scale count as clipped (> 0; ``math.inf``: none
        does).  For b-bit PCM pass ``(2**(b-1) - 1) / 2**(b-1)`` so that the
        largest code counts as at full scale; for a float encoding, which keeps
        samples past 1.0, ``math.inf`` (:func:`chainrun.audio.formats.clip_level`).
        The dB figures are always relative to 1.0.
    over_level : float, optional
        Count the samples with |x| > over_level as over full scale
        (``over_samples``): for a float encoding, which keeps them, 1.0 or
        :func:`chainrun.audio.formats.over_level` (default infinity: none).
    true_peak : bool, optional
        Meter the true peak (default True).  When False no interpolation is
        computed and ``true_peak`` readings are None.
    max_regions : int, optional
        How many clipped regions per channel to keep (>= 0, default 20); all
        are counted.
    loudness : bool, optional
        Also meter loudness (:class:`~chainrun.meters.loudness.LoudnessMeter`);
        default False.
    channel_mask : int, optional
        WAVE_FORMAT_EXTENSIBLE speaker mask: chooses the loudness channel weights.

    Notes
    -----
    The true peak follows ITU-R BS.1770-4 Annex 2; how, and what it costs, is
    told in :class:`~chainrun.meters.truepeak.TruePeakMeter`.  No per-sample
    Python code: per block, two reductions (max, min) shared by every meter, a
    sum and a sum of squares for DC and RMS; a clip mask is built only for
    channels whose peak reaches ``full_scale`` and a finiteness mask only for
    channels whose max or min is not finite.

    Examples
    --------
    >>> import numpy as np
    >>> m = MeterBank(48000, 1)
    >>> n = np.arange(48000)
    >>> m.update(np.sin(np.pi / 2 * n + np.pi / 4)[np.newaxis, :])   # rate/4, 45 degrees
    >>> r = m.result().channels[0]
    >>> round(r.peak_dbfs, 2), round(r.true_peak_dbtp, 2), round(r.rms_dbfs, 2)
    (-3.01, 0.0, -3.01)
    """

    def __init__(self, rate: int, channels: int, *, full_scale: float = 1.0,
                 true_peak: bool = True, max_regions: int = 20, loudness: bool = False,
                 channel_mask: int | None = None, over_level: float = math.inf) -> None:
        if isinstance(rate, bool) or not isinstance(rate, (int, np.integer)) or rate <= 0:
            raise ValueError(f"rate must be a positive integer number of Hz, got {rate!r}")
        if isinstance(channels, bool) or not isinstance(channels, (int, np.integer)) or channels < 1:
            raise ValueError(f"channels must be an integer >= 1, got {channels!r}")
        if not isinstance(full_scale, (int, float, np.floating, np.integer)) or isinstance(full_scale, bool) \
                or math.isnan(full_scale) or full_scale <= 0:
            raise ValueError(f"full_scale must be a number > 0 (infinity: nothing counts as clipped), "
                             f"got {full_scale!r}")
        if not isinstance(over_level, (int, float, np.floating, np.integer)) or isinstance(over_level, bool) \
                or math.isnan(over_level) or over_level <= 0:
            raise ValueError(f"over_level must be a number > 0 (infinity: nothing counts as over), got {over_level!r}")
        if isinstance(max_regions, bool) or not isinstance(max_regions, (int, np.integer)) or max_regions < 0:
            raise ValueError(f"max_regions must be an integer >= 0, got {max_regions!r}")
        self._rate = int(rate)
        self._channels = int(channels)
        self._frames = 0
        self._peak = PeakMeter(self._rate, self._channels)
        self._rms = RMSMeter(self._rate, self._channels)
        self._clipping = ClippingMeter(self._rate, self._channels, full_scale=float(full_scale),
                                       max_regions=int(max_regions), over_level=float(over_level))
        self._true_peak = TruePeakMeter(self._rate, self._channels) if true_peak else None
        self._loudness = LoudnessMeter(self._rate, self._channels, channel_mask) if loudness else None
        self._meters: tuple[Meter, ...] = tuple(m for m in (self._peak, self._true_peak, self._rms, self._clipping,
                                                            self._loudness) if m is not None)
        self._reading: MeterReading | None = None   # result() since the last non-empty update

    def follow(self, leader: "MeterBank") -> bool:
        """Take blocks in step with ``leader`` (the same frames, given to ``leader`` first, in one
        thread), so that the two loudness meters K-weight each block in one pass
        (:meth:`LoudnessMeter.follow`); True if paired. The figures are unchanged."""
        if self._loudness is None or leader._loudness is None:
            return False
        return self._loudness.follow(leader._loudness)

    def unfollow(self) -> None:
        """End :meth:`follow`."""
        if self._loudness is not None:
            self._loudness.unfollow()

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
        if extremes is None:
            extremes = block.max(axis=1), block.min(axis=1)
        for meter in self._meters:
            meter.update(block, extremes)
        self._frames += n

    def result(self) -> MeterReading:
        """The figures so far, as a :class:`MeterReading`; the bank can go on being updated.

        Returns
        -------
        MeterReading
            One :class:`ChannelReading` per channel.
        """
        if self._reading is not None:          # nothing metered since the last call
            return self._reading
        pk, rms, clip = self._peak.reading(), self._rms.reading(), self._clipping.reading()
        tp = self._true_peak.reading() if self._true_peak is not None else None
        chans = tuple(ChannelReading(
            peak=pk.peak[c], true_peak=None if tp is None else tp.true_peak[c], rms=rms.rms[c],
            dc_offset=rms.dc_offset[c], clipped_samples=clip.clipped_samples[c],
            clipped_regions=clip.clipped_regions[c], clipped_region_count=clip.clipped_region_count[c],
            nonfinite_samples=pk.nonfinite_samples[c], over_samples=clip.over_samples[c])
            for c in range(self._channels))
        self._reading = MeterReading(channels=chans, frames=self._frames, rate=self._rate,
                                     true_peak_oversampling=None if tp is None else tp.oversampling,
                                     loudness=None if self._loudness is None else self._loudness.reading())
        return self._reading
