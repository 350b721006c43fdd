"""Writing a batch's reports: JSON (everything), CSV (a row per file) and the HTML page.

The three are drawn from one report document and written together, or none is: each is written to a
temporary name beside its final one first (:func:`chainrun.fsutil.temp_path_for`), and only when all
three are complete are they renamed into place, one after the other with Ctrl-C held off, so the three
always describe the same run. If one cannot be written where it belongs, none is put there and the three
go to the system's temporary folder instead (the JSON, the complete record, first). A report replaces
only a report chainrun wrote earlier (:func:`foreign`): never a recording, a spreadsheet or any other
file that happens to have its name. The reports of an earlier run under the default names are kept
under a dated name (:func:`dated_base`) before the new ones take their place.
"""
from __future__ import annotations

import json
import os
import stat
import tempfile
import time
from typing import TYPE_CHECKING

from ..fsutil import fsync_path, remove_quietly, temp_path_for
from ..interrupt import ctrl_c_stops_rendering
from ..text import reason, shown
from .document import batch_dict, with_pictures
from .html import render_html
from .table import CSV_FILE_FIELDS, csv_text

if TYPE_CHECKING:
    from ..batch.run import BatchResult

__all__ = ["DEFAULT_NAME", "REPORT_SUFFIXES", "report_paths", "write_reports", "ReportError", "ReportsInterrupted",
           "foreign", "dated_base"]

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


DEFAULT_NAME = "chainrun-report"
REPORT_SUFFIXES = (".json", ".csv", ".html")      # the one taken off a --report name (any case)
_KINDS = ("json", "csv", "html")


def report_paths(b: BatchResult | None, json_path: str | None = None) -> dict[str, str]:
    """The three report paths: OUTDIR/chainrun-report.*, or as ``--report`` names them.

    ``--report`` may name any of the three (``night.json``, ``night.csv``, ``night.html``: that suffix,
    in any case, is taken off and the three suffixes put on), a base name (``night.2024.06.01``: no
    other dot-part is ever taken off) or a folder (``rep/``: the default names inside it).
    """
    if not json_path:
        base = os.path.join(b.outdir, DEFAULT_NAME)
    elif _default_names(json_path):
        base = os.path.join(json_path, DEFAULT_NAME)
    else:
        stem, ext = os.path.splitext(json_path)
        base = stem if ext.lower() in REPORT_SUFFIXES else json_path
    return {kind: f"{base}.{kind}" for kind in _KINDS}


def _default_names(json_path: str | None) -> bool:
    """Whether the reports take the default names: no ``--report``, or a folder given to it."""
    return not json_path or json_path.endswith(("/", os.sep)) or os.path.isdir(json_path)


def dated_base(paths: dict[str, str]) -> str:
    """Where the reports now at ``paths`` are kept when a new run's take their names: the base name with
    the time the earlier JSON report (else the first report there) was written, ``-YYYYMMDD-HHMMSS`` in
    local time, and ``-2``, ``-3``... after it if a report of that name is there already (never replaced)."""
    base = paths["json"][:-len(".json")]
    mtime = time.time()
    for kind in _KINDS:
        try:
            mtime = os.stat(paths[kind]).st_mtime
            break
        except OSError:
            continue
    dated = f"{base}-{time.strftime('%Y%m%d-%H%M%S', time.localtime(mtime))}"
    n, candidate = 1, dated
    while any(os.path.lexists(f"{candidate}.{kind}") for kind in _KINDS):
        n += 1
        candidate = f"{dated}-{n}"
    return candidate


class ReportError(OSError):
    """The reports could not be written where they belong; ``written`` has the paths of those written
    instead (to the temporary folder), ``problems`` one line for each report that was not."""

    def __init__(self, written: dict[str, str], problems: list[str]):
        super().__init__("; ".join(problems))
        self.written, self.problems = written, problems


class ReportsInterrupted(KeyboardInterrupt):
    """A Ctrl-C (or stop signal) came while the reports were written; ``written`` has their paths if all
    three were put in place before it was taken (else it is empty, and no report was replaced)."""

    def __init__(self, written: dict[str, str]):
        super().__init__()
        self.written = written


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


def _write_temp(path: str, text: str) -> str:
    """``text`` written and fsynced under a temporary name beside ``path``; returns that name."""
    tmp = temp_path_for(path)
    try:
        with open(tmp, "x", encoding="utf-8", newline="") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
    except BaseException:
        remove_quietly(tmp)
        raise
    return tmp


