"""Level meters: sample peak and non-finite samples (:class:`PeakMeter`), RMS and DC offset (:class:`RMSMeter`).

Non-finite samples (NaN, +-Inf) are counted and otherwise left out: they do not enter
the peak, RMS or DC offset, and RMS and DC offset are means over the finite samples only.
RMS is referenced to a full-scale square wave (a full-scale sine reads -3.01 dBFS RMS).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..dsp.sums import row_sums

__all__ = ["PeakMeter", "PeakReading", "RMSMeter", "RMSReading"]


def _finite_row(block: np.ndarray, bad: np.ndarray | None, c: int, h: float, l_: float):
    """Channel ``c``'s row with non-finite samples set to 0, its finite count and its max and min.

    ``h`` and ``l_`` are the row's max and min; only when one is not finite is ``bad``
    (``~np.isfinite(block)``) read and the row copied.
    """
    row = block[c]
    if math.isfinite(h) and math.isfinite(l_):
        return row, row.shape[0], h, l_
    ok = ~bad[c]
    cnt = int(np.count_nonzero(ok))
    row = np.where(ok, row, 0.0)
    if cnt:
        return row, cnt, float(row.max()), float(row.min())
    return row, cnt, 0.0, 0.0


def _extremes(block: np.ndarray, extremes):
    """(hi, lo, bad): per-channel max and min, and the non-finite mask when any is not finite (else None)."""
    hi, lo = (block.max(axis=1), block.min(axis=1)) if extremes is None else extremes
    finite = bool(np.isfinite(hi).all() and np.isfinite(lo).all())
    return hi, lo, None if finite else ~np.isfinite(block)


@dataclass(frozen=True)
class PeakReading:
    """Per channel: sample peak max |x| over the finite samples (linear), and the non-finite count."""

    peak: tuple[float, ...]
    nonfinite_samples: tuple[int, ...]

    def to_dict(self) -> dict:
        return {"peak": list(self.peak), "nonfinite_samples": list(self.nonfinite_samples)}


class PeakMeter:
    """Streaming sample peak (from the block's extremes: no pass of its own) and non-finite count."""

    HEADLINE = (("peak_dbfs", "peak", "dBFS"),)

    def __init__(self, rate: int, channels: int) -> None:
        self._channels = int(channels)
        self._peak = np.zeros(self._channels)
        self._nonfinite = [0] * self._channels

    def update(self, block: np.ndarray, extremes: tuple[np.ndarray, np.ndarray] | None = None) -> None:
        """Meter one block (channels x frames, float64, C-contiguous); see :meth:`MeterBank.update`."""
        n = block.shape[1]
        if n == 0:
            return
        hi, lo, bad = _extremes(block, extremes)
        for c in range(self._channels):
            _, cnt, h, l_ = _finite_row(block, bad, c, float(hi[c]), float(lo[c]))
            self._nonfinite[c] += n - cnt
            pk = max(h, -l_)
            if pk > self._peak[c]:
                self._peak[c] = pk

    def reading(self) -> PeakReading:
        return PeakReading(tuple(float(p) for p in self._peak), tuple(self._nonfinite))


@dataclass(frozen=True)
class RMSReading:
    """Per channel: sqrt(mean x**2) and mean x over the finite samples (0.0 when there are none)."""

    rms: tuple[float, ...]
    dc_offset: tuple[float, ...]

    def to_dict(self) -> dict:
        return {"rms": list(self.rms), "dc_offset": list(self.dc_offset)}


class RMSMeter:
    """Streaming RMS and DC offset: sums of x and x**2 over the finite samples, each block's in one pass
    (chainrun.dsp.sums: eight running sums), added up across blocks with compensation."""

    HEADLINE = (("rms_dbfs", "RMS", "dBFS"),)

    def __init__(self, rate: int, channels: int) -> None:
        c = self._channels = int(channels)
        self._sum = [0.0] * c                 # Neumaier-compensated sums across blocks
        self._sum_comp = [0.0] * c
        self._sumsq = [0.0] * c
        self._sumsq_comp = [0.0] * c
        self._finite = [0] * c                # finite samples seen

    def update(self, block: np.ndarray, extremes: tuple[np.ndarray, np.ndarray] | None = None) -> None:
        """Meter one block (channels x frames, float64, C-contiguous); see :meth:`MeterBank.update`."""
        if block.shape[1] == 0:
            return
        hi, lo, bad = _extremes(block, extremes)
        with np.errstate(over="ignore", invalid="ignore"):     # |x| > 1e154: RMS inf, a sum inf - inf: None in JSON
            for c in range(self._channels):
                row, cnt, _, _ = _finite_row(block, bad, c, float(hi[c]), float(lo[c]))
                self._finite[c] += cnt
                s1, s2 = row_sums(row)
                self._sum[c], self._sum_comp[c] = _neumaier(self._sum[c], self._sum_comp[c], s1)
                self._sumsq[c], self._sumsq_comp[c] = _neumaier(self._sumsq[c], self._sumsq_comp[c], s2)

    def reading(self) -> RMSReading:
        rms, dc = [], []
        for c in range(self._channels):
            n = self._finite[c]
            mean = (self._sum[c] + self._sum_comp[c]) / n if n else 0.0
            msq = (self._sumsq[c] + self._sumsq_comp[c]) / n if n else 0.0
            rms.append(math.sqrt(max(msq, 0.0)))
            dc.append(mean)
        return RMSReading(tuple(rms), tuple(dc))


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
