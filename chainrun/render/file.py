"""Render one file: blocks in -> filter (state carried) -> meters -> policy -> quantise -> temp -> rename.

Memory does not depend on the file's length: every buffer is one block long.
The output is written to a temporary name in the destination folder, flushed
and fsynced, and only then renamed to its final name, so a final name never
holds an incomplete file. The input is opened read-only and never written.
"""
from __future__ import annotations

import errno
import os
import time
from dataclasses import dataclass

import numpy as np
import soundfile as sf

from ..audio.formats import clip_level, output_format, over_level
from ..audio.quantise import Quantiser, seed_for, wants_dither
from ..audio.reader import _Blocks, _why
from ..audio.metadata.carry import MetaError, OutputMeta
from ..audio.source import Source
from ..audio.writer import meta_failure
from ..version import __version__
from ..errors import AudioError
from ..fsutil import fsync_path as _fsync_path, remove_quietly as _remove_quietly, temp_path_for
from ..heap import keep_freed_buffers
from ..meters import MeterBank
from ..results import CLIPPED, FAILED, OK, FileResult
from ..text import db as _db
from .filter import _Filter
from .loudness import Group, Target
from .policy import DEFAULT_BLOCK, ON_OVER, Policy

__all__ = ["render_file", "scan_file", "bext_loudness", "overs_text"]


@dataclass
class _Run:
    """One file being rendered: what the ``on_over`` class needs to run its passes."""

    src: Source
    dst: str
    tmp: str | None
    fmt: str
    out_subtype: str
    out_fs: float
    res: FileResult
    in_meter: MeterBank
    quantise: Quantiser
    filt: _Filter
    meter_args: dict
    scratch: str | None = None
    meta: OutputMeta | None = None


