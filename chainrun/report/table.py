"""Reports as text, drawn from the report document alone: the console summary, stderr lines, the CSV.

Files are listed worst first (:func:`worst_first`): failed, rejected, clipped,
then by output peak, loudest first. Every view takes that order from here.
dB values of silence are left empty in the CSV; a CSV text cell that a spreadsheet would take for
a formula (``=HYPERLINK(...)``, ``-take``) starts with an apostrophe.
"""
from __future__ import annotations

import csv
import io
import math
from typing import Any

from ..results import DELIVERED, FAILED, NOT_RENDERED, QUIET_SKIPS, REJECTED, SKIPPED, STATUS_ORDER, STATUSES
from ..text import clock, fmt_db, shown

__all__ = ["CSV_FILE_FIELDS", "channels_of", "worst_first", "meter_figure", "loudness_text", "duration_text",
           "console_summary", "interrupted_line", "error_lines", "csv_fields", "csv_text", "BELOW_GATE"]

# The file columns of the CSV, split where the meter columns (in_<key>, out_<key>) go.
CSV_FILE_FIELDS = ("input", "output", "status", "message", "rate_hz", "channels", "duration_s", "format", "subtype",
                    "out_format", "out_subtype", "dither")
_CSV_RESULT_FIELDS = ("over_db", "trim_db", "gain_db", "clipped_by_chainrun", "seconds", "loudness_gain_db",
                      "loudness_shortfall_lu")
# The CSV's text columns (names, messages, format names): the only cells a spreadsheet could take
# for a formula. Every other column is a number and is written as one (a dB figure of -3.01 too).
_CSV_TEXT_FIELDS = ("input", "output", "status", "message", "format", "subtype", "out_format", "out_subtype",
                    "dither")
# OWASP "CSV Injection": a cell starting with one of these is taken for a formula by spreadsheet
# programs; a leading apostrophe makes it text.
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")

# The console table (at most 80 columns before the file name): (heading, width, which meters, key); the unit is
# in the heading, dBFS for the sample peak and dBTP for the true peak. The input's peak is in the other reports.
_CONSOLE_COLUMNS = (
    ("out dBFS", 8, "output_meters", "peak_dbfs"),
    ("out dBTP", 8, "output_meters", "true_peak_dbtp"),
)
# Its loudness columns, shown when some file's loudness was metered: (heading, width, which meters).
_CONSOLE_LOUDNESS = (("in LUFS", 10, "input_meters"), ("out LUFS", 10, "output_meters"))
# Its format columns, first: (heading, width).
_CONSOLE_FORMAT = (("rate", 6), ("ch", 3), ("length", 9))
_STATUS_WIDTH = max(len(word) for word in STATUS_ORDER)
BELOW_GATE = "below gate"     # a loudness below the -70 LUFS gate: silence, or shorter than one 400 ms block


def channels_of(meters: dict | None) -> list[dict]:
    return list(meters.get("channels") or []) if meters else []


def _linear_key(key: str) -> str:
    """The linear figure a dB figure comes from: ``peak_dbfs`` -> ``peak``."""
    for suffix in ("_dbfs", "_dbtp"):
        if key.endswith(suffix):
            return key[:-len(suffix)]
    return key


def meter_figure(meters: dict | None, key: str, unit: str = "") -> Any:
    """One headline figure of a file's meters: the loudest channel's, or for a count (unit
    ``samples``) the sum over channels; -inf for silence, None if not measured."""
    chans = channels_of(meters)
    if not chans:
        return None
    if not any(key in c for c in chans):           # a figure of the whole stream, not of each channel
        return (meters.get("headline") or {}).get(key)
    if unit == "samples":               # a count; null on every channel for an output that does not exist
        counts = [int(c[key]) for c in chans if c.get(key) is not None]
        return sum(counts) if counts else None
    vals = [c.get(key) for c in chans if c.get(key) is not None]
    if vals:
        return max(vals)
    linear = _linear_key(key)
    if linear != key and any(c.get(linear) is not None for c in chans):
        return -math.inf                            # silence: its dB figure is written as null
    return None


