"""What every metadata module shares: the one error, the plan record, the reservation, the cap."""
from __future__ import annotations

from dataclasses import dataclass, field

__all__ = ["CARRY_LIMIT", "MetaError", "CarryItem", "Reservation"]

CARRY_LIMIT = 16 * 1024 * 1024        # bytes of metadata carried per file, all chunks together


class MetaError(Exception):
    """A file's chunks cannot be read or written; ``str()`` is one line naming the file."""


@dataclass(frozen=True)
class CarryItem:
    """What the output does with one chunk of the input: 'carried', 'rewritten' or 'dropped'."""

    id: str
    offset: int
    size: int
    action: str
    reason: str
    before_data: bool
    payload: bytes | None = field(default=None, repr=False)

    def as_dict(self) -> dict:
        """Plain data for the JSON report."""
        return {"chunk": self.id, "at_byte": self.offset, "bytes": self.size,
                "action": self.action, "reason": self.reason}


@dataclass(frozen=True)
class Reservation:
    """Payload bytes of the JUNK chunk reserved before the audio (0: nothing reserved)."""

    size: int