def render_file(src: Source, dst: str, sos: np.ndarray, bound: float, policy: Policy,
                seed_key: str, relpath: str | None = None, group: Group | None = None) -> FileResult:
    """Filter one file into ``dst`` atomically.

    Parameters
    ----------
    src
        From :func:`~chainrun.audio.reader.probe`.
    dst
        Final output path; its folder must exist. Never the input itself.
    sos
        The chain designed at ``src.rate`` (S x 6).
    bound
        The guard's worst-case peak gain (L1 norm) for ``sos``: the runtime guard
        stops the file if the output ever passes ``bound * input peak``.
    policy
        Headroom policy, ceilings, output format, block size.
    seed_key
        Seeds the dither (the file's relative path).
    group
        With a loudness target linked over a folder or the batch: the group's loudness and
        headroom (:func:`chainrun.render.loudness.group_of`), which decide the gain instead of
        the file's own.

    Returns
    -------
    FileResult
        Status ``ok``, ``clipped``, ``rejected`` or ``failed``; on anything but ok
        and clipped, nothing is written under ``dst`` (a file already there is left as it was).
    """
    t0 = time.perf_counter()
    res = FileResult(input=src.path, relpath=relpath or seed_key, status=FAILED, source=src)
    run = None
    blas = _one_blas_thread()
    keep_freed_buffers()          # block-sized buffers reused from the heap, not fresh pages each block
    try:
        if os.path.exists(dst) and os.path.samefile(dst, src.path):
            raise AudioError("the output would overwrite the input; refused")
        meta = OutputMeta(src.meta, policy.metadata, policy.history or f"chainrun {__version__}")
        fmt, out_subtype = output_format(src, policy.subtype, meta.extra_bytes())
        res.out_format, res.out_subtype = fmt, out_subtype
        res.dither = wants_dither(policy.dither, src.subtype, out_subtype)
        mask = getattr(src, "channel_mask", None)
        in_meter = MeterBank(src.rate, src.channels, full_scale=clip_level(src.subtype),
                             true_peak=policy.true_peak, max_regions=policy.max_regions,
                             loudness=policy.loudness, channel_mask=mask, over_level=over_level(src.subtype))
        out_fs = clip_level(out_subtype)
        quantise = Quantiser(out_subtype, res.dither, seed_for(seed_key))
        filt = _Filter(sos, src.channels, bound)
        # A true-peak ceiling is always checked: without true-peak metering (--no-true-peak) the
        # output is still metered for it, only the input is not.
        out_true_peak = policy.true_peak or policy.true_peak_ceiling_dbtp is not None
        run = _Run(src, dst, temp_path_for(dst), fmt, out_subtype, out_fs, res, in_meter, quantise, filt,
                   dict(true_peak=out_true_peak, max_regions=policy.max_regions,
                        loudness=policy.loudness or policy.target_lufs is not None, channel_mask=mask,
                        over_level=over_level(out_subtype)), meta=meta)
        on_over = ON_OVER[policy.on_over](policy) if policy.target_lufs is None else Target(policy, group)
        out_meter, over = on_over.render(run)
        if on_over.refuse(res, over):
            _remove_quietly(run.tmp)
            run.tmp = None
            res.input_meters, res.output_meters = in_meter.result(), out_meter.result()
            _note_overs(res)
            return res

        at_ceiling = res.clipped_by_chainrun          # by the clip policy; the rest by the word length
        res.clipped_by_chainrun += quantise.clipped
        try:    # the output is closed: its meters are final, and its bext v2 loudness fields say them
            meta.finish(run.tmp, loudness=bext_loudness(out_meter.result()))
        except MetaError as exc:
            raise AudioError(meta_failure(exc)) from None
        res.metadata = meta.listing()
        _check_unchanged(src)
        _fsync_path(run.tmp)
        os.replace(run.tmp, dst)
        run.tmp = None
        res.output = dst          # in place from here on, even if syncing its folder fails below
        _fsync_path(os.path.dirname(dst) or ".", directory=True)
        res.input_meters, res.output_meters = in_meter.result(), out_meter.result()
        tp_left = on_over.true_peak_left(res.output_meters)
        res.status = CLIPPED if res.clipped_by_chainrun or tp_left > 0 else OK
        if res.status == CLIPPED:
            res.message = _clipped_message(at_ceiling, filt.out_peak, policy, quantise.clipped, out_subtype, tp_left)
        elif res.gain_db:
            res.message = (f"scaled by {res.gain_db:.2f} dB to fit the ceiling" if res.gain_db <= -0.005
                           else "scaled by less than 0.01 dB to fit the ceiling")
        _note_overs(res)
        return res
    except AudioError as exc:
        res.status, res.message = FAILED, str(exc)
        return res
    except (sf.LibsndfileError, RuntimeError) as exc:
        res.status, res.message = FAILED, _why(exc)
        return res
    except OSError as exc:
        res.status = FAILED
        if exc.errno in (errno.ENOSPC, errno.EDQUOT, errno.EFBIG):
            res.message = f"cannot write the output: {os.strerror(exc.errno).lower()}; nothing was delivered"
        else:
            res.message = f"{exc.strerror.lower() if exc.strerror else exc}: {exc.filename or dst}"
        return res
    except Exception as exc:  # a fault (MemoryError, a bug): this file fails, the batch goes on
        text = (str(exc).strip().splitlines() or [""])[0]
        res.status = FAILED
        res.message = (f"unexpected fault while rendering ({type(exc).__name__}{': ' + text if text else ''}); "
                       "nothing was delivered; please report it")
        return res
    finally:
        if run is not None:
            _remove_quietly(run.tmp)
            _remove_quietly(run.scratch)
        blas.restore_original_limits()
        res.seconds = time.perf_counter() - t0


def bext_loudness(reading) -> dict | None:
    """The bext v2 loudness fields (EBU Tech 3285 v2) of an output's meter reading, or None.

    None (every field unknown, 0x7FFF) when the output's loudness was not metered; a figure the
    meters could not give (below the gate, too short, true peak not metered) is left out, so
    that it is written unknown too.
    """
    loud = getattr(reading, "loudness", None)
    if loud is None:
        return None
    tps = [c.true_peak_dbtp for c in reading.channels if c.true_peak_dbtp is not None]
    values = {"loudness_value": loud.integrated_lufs, "loudness_range": loud.loudness_range_lu,
              "max_true_peak_level": max(tps) if tps else None,
              "max_momentary_loudness": loud.max_momentary_lufs,
              "max_short_term_loudness": loud.max_short_term_lufs}
    return {k: v for k, v in values.items() if v is not None}


