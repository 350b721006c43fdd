"""Helpers shared by the test folders (fixtures live in conftest.py beside this file).

Plain functions, imported as ``from support import ...`` (pytest puts this folder on sys.path:
``pythonpath`` in pyproject.toml).
"""
from __future__ import annotations

import json
import os
from pathlib import Path

from chainrun.fsutil import TEMP_TAG

REPO = Path(__file__).resolve().parents[1]          # the repository root (chainrun/, recipes/, tests/)


def report_of(where) -> dict:
    """The JSON report of a run: ``where`` is its OUTDIR or the report file itself."""
    path = os.fspath(where)
    if not path.endswith(".json"):
        path = os.path.join(path, "chainrun-report.json")
    with open(path, encoding="utf-8") as fh:
        return json.load(fh)


def by_rel(report: dict) -> dict:
    """A report's files by their relative path."""
    return {f["relpath"]: f for f in report["files"]}


def temporaries(folder) -> list[str]:
    """Every temporary output (a name holding chainrun's temporary tag) under ``folder``, sorted."""
    return sorted(os.path.join(r, f) for r, _, fs in os.walk(folder) for f in fs if TEMP_TAG in f)
