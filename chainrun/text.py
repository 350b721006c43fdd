"""One-line text: escaped names and messages, dB figures, and the reason an exception gives.

Everything a user reads goes through here, so that a file name holding a newline, a terminal
escape or bytes that are not UTF-8 can never break a line of output, and a dB figure always
looks the same.
"""
from __future__ import annotations

import math
import re

__all__ = ["one_line", "shown", "db", "fmt_db", "clock", "reason", "first_line", "fault"]

_CONTROL_RE = re.compile(r"[\x00-\x1f\x7f]")

# Characters that are invisible or reorder the text around them, so that a name holding one can
# pass for another name, or a line of a log can read differently from its bytes (the attack of
# N. Boucher and R. Anderson, "Trojan Source: Invisible Vulnerabilities", 2021). They are shown as
# \uXXXX, never as \xNN, so that a real U+0085 is never mistaken for the stray byte 0x85 that
# shown() writes as \x85.
#   U+0080-U+009F          C1 controls (U+009B CSI starts a terminal escape; U+0085 NEL ends a line)
#   U+202A-U+202E          LRE RLE PDF LRO RLO: explicit embeddings and overrides  } the directional
#   U+2066-U+2069          LRI RLI FSI PDI: isolates                               } formatting characters
#   U+200E U+200F U+061C   LRM RLM ALM: implicit directional marks                 } of Unicode Standard Annex #9
#   U+2028 U+2029          line and paragraph separators: some viewers and editors end a line there
#   U+200B U+2060 U+FEFF   zero width space, word joiner, zero width no-break space: invisible, so two
#                          names differing by one look the same
# Left as they are: U+200C and U+200D (zero width non-joiner and joiner), which Persian, Indic
# scripts and emoji sequences need in ordinary names, and every other printable character.
_HIDDEN_RE = re.compile("[\u0080-\u009f\u061c\u200b\u200e\u200f\u2028\u2029\u202a-\u202e"
                        "\u2060\u2066-\u2069\ufeff]")


def one_line(text: str) -> str:
    """``text`` with control characters (a newline, a terminal escape) shown escaped, e.g. ``\\n``,
    ``\\x1b``; C1 controls, bidirectional formatting characters and invisible ones as ``\\u202e``."""
    text = _CONTROL_RE.sub(lambda m: repr(m.group())[1:-1], text)
    return _HIDDEN_RE.sub(lambda m: f"\\u{ord(m.group()):04x}", text)


def shown(path: str | None) -> str | None:
    """A path (or any text) on one line: bytes that are not UTF-8 shown as \\xNN, control characters
    (a newline in a file name, a terminal escape) as \\n, \\x1b and so on, and the characters
    :func:`one_line` hides as \\uXXXX. The result encodes as strict UTF-8 (it holds no surrogate)."""
    if path is None:
        return None
    try:
        text = path.encode("utf-8", "surrogateescape").decode("utf-8", "backslashreplace")
    except UnicodeEncodeError:      # a lone surrogate that is no escaped byte (text from JSON, not a file name)
        text = path.encode("utf-8", "backslashreplace").decode("utf-8")
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


def clock(frames: int | None, rate: int | None, places: int = 3) -> str:
    """Where sample ``frames`` falls at ``rate``, as ``h:mm:ss.mmm`` (``places`` decimals of a second, 0 for
    ``h:mm:ss``), cut down to the last whole tick, never rounded up: exact for any whole frame count.
    ``clock(178_800_024, 48000)`` is ``1:02:05.000``; ``-`` when either is unknown."""
    if frames is None or not rate or frames < 0:
        return "-"
    unit = 10 ** places
    s, frac = divmod(int(frames) * unit // int(rate), unit)
    h, s = divmod(s, 3600)
    m, s = divmod(s, 60)
    return f"{h}:{m:02d}:{s:02d}" + (f".{frac:0{places}d}" if places else "")


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