def overs_text(reading) -> str:
    """``N sample(s) over full scale (float), peak +X.XX dBFS`` for a reading with float overs, else ""."""
    if reading is None:
        return ""
    n = sum(c.over_samples for c in reading.channels)
    if not n:
        return ""
    return f"{n} sample(s) over full scale (float), peak {_db(max(c.peak for c in reading.channels)):+.2f} dBFS"


def _note_overs(res: FileResult) -> None:
    """Add to the message what the float input holds over full scale (not clipped: a gain recovers it)."""
    said = overs_text(res.input_meters)
    if said:
        said = f"the input has {said}: recoverable, not clipped"
        res.message = f"{res.message}; {said}" if res.message else said


def _clipped_message(at_ceiling: int, out_peak: float, policy: Policy, by_codes: int, out_subtype: str,
                     tp_left: float) -> str:
    """What was clipped, and where: at the ceiling, at the largest code, or a true peak left over its ceiling."""
    said = []
    if at_ceiling:
        said.append(f"{at_ceiling} sample(s) hard-clipped at the ceiling")
        sample_over = _db(out_peak) - policy.ceiling_dbfs
        if sample_over > 0:
            said[-1] += f" (the filtered peak passed it by {sample_over:.2f} dB)"
    if by_codes:
        said.append(f"{by_codes} sample(s) hard-clipped at the largest {out_subtype} code "
                    "(at full scale, where rounding or dither took them past it)")
    if tp_left > 0:
        said.append(f"the true peak passes the true-peak ceiling by {tp_left:.2f} dB (clipping holds the "
                    "sample ceiling only; on_over: scale or reject would hold it)")
    return "; ".join(said)


def scan_file(src: Source, block: int = DEFAULT_BLOCK, true_peak: bool = True, relpath: str = "",
              loudness: bool = True) -> FileResult:
    """Meter an existing file; nothing is written. Status ok, clipped (samples at full scale) or failed.

    ``loudness`` meters its loudness too (BS.1770-4, channel weights from the file's
    channel mask when it has one). A float file's samples past full scale are not clipped (the
    file keeps them, a gain brings them back): the file is ok, and its message counts them
    (:func:`overs_text`); a sample of exactly +-1.0 is at full scale, not over it.
    """
    t0 = time.perf_counter()
    res = FileResult(input=src.path, relpath=relpath or src.path, status=FAILED, source=src)
    meter = MeterBank(src.rate, src.channels, full_scale=clip_level(src.subtype), true_peak=true_peak,
                      loudness=loudness, channel_mask=getattr(src, "channel_mask", None),
                      over_level=over_level(src.subtype))
    try:
        keep_freed_buffers()
        reader = _Blocks(src, block, meter)
        try:
            with _one_blas_thread():
                for _ in reader:
                    pass
        finally:
            reader.close()
        res.input_meters = meter.result()
        clipped = sum(c.clipped_samples for c in res.input_meters.channels)
        res.status = CLIPPED if clipped else OK
        if clipped:
            res.message = f"{clipped} sample(s) at or beyond full scale"
        else:
            res.message = overs_text(res.input_meters)
    except AudioError as exc:
        res.message = str(exc)
    except (sf.LibsndfileError, RuntimeError, OSError) as exc:
        res.message = _why(exc)
    res.seconds = time.perf_counter() - t0
    return res


def _one_blas_thread():
    """Keep BLAS on the calling thread while a file is metered (a context manager).

    The true-peak meter's matrix products are small; OpenBLAS would still spread
    each over its own worker threads, which on a busy machine stall and which take
    cores that ``--workers`` did not grant. chainrun's parallelism is its own:
    worker processes, and the threads of one file's pipeline.
    """
    from threadpoolctl import threadpool_limits

    return threadpool_limits(limits=1, user_api="blas")


def _check_unchanged(src: Source) -> None:
    try:
        st = os.stat(src.path)
    except OSError as exc:
        raise AudioError(f"disappeared while being read ({exc.strerror})") from None
    if st.st_size != src.size or st.st_mtime_ns != src.mtime_ns:
        raise AudioError("changed while being read (size or modification time differs); "
                         "nothing was delivered, run again once it is stable")
    if src.inode and (st.st_ino != src.inode or st.st_ctime_ns != src.ctime_ns):
        raise AudioError("changed while being read (another file was put in its place, or it was rewritten "
                         "with its size and modification time kept); nothing was delivered, run again once it is stable")
