"""Chunks of AIFF and AIFF-C files: read the layout, plan what an output carries, write it there.

Containers: FORM/AIFF (Apple, Audio Interchange File Format 1.3, 1989) and FORM/AIFC (Apple,
AIFF-C draft of 1991): EA IFF 85 chunks with big-endian 32-bit sizes and a pad byte after an
odd-sized payload (not counted in the size). No library reads and writes arbitrary AIFF
chunks in place (mutagen handles only the 'ID3 ' chunk; Python's aifc module is gone from
3.13 and never kept other chunks), so the chunk code is here, built like
:mod:`chainrun.audio.metadata.riff` and sharing its records (``CarryItem``, ``Reservation``,
``MetaError``) and its libsndfile ``sf_set_chunk`` binding.

Carried with the same payload, in the input's order: NAME, AUTH, '(c) ', ANNO, COMT, MARK,
INST, APPL, 'ID3 ' and every chunk of unknown kind. MARK positions are sample frames and
stay valid (chainrun never changes a file's length or rate); COMT and INST refer to MARK ids,
which are kept. COMM, SSND and FVER are the audio's own and written afresh by libsndfile;
PEAK (levels of the input's samples) and filler chunks are dropped.

The writer's side, with no extra pass over the audio::

    layout = read_layout(src)
    carry = plan_carry(layout, keep=True)
    f = soundfile.SoundFile(tmp, "w", ..., format="AIFF")
    res = prepare_output(f, carry)        # before the first write: room before 'SSND'
    ... write the audio, f.close() ...
    finish_output(tmp, res, carry)

libsndfile 1.2.2 writes COMM and SSND (AIFF-C: FVER, COMM, SSND) and places a chunk given
to ``sf_set_chunk`` between COMM and SSND, its size rounded up to 4 bytes. The room is
overwritten with the chunks the input had before its audio, plus a 'JUNK' filler chunk
when the rounding leaves bytes over (AIFF 1.3 readers skip chunks they do not know; EA IFF
85's own filler id of four blanks, from memory, is not used: mutagen 1.48.1 strips blanks
from ids and stops reading at it, measured); the chunks the input had after its audio are appended and the
FORM size patched. Only header bytes are touched, and nothing time-dependent is written.
"""

from __future__ import annotations

import math
import os
import struct
from dataclasses import dataclass, field

from ..sndfile import reserve_chunk
from .common import CARRY_LIMIT, CarryItem, MetaError, Reservation

FILLER = "JUNK"                    # id of the reserved room and of the filler left in it

# Chunks that describe the input's audio or fill space: never copied. id -> (action, why)
_LAYOUT = {
    "COMM": ("rewritten", "written afresh for the output's sample format"),
    "SSND": ("rewritten", "the processed audio"),
    "FVER": ("rewritten", "AIFF-C format version; written afresh where the output is AIFF-C"),
    "PEAK": ("dropped", "peak levels of the input's samples, stale after processing"),
    "    ": ("dropped", "filler"),
    "JUNK": ("dropped", "filler"),
    "FLLR": ("dropped", "filler"),
}
# Why a metadata chunk is carried (default: "metadata").
_WHY = {
    "MARK": "metadata; marker positions are sample frames and stay valid",
    "INST": "metadata; refers to MARK ids, which are kept",
    "COMT": "metadata; refers to MARK ids, which are kept",
}
_COMM_MAX = 65536                  # bytes; a larger COMM chunk is not believed


@dataclass(frozen=True)
class Chunk:
    """One chunk: where its header starts, its declared payload size, its payload if read."""

    id: str
    offset: int
    size: int
    payload: bytes | None = field(default=None, repr=False)
    note: str | None = None        # why the chunk is not carried, if it is malformed


@dataclass(frozen=True)
class AiffLayout:
    """The chunk structure of one file (see :func:`read_layout`)."""

    path: str
    form: str                      # 'AIFF' or 'AIFC'
    file_size: int
    chunks: tuple[Chunk, ...]
    ssnd_offset: int | None        # where the SSND chunk's header starts
    audio_error: str | None        # one line: the audio cannot be trusted; refuse the file
    notes: tuple[str, ...]         # one line each: metadata that is not carried, and why
    rate: float | None = None      # the COMM chunk's sample rate as written (80-bit extended; NaN, inf...)


def _plausible(cid: bytes) -> bool:
    """EA IFF 85: an id is four printable ASCII characters, no leading blank (the filler
    id of four blanks aside)."""
    return len(cid) == 4 and all(0x20 <= c <= 0x7E for c in cid) and (cid[:1] != b" " or cid == b"    ")


