"""Chunks of WAV-family files: read the layout, plan what an output carries, write it there.

Containers: RIFF/WAVE (WAVE_FORMAT_EXTENSIBLE included), RF64 and BW64 (EBU Tech 3306,
ITU-R BS.2088: a 'ds64' chunk holds the 64-bit sizes) and Sony Wave64 (GUID chunk ids,
64-bit sizes, 8-byte alignment; read only, nothing is carried into W64 outputs yet).

The writer's side, with no extra pass over the audio::

    layout = read_layout(src)                     # headers and metadata only, never the audio
    carry = plan_carry(layout, keep=True)         # one CarryItem per input chunk, in order
    f = soundfile.SoundFile(tmp, "w", ...)        # the output, as before
    res = prepare_output(f, carry)                # before the first write: reserve a JUNK chunk
    ... write the audio, f.close() ...
    finish_output(tmp, res, carry, bext_row=coding_history_row(...), loudness=None)
    ... fsync, rename ...

``prepare_output`` asks libsndfile (``sf_set_chunk``) for a JUNK chunk big enough for every
chunk the input had before its audio; libsndfile places it before 'data' and keeps the data
offset where it is. ``finish_output`` overwrites that space with the carried chunks and a
final JUNK filler of the exact remaining size, appends the chunks the input had after its
audio, and patches the RIFF size (RF64: the ds64 riffSize). Only header bytes are touched.
The output keeps the input's chunk order relative to the audio and is the same for any block
size and on reruns (nothing time-dependent is written).

At most :data:`CARRY_LIMIT` bytes of metadata are carried per file (all chunks together);
a chunk beyond it is listed as dropped.
"""

from __future__ import annotations

import os
import struct
from dataclasses import dataclass, field

import numpy as np

from .bext import BEXT_ROW_MAX, parse_bext
from .common import CARRY_LIMIT, CarryItem, MetaError

TAIL_WINDOW = CARRY_LIMIT + 65536     # bytes at the end of a streamed file searched for chunks
_PLACEHOLDERS = {0, 0x7FFFFFFF, 0xFFFFFFFF}   # sizes that streaming writers leave in headers
_W64_SUFFIX = bytes.fromhex("f3acd3118cd100c04f8edb8a")   # Wave64 GUID of a RIFF-style fourcc
_W64_RIFF = b"riff" + bytes.fromhex("2e91cf11a5d628db04c10000")
_W64_LIST = b"list" + bytes.fromhex("2f91cf11a5d628db04c10000")

# Chunks that describe the input's audio: never copied. id -> (action, why)
_LAYOUT = {
    "fmt ": ("rewritten", "written afresh for the output's sample format"),
    "data": ("rewritten", "the processed audio"),
    "fact": ("rewritten", "sample count; written afresh where the output's format needs one"),
    "ds64": ("rewritten", "64-bit sizes; written afresh where the output is RF64"),
    "PEAK": ("dropped", "peak levels of the input's samples, stale after processing"),
    "levl": ("dropped", "peak envelope of the input's samples, stale after processing"),
    "MD5 ": ("dropped", "checksum of the input's samples, stale after processing"),
    "JUNK": ("dropped", "filler"),
    "junk": ("dropped", "filler"),
    "PAD ": ("dropped", "filler"),
    "pad ": ("dropped", "filler"),
    "FLLR": ("dropped", "filler"),
}
# Metadata chunks that may follow a streamed data chunk (the tail search trusts only these).
_KNOWN = {"LIST", "bext", "iXML", "axml", "cue ", "smpl", "inst", "cart", "chna", "ID3 ", "id3 ",
          "JUNK", "PAD ", "FLLR", "PEAK", "levl", "MD5 ", "fact", "umid", "_PMX", "plst"}
_FMT_MAX = 65536                      # bytes; a larger 'fmt ' or 'ds64' chunk is not believed


@dataclass(frozen=True)
class Chunk:
    """One chunk: where its header starts, its declared payload size, the bytes present."""

    id: str
    offset: int
    size: int
    present: int
    header: int = 8
    payload: bytes | None = field(default=None, repr=False)
    note: str | None = None      # why the chunk is not carried, if it is malformed


@dataclass(frozen=True)
class Fmt:
    """The 'fmt ' chunk's fields; ``valid_bits``/``channel_mask`` only for WAVE_FORMAT_EXTENSIBLE."""

    tag: int
    channels: int
    rate: int
    bits: int
    block_align: int
    valid_bits: int | None = None
    channel_mask: int | None = None


