"""Rendering to a loudness target: one gain per file, measured on the filtered output, never past a ceiling.

Pass 1 filters the file into a float64 scratch file while metering the filtered output's
integrated loudness (ITU-R BS.1770-4), sample peak and true peak; the gain is
``target - measured``. Pass 2 reads the scratch file (never the input again), applies that one
gain, meters, quantises and writes. No limiter, no compressor: when the gain would take the
sample peak past ``ceiling_dbfs``, the true peak past ``true_peak_ceiling_dbtp`` or the samples
past the largest code, the file gets the largest gain that fits instead (``on_over`` scale or
clip: delivered, status ok, with the shortfall in LU said and kept in ``loudness_shortfall_lu``)
or is not delivered (``on_over`` reject: rejected, with the shortfall and the largest gain that
fits, in ``trim_db``). A file whose loudness is below the gate (silence, or shorter than one
400 ms block) gets no loudness gain and a note.

Linked gain (``loudness_link`` folder or batch: one gain for a group of files) takes two phases,
run by the batch: first :func:`measure_file` on every file of the group (read, filter and meter
only; nothing written), then :func:`group_of` to combine them -- the integrated loudness of all
the group's gating blocks together, exactly as if they were one stream's, and the smallest
headroom -- and then :func:`~chainrun.render.file.render_file` with ``group=`` that
:class:`Group` for each file, which renders through the same two passes as a single file but
takes the group's loudness and headroom instead of its own, so every file gets the same gain.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..audio.formats import output_format
from ..audio.quantise import Quantiser, wants_dither
from ..audio.reader import _Blocks
from ..audio.source import Source
from ..meters import MeterBank
from ..meters.loudness import LoudnessMeter, integrated_of
from ..results import REJECTED
from ..text import db as _db
from .filter import _Filter
from .policy import OnOver, Policy, _max_tp, filter_to_scratch, write_from_scratch

__all__ = ["Target", "Group", "Part", "measure_file", "group_of", "decide_gain", "headroom_db", "FIT_MARGIN_DB",
           "BELOW_GATE"]

# When the ceiling holds the gain back, it is held this far below the largest gain that fits, so that
# rounding in the gain, the quantiser and the true-peak estimate cannot take the output over
# (common practice, no published source; the reject policy's trim advice keeps the same 0.01 dB).
FIT_MARGIN_DB = 0.01
BELOW_GATE = "loudness below the gate (silence, or shorter than 400 ms): no loudness gain"


def headroom_db(peak: float, true_peak: float | None, policy: Policy, code_limit: float) -> float:
    """The largest gain (dB) that keeps the sample peak, the true peak and the codes within their ceilings.

    +inf for silence (nothing limits the gain).
    """
    room = min(policy.ceiling_dbfs - _db(peak), _db(code_limit) - _db(peak))
    if policy.true_peak_ceiling_dbtp is not None and true_peak is not None:
        room = min(room, policy.true_peak_ceiling_dbtp - _db(true_peak))
    return room


@dataclass(frozen=True)
class Part:
    """One file of a linked group, measured: its gating-block histogram and its headroom (dB)."""

    count: np.ndarray
    power: np.ndarray
    room_db: float


@dataclass(frozen=True)
class Group:
    """A linked group's integrated loudness (None: below the gate), smallest headroom (dB) and size."""

    integrated_lufs: float | None
    room_db: float
    files: int
    link: str = "folder"


def measure_file(src: Source, sos: np.ndarray, bound: float, policy: Policy) -> Part:
    """Phase 1 of a linked gain: read, filter and meter one file; nothing is written.

    The filter and meters are those of the render itself, so the figures are the ones its
    pass 1 will find again.

    Raises
    ------
    AudioError, soundfile.LibsndfileError, RuntimeError, OSError
        As :func:`~chainrun.render.file.render_file` would meet them (it then fails the file).
    """
    _, out_subtype = output_format(src, policy.subtype)
    limit = Quantiser(out_subtype, wants_dither(policy.dither, src.subtype, out_subtype), 0).limit
    out_true_peak = policy.true_peak_ceiling_dbtp is not None
    meter = MeterBank(src.rate, src.channels, true_peak=out_true_peak, max_regions=0)
    loudness = LoudnessMeter(src.rate, src.channels, getattr(src, "channel_mask", None))
    filt = _Filter(sos, src.channels, bound)
    reader = _Blocks(src, policy.block_size)
    try:
        for frame0, x, x_peak in reader:
            y = filt(x, frame0, x_peak)
            if y.size:
                meter.update(y, filt.extremes)
                loudness.update(y, filt.extremes)
    finally:
        reader.close()
    count, power = loudness.gating_histogram()
    return Part(count, power, headroom_db(filt.out_peak, _max_tp(meter.result()), policy, limit))


