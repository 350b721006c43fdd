"""A batch's reports, drawn from one report document.

* :mod:`~chainrun.report.document`: the report document (JSON-safe data) built from a
  :class:`~chainrun.batch.BatchResult`; the only module here that reads the live batch.
* :mod:`~chainrun.report.table`: the console summary, stderr lines and the CSV, from the document.
* :mod:`~chainrun.report.html`: the self-contained HTML page, from the document
  (with :mod:`~chainrun.report.cells` and the style sheet ``report.css``).
* :mod:`~chainrun.report.pictures`: the response pictures, drawn aside while the audio renders.
* :mod:`~chainrun.report.plot`: the response figure (matplotlib), also for ``chainrun plot``.
* :mod:`~chainrun.report.write`: writing the three reports.

Importing this package imports neither matplotlib nor scipy.
"""
from __future__ import annotations

from ..text import fmt_db, shown  # transitional re-export
from . import table as _table
from .document import batch_dict, file_dict, files_document, loudest  # transitional re-export
from .write import ReportError, report_paths, write_reports  # transitional re-export

__all__ = ["fmt_db", "shown", "batch_dict", "file_dict", "loudest", "ReportError",  # transitional re-export
           "report_paths", "write_reports", "console_summary", "error_lines"]


def console_summary(b, paths: dict[str, str] | None = None, limit: int = 40) -> str:  # transitional
    """:func:`chainrun.report.table.console_summary` of a BatchResult (until the caller passes the document)."""
    return _table.console_summary(b if isinstance(b, dict) else files_document(b), paths, limit)


def error_lines(b) -> list[str]:  # transitional
    """:func:`chainrun.report.table.error_lines` of a BatchResult (until the caller passes the document)."""
    return _table.error_lines(b if isinstance(b, dict) else files_document(b))