def extended(raw: bytes) -> float:
    """An IEEE 754 80-bit extended float (big-endian, as AIFF's COMM rate) as a Python float.

    Sign bit and 15-bit exponent (bias 16383), then a 64-bit significand with an explicit integer bit
    (Apple, "Audio Interchange File Format" 1.3, and IEEE 754-1985 double extended). Exponent 0x7FFF is
    infinity (significand fraction 0) or NaN.
    """
    sign_exp, mant = struct.unpack(">HQ", raw[:10])
    sign, exp = -1.0 if sign_exp & 0x8000 else 1.0, sign_exp & 0x7FFF
    if exp == 0x7FFF:
        return sign * math.inf if mant & 0x7FFFFFFFFFFFFFFF == 0 else math.nan
    if exp - 16383 - 63 > 1023:          # beyond a double
        return sign * math.inf
    return sign * math.ldexp(mant, exp - 16383 - 63)


def _header(fh, at: int, end: int) -> tuple[str, int] | None:
    if at + 8 > end:
        return None
    fh.seek(at)
    raw = fh.read(8)
    if len(raw) < 8 or not _plausible(raw[:4]):
        return None
    return raw[:4].decode("latin-1"), struct.unpack(">I", raw[4:])[0]


def read_layout(path: str) -> AiffLayout:
    """Walk the chunks of an AIFF or AIFF-C file without reading its audio.

    Malformed metadata gives one-line notes (``<path>: note: ...``), never an exception; a
    problem with COMM or SSND sets ``audio_error`` (the caller refuses the file).

    Raises
    ------
    MetaError
        If the file cannot be read or is not an AIFF or AIFF-C file.
    """
    try:
        with open(path, "rb") as fh:
            return _walk(path, fh)
    except OSError as exc:
        raise MetaError(f"{path}: error: cannot read the file: {exc.strerror or exc}") from None


def _walk(path: str, fh) -> AiffLayout:
    size = os.fstat(fh.fileno()).st_size
    head = fh.read(12)
    if head[:4] != b"FORM" or head[8:12] not in (b"AIFF", b"AIFC"):
        raise MetaError(f"{path}: error: not an AIFF or AIFF-C file")
    kind = head[8:12].decode("latin-1")
    notes, chunks, kept = [], [], 0
    ssnd = error = rate = None
    comm = False
    note = lambda text: notes.append(f"{path}: note: {text}")   # noqa: E731
    form = struct.unpack(">I", head[4:8])[0]
    if form + 8 != size:
        note(f"the FORM size says {form + 8} bytes but the file has {size}")
    at = 12
    while at + 8 <= size:
        head = _header(fh, at, size)
        if head is None:
            note(f"unreadable bytes at byte {at} where a chunk should start; "
                 f"the {size - at} bytes from there are not carried")
            break
        cid, n = head
        pay = at + 8
        if n > size - pay:
            if cid in ("COMM", "SSND"):
                error = f"its '{cid}' chunk says {n} bytes but only {size - pay} remain"
                break
            note(f"chunk '{cid}' at byte {at} says {n} bytes but only {size - pay} remain; it is not carried")
            chunks.append(Chunk(cid, at, n, note="it runs past the end of the file"))
            break
        nxt = pay + n + (n & 1)
        if n & 1 and nxt < size and _header(fh, nxt, size) is None and _header(fh, pay + n, size):
            note(f"chunk '{cid}' at byte {at} has an odd size and no pad byte; "
                 f"the next chunk is read from byte {pay + n}")
            nxt = pay + n
        payload = problem = None
        if cid == "COMM":
            comm = True
            if n < 18 or n > _COMM_MAX:
                error = f"its 'COMM' chunk has {n} bytes; it needs 18 (AIFF-C: 22 or more)"
                break
            fh.seek(pay + 8)                  # channels (2), frames (4), bits (2), then the rate (10)
            rate = extended(fh.read(10))
        elif cid == "SSND":
            ssnd = at
        elif cid not in _LAYOUT and kept + n <= CARRY_LIMIT:
            fh.seek(pay)
            payload = fh.read(n)
            kept += n
        elif cid not in _LAYOUT:
            problem = f"it would take the metadata past the {CARRY_LIMIT // 2**20} MiB chainrun carries"
            note(f"chunk '{cid}' at byte {at}: {problem}; it is not carried")
        chunks.append(Chunk(cid, at, n, payload, problem))
        at = nxt
    if error is None and not comm:
        error = "it has no 'COMM' chunk"
    elif error is None and ssnd is None:
        error = "it has no 'SSND' chunk"
    return AiffLayout(path, kind, size, tuple(chunks), ssnd, error, tuple(notes), rate)


