"""The located, one-line errors every layer raises; the command line turns each into one line on stderr.

* :class:`RecipeError` — a recipe (or plan) problem, ``path:line:col: error: what; what is allowed``.
* :class:`AudioError` — one audio file cannot be rendered; the file fails, the batch goes on.
* :class:`BatchError` — the whole batch cannot start (usage, a rejected recipe): exit status 2.

:func:`problem` turns one such line (an error or a warning) into the object ``check --json`` gives.
"""
from __future__ import annotations

import re
from dataclasses import dataclass

from .text import one_line

__all__ = ["Location", "RecipeError", "AudioError", "BatchError", "problem", "problem_line"]


@dataclass(frozen=True)
class Location:
    """A place in a recipe file: path, 1-based line and 1-based column."""

    path: str
    line: int
    col: int

    def __str__(self) -> str:
        return f"{self.path}:{self.line}:{self.col}"


class RecipeError(ValueError):
    """A recipe problem, located: ``path:line:col: error: what; what is allowed``.

    Parameters
    ----------
    path, line, col
        Where the problem is (1-based line and column).
    message
        What is wrong and what is allowed, in one line.
    """

    def __init__(self, path: str, line: int, col: int, message: str):
        # One error, one line: control characters (a newline in a quoted key, a
        # YAML library message) are shown escaped, never as a line break.
        message = one_line(str(message))
        self.path, self.line, self.col, self.message = str(path), int(line), int(col), message
        super().__init__(f"{self.path}:{self.line}:{self.col}: error: {message}")

    @classmethod
    def at(cls, where: Location, message: str) -> "RecipeError":
        return cls(where.path, where.line, where.col, message)

    @property
    def where(self) -> Location:
        return Location(self.path, self.line, self.col)


class AudioError(Exception):
    """A problem with one audio file: one line, naming the file."""


class BatchError(Exception):
    """A problem with the whole batch (usage, recipe rejected): exit status 2."""


# ``path:line:col: severity: message``, the place optional (a finding of the whole chain has none).
_LINE = re.compile(r"(?:(?P<path>.*?):(?P<line>\d+):(?P<col>\d+): )?(?P<severity>error|warning): (?P<message>.*)", re.S)


def problem(line: str, rate: int | None = None) -> dict:
    """One located line as a JSON-safe object: ``path``, ``line``, ``col`` (None where it has no place),
    ``severity`` ("error" or "warning"), ``message`` and the ``rate`` in Hz it applies to (or None)."""
    m = _LINE.fullmatch(line)
    if m is None:                       # not in the located form: an error with no place
        return {"path": None, "line": None, "col": None, "severity": "error", "message": line, "rate": rate}
    placed = m["line"] is not None
    return {"path": m["path"] if placed else None, "line": int(m["line"]) if placed else None,
            "col": int(m["col"]) if placed else None, "severity": m["severity"], "message": m["message"],
            "rate": rate}


def problem_line(p: dict) -> str:
    """The one line :func:`problem` was made from."""
    place = f"{p['path']}:{p['line']}:{p['col']}: " if p["line"] is not None else ""
    return f"{place}{p['severity']}: {p['message']}"