def _keep_earlier(paths: dict[str, str], dated: str) -> None:
    """Give the earlier run's reports at ``paths`` their dated names too (a second name: the final name
    stays until the new report replaces it), never over a file that is there."""
    for kind in _KINDS:
        if not os.path.isfile(paths[kind]):
            continue
        target = f"{dated}.{kind}"
        try:
            os.link(paths[kind], target)          # fails if anything is at target: nothing is replaced
        except FileExistsError:
            continue
        except OSError:                           # a file system without hard links: move it instead
            if not os.path.lexists(target):
                os.rename(paths[kind], target)


def _put_in_place(texts: dict[str, str], paths: dict[str, str], keep_earlier: bool) -> list[str]:
    """Write the three reports under temporary names, then rename all three into place; returns the problems
    (and then nothing was put in place). A Ctrl-C while they are renamed is held until all three are."""
    temps: dict[str, str] = {}
    try:
        for kind in _KINDS:
            try:
                temps[kind] = _write_temp(paths[kind], texts[kind])
            except OSError as exc:
                return [_why_not(exc, paths[kind])]
        try:
            with ctrl_c_stops_rendering():        # Ctrl-C only sets the stop flag until the three are in place
                if keep_earlier and any(os.path.isfile(paths[kind]) for kind in _KINDS):
                    _keep_earlier(paths, dated_base(paths))
                for kind in _KINDS:
                    os.replace(temps.pop(kind), paths[kind])
        except KeyboardInterrupt:
            raise ReportsInterrupted({} if temps else dict(paths)) from None
        except OSError as exc:
            return [_why_not(exc, exc.filename or paths["json"])]
        try:
            fsync_path(os.path.dirname(paths["json"]) or ".", directory=True)
        except OSError:
            pass                                  # renamed; only a power cut could still lose the renames
        return []
    except KeyboardInterrupt as exc:
        if isinstance(exc, ReportsInterrupted):
            raise
        raise ReportsInterrupted({}) from None
    finally:
        for tmp in temps.values():
            remove_quietly(tmp)


def _elsewhere(texts: dict[str, str]) -> dict[str, str]:
    """The three reports written to the system's temporary folder (``chainrun-report-XXXX.json`` and the CSV and
    HTML beside it), the JSON first; returns those that could be written."""
    written: dict[str, str] = {}
    fd, path = tempfile.mkstemp(prefix=DEFAULT_NAME + "-", suffix=".json")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(texts["json"])
    except OSError:
        remove_quietly(path)
        return written
    written["json"] = path
    base = path[:-len(".json")]
    for kind in ("csv", "html"):
        try:
            with open(f"{base}.{kind}", "x", encoding="utf-8", newline="") as fh:
                fh.write(texts[kind])
            written[kind] = f"{base}.{kind}"
        except OSError:
            remove_quietly(f"{base}.{kind}")
    return written


def write_reports(b: BatchResult, json_path: str | None = None, command: list[str] | None = None) -> dict[str, str]:
    """Write the JSON, CSV and HTML reports, all three or none; returns their paths.

    All three are drawn from one document first, then written under temporary names, then renamed into
    place together (see the module's notes). With the default names (no ``--report``, or a folder), an
    earlier run's reports there are kept under a dated name (:func:`dated_base`).

    Raises
    ------
    ReportError
        If any report could not be written where it belongs, or a file that chainrun did not write is at
        one of the names (:func:`foreign`): none was put there, and the three were written to the system's
        temporary folder instead (``written``), as far as they could be.
    ReportsInterrupted
        On Ctrl-C (or a stop signal) while the reports were drawn or written.
    """
    paths = report_paths(b, json_path)
    keep_earlier = _default_names(json_path)
    try:
        document = batch_dict(b, command)
        texts = {"json": json.dumps(document, indent=2, allow_nan=False) + "\n", "csv": csv_text(document),
                 "html": render_html(with_pictures(document, b))}
    except KeyboardInterrupt:
        raise ReportsInterrupted({}) from None
    problems = [_refusal(paths[kind], why) for kind in _KINDS if (why := foreign(paths[kind], kind))]
    if not problems:
        try:
            os.makedirs(os.path.dirname(paths["json"]) or ".", exist_ok=True)
        except OSError:
            pass                    # writing below says why it fails
        problems = _put_in_place(texts, paths, keep_earlier)
    if not problems:
        return paths
    written = _elsewhere(texts)
    aside = (f"; the reports were written to {', '.join(shown(p) for p in written.values())} instead, all three "
             "together or none" if written else "; they could not be written to the temporary folder either")
    problems[-1] += aside
    raise ReportError(written, problems)
