"""What happened to each file: one status table, and :class:`FileResult`.

Every module that decides, counts, orders or prints a status reads it from :data:`STATUSES`;
no status word is written as a literal anywhere else.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import NamedTuple

from .meters import MeterReading
from .audio.source import Source

__all__ = ["Status", "STATUSES", "STATUS_ORDER", "OK", "CLIPPED", "REJECTED", "FAILED", "SKIPPED", "NOT_RENDERED",
           "DELIVERED", "INTERRUPTED", "css_name", "NOT_AUDIO", "MAC_METADATA", "QUIET_SKIPS", "FileResult"]


class Status(NamedTuple):
    word: str           # as written in every report
    rank: int           # "needs attention first" order: lower first
    error_word: str     # the word of its stderr line ("" = no line)
    meaning: str        # what it means, for the HTML report's legend


# One row per status, in "needs attention first" order.
STATUSES: dict[str, Status] = {s.word: s for s in (
    Status("failed", 0, "error", "unreadable input or a fault; nothing delivered"),
    Status("rejected", 1, "rejected", "would pass the ceiling, or the recipe cannot be used at its rate; "
                                      "nothing delivered"),
    Status("clipped", 2, "clipped", "delivered, but chainrun hard-clipped samples, or the true peak passes its "
                                    "ceiling"),
    Status("not rendered", 3, "not rendered", "the run was interrupted before this file was delivered; nothing "
                                              "of it was left, and the next run renders it"),
    Status("ok", 4, "", "delivered"),
    Status("skipped", 5, "", "not processed (not audio, no audio frames, or named twice)"),
)}
OK, CLIPPED, REJECTED, FAILED, SKIPPED, NOT_RENDERED = "ok", "clipped", "rejected", "failed", "skipped", "not rendered"
STATUS_ORDER = {word: s.rank for word, s in STATUSES.items()}
DELIVERED = frozenset({OK, CLIPPED})                  # statuses whose output is in place



def css_name(word: str) -> str:
    """A status word as an HTML class or anchor name (``not rendered`` -> ``not-rendered``)."""
    return word.replace(" ", "-")


# Messages that other modules recognise.
INTERRUPTED = "the run was interrupted before this file was delivered"
NOT_AUDIO = "not audio (by name and by content)"
MAC_METADATA = "a macOS metadata file, not audio"
QUIET_SKIPS = frozenset({NOT_AUDIO, MAC_METADATA})     # skips not worth a line on stderr


@dataclass
class FileResult:
    """The outcome for one input file; ``status`` is a key of :data:`STATUSES`."""

    input: str
    relpath: str
    status: str
    message: str = ""
    output: str | None = None
    source: Source | None = None
    out_format: str | None = None
    out_subtype: str | None = None
    dither: bool = False
    input_meters: MeterReading | None = None
    output_meters: MeterReading | None = None
    over_db: float | None = None         # how far the filtered peak passed the ceiling
    trim_db: float | None = None         # a gain that would fit under the ceiling
    gain_db: float = 0.0                 # gain applied by the scale policy
    clipped_by_chainrun: int = 0         # samples hard-clipped by policy or quantiser
    loudness_gain_db: float | None = None       # gain applied to reach the loudness target
    loudness_shortfall_lu: float | None = None  # how far the ceiling kept the output below the target
    seconds: float = 0.0
    extra: dict = field(default_factory=dict)
    metadata: dict | None = None         # chunks carried, rewritten or dropped; notes (audio.metadata.carry)

    _RECORDED = ("status", "message", "out_format", "out_subtype", "dither", "over_db", "trim_db", "gain_db",
                 "clipped_by_chainrun", "seconds", "metadata", "loudness_gain_db", "loudness_shortfall_lu")

    def to_record(self) -> dict:
        """What a journal keeps of a delivered file, to report it again without rendering it."""
        d = {k: getattr(self, k) for k in self._RECORDED}
        d["input_meters"] = self.input_meters.to_dict() if self.input_meters else None
        d["output_meters"] = self.output_meters.to_dict() if self.output_meters else None
        return d

    @classmethod
    def from_record(cls, d: dict, input: str, relpath: str, output: str, source: Source | None) -> "FileResult":
        """Inverse of :meth:`to_record`."""
        r = cls(input=input, relpath=relpath, output=output, source=source,
                **{k: d[k] for k in cls._RECORDED if k in d})
        r.input_meters = MeterReading.from_dict(d["input_meters"]) if d.get("input_meters") else None
        r.output_meters = MeterReading.from_dict(d["output_meters"]) if d.get("output_meters") else None
        return r
