"""Batch reports: JSON (everything), CSV (a row per file) and the console summary.

Field names are plain English and trade terms (dBFS, dBTP). dB values of
silence, which are minus infinity, are written as null in JSON and left empty
in CSV.
"""
from __future__ import annotations

import csv
import io
import json
import math
import os
import platform
import tempfile
import time
from typing import Any

from . import __version__
from .batch import BatchResult
from .fsutil import atomic_write_text, remove_quietly
from .results import INTERRUPTED, QUIET_SKIPS, SKIPPED, STATUS_ORDER, STATUSES, FileResult
from .text import fmt_db, shown

__all__ = ["STATUS_ORDER", "file_dict", "batch_dict", "write_reports", "console_summary", "worst_first",
           "error_lines", "report_paths", "shown", "fmt_db", "loudest"]

# Status -> rank in "needs attention first" order.
CSV_FIELDS = (
    "input", "output", "status", "message", "rate_hz", "channels", "duration_s", "format", "subtype",
    "out_format", "out_subtype", "dither", "in_peak_dbfs", "in_true_peak_dbtp", "in_clipped_samples",
    "out_peak_dbfs", "out_true_peak_dbtp", "out_rms_dbfs", "out_clipped_samples", "over_db", "trim_db",
    "gain_db", "clipped_by_chainrun", "seconds",
)


def _num(x: Any) -> Any:
    if isinstance(x, float) and not math.isfinite(x):
        return None
    return x


def loudest(reading, attr: str) -> float | None:
    """The largest of one meter figure (e.g. ``peak_dbfs``) over a reading's channels; None if none."""
    if reading is None:
        return None
    vals = [getattr(c, attr) for c in reading.channels if getattr(c, attr) is not None]
    return max(vals) if vals else None


def file_dict(r: FileResult) -> dict:
    """One file's result as JSON-safe data."""
    s = r.source
    d = {
        "input": shown(r.input), "relpath": shown(r.relpath), "output": shown(r.output),
        "status": r.status, "message": shown(r.message),
        "rate_hz": s.rate if s else None, "channels": s.channels if s else None,
        "frames": s.frames if s else None, "duration_s": s.duration_s if s else None,
        "format": s.format if s else None, "subtype": s.subtype if s else None,
        "out_format": r.out_format, "out_subtype": r.out_subtype, "dither": r.dither if r.out_subtype else None,
        "over_db": _num(r.over_db), "trim_db": _num(r.trim_db), "gain_db": _num(r.gain_db),
        "clipped_by_chainrun": r.clipped_by_chainrun, "seconds": round(r.seconds, 4),
        "input_meters": _meters_dict(r.input_meters),
        "output_meters": _meters_dict(r.output_meters),
    }
    d.update(r.extra)
    return d


def _meters_dict(reading) -> dict | None:
    """A meter reading as JSON, each clipped region also given as [start in seconds, length in samples]."""
    if reading is None:
        return None
    d = reading.to_dict()
    for ch in d["channels"]:
        ch["clipped_regions_s"] = [[round(start / reading.rate, 6), length] for start, length in ch["clipped_regions"]]
    return d


def _csv_row(r: FileResult) -> dict:
    d = file_dict(r)
    im, om = r.input_meters, r.output_meters

    def db(x):
        return "" if x is None or not math.isfinite(x) else f"{x:.2f}"

    row = {k: d.get(k) for k in CSV_FIELDS if k in d}
    row.update(
        in_peak_dbfs=db(loudest(im, "peak_dbfs")), in_true_peak_dbtp=db(loudest(im, "true_peak_dbtp")),
        in_clipped_samples=sum(c.clipped_samples for c in im.channels) if im else "",
        out_peak_dbfs=db(loudest(om, "peak_dbfs")), out_true_peak_dbtp=db(loudest(om, "true_peak_dbtp")),
        out_rms_dbfs=db(loudest(om, "rms_dbfs")),
        out_clipped_samples=sum(c.clipped_samples for c in om.channels) if om else "",
        over_db=db(r.over_db), trim_db=db(r.trim_db), gain_db=db(r.gain_db),
    )
    return {k: ("" if row.get(k) is None else row.get(k)) for k in CSV_FIELDS}


