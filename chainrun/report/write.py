"""Writing a batch's reports: JSON (everything), CSV (a row per file) and the HTML page.

Each report is written atomically (:func:`chainrun.fsutil.atomic_write_text`), on its own, the
JSON (the complete record) first, so a full disk loses as little as possible.
"""
from __future__ import annotations

import json
import os
import tempfile
from typing import TYPE_CHECKING

from ..fsutil import atomic_write_text, remove_quietly
from ..text import reason, shown
from .document import batch_dict, with_pictures
from .html import render_html
from .table import csv_text

if TYPE_CHECKING:
    from ..batch.run import BatchResult

__all__ = ["report_paths", "write_reports", "ReportError"]


def report_paths(b: BatchResult | None, json_path: str | None = None) -> dict[str, str]:
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
    return f"{shown(path)}: error: cannot write the report: {reason(exc)}"


def _write_json(path: str, text: str, written: dict[str, str], problems: list[str]) -> None:
    """Write the JSON report; if it cannot be written where it belongs, to the temporary folder instead."""
    try:
        atomic_write_text(path, text)
        written["json"] = path
    except OSError as exc:
        line = _why_not(exc, path)
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
    document = batch_dict(b, command)
    _write_json(paths["json"], json.dumps(document, indent=2, allow_nan=False) + "\n", written, problems)
    try:
        atomic_write_text(paths["csv"], csv_text(document))
        written["csv"] = paths["csv"]
    except OSError as exc:
        problems.append(_why_not(exc, paths["csv"]))
    try:
        atomic_write_text(paths["html"], render_html(with_pictures(document, b)))
        written["html"] = paths["html"]
    except OSError as exc:
        problems.append(_why_not(exc, paths["html"]))
    if problems:
        raise ReportError(written, problems)
    return paths
