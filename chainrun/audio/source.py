"""What an input file holds, from its header (no audio read)."""
from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Source"]


@dataclass(frozen=True)
class Source:
    """What an input file holds, from its header."""

    path: str
    rate: int
    channels: int
    frames: int
    format: str
    subtype: str
    size: int
    mtime_ns: int

    @property
    def duration_s(self) -> float:
        return self.frames / self.rate if self.rate else 0.0
