"""A batch's reports, drawn from one report document.

* :mod:`~chainrun.report.document`: the report document (JSON-safe data) built from a
  :class:`~chainrun.batch.run.BatchResult`; the only module here that reads the live batch.
* :mod:`~chainrun.report.table`: the console summary, stderr lines and the CSV, from the document.
* :mod:`~chainrun.report.html`: the self-contained HTML page, from the document
  (with :mod:`~chainrun.report.cells` and the style sheet ``report.css``).
* :mod:`~chainrun.report.pictures`: the response pictures of the HTML report.
* :mod:`~chainrun.report.plot`: the response figure (matplotlib) of ``chainrun plot``.
* :mod:`~chainrun.report.write`: writing the three reports.

Importing this package imports neither matplotlib nor scipy.
"""