@dataclass(frozen=True)
class RiffLayout:
    """The chunk structure of one file (see :func:`read_layout`)."""

    path: str
    container: str                 # 'RIFF', 'RF64', 'BW64' or 'W64'
    file_size: int
    chunks: tuple[Chunk, ...]
    fmt: Fmt | None
    data_offset: int | None        # first audio byte
    data_size: int | None          # audio bytes really there (placeholders resolved)
    audio_error: str | None        # one line: the audio cannot be trusted; refuse the file
    notes: tuple[str, ...]         # one line each: metadata that is not carried, and why


def _plausible(cid: bytes) -> bool:
    return len(cid) == 4 and all(0x20 <= c <= 0x7E for c in cid) and cid[:1].isalnum()


def _parse_fmt(p: bytes) -> Fmt:
    tag, channels, rate, _, align, bits = struct.unpack_from("<HHIIHH", p)
    if tag == 0xFFFE and len(p) >= 40:
        valid, mask = struct.unpack_from("<HI", p, 18)
        return Fmt(tag, channels, rate, bits, align, valid, mask)
    return Fmt(tag, channels, rate, bits, align)


class _Walker:
    """Walks one file's chunks once; collects chunks, notes and the audio's extent."""

    def __init__(self, path: str, fh, size: int, container: str):
        self.path, self.fh, self.size, self.container = path, fh, size, container
        self.w64 = container == "W64"
        self.hs, self.align = (24, 8) if self.w64 else (8, 2)
        self.chunks: list[Chunk] = []
        self.notes: list[str] = []
        self.fmt = self.data_offset = self.data_size = self.audio_error = None
        self.ds64: dict[str, int] = {}
        self.kept = 0                 # metadata bytes read so far (at most CARRY_LIMIT)

    def read(self, at: int, n: int) -> bytes:
        self.fh.seek(at)
        return self.fh.read(n)

    def note(self, text: str) -> None:
        self.notes.append(f"{self.path}: note: {text}")

    def header(self, at: int) -> tuple[str, int] | None:
        raw = self.read(at, self.hs)
        if len(raw) < self.hs:
            return None
        if self.w64:
            guid, size = raw[:16], struct.unpack_from("<Q", raw, 16)[0]
            cid = guid[:4].decode("latin-1") if guid[4:] == _W64_SUFFIX else (
                "LIST" if guid == _W64_LIST else "{" + guid.hex() + "}")
            return (cid, size - 24) if size >= 24 else None
        cid, size = raw[:4], struct.unpack_from("<I", raw, 4)[0]
        return (cid.decode("latin-1"), size) if _plausible(cid) else None

    def step(self, pay: int, size: int) -> int:
        return pay + size + (-size % self.align)

    def after(self, at: int, cid: str, pay: int, size: int) -> int:
        """Where the next chunk starts; an odd-sized chunk whose writer left out the pad byte
        is recognised by a chunk header one byte early and none where the pad rule says."""
        nxt = self.step(pay, size)
        if size & 1 and not self.w64 and nxt < self.size and self.header(nxt) is None \
                and self.header(pay + size) is not None:
            self.note(f"chunk '{cid}' at byte {at} has an odd size and no pad byte; "
                      f"the next chunk is read from byte {pay + size}")
            return pay + size
        return nxt

    def run(self, start: int) -> RiffLayout:
        at = start
        while at + self.hs <= self.size:
            head = self.header(at)
            if head is None:
                self.note(f"unreadable bytes at byte {at} where a chunk should start; "
                          f"the {self.size - at} bytes from there are not carried")
                break
            cid, size = head
            if cid != "data" and size == 0xFFFFFFFF and cid in self.ds64:
                size = self.ds64[cid]
            nxt = self.data(at, size) if cid == "data" else self.chunk(at, cid, size)
            if nxt is None:
                break
            at = nxt
        if self.audio_error is None and self.fmt is None:
            self.audio_error = "it has no readable 'fmt ' chunk before its audio"
        elif self.audio_error is None and self.data_offset is None:
            self.audio_error = "it has no readable 'data' chunk"
        return RiffLayout(self.path, self.container, self.size, tuple(self.chunks), self.fmt,
                          self.data_offset, self.data_size, self.audio_error, tuple(self.notes))

    def chunk(self, at: int, cid: str, size: int) -> int | None:
        pay = at + self.hs
        remaining = self.size - pay
        lost = size > remaining or (self.step(pay, size) < self.size and self.header(self.step(pay, size)) is None)
        if cid == "LIST" and lost and not self.w64 and (real_end := self.list_end(pay, remaining)) is not None:
            self.note(f"chunk 'LIST' at byte {at} says {size} bytes but its entries end at byte "
                      f"{real_end}, where the next chunk starts; it is not carried")
            self.chunks.append(Chunk(cid, at, size, real_end - pay, self.hs, note="its size is wrong"))
            return real_end
        if size > remaining:
            self.note(f"chunk '{cid}' at byte {at} says {size} bytes but only {remaining} remain; "
                      "it is not carried")
            self.chunks.append(Chunk(cid, at, size, remaining, self.hs, note="it runs past the end of the file"))
            if cid in ("fmt ", "ds64"):
                self.audio_error = f"its '{cid}' chunk runs past the end of the file"
            return None
        nxt = self.after(at, cid, pay, size)
        payload, problem = None, None
        if cid in ("fmt ", "ds64"):
            if size > _FMT_MAX:
                self.audio_error = f"its '{cid}' chunk says {size} bytes, more than a header can hold"
                return None
            payload = self.read(pay, size)
        elif cid not in _LAYOUT and self.kept + size <= CARRY_LIMIT:
            payload = self.read(pay, size)
            self.kept += size
        elif cid not in _LAYOUT:
            problem = (f"it holds {size} bytes, more than the {CARRY_LIMIT // 2**20} MiB chainrun carries"
                       if size > CARRY_LIMIT else
                       f"it would take the metadata past the {CARRY_LIMIT // 2**20} MiB chainrun carries")
        if cid == "fmt ":
            if size < 16:
                self.audio_error = f"its 'fmt ' chunk has {size} bytes, fewer than 16"
                return None
            self.fmt = _parse_fmt(payload)
        elif cid == "ds64" and self.container in ("RF64", "BW64") and size >= 28:
            riff, data, _, n = struct.unpack_from("<QQQI", payload)
            self.ds64 = {"RF64": riff, "data": data}
            for k in range(min(n, (size - 28) // 12)):
                tid, tsize = struct.unpack_from("<4sQ", payload, 28 + 12 * k)
                self.ds64[tid.decode("latin-1")] = tsize
        elif cid == "bext" and payload is not None:
            try:
                parse_bext(payload)
            except ValueError as exc:
                problem = f"it {exc}"
        if problem:
            self.note(f"chunk '{cid}' at byte {at}: {problem}; it is not carried")
        self.chunks.append(Chunk(cid, at, size, size, self.hs, payload, problem))
        return nxt

    def list_end(self, pay: int, remaining: int) -> int | None:
        """Where a LIST whose size runs past the file really ends: its entries, walked one by
        one, stop at a known top-level chunk (e.g. 'data'); None if they do not."""
        at, end = pay + 4, pay + remaining
        while at + 8 <= end:
            head = self.header(at)
            if head is None:
                return None
            if head[0] in _KNOWN or head[0] in ("data", "fmt "):
                return at if at > pay + 4 else None
            at = self.step(at + 8, head[1])
        return None

    def data(self, at: int, size: int) -> int | None:
        pay = at + self.hs
        remaining = self.size - pay
        if self.container in ("RF64", "BW64") and size == 0xFFFFFFFF:
            size = self.ds64.get("data", 0)
            declared = f"{size} (ds64)"
        else:
            declared = f"{size:#x}" if size in _PLACEHOLDERS else str(size)
        self.data_offset = pay
        self.chunks.append(Chunk("data", at, size, min(size, remaining), self.hs))
        if (size <= remaining and size not in _PLACEHOLDERS) or size == remaining == 0:
            self.data_size = size
            return self.after(at, "data", pay, size)
        if self.fmt is None or self.w64:
            self.audio_error = "cannot tell where the audio ends (its 'data' size is not usable)"
            return None
        real = self.tail(pay)
        if real is None:
            return None
        self.data_size, nxt = real
        where = f", where a '{self.header(nxt)[0]}' chunk starts" if nxt < self.size else " (the end of the file)"
        why = ("a streaming or unfinished header" if size in _PLACEHOLDERS else
               f"only {remaining} follow")
        self.note(f"chunk 'data' at byte {at} says {declared} bytes ({why}); "
                  f"the audio ends at byte {pay + self.data_size}{where}")
        return nxt

    def tail(self, pay: int) -> tuple[int, int] | None:
        """The audio of a data chunk whose size is a placeholder: up to the earliest chunk whose
        chain of sizes ends exactly at the end of the file, else to the end of the file.

        Candidates start at whole frames (plus a pad byte after an odd length); the earliest
        must be a known metadata chunk, or the file is refused. Chunks of more than
        :data:`TAIL_WINDOW` bytes after the audio are not found (they would be taken as audio).
        """
        block = max(1, self.fmt.block_align)
        start = max(pay, self.size - TAIL_WINDOW)
        buf = self.read(start, self.size - start)
        b = np.frombuffer(buf, np.uint8)
        text = (b >= 0x20) & (b <= 0x7E)
        n = max(0, len(buf) - 7)
        first = b[:n]
        alnum = ((first >= 0x30) & (first <= 0x39)) | ((first | 0x20) >= 0x61) & ((first | 0x20) <= 0x7A)
        heads = np.flatnonzero(alnum & text[:n] & text[1:n + 1] & text[2:n + 2] & text[3:n + 3])
        ok: dict[int, bool] = {}
        for p in heads[::-1].tolist():              # latest first, so a chain's rest is known
            size = struct.unpack_from("<I", buf, p + 4)[0]
            nxt = p + 8 + size + (size & 1)
            ok[p] = nxt == len(buf) or (size & 1 and nxt - 1 == len(buf)) or ok.get(nxt, False)
        for p in sorted(q for q, good in ok.items() if good):
            audio = start + p - pay
            if audio % block == 0 or (audio % 2 and (audio - 1) % block == 0):
                cid = buf[p:p + 4].decode("latin-1")
                if cid not in _KNOWN:
                    self.audio_error = (f"cannot tell where the audio ends: the bytes at {start + p} read "
                                        f"as a chunk '{cid}' of unknown kind, or as audio")
                    return None
                return audio - (audio % block), start + p
        audio = self.size - pay
        return audio - audio % block, self.size


def read_layout(path: str) -> RiffLayout:
    """Walk the chunks of a WAV, RF64, BW64 or W64 file without reading its audio.

    Malformed metadata gives one-line notes (``<path>: note: ...``), never an exception; a
    problem with the audio's own chunks sets ``audio_error`` (the caller refuses the file).

    Raises
    ------
    MetaError
        If the file cannot be read or is not of the WAV family.
    """
    try:
        with open(path, "rb") as fh:
            size = os.fstat(fh.fileno()).st_size
            head = fh.read(40)
            if head[:4] in (b"RIFF", b"RF64", b"BW64") and head[8:12] == b"WAVE":
                container, start = head[:4].decode(), 12
            elif head[:16] == _W64_RIFF and head[24:28] == b"wave" and head[28:40] == _W64_SUFFIX:
                container, start = "W64", 40
            else:
                raise MetaError(f"{path}: error: not a WAV, RF64, BW64 or W64 file")
            walker = _Walker(path, fh, size, container)
            if container == "RIFF":
                riff = struct.unpack_from("<I", head, 4)[0]
                if riff + 8 != size and riff not in _PLACEHOLDERS:
                    walker.note(f"the RIFF size says {riff + 8} bytes but the file has {size}")
            return walker.run(start)
    except OSError as exc:
        raise MetaError(f"{path}: error: cannot read the file: {exc.strerror or exc}") from None


def plan_carry(layout: RiffLayout, keep: bool = True) -> list[CarryItem]:
    """What the output does with each chunk of the input, in the input's order.

    Chunks describing the input's audio are rewritten or dropped (see ``_LAYOUT``); a valid
    'bext' is rewritten (one coding history row, version 2); every other chunk is carried with
    the same payload, up to :data:`CARRY_LIMIT` bytes in all. ``keep=False`` (recipe
    ``output.metadata: drop``) drops every metadata chunk. Malformed chunks are dropped with
    the reason of their note.
    """
    items, total = [], 0
    for c in layout.chunks:
        before = layout.data_offset is None or c.offset < layout.data_offset
        action, why, payload = "carried", "metadata", c.payload
        if c.id in _LAYOUT:
            action, why = _LAYOUT[c.id]
            payload = c.payload if c.id == "fmt " else None
        elif c.note or c.payload is None:
            action, why = "dropped", c.note or "not read"
        elif not keep:
            action, why = "dropped", "output.metadata is drop"
        elif layout.container == "W64":
            action, why = "dropped", "chunks are not carried into W64 files yet"
        elif total + c.size > CARRY_LIMIT:
            action, why = "dropped", f"past the {CARRY_LIMIT // 2**20} MiB of metadata chainrun carries"
        elif c.id == "bext":
            action, why = "rewritten", "kept; one coding history row appended, version 2, loudness fields set"
        if action != "dropped" and c.id not in _LAYOUT:
            total += c.size
        items.append(CarryItem(c.id, c.offset, c.size, action, why, before, payload))
    return items


def _metadata(carry: list[CarryItem], before: bool) -> list[CarryItem]:
    return [i for i in carry if i.action != "dropped" and i.id not in _LAYOUT and i.before_data == before]


def carry_bytes(carry: list[CarryItem]) -> int:
    """Bytes the carried chunks add to an output at most (for the writer's RF64 decision)."""
    items = _metadata(carry, True) + _metadata(carry, False)
    extra = BEXT_ROW_MAX + 12 if any(i.id == "bext" for i in items) else 12   # + JUNK filler, pad
    return sum(8 + i.size + (i.size & 1) for i in items) + extra