def loudness_text(meters: dict | None, key: str = "integrated_lufs", unit: str = "LUFS") -> str:
    """A loudness figure for a console: ``-23.0 LUFS``, ``below gate`` (metered, below the gate), ``-`` (not metered)."""
    loud = (meters or {}).get("loudness")
    if not loud:
        return "-"
    value = loud.get(key)
    return BELOW_GATE if value is None else f"{value:.1f} {unit}"


def worst_first(files: list[dict]) -> list[dict]:
    """Files needing attention first: failed, rejected, clipped, then by output peak, loudest first."""
    def key(f: dict):
        peaks = [c.get("peak") or 0.0 for c in channels_of(f.get("output_meters"))]
        return (STATUS_ORDER.get(f.get("status"), 9), -(max(peaks) if peaks else 0.0), f.get("relpath") or "")
    return sorted(files, key=key)


def _audio_seconds(document: dict) -> float:
    return sum(f["duration_s"] for f in document.get("files") or []
               if f.get("duration_s") is not None and f.get("status") in DELIVERED)


def duration_text(f: dict, places: int = 3) -> str:
    """A file's duration as ``h:mm:ss.mmm`` (``places`` decimals), from its frames and rate; ``-`` if unknown."""
    return clock(f.get("frames"), f.get("rate_hz"), places)


def _number(x: Any) -> str:
    """A dB or LUFS figure for the console table without its unit: ``-6.17``, ``-inf``, ``-`` for none."""
    return fmt_db(x, "").strip()


def _loudness_number(meters: dict | None) -> str:
    text = loudness_text(meters)
    return text[:-len(" LUFS")] if text.endswith(" LUFS") else text


def console_summary(document: dict, paths: dict[str, str] | None = None, limit: int = 40) -> str:
    """A short table, worst files first, and a totals line; the table fits 80 columns before the file name.

    Every name and message is passed through :func:`~chainrun.text.shown` (again: a document read
    back from JSON, or report paths under a folder whose name is not UTF-8, hold raw text), so the
    summary prints on a strict UTF-8 console and no name can hold a terminal escape.
    """
    rows = worst_first(document.get("files") or [])
    loud = _CONSOLE_LOUDNESS if any((f.get(m) or {}).get("loudness") for f in rows
                                    for _, _, m in _CONSOLE_LOUDNESS) else ()
    heads = [(h, w) for h, w in _CONSOLE_FORMAT] + [(h, w) for h, w, *_ in _CONSOLE_COLUMNS + loud]
    lines = [f"{'status':<{_STATUS_WIDTH}} " + " ".join(f"{h:>{w}}" for h, w in heads) + "  file"]
    for f in rows[:limit]:
        cells = [num_text(f.get("rate_hz")), num_text(f.get("channels")), duration_text(f, 1)]
        cells += [_number(meter_figure(f.get(m), key)) for _, _, m, key in _CONSOLE_COLUMNS]
        cells += [_loudness_number(f.get(m)) for _, _, m in loud]
        lines.append(f"{shown(str(f['status'])):<{_STATUS_WIDTH}} "
                     + " ".join(f"{c:>{w}}" for c, (_, w) in zip(cells, heads)) + f"  {shown(f['relpath'])}"
                     + (f"  ({shown(f['message'])})" if f.get("message") else ""))
    if len(rows) > limit:
        lines.append(f"... and {len(rows) - limit} more in the report")
    summary = document.get("summary") or {}
    counts = ", ".join(f"{summary[s]} {s}" for s in STATUS_ORDER if summary.get(s))
    lines.append(f"{summary.get('files', len(rows))} file(s): {counts or 'none'}; {_audio_seconds(document):.1f} s "
                 f"of audio delivered in {summary.get('wall_seconds') or 0.0:.1f} s"
                 + ("; INTERRUPTED" if summary.get("interrupted") else ""))
    if paths:
        lines.append("report: " + ", ".join(shown(p) for p in paths.values()))
    return "\n".join(lines)


def num_text(x: Any) -> str:
    return "-" if x is None else str(x)


def _files(n: int) -> str:
    return f"{n} file{'' if n == 1 else 's'}"