def group_of(parts: list[Part], link: str = "folder") -> Group:
    """Phase 1's parts of a group (in a fixed order, e.g. by relative path) -> the :class:`Group` to render with."""
    room = min((p.room_db for p in parts), default=float("inf"))
    return Group(integrated_of((p.count, p.power) for p in parts), room, len(parts), link)


class Target(OnOver):
    """Bring the filtered output to ``policy.target_lufs`` with one gain, never past a ceiling (see the module).

    With a :class:`Group`, the group's loudness and headroom decide the gain instead of the file's own.
    """

    def __init__(self, policy: Policy, group: Group | None = None):
        super().__init__(policy)
        self.group = group

    def render(self, run) -> tuple[MeterBank, float]:
        policy, res, filt = self.policy, run.res, run.filt
        pre = filter_to_scratch(run, policy, loudness=True)
        reading = pre.result()
        measured = reading.loudness.integrated_lufs
        room = headroom_db(filt.out_peak, _max_tp(reading), policy, run.quantise.limit)
        if self.group is not None:
            measured, room = self.group.integrated_lufs, min(room, self.group.room_db)
        self.short = decide_gain(res, policy.target_lufs, measured, room, policy.on_over == "reject")
        if self.group is not None and res.message:
            res.message += f" (one gain for the {self.group.link}'s {self.group.files} file(s))"
        elif self.group is None and policy.loudness_link != "file" and res.message:
            res.message += f" (measured on this file alone: no {policy.loudness_link} group was given)"
        if res.status == REJECTED:
            return pre, self.short
        return write_from_scratch(run, policy, 10.0 ** (res.loudness_gain_db / 20.0)), 0.0

    def refuse(self, res, over: float) -> bool:
        return res.status == REJECTED


def decide_gain(res, target: float, measured: float | None, room: float, reject: bool) -> float:
    """Fill ``res`` with the loudness gain (or the rejection) for ``measured`` LUFS; returns the shortfall (LU).

    Parameters
    ----------
    res : FileResult
        Gets ``loudness_gain_db``, ``loudness_shortfall_lu``, ``message`` and, when
        rejected, ``status`` and ``trim_db`` (the largest gain that fits).
    target : float
        The target integrated loudness (LUFS).
    measured : float or None
        The filtered output's integrated loudness (LUFS; for a linked group, the group's);
        None below the gate.
    room : float
        :func:`headroom_db` of the filtered output.
    reject : bool
        Whether a file that cannot reach the target is rejected (``on_over: reject``).
    """
    wanted = 0.0 if measured is None else target - measured
    fit = room - FIT_MARGIN_DB
    short = wanted - fit if wanted > room else 0.0
    gain = wanted if short <= 0 else fit
    res.loudness_shortfall_lu = short if short > 0 else None
    if measured is None:
        res.message = BELOW_GATE
        if short <= 0:
            res.loudness_gain_db = 0.0
        elif reject:
            res.status, res.trim_db = REJECTED, fit
            res.message += (f"; the output would pass the ceiling by {-room:.2f} dB; not delivered. "
                            f"A trim of {fit:.2f} dB would fit")
        else:
            res.loudness_gain_db = gain
            res.message += f"; scaled by {gain:.2f} dB to fit the ceiling"
        return short
    if short <= 0:
        res.loudness_gain_db = gain
        res.message = f"loudness gain {gain:+.2f} dB to {target:.1f} LUFS"
    elif reject:
        res.status, res.trim_db = REJECTED, fit
        res.message = (f"reaching {target:.1f} LUFS needs a gain of {wanted:+.2f} dB, which would pass the ceiling; "
                       f"not delivered. The largest gain that fits is {fit:+.2f} dB, {short:.2f} LU short "
                       "of the target")
    else:
        res.loudness_gain_db = gain
        res.message = (f"{short:.2f} LU short of the loudness target {target:.1f} LUFS: the ceiling held the gain "
                       f"at {gain:+.2f} dB (of {wanted:+.2f} dB wanted)")
    return short if short > 0 else 0.0