def plan_carry(layout: AiffLayout, keep: bool = True) -> list[CarryItem]:
    """What the output does with each chunk of the input, in the input's order.

    Chunks describing the input's audio, and fillers, are rewritten or dropped (see
    ``_LAYOUT``); every other chunk is carried with the same payload, up to
    :data:`chainrun.audio.metadata.common.CARRY_LIMIT` bytes in all. ``keep=False`` (recipe
    ``output.metadata: drop``) drops every metadata chunk; malformed chunks are dropped with
    the reason of their note.
    """
    items, total = [], 0
    for c in layout.chunks:
        before = layout.ssnd_offset is None or c.offset < layout.ssnd_offset
        action, why = "carried", _WHY.get(c.id, "metadata")
        if c.id in _LAYOUT:
            action, why = _LAYOUT[c.id]
        elif c.note or c.payload is None:
            action, why = "dropped", c.note or "not read"
        elif not keep:
            action, why = "dropped", "output.metadata is drop"
        elif total + c.size > CARRY_LIMIT:
            action, why = "dropped", f"past the {CARRY_LIMIT // 2**20} MiB of metadata chainrun carries"
        if action == "carried":
            total += c.size
        items.append(CarryItem(c.id, c.offset, c.size, action, why, before,
                               c.payload if action == "carried" else None))
    return items


def _blob(item: CarryItem) -> bytes:
    n = len(item.payload)
    return item.id.encode("latin-1") + struct.pack(">I", n) + item.payload + b"\0" * (n & 1)


def _pre(carry, before: bool) -> list[CarryItem]:
    return [i for i in carry if i.action == "carried" and i.before_data == before]


def _room(total: int) -> int:
    """Payload size to reserve for `total` bytes of chunks (headers included): exactly the
    chunks when libsndfile's rounding to 4 bytes allows it, else the chunks and a filler."""
    return total - 8 if total >= 8 and (total - 8) % 4 == 0 else (total + 3) & ~3


def prepare_output(sf_handle, carry: list[CarryItem]) -> Reservation:
    """Reserve room before the audio for the chunks the input had there.

    Call it after opening the output (a ``soundfile.SoundFile`` in mode 'w', format AIFF)
    and before the first write. With ``sf_handle=None`` or nothing to carry before the
    audio, nothing is reserved and :func:`finish_output` appends every carried chunk.

    Raises
    ------
    MetaError
        If libsndfile refuses the reservation (e.g. audio was already written).
    """
    pre = _pre(carry, True)
    if sf_handle is None or not pre:
        return Reservation(0)
    size = _room(sum(len(_blob(i)) for i in pre))
    reason = reserve_chunk(sf_handle, FILLER.encode(), size)
    if reason:
        raise MetaError(f"{sf_handle.name}: error: cannot reserve {size} bytes for metadata: {reason}")
    return Reservation(size)


def finish_output(temp_path: str, reservation: Reservation, carry: list[CarryItem]) -> None:
    """Write the carried chunks into the closed output and patch its FORM size.

    Parameters
    ----------
    temp_path : str
        The output, closed by libsndfile, before fsync and rename.
    reservation : Reservation
        What :func:`prepare_output` returned.
    carry : list of CarryItem
        What :func:`plan_carry` returned.

    Raises
    ------
    MetaError
        One line naming the file; the caller removes the temporary file.
    """
    out = read_layout(temp_path)
    if out.audio_error:
        raise MetaError(f"{temp_path}: error: the written output is unreadable: {out.audio_error}")
    pre, post = _pre(carry, True), _pre(carry, False)
    with open(temp_path, "r+b") as fh:
        if reservation.size:
            room = [c for c in out.chunks if c.id == FILLER and c.offset + 8 + c.size == out.ssnd_offset]
            if not room or room[0].size != reservation.size:
                raise MetaError(f"{temp_path}: error: the space reserved for metadata is not before the audio")
            body = b"".join(_blob(i) for i in pre)
            left = reservation.size + 8 - len(body)
            if left != 0 and left < 8:
                raise MetaError(f"{temp_path}: error: the metadata needs {len(body)} bytes, "
                                f"{reservation.size + 8} were reserved")
            fh.seek(room[0].offset)
            fh.write(body + (FILLER.encode() + struct.pack(">I", left - 8) + b"\0" * (left - 8) if left else b""))
        else:
            post = pre + post
        if post:
            end = out.file_size
            tail = b"\0" * (end & 1) + b"".join(_blob(i) for i in post)
            if end + len(tail) - 8 > 0xFFFFFFFF:
                raise MetaError(f"{temp_path}: error: with its metadata the output passes 4 GiB, "
                                "more than AIFF can hold")
            fh.seek(end)
            fh.write(tail)
            fh.seek(4)
            fh.write(struct.pack(">I", end + len(tail) - 8))
