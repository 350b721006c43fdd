"""One run's metadata, from the input's probe to the finished output, whatever the container.

:func:`read_source_meta` reads an input's metadata layout once, when it is probed (headers and
metadata only, never the audio). :class:`OutputMeta` then follows one output through the
writer: :meth:`~OutputMeta.extra_bytes` for the RF64 decision, :meth:`~OutputMeta.prepare`
right after the output is opened and before its first audio write, :meth:`~OutputMeta.finish`
after it is closed and before it is synced and renamed, and :meth:`~OutputMeta.listing` for
the report. The container modules (:mod:`.riff`, :mod:`.flac`, :mod:`.aiff`) do the work.
"""
from __future__ import annotations

from dataclasses import dataclass

from . import aiff, flac, riff, riff_write
from .bext import coding_history_row
from .common import MetaError, Reservation

__all__ = ["SourceMeta", "OutputMeta", "read_source_meta", "MetaError", "KINDS"]

# libsndfile's major format -> the module family that reads and writes its metadata.
KINDS = {"WAV": "riff", "WAVEX": "riff", "RF64": "riff", "W64": "riff", "FLAC": "flac", "AIFF": "aiff"}
_READ = {"riff": riff.read_layout, "flac": flac.read_flac_meta, "aiff": aiff.read_layout}
_PLAN = {"riff": riff.plan_carry, "flac": flac.plan_carry, "aiff": aiff.plan_carry}
# Bits per sample of the output subtypes chainrun writes (EBU R 98 "W="), and R 98's "A=" word.
_BITS = {"PCM_16": 16, "PCM_24": 24, "PCM_32": 32, "FLOAT": 32, "DOUBLE": 64}


@dataclass(frozen=True)
class SourceMeta:
    """An input's metadata as read at probe time.

    ``layout`` is a :class:`~.riff.RiffLayout`, :class:`~.flac.FlacMeta` or
    :class:`~.aiff.AiffLayout` (None when it could not be read); ``notes`` are one line each,
    naming the file: metadata that is not carried, and why.
    """

    kind: str
    layout: object | None
    notes: tuple[str, ...]

    @property
    def channel_mask(self) -> int | None:
        """The WAVE_FORMAT_EXTENSIBLE channel mask, or None (not extensible, not a WAV)."""
        fmt = getattr(self.layout, "fmt", None)
        return fmt.channel_mask if fmt is not None else None


def read_source_meta(path: str, fmt: str) -> SourceMeta | None:
    """The metadata layout of ``path`` (libsndfile's major format ``fmt``); None for other formats.

    Never raises: a file whose metadata cannot be read gets a note and carries none.
    """
    kind = KINDS.get(fmt)
    if kind is None:
        return None
    try:
        layout = _READ[kind](path)
    except MetaError as exc:
        why = str(exc).split(": error: ", 1)[-1]
        return SourceMeta(kind, None, (f"{path}: note: its metadata cannot be read ({why}); none is carried",))
    return SourceMeta(kind, layout, tuple(layout.notes))


class OutputMeta:
    """The metadata of one output: what is carried, and the writer's calls that carry it.

    Parameters
    ----------
    meta : SourceMeta or None
        The input's, from :func:`read_source_meta`.
    keep : bool
        False drops every metadata chunk (recipe ``output.metadata: drop``).
    history : str
        The free text of the bext coding history row (EBU R 98 ``T=``).
    """

    def __init__(self, meta: SourceMeta | None, keep: bool = True, history: str = ""):
        self.kind = meta.kind if meta is not None and meta.layout is not None else None
        self.carry = _PLAN[self.kind](meta.layout, keep) if self.kind else []
        self.notes = list(meta.notes) if meta is not None else []
        self.history = history
        self.changes: list[str] = []
        self.reservation = None
        self.row: str | None = None

    def _carried(self) -> list:
        return [i for i in self.carry if i.action in ("carried", "rewritten") and i.payload is not None
                and i.id != "fmt "] if self.kind != "flac" else [i for i in self.carry if i.action == "carried"]

    def extra_bytes(self) -> int:
        """Bytes the carried metadata adds to a WAV-family output at most (0 if none is carried)."""
        return riff.carry_bytes(self.carry) if self.kind == "riff" and self._carried() else 0

    def prepare(self, f) -> None:
        """Reserve room before the audio; call right after opening ``f`` (a soundfile.SoundFile), before writing.

        Raises
        ------
        MetaError
            If libsndfile refuses the reservation.
        """
        if not self.kind or not self._carried():
            return
        if self.kind == "riff":
            self.row = coding_history_row(f.samplerate, f.channels, _BITS.get(f.subtype, 0), self.history)
            self.reservation = riff_write.prepare_output(f if f.format != "W64" else None, self.carry)
        elif self.kind == "flac":
            self.reservation = flac.prepare_output(f, self.carry)
        else:
            self.reservation = aiff.prepare_output(f, self.carry)

    def finish(self, temp_path: str, loudness: dict | None = None) -> None:
        """Write the carried metadata into the closed output (before it is synced and renamed).

        ``loudness``: the output's measurements for the bext v2 loudness fields (keys of
        :data:`~.bext.LOUDNESS_FIELDS`); those not given are written unknown (0x7FFF).

        Raises
        ------
        MetaError
            One line naming the file; the caller removes it.
        """
        if self.kind == "riff":
            if self._carried() or any(i.id == "fmt " and i.payload for i in self.carry):
                self.changes = riff_write.finish_output(temp_path, self.reservation or Reservation(0), self.carry,
                                                  bext_row=self.row, loudness=loudness)
        elif self.kind == "flac" and any(i.id != "VORBIS_COMMENT" or len(i.block) for i in self._carried()):
            flac.finish_output(temp_path, self.carry)
        elif self.kind == "aiff" and self._carried():
            aiff.finish_output(temp_path, self.reservation or Reservation(0), self.carry)

    def listing(self) -> dict | None:
        """Plain data for the report: every chunk or block and what became of it, the notes, the changes."""
        if self.kind is None and not self.notes:
            return None
        return {"container": self.kind, "items": [i.as_dict() for i in self.carry],
                "notes": list(self.notes), "changes": list(self.changes)}
