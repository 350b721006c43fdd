"""Clipping meter: samples at or beyond full scale, and the runs (regions) they form.

For a float stream it also counts the samples over full scale (|x| > 1.0), which a float file
keeps as they are: they are not clipped, a gain brings them back, so they are counted apart.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .level import _extremes, _finite_row

__all__ = ["ClippingMeter", "ClippingReading"]


@dataclass(frozen=True)
class ClippingReading:
    """Per channel: clipped samples, the first regions ``(start_frame, length)``, how many regions there
    are, and (float streams) the samples over full scale."""

    clipped_samples: tuple[int, ...]
    clipped_regions: tuple[tuple[tuple[int, int], ...], ...]
    clipped_region_count: tuple[int, ...]
    over_samples: tuple[int, ...] = ()

    def to_dict(self) -> dict:
        return {"clipped_samples": list(self.clipped_samples),
                "clipped_regions": [[list(r) for r in ch] for ch in self.clipped_regions],
                "clipped_region_count": list(self.clipped_region_count),
                "over_samples": list(self.over_samples)}


class ClippingMeter:
    """Streaming count of samples with |x| >= ``full_scale``, and of their runs across blocks.

    A clip mask is built only for channels whose peak reaches ``full_scale``; non-finite
    samples never count. State between blocks is ``max_regions`` regions per channel and
    the start of a run that reaches the end of the last block. ``full_scale`` may be infinite:
    then no sample counts as clipped (a float encoding keeps every finite value).

    It also counts, per channel, the finite samples with |x| > ``over_level`` (a float stream's
    overs: 1.0, or where its encoding stores a value past 1.0; a sample of exactly +-1.0 is at
    full scale, not over it); with the default, infinity, that count stays 0.
    """

    HEADLINE = (("clipped_samples", "clipped", "samples"),
                ("over_samples", "over full scale (float)", "samples"))

    def __init__(self, rate: int, channels: int, *, full_scale: float = 1.0, max_regions: int = 20,
                 over_level: float = math.inf) -> None:
        c = self._channels = int(channels)
        self._full_scale = float(full_scale)
        self._over_level = float(over_level)
        self._over = [0] * c
        self._max_regions = int(max_regions)
        self._frames = 0
        self._clipped = [0] * c
        self._regions: list[list[tuple[int, int]]] = [[] for _ in range(c)]
        self._region_count = [0] * c          # closed runs
        self._open_start = [-1] * c           # start frame of a run reaching the last block's end, or -1

    def update(self, block: np.ndarray, extremes: tuple[np.ndarray, np.ndarray] | None = None) -> None:
        """Meter one block (channels x frames, float64, C-contiguous); see :meth:`MeterBank.update`."""
        n = block.shape[1]
        if n == 0:
            return
        hi, lo, bad = _extremes(block, extremes)
        base, fs = self._frames, self._full_scale
        over = self._over_level
        for c in range(self._channels):
            h, l_ = float(hi[c]), float(lo[c])
            if h >= fs or l_ <= -fs or h > over or l_ < -over or bad is not None:
                row, _, h, l_ = _finite_row(block, bad, c, h, l_)
            if h > over or l_ < -over:
                self._over[c] += int(np.count_nonzero(np.abs(row) > over))
            if h >= fs or l_ <= -fs:
                self._clips(c, row, base)
            elif self._open_start[c] >= 0:
                self._close(c, base)
        self._frames = base + n

    def reading(self) -> ClippingReading:
        regions_all, counts = [], []
        for c in range(self._channels):
            regions = list(self._regions[c])
            count = self._region_count[c]
            if self._open_start[c] >= 0:
                count += 1
                if len(regions) < self._max_regions:
                    regions.append((self._open_start[c], self._frames - self._open_start[c]))
            regions_all.append(tuple(regions))
            counts.append(count)
        return ClippingReading(tuple(self._clipped), tuple(regions_all), tuple(counts), tuple(self._over))

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

