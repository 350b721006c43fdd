"""How many cores this process may use (the default number of workers; the command line's help)."""
from __future__ import annotations

import os

__all__ = ["cores"]


def cores() -> int:
    """The cores this process may run on."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not Linux
        return max(1, os.cpu_count() or 1)
