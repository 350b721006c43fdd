"""Gating of BS.1770-4 / EBU Tech 3342: the bounded histogram of window loudness and the gated mean;
the loudness meter's figures (:class:`LoudnessReading`).

The windows above the -70 LUFS absolute gate are kept in bins 0.005 LU wide, each bin holding
its count and the sum of its windows' mean squares, so memory does not grow with the file and
the gated mean is exact except for the windows of the one bin that holds a relative gate
(see :mod:`chainrun.meters.loudness` for the error this adds, shown below 0.01 LU by its tests).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["integrated_of", "LoudnessReading"]

_OFFSET = -0.691          # BS.1770-4 Annex 1, eq. 2
_ABS_GATE = -70.0         # LUFS, BS.1770-4 and Tech 3342
_REL_GATE_I = -10.0       # LU, BS.1770-4
_REL_GATE_LRA = -20.0     # LU, Tech 3342
_BIN_LU = 0.005
_TOP_LUFS = 40.0
_N_BINS = int(round((_TOP_LUFS - _ABS_GATE) / _BIN_LU))
_BIN_LU = 0.005
_TOP_LUFS = 40.0
_N_BINS = int(round((_TOP_LUFS - _ABS_GATE) / _BIN_LU))


def _power(lufs: float) -> float:
    """Mean square whose loudness is ``lufs``."""
    return 10.0 ** ((lufs - _OFFSET) / 10.0)


def _lufs(power: float) -> float:
    return _OFFSET + 10.0 * math.log10(power)


_EDGES = np.array([_power(_ABS_GATE + i * _BIN_LU) for i in range(_N_BINS)])   # lower edges
_GATE_POWER = _EDGES[0]


class _Histogram:
    """Counts and power sums of windows above -70 LUFS, in bins 0.005 LU wide (see module notes)."""

    def __init__(self) -> None:
        self.count = np.zeros(_N_BINS, dtype=np.int64)
        self.power = np.zeros(_N_BINS)

    def add(self, z: np.ndarray) -> None:
        """Add mean squares ``z`` (in stream order); those at or below the -70 LUFS gate are dropped."""
        z = z[z > _GATE_POWER]
        if z.size:
            idx = np.searchsorted(_EDGES, z, side="right") - 1      # exact comparisons in power
            np.add.at(self.count, idx, 1)
            np.add.at(self.power, idx, z)                          # sequential: same sums in any split

    def kept(self, rel_gate_lu: float) -> tuple[np.ndarray, int, float] | None:
        """Per-bin counts after the relative gate, their total count and power sum; None if empty."""
        n = int(self.count.sum())
        if n == 0:
            return None
        gate = float(self.power.sum()) / n * 10.0 ** (rel_gate_lu / 10.0)
        g = int(np.searchsorted(_EDGES, gate, side="right")) - 1
        count = self.count.copy()
        power = self.power.copy()
        if g >= 0:
            count[:g] = 0
            power[:g] = 0.0
            if count[g] and not power[g] / count[g] > gate:   # the bin holding the gate: whole or nothing
                count[g] = 0
                power[g] = 0.0
        return count, int(count.sum()), float(power.sum())


def integrated_of(histograms) -> float | None:
    """Integrated loudness (BS.1770-4 gating) of the gating blocks of several streams taken together.

    Parameters
    ----------
    histograms : iterable of (numpy.ndarray, numpy.ndarray)
        :meth:`LoudnessMeter.gating_histogram` of each stream, in a fixed order
        (the power sums are added in that order).

    Returns
    -------
    float or None
        LUFS; None when no block of any stream is above the gate.  One stream
        gives exactly its own ``integrated_lufs``.
    """
    total = _Histogram()
    for count, power in histograms:
        total.count += count
        total.power += power
    kept = total.kept(_REL_GATE_I)
    if kept is None or not kept[1]:
        return None
    return _lufs(kept[2] / kept[1])


@dataclass(frozen=True)
class LoudnessReading:
    """Loudness figures of a stream.  None: below the -70 LUFS gate, or too short.

    Attributes
    ----------
    integrated_lufs : float or None
        Gated integrated loudness, BS.1770-4 (LUFS).
    loudness_range_lu : float or None
        Loudness range, EBU Tech 3342 (LU).
    max_momentary_lufs, max_short_term_lufs : float or None
        Largest 400 ms / 3 s loudness, windows every 10 ms (LUFS).
    channel_weights : tuple of float
        The weight G of each channel (0.0 = left out).
    weights_note : str
        How the weights were chosen.
    frames : int
        Frames metered.
    nonfinite_samples : int
        NaN and +-Inf samples, metered as 0.0.
    """

    integrated_lufs: float | None
    loudness_range_lu: float | None
    max_momentary_lufs: float | None
    max_short_term_lufs: float | None
    channel_weights: tuple[float, ...]
    weights_note: str
    frames: int
    nonfinite_samples: int

    def to_dict(self) -> dict:
        """The reading as JSON-safe plain types."""
        return {
            "integrated_lufs": self.integrated_lufs,
            "loudness_range_lu": self.loudness_range_lu,
            "max_momentary_lufs": self.max_momentary_lufs,
            "max_short_term_lufs": self.max_short_term_lufs,
            "channel_weights": [float(g) for g in self.channel_weights],
            "weights_note": self.weights_note,
            "frames": int(self.frames),
            "nonfinite_samples": int(self.nonfinite_samples),
        }

    @classmethod
    def from_dict(cls, d: dict) -> "LoudnessReading":
        """Inverse of :meth:`to_dict`."""
        def opt(v):
            return None if v is None else float(v)
        return cls(opt(d["integrated_lufs"]), opt(d["loudness_range_lu"]), opt(d["max_momentary_lufs"]),
                   opt(d["max_short_term_lufs"]), tuple(float(g) for g in d["channel_weights"]),
                   str(d["weights_note"]), int(d["frames"]), int(d["nonfinite_samples"]))