def batch_dict(b: BatchResult, command: list[str] | None = None) -> dict:
    """The whole batch as JSON-safe data: recipe, designs per rate, files, summary."""
    audio_s = sum(r.source.duration_s for r in b.results if r.source and r.status in ("ok", "clipped"))
    return {
        "chainrun_version": __version__,
        "created": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
        "host": {"python": platform.python_version(), "platform": platform.platform()},
        "command": command,
        "recipe": b.recipe.to_dict(),
        "recipe_digest": b.recipe.digest,
        "policy": {
            "on_over": b.policy.on_over, "ceiling_dbfs": b.policy.ceiling_dbfs,
            "true_peak_ceiling_dbtp": b.policy.true_peak_ceiling_dbtp, "subtype": b.policy.subtype,
            "dither": b.policy.dither, "block_size": b.policy.block_size,
        },
        "rates": [
            {"rate_hz": rate, "usable": d.usable, "error": d.error,
             "chain": d.chain.to_dict() if d.chain else None,
             "assessment": d.assessment.to_dict() if d.assessment else None}
            for rate, d in sorted(b.designs.items())
        ],
        "summary": {
            "files": len(b.results), **{s: b.count(s) for s in STATUS_ORDER},
            "audio_seconds_delivered": round(audio_s, 3), "wall_seconds": round(b.seconds, 3),
            "interrupted": b.interrupted,
        },
        "notes": list(b.notes),
        "files": [file_dict(r) for r in b.results],
    }


def report_paths(b: BatchResult, json_path: str | None = None) -> dict[str, str]:
    """The three report paths: OUTDIR/chainrun-report.*, or beside ``--report``.

    ``--report`` may name the JSON file (``night.json``), a base name (``night.2024.06.01``: only a
    ``.json`` suffix is taken off, never another dot-part) or a folder (``rep/``: the default names
    inside it).
    """
    if not json_path:
        base = os.path.join(b.outdir, "chainrun-report")
    elif json_path.endswith(("/", os.sep)) or os.path.isdir(json_path):
        base = os.path.join(json_path, "chainrun-report")
    else:
        stem, ext = os.path.splitext(json_path)
        base = stem if ext.lower() == ".json" else json_path
    return {"json": base + ".json", "csv": base + ".csv", "html": base + ".html"}


class ReportError(OSError):
    """Some reports could not be written; ``written`` has the paths of those that were, ``problems`` one
    line for each that was not."""

    def __init__(self, written: dict[str, str], problems: list[str]):
        super().__init__("; ".join(problems))
        self.written, self.problems = written, problems


def _why_not(exc: OSError, path: str) -> str:
    return f"{shown(path)}: error: cannot write the report: {(exc.strerror or str(exc)).lower()}"


