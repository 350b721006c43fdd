"""One-line text: escaped names and messages, dB figures, and the reason an exception gives.

Everything a user reads goes through here, so that a file name holding a newline, a terminal
escape or bytes that are not UTF-8 can never break a line of output, and a dB figure always
looks the same.
"""
from __future__ import annotations

import math
import re

__all__ = ["one_line", "shown", "db", "fmt_db", "reason", "first_line", "fault"]

_CONTROL_RE = re.compile(r"[\x00-\x1f\x7f]")


def one_line(text: str) -> str:
    """``text`` with control characters (a newline, a terminal escape) shown escaped, e.g. ``\\n``."""
    return _CONTROL_RE.sub(lambda m: repr(m.group())[1:-1], text)


def shown(path: str | None) -> str | None:
    """A path (or any text) on one line: bytes that are not UTF-8 shown as \\xNN, control characters
    (a newline in a file name, a terminal escape) as \\n, \\x1b and so on."""
    if path is None:
        return None
    text = path.encode("utf-8", "surrogateescape").decode("utf-8", "backslashreplace")
    return one_line(text)


def db(value: float) -> float:
    """20*log10(value); -inf for 0 (and for anything not above it)."""
    return 20.0 * math.log10(value) if value > 0.0 else -math.inf


def fmt_db(x: float | None, unit: str = "dB") -> str:
    """A dB figure for a console table: ``+1.23 dBFS``, ``-inf dBFS`` for silence, ``-`` for none."""
    if x is None or math.isnan(x):
        return "-"
    if math.isinf(x):
        return f"{'+' if x > 0 else '-'}inf {unit}"
    return f"{x:+.2f} {unit}"


def reason(exc: BaseException) -> str:
    """What an OSError says, in lower case (``permission denied``); any other exception's text."""
    return ((getattr(exc, "strerror", None) or str(exc))).lower()


def first_line(exc: BaseException, default: str = "") -> str:
    """The first line of an exception's text (library messages can run over several)."""
    return (str(exc).strip().splitlines() or [default])[0]


def fault(exc: BaseException) -> str:
    """``TypeName: first line`` for a fault that is not bad input (a bug, MemoryError)."""
    text = first_line(exc)
    return f"{type(exc).__name__}{': ' + text if text else ''}"