def interrupted_line(document: dict, paths: dict[str, str] | None) -> str:
    """The closing line of an interrupted run: what was delivered, what was not rendered, where the reports are."""
    summary = document.get("summary") or {}
    delivered = sum(summary.get(s) or 0 for s in DELIVERED)
    left = summary.get(NOT_RENDERED) or 0
    parts = [f"{_files(delivered)} delivered"] + [f"{summary[s]} {s}" for s in (FAILED, REJECTED) if summary.get(s)]
    if left:
        parts.append(f"{left} not rendered (no partial file was left; the next run renders them)")
    head = "chainrun: interrupted" + ("" if left else " after the last file was rendered")
    where = (f"reports written to {', '.join(shown(p) for p in paths.values())}" if paths
             else "no report was written or replaced (an earlier run's reports are left as they were)")
    return f"{head}: {', '.join(parts)}; {where}"


def error_lines(document: dict) -> list[str]:
    """One line per file that needs attention (failed, rejected, clipped), naming it first, for stderr
    (names and messages through :func:`~chainrun.text.shown`).

    Also the notes on malformed metadata of delivered files (one line each, naming the
    file, the chunk and its byte offset), and a note for each input skipped for a reason worth knowing (named twice, a
    link loop); not for files that are plainly not audio. After Ctrl-C, the files
    not rendered because of it are left to the report and the closing line.
    """
    lines = []
    for f in worst_first(document.get("files") or []):
        status, message = f.get("status"), f.get("message")
        word = STATUSES[status].error_word if status in STATUSES else ""
        if word and status != NOT_RENDERED:           # files a Ctrl-C left: the closing line counts them
            lines.append(f"{shown(f['input'])}: {word}: {shown(message)}")
        elif status == SKIPPED and message not in QUIET_SKIPS:
            lines.append(f"{shown(f['input'])}: note: skipped: {shown(message)}")
        elif status in DELIVERED and f.get("loudness_shortfall_lu"):
            lines.append(f"{shown(f['input'])}: note: {shown(message)}")    # delivered short of the loudness target
        lines.extend(shown(n) for n in (f.get("metadata") or {}).get("notes") or [])   # malformed metadata, located
    return lines


def csv_fields(document: dict) -> tuple[str, ...]:
    """The CSV's columns: the file's, then in_<key> and out_<key> of each headline meter figure, then the result's."""
    keys = [h["key"] for h in document.get("headline_fields") or []]
    return (CSV_FILE_FIELDS + tuple(f"in_{k}" for k in keys) + tuple(f"out_{k}" for k in keys)
            + _CSV_RESULT_FIELDS)


def _db_text(x: Any) -> str:
    return "" if x is None or not math.isfinite(x) else f"{x:.2f}"


def _csv_row(f: dict, headline: list[dict], fields: tuple[str, ...]) -> dict:
    row = {k: f.get(k) for k in fields if k in f}
    for side, meters in (("in", f.get("input_meters")), ("out", f.get("output_meters"))):
        for h in headline:
            value = meter_figure(meters, h["key"], h["unit"])
            if isinstance(value, float):
                value = _db_text(value)
            row[f"{side}_{h['key']}"] = "" if value is None else value
    row.update(over_db=_db_text(f.get("over_db")), trim_db=_db_text(f.get("trim_db")),
               gain_db=_db_text(f.get("gain_db")), loudness_gain_db=_db_text(f.get("loudness_gain_db")),
               loudness_shortfall_lu=_db_text(f.get("loudness_shortfall_lu")))
    for k in _CSV_TEXT_FIELDS:
        if isinstance(row.get(k), str):
            row[k] = _csv_text_cell(row[k])
    return {k: ("" if row.get(k) is None else row.get(k)) for k in fields}


def _csv_text_cell(text: str) -> str:
    """A text cell on one line (:func:`~chainrun.text.shown`) that no spreadsheet runs as a formula."""
    text = shown(text)
    return "'" + text if text.startswith(_FORMULA_START) else text


def csv_text(document: dict) -> str:
    """The CSV report: a header and a row per file, worst first."""
    fields = csv_fields(document)
    headline = document.get("headline_fields") or []
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=fields, lineterminator="\n")
    w.writeheader()
    for f in worst_first(document.get("files") or []):
        w.writerow(_csv_row(f, headline, fields))
    return buf.getvalue()