def write_reports(b: BatchResult, json_path: str | None = None, command: list[str] | None = None) -> dict[str, str]:
    """Write the JSON, CSV and HTML reports (each atomically); returns their paths.

    Each report is written on its own, the JSON (the complete record) first, so a
    full disk loses as little as possible. If the JSON report cannot be written
    where it belongs, it is written to the system's temporary folder instead.

    Raises
    ------
    ReportError
        If any report could not be written where it belongs (after writing all
        that could be).
    """
    paths = report_paths(b, json_path)
    written: dict[str, str] = {}
    problems: list[str] = []
    try:
        os.makedirs(os.path.dirname(paths["json"]) or ".", exist_ok=True)
    except OSError:
        pass                    # each write below says why it fails
    data = batch_dict(b, command)
    text = json.dumps(data, indent=2, allow_nan=False) + "\n"
    try:
        atomic_write_text(paths["json"], text)
        written["json"] = paths["json"]
    except OSError as exc:
        line = _why_not(exc, paths["json"])
        fallback = None
        try:
            fd, fallback = tempfile.mkstemp(prefix="chainrun-report-", suffix=".json")
            with os.fdopen(fd, "w", encoding="utf-8") as fh:
                fh.write(text)
            written["json"] = fallback
            line += f"; it was written to {fallback} instead"
        except OSError:
            if fallback:
                remove_quietly(fallback)
        problems.append(line)
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=CSV_FIELDS, lineterminator="\n")
    w.writeheader()
    for r in worst_first(b.results):
        w.writerow(_csv_row(r))
    try:
        atomic_write_text(paths["csv"], buf.getvalue())
        written["csv"] = paths["csv"]
    except OSError as exc:
        problems.append(_why_not(exc, paths["csv"]))
    from .htmlreport import render_html      # matplotlib is imported only when a report is written

    try:
        atomic_write_text(paths["html"], render_html(data, b))
        written["html"] = paths["html"]
    except OSError as exc:
        problems.append(_why_not(exc, paths["html"]))
    if problems:
        raise ReportError(written, problems)
    return paths


def worst_first(results: list[FileResult]) -> list[FileResult]:
    """Files needing attention first: failed, rejected, clipped, then by output peak, loudest first."""
    def key(r: FileResult):
        peak = loudest(r.output_meters, "peak") or 0.0
        return (STATUS_ORDER.get(r.status, 9), -peak, r.relpath)
    return sorted(results, key=key)


def console_summary(b: BatchResult, paths: dict[str, str] | None = None, limit: int = 40) -> str:
    """A short table, worst files first, and a totals line."""
    lines = [f"{'status':<9} {'out peak':>11} {'out true peak':>13} {'in peak':>11}  file"]
    rows = worst_first(b.results)
    for r in rows[:limit]:
        lines.append(f"{r.status:<9} {fmt_db(loudest(r.output_meters, 'peak_dbfs'), 'dBFS'):>11} "
                     f"{fmt_db(loudest(r.output_meters, 'true_peak_dbtp'), 'dBTP'):>13} "
                     f"{fmt_db(loudest(r.input_meters, 'peak_dbfs'), 'dBFS'):>11}  {shown(r.relpath)}"
                     + (f"  ({shown(r.message)})" if r.message else ""))
    if len(rows) > limit:
        lines.append(f"... and {len(rows) - limit} more in the report")
    counts = ", ".join(f"{b.count(s)} {s}" for s in STATUS_ORDER if b.count(s))
    audio = sum(r.source.duration_s for r in b.results if r.source and r.status in ("ok", "clipped"))
    lines.append(f"{len(b.results)} file(s): {counts or 'none'}; {audio:.1f} s of audio delivered "
                 f"in {b.seconds:.1f} s" + ("; INTERRUPTED" if b.interrupted else ""))
    if paths:
        lines.append("report: " + ", ".join(paths.values()))
    return "\n".join(lines)




def error_lines(b: BatchResult) -> list[str]:
    """One line per file that needs attention (failed, rejected, clipped), naming it first, for stderr.

    Also a note for each input skipped for a reason worth knowing (named twice, a
    link loop); not for files that are plainly not audio. After Ctrl-C, the files
    not rendered because of it are left to the report and the closing line.
    """

    lines = []
    for r in worst_first(b.results):
        word = STATUSES[r.status].error_word if r.status in STATUSES else ""
        if word and not (b.interrupted and r.message == INTERRUPTED):
            lines.append(f"{shown(r.input)}: {word}: {shown(r.message)}")
        elif r.status == SKIPPED and r.message not in QUIET_SKIPS:
            lines.append(f"{shown(r.input)}: note: skipped: {shown(r.message)}")
    return lines
