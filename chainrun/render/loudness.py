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
"""
from __future__ import annotations

from ..meters import MeterBank
from ..results import REJECTED
from ..text import db as _db
from .policy import OnOver, Policy, _max_tp, filter_to_scratch, write_from_scratch

__all__ = ["Target", "FIT_MARGIN_DB", "BELOW_GATE"]

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


class Target(OnOver):
    """Bring the filtered output to ``policy.target_lufs`` with one gain, never past a ceiling (see the module)."""

    def render(self, run) -> tuple[MeterBank, float]:
        policy, res, filt = self.policy, run.res, run.filt
        pre = filter_to_scratch(run, policy, loudness=True)
        reading = pre.result()
        measured = reading.loudness.integrated_lufs
        room = headroom_db(filt.out_peak, _max_tp(reading), policy, run.quantise.limit)
        self.short = decide_gain(res, policy.target_lufs, measured, room, policy.on_over == "reject")
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
