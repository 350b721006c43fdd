"""Pieces of the HTML report: escaped text, number cells, status badges."""
from __future__ import annotations

import html
import math
import re
from typing import Any

from ..results import SKIPPED, STATUSES, css_name
from ..text import fmt_db, one_line
from .table import channels_of, meter_figure

__all__ = ["plain", "esc", "db_cell", "loudness_cell", "gain_cell", "clipped_total", "seconds_text", "status_badge",
           "num_text"]

_CONTROL = re.compile(r"[\x00-\x08\x0b-\x1f\x7f]")


def plain(value: Any) -> str:
    """Any value as text a UTF-8 file can hold: stray surrogates and control characters shown as escapes;
    C1 controls, bidirectional overrides and isolates and invisible characters as ``\\u202e`` and so on
    (:func:`chainrun.text.one_line`), so that no name or note can reorder or hide text on the page."""
    s = "" if value is None else str(value)
    try:
        s.encode("utf-8")
    except UnicodeEncodeError:
        try:
            s = s.encode("utf-8", "surrogateescape").decode("utf-8", "backslashreplace")
        except UnicodeEncodeError:
            s = s.encode("utf-8", "backslashreplace").decode("utf-8")
    s = s.replace("\n", "\\n").replace("\t", "\\t")
    return one_line(_CONTROL.sub(lambda m: f"\\x{ord(m.group()):02x}", s))


def esc(value: Any) -> str:
    """Escaped for HTML text and attribute values."""
    return html.escape(plain(value), quote=True)


# --------------------------------------------------------------------------- numbers

def db_cell(meters: dict | None, key: str) -> str:
    """A table cell with a file's loudest channel's dB figure ``key``; silence and "not measured" in words."""
    value = meter_figure(meters, key)
    if value is None:
        return '<td class="num"><span class="na" title="not measured">&ndash;</span></td>'
    if value == -math.inf:
        return '<td class="num" title="silence">&minus;&infin;</td>'
    return f'<td class="num">{_fmt_db(value)}</td>'


def loudness_cell(meters: dict | None) -> str:
    """A table cell with a file's integrated loudness: a number, "below gate" in words, or "not measured"."""
    loud = (meters or {}).get("loudness")
    if not loud:
        return '<td class="num"><span class="na" title="not measured">&ndash;</span></td>'
    value = loud.get("integrated_lufs")
    if value is None:
        return '<td class="num" title="below the -70 LUFS gate: silence, or shorter than 400 ms">below gate</td>'
    return f'<td class="num">{_fmt_db(value)}</td>'


def gain_cell(gain: float | None) -> str:
    """A table cell with the loudness gain applied; a dash when no loudness target was set."""
    if gain is None:
        return '<td class="num"><span class="na" title="no loudness target">&ndash;</span></td>'
    return f'<td class="num">{_fmt_db(gain)}</td>'


def _fmt_db(x: float) -> str:
    """A finite dB figure for a table cell: ``+1.23``, ``&minus;4.50`` (never ``-0.00``)."""
    return fmt_db(0.0 if abs(x) < 0.005 else x, "").strip().replace("-", "&minus;")


def clipped_total(meters: dict | None) -> int | None:
    chans = channels_of(meters)
    counts = [int(c["clipped_samples"]) for c in chans if c.get("clipped_samples") is not None]
    return sum(counts) if counts else None       # None: not measured, or no output (rejected, failed)


def seconds_text(x: float | None) -> str:
    if x is None or not math.isfinite(x):
        return "&ndash;"
    return f"{x:.1f} s" if x >= 10 else f"{x:.3g} s"


def status_badge(status: Any) -> str:
    s = plain(status)
    cls = s if s in STATUSES else SKIPPED
    return f'<span class="status st-{css_name(cls)}">{esc(s)}</span>'


def num_text(x: Any, fmt: str, none: str = "-") -> str:
    if x is None:
        return none
    try:
        return format(float(x), fmt)
    except (TypeError, ValueError):
        return str(x)
