"""Writing a batch's reports: JSON (everything), CSV (a row per file) and the HTML page.

Each report is written atomically (:func:`chainrun.fsutil.atomic_write_text`), on its own, the
JSON (the complete record) first, so a full disk loses as little as possible. A report replaces
only a report chainrun wrote earlier (:func:`foreign`): never a recording, a spreadsheet or any
other file that happens to have its name.
"""
from __future__ import annotations

import json
import os
import stat
import tempfile
from typing import TYPE_CHECKING

from ..fsutil import atomic_write_text, remove_quietly
from ..text import reason, shown
from .document import batch_dict, with_pictures
from .html import render_html
from .table import CSV_FILE_FIELDS, csv_text

if TYPE_CHECKING:
    from ..batch.run import BatchResult

__all__ = ["report_paths", "write_reports", "ReportError", "foreign"]

# How each report chainrun writes begins (since its first version): the JSON with its
# "chainrun_version" key (json.dumps keeps the document's key order), the CSV with its header's file
# columns, the HTML page with its generator tag in the head. A file there that begins otherwise
# is not ours and is never replaced.
_HEAD_BYTES = 4096
_OUR_HEAD = {
    "json": lambda head: head.startswith(b'{\n  "chainrun_version": '),
    "csv": lambda head: head.startswith((",".join(CSV_FILE_FIELDS) + ",").encode("ascii")),
    "html": lambda head: head.startswith(b"<!DOCTYPE html>") and b'<meta name="generator" content="chainrun">' in head,
}


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


def foreign(path: str, kind: str) -> str | None:
    """Why the ``kind`` report (json, csv, html) must not be written to ``path``: a file is there that
    is not a report chainrun wrote (a recording, someone's spreadsheet); None if nothing is there or
    an earlier report of ours is, which is replaced."""
    try:
        st = os.stat(path)
    except OSError:
        return None                 # nothing there (or a dangling link); if it cannot be written, the write says why
    if not stat.S_ISREG(st.st_mode):
        return "something that is not a file is there"
    try:
        with open(path, "rb") as fh:
            head = fh.read(_HEAD_BYTES)
    except OSError as exc:
        return f"a file is there that cannot be read to tell whether chainrun wrote it ({reason(exc)})"
    if _OUR_HEAD[kind](head):
        return None
    return f"a file is there that is not a {kind.upper()} report chainrun wrote"


def _refusal(path: str, why: str) -> str:
    return f"{shown(path)}: error: the report was not written there: {why} (left as it was; give --report another name)"


def _write_text(kind: str, path: str, text: str, written: dict[str, str], problems: list[str]) -> None:
    """Write the CSV or HTML report, unless a file that is not ours is there."""
    why = foreign(path, kind)
    if why:
        problems.append(_refusal(path, why))
        return
    try:
        atomic_write_text(path, text)
        written[kind] = path
    except OSError as exc:
        problems.append(_why_not(exc, path))


def _write_json(path: str, text: str, written: dict[str, str], problems: list[str]) -> None:
    """Write the JSON report; if it cannot be written where it belongs (or a file that is not ours is
    there), to the temporary folder instead."""
    why = foreign(path, "json")
    if why:
        line = _refusal(path, why)
    else:
        try:
            atomic_write_text(path, text)
            written["json"] = path
            return
        except OSError as exc:
            line = _why_not(exc, path)
    fallback = None
    try:
        fd, fallback = tempfile.mkstemp(prefix="chainrun-report-", suffix=".json")
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        written["json"] = fallback
        line += f"; it was written to {shown(fallback)} instead"
    except OSError:
        if fallback:
            remove_quietly(fallback)
    problems.append(line)


def write_reports(b: BatchResult, json_path: str | None = None, command: list[str] | None = None) -> dict[str, str]:
    """Write the JSON, CSV and HTML reports (each atomically); returns their paths.

    Each report is written on its own, the JSON (the complete record) first, so a
    full disk loses as little as possible. If the JSON report cannot be written
    where it belongs, it is written to the system's temporary folder instead.
    A report path where a file is that chainrun did not write (:func:`foreign`)
    is left as it is: that report is not written there.

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
    _write_text("csv", paths["csv"], csv_text(document), written, problems)
    _write_text("html", paths["html"], render_html(with_pictures(document, b)), written, problems)
    if problems:
        raise ReportError(written, problems)
    return paths
