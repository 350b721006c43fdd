"""What an input file holds, from its header (no audio read)."""
from __future__ import annotations

from dataclasses import dataclass, field

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
    channel_mask: int | None = None     # WAVE_FORMAT_EXTENSIBLE speaker mask, if the header has one
    # The metadata layout read at probe time (a chainrun.audio.metadata.carry.SourceMeta), or None.
    meta: object | None = field(default=None, compare=False, repr=False)
    # Which file this is, as probed: a file put in its place (same size and mtime) has another inode,
    # and its change time moves with any write or utime. 0 when unknown (a Source built by hand).
    inode: int = 0
    ctime_ns: int = 0

    @property
    def duration_s(self) -> float:
        return self.frames / self.rate if self.rate else 0.0
