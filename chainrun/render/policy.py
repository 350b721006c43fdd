"""How to render a file (:class:`Policy`), and what happens when its output passes a ceiling (:data:`ON_OVER`).

Each ``on_over`` word is one class: :class:`Reject` stops writing and delivers nothing,
:class:`Clip` hard-clips at the sample ceiling, :class:`Scale` filters into a scratch file
first and then writes it scaled to fit. :func:`chainrun.render.file.render_file` asks the
policy's class to run the passes and to judge the outcome.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from ..version import __version__
from ..audio.formats import is_float
from ..audio.reader import _Blocks
from ..audio.writer import _Output
from ..dsp.sums import row_extremes
from ..errors import BatchError
from ..fsutil import remove_quietly as _remove_quietly, temp_path_for
from ..meters import MeterBank, MeterReading
from ..results import REJECTED
from ..text import db as _db
from .pipeline import _Scratch, _pipeline

if TYPE_CHECKING:
    from ..recipe import Recipe

__all__ = ["Policy", "DEFAULT_BLOCK", "MIN_BLOCK", "MAX_BLOCK", "ON_OVER", "Reject", "Clip", "Scale", "LOUDNESS_LINKS",
           "float_clip_warning"]

DEFAULT_BLOCK = 65536
LOUDNESS_LINKS = ("file", "folder", "batch")     # over what one loudness gain is measured
MIN_BLOCK = 1
MAX_BLOCK = 1 << 22


@dataclass(frozen=True)
class Policy:
    """How to render: headroom policy, ceiling, output format, block size.

    ``threads`` is how many cores the file may keep busy. With 1 (the
    default) every step runs in the calling thread, one after the other; with 2
    or more, decoding (with the input meters), filtering, and the output meters
    with encoding run in three threads that overlap. The batch gives a file more
    than one only when it renders that file alone. It never changes the output.

    ``loudness`` meters input and output loudness (BS.1770-4); like ``true_peak``
    it costs time and never changes the output. ``target_lufs`` (None: off) renders
    each file to that integrated loudness with one gain, never past a ceiling
    (:class:`Target`); ``loudness_link`` says over what the gain is measured:
    ``file`` (each file its own), ``folder`` or ``batch`` (one gain for the group,
    applied by the batch with :mod:`chainrun.render.loudness`).
    """

    on_over: str = "reject"
    ceiling_dbfs: float = 0.0
    true_peak_ceiling_dbtp: float | None = None
    subtype: str = "same"
    dither: str = "auto"
    block_size: int = DEFAULT_BLOCK
    true_peak: bool = True
    max_regions: int = 20
    threads: int = 1
    metadata: bool = True
    history: str = ""
    loudness: bool = True
    target_lufs: float | None = None
    loudness_link: str = "file"

    @property
    def ceiling(self) -> float:
        return 10.0 ** (self.ceiling_dbfs / 20.0)

    @classmethod
    def from_recipe(cls, recipe: Recipe, *, on_over: str | None = None, block_size: int | None = None,
                    true_peak: bool = True, loudness: bool = True) -> "Policy":
        """The recipe's guard and output settings, with the command line's choices over them.

        Raises
        ------
        BatchError
            If ``block_size`` is outside MIN_BLOCK .. MAX_BLOCK frames.
        """
        block = DEFAULT_BLOCK if block_size is None else block_size
        if not MIN_BLOCK <= block <= MAX_BLOCK:
            raise BatchError(f"--block-size {block} is out of range; allowed: {MIN_BLOCK} to {MAX_BLOCK} frames")
        g, o = recipe.guard, recipe.output
        target, link = _loudness_of(recipe)
        if link not in LOUDNESS_LINKS:
            raise BatchError(f"loudness link {link!r} is not known; allowed: {', '.join(LOUDNESS_LINKS)}")
        return cls(on_over=on_over or g.on_over, ceiling_dbfs=g.ceiling_dbfs,
                   true_peak_ceiling_dbtp=g.true_peak_ceiling_dbtp, subtype=o.subtype, dither=o.dither,
                   block_size=block, true_peak=true_peak, loudness=loudness, target_lufs=target,
                   loudness_link=link, metadata=getattr(o, "metadata", "keep") == "keep",
                   history=f"chainrun {__version__} {getattr(recipe, 'name', '')}".strip())

    def output_key(self) -> dict:
        """The fields that decide an output's bytes (besides the input and the recipe), by name.

        Block size, threads and metering never change the output, so they are not in it.
        ``metadata`` and ``history`` are: the history text (it names the recipe, which the
        recipe's digest leaves out) is written into the bext chunk of an output.
        """
        return {"on_over": self.on_over, "ceiling_dbfs": self.ceiling_dbfs,
                "true_peak_ceiling_dbtp": self.true_peak_ceiling_dbtp, "subtype": self.subtype,
                "dither": self.dither, "metadata": self.metadata, "history": self.history,
                "target_lufs": self.target_lufs, "loudness_link": self.loudness_link}


def _loudness_of(recipe) -> tuple[float | None, str]:
    """The recipe's ``loudness: {target_lufs, link}`` block as (target, link); (None, "file") without one.

    Read with getattr: the block is an attribute (or a plain dict) of recipes that have it.
    """
    block = getattr(recipe, "loudness", None)
    if block is None:
        return None, "file"
    get = block.get if isinstance(block, dict) else (lambda k, d=None: getattr(block, k, d))
    target = get("target_lufs")
    return (None if target is None else float(target)), str(get("link", None) or "file")


# The true-peak meter computes in single precision: a reading may be off by up to 1.15e-5 of it (1e-4 dB;
# chainrun.meters.truepeak), so the scaled output, metered again, may read up to twice that above the
# scaled input's reading. A true peak scaled to its ceiling is held this far under it.
TRUE_PEAK_MARGIN_DB = 0.001


def _over(peak: float, true_peak: float | None, policy: Policy) -> float:
    """dB by which the output passes the ceiling(s); <= 0 when it fits."""
    return max(_db(peak) - policy.ceiling_dbfs, _true_peak_over(true_peak, policy))


def _true_peak_over(true_peak: float | None, policy: Policy) -> float:
    """dB by which ``true_peak`` passes the true-peak ceiling; -inf with no ceiling or no reading."""
    if policy.true_peak_ceiling_dbtp is None or true_peak is None:
        return -math.inf
    return _db(true_peak) - policy.true_peak_ceiling_dbtp


def _max_tp(reading: MeterReading) -> float | None:
    tps = [c.true_peak for c in reading.channels if c.true_peak is not None]
    return max(tps) if tps else None


class OnOver:
    """What happens to a file whose filtered output passes a ceiling (base: nothing; it is delivered).

    :meth:`render` gets the file's ``run`` from ``render_file``: ``src``, ``dst``, ``tmp``
    (the temporary output), ``scratch`` (a scratch file to remove, or None), ``fmt``,
    ``out_subtype``, ``out_fs`` (where its samples clip: infinite for a float output), ``res`` (the FileResult being filled),
    ``in_meter``, ``quantise``, ``filt`` and ``meter_args`` (for the output meters).
    """

    def __init__(self, policy: Policy):
        self.policy = policy

    def render(self, run) -> tuple[MeterBank, float]:
        """Read, filter, meter and write the file in one pass; returns the output meter and dB over the ceiling."""
        policy, res, filt, src = self.policy, run.res, run.filt, run.src
        out_meter = MeterBank(src.rate, src.channels, full_scale=self.meter_full_scale(run.out_fs), **run.meter_args)
        reader = _Blocks(src, policy.block_size, run.in_meter)
        out = _Output(run.tmp, src, run.fmt, run.out_subtype, run.meta)
        # In one thread the output's loudness meter takes each block right after the input's:
        # the two K-weight it in one pass (the same figures).
        paired = policy.threads <= 1 and out_meter.follow(run.in_meter)
        try:
            def process(item):
                frame0, x, x_peak = item
                return self.limit(filt(x, frame0, x_peak), filt, res)

            def encode(item):
                y, over_mask, wanted, extremes, peak = item
                out_meter.update(y, extremes)  # here, not above: balances the threads' work
                if wanted:
                    out.put(run.quantise, y, over_mask, peak)
            _pipeline(reader, process, encode, policy.threads > 1)
        finally:
            if paired:
                out_meter.unfollow()
            reader.close()
            out.close()
        over = _over(filt.out_peak, _max_tp(out_meter.result()), policy)
        if over > 0:
            res.over_db = over
        return out_meter, over

    def meter_full_scale(self, out_fs: float) -> float:
        """Where the output meter counts a sample as clipped."""
        return out_fs

    def limit(self, y: np.ndarray, filt, res) -> tuple:
        """One filtered block -> (block, samples already counted as clipped or None, write it?, extremes, peak)."""
        return y, None, True, filt.extremes, filt.block_peak

    def refuse(self, res, over: float) -> bool:
        """True (and ``res`` says why) when the file must not be delivered."""
        return False

    def true_peak_left(self, reading: MeterReading) -> float:
        """dB by which the delivered output's true peak still passes its ceiling, when that is to be said."""
        return -math.inf


class Reject(OnOver):
    """Over a ceiling: stop writing (the meters go on), deliver nothing, and say what trim would fit."""

    def __init__(self, policy: Policy):
        super().__init__(policy)
        self.rejecting = False

    def limit(self, y, filt, res):
        if _over(filt.out_peak, None, self.policy) > 0:
            self.rejecting = True        # will be rejected: stop writing, keep metering
        return y, None, not self.rejecting, filt.extremes, filt.block_peak

    def refuse(self, res, over: float) -> bool:
        if over <= 0:
            return False
        res.trim_db = -over - 0.01
        res.status = REJECTED
        res.message = (f"output would pass the ceiling by {over:.2f} dB; not delivered. "
                       f"A trim of {res.trim_db:.2f} dB (a gain section, or on_over: scale) would fit")
        return True


class Clip(OnOver):
    """Over the sample ceiling: hard-clip there; samples held at the ceiling count as clipped."""

    def __init__(self, policy: Policy):
        super().__init__(policy)
        self.ceiling = policy.ceiling

    def meter_full_scale(self, out_fs: float) -> float:
        return min(out_fs, self.ceiling)

    def limit(self, y, filt, res):
        ceiling = self.ceiling
        over_mask = None
        extremes, peak = filt.extremes, filt.block_peak
        if peak > ceiling:
            over_mask = np.abs(y) > ceiling
            res.clipped_by_chainrun += int(np.count_nonzero(over_mask))
            np.clip(y, -ceiling, ceiling, out=y)
            # clipping is monotonic: the extremes of the clipped block are the clipped extremes
            extremes = (np.minimum(extremes[0], ceiling), np.maximum(extremes[1], -ceiling))
            peak = ceiling
        return y, over_mask, True, extremes, peak

    def true_peak_left(self, reading: MeterReading) -> float:
        # Clipping holds the sample ceiling only: a true peak still over its ceiling is said, not hidden.
        return _true_peak_over(_max_tp(reading), self.policy)


class Scale(OnOver):
    """Over a ceiling: filter into a float64 scratch file, then write it scaled to fit the ceiling and the codes."""

    def render(self, run) -> tuple[MeterBank, float]:
        policy, res, filt, quantise = self.policy, run.res, run.filt, run.quantise
        # Pass 1: filter to a float64 scratch file, metering the unscaled output.
        pre = filter_to_scratch(run, self.policy)
        tp_over = _true_peak_over(_max_tp(pre.result()), policy)
        over = max(_db(filt.out_peak) - policy.ceiling_dbfs, tp_over)
        # Fit the ceiling and also the codes: for integer output +1.0 (0 dBFS) has no code, so
        # scaling to a 0 dBFS ceiling alone would leave the positive crests hard-clipped. A true
        # peak is fitted TRUE_PEAK_MARGIN_DB under its ceiling: metering the scaled output rounds anew.
        fit = max(over, _db(filt.out_peak) - _db(quantise.limit),
                  tp_over + TRUE_PEAK_MARGIN_DB if tp_over > 0 else -math.inf)
        gain = 10.0 ** (-fit / 20.0) if fit > 0 else 1.0
        res.gain_db = _db(gain) if fit > 0 else 0.0
        res.over_db = over if over > 0 else None
        # Pass 2: scale, meter, quantise, write.
        return write_from_scratch(run, policy, gain), over


def filter_to_scratch(run, policy: Policy, loudness: bool = False) -> MeterBank:
    """Pass 1 of a two-pass render: read, filter and meter ``run``'s file into a float64 scratch file.

    Sets ``run.scratch``; returns the meters of the filtered output (no clipped regions kept;
    with ``loudness``, its loudness too).
    """
    filt, src = run.filt, run.src
    pre = MeterBank(src.rate, src.channels, full_scale=run.out_fs, true_peak=run.meter_args["true_peak"],
                    max_regions=0, loudness=loudness, channel_mask=run.meter_args.get("channel_mask"))
    run.scratch = temp_path_for(run.dst, ".f64")
    store = _Scratch(run.scratch, src.channels)
    reader = _Blocks(src, policy.block_size, run.in_meter)
    fh, write_scratch = store.writer()
    try:
        def pass1(item):
            frame0, x, x_peak = item
            return filt(x, frame0, x_peak), filt.extremes

        def keep(item):
            y, extremes = item
            pre.update(y, extremes)
            write_scratch(y)
        _pipeline(reader, pass1, keep, policy.threads > 1)
    finally:
        reader.close()
        fh.close()
    return pre


def write_from_scratch(run, policy: Policy, gain: float) -> MeterBank:
    """Pass 2: read ``run.scratch`` (never the input) times ``gain`` (linear), meter, quantise, write ``run.tmp``.

    Removes the scratch file; returns the output meters.
    """
    src, quantise = run.src, run.quantise
    store = _Scratch(run.scratch, src.channels)
    out_meter = MeterBank(src.rate, src.channels, full_scale=run.out_fs, **run.meter_args)
    with _Output(run.tmp, src, run.fmt, run.out_subtype, run.meta) as out:
        def pass2(y):
            extremes = row_extremes(y)
            out_meter.update(y, extremes)
            return y, max(float(extremes[0].max()), -float(extremes[1].min()))

        def encode(item):
            y, peak = item
            out.put(quantise, y, peak=peak)
        _pipeline(store.blocks(policy.block_size, gain), pass2, encode, policy.threads > 1)
    _remove_quietly(run.scratch)
    run.scratch = None
    return out_meter


def float_clip_warning(recipe, policy: Policy, subtypes) -> str | None:
    """The warning for ``on_over: clip`` when some output (of input subtypes ``subtypes``) is float, or None.

    A float file keeps samples over full scale, and a gain brings them back; clipping them at the
    ceiling throws that away for good. The warning is located at the recipe's ``on_over`` key (or
    names ``--on-over`` when the command line chose clip); a loudness target never clips, so it has none.
    """
    if policy.on_over != "clip" or policy.target_lufs is not None:
        return None
    if not any(is_float(s if policy.subtype == "same" else policy.subtype) for s in subtypes):
        return None
    guard = getattr(recipe, "guard", None)
    if guard is not None and guard.on_over == "clip":
        where = guard.where.get("on_over") if getattr(guard, "where", None) else None
        head = f"{where or recipe.path}: warning: on_over: clip"
    else:
        head = "chainrun: warning: --on-over clip"
    return (f"{head} hard-clips float output at the ceiling, which destroys the headroom a float recording "
            "keeps over full scale (it is recoverable by a gain); for float takes use on_over: scale or a "
            "loudness target")


# on_over word -> what it does.
ON_OVER: dict[str, type[OnOver]] = {"reject": Reject, "clip": Clip, "scale": Scale}
