"""What every command shares: exit statuses, the one-line error printer, argument types."""
from __future__ import annotations

import argparse
import sys

from ..text import shown

__all__ = ["EXIT_OK", "EXIT_NOT_OK", "EXIT_USAGE", "UsageError", "_err", "_rate", "_positive"]

EXIT_OK, EXIT_NOT_OK, EXIT_USAGE = 0, 1, 2


class UsageError(Exception):
    """A command-line mistake: printed as one line, exit status 2."""


def _err(line: str) -> None:
    """One line on stderr; undecodable bytes and control characters shown escaped (text.shown)."""
    print(shown(str(line)), file=sys.stderr)


def _rate(text: str) -> int:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a sample rate; give Hz, e.g. 48000") from None
    if not value.is_integer() or not 1000 <= value <= 768000:
        raise argparse.ArgumentTypeError(f"{text} Hz is out of range; allowed: whole Hz from 1000 to 768000")
    return int(value)


def _positive(name: str):
    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{name} must be a whole number; got '{text}'") from None
        if value < 1:
            raise argparse.ArgumentTypeError(f"{name} must be at least 1; got {value}")
        return value
    return parse
