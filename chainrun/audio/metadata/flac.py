"""Metadata blocks of FLAC files: read them, plan what an output carries, write it there.

The blocks are read and written with mutagen (``mutagen.flac``), a well-kept pure-Python
library that parses and renders every FLAC metadata block type; chainrun only decides which
blocks travel. The writer's side::

    meta = read_flac_meta(src)                    # metadata blocks only, never the audio
    carry = plan_carry(meta, keep=True)           # one CarryItem per input block, in order
    f = soundfile.SoundFile(tmp, "w", ...)        # the output, as before
    reserved = prepare_output(f, carry)           # before the first write (optional, see below)
    ... write the audio, f.close() ...
    finish_output(tmp, carry)                     # the carried blocks go into the output
    ... fsync, rename ...

Carried, in the input's order after the output's STREAMINFO: VORBIS_COMMENT (every
``NAME=value`` comment in order; the vendor string stays the one of the encoder that wrote
the output), PICTURE, CUESHEET, APPLICATION and blocks of unknown type. A cuesheet's sample
offsets stay valid because chainrun never changes a file's length or rate. STREAMINFO is
rewritten by the encoder; SEEKTABLE (byte offsets into the input's frames) and PADDING are
dropped.

Notes
-----
Whether the audio is moved. libsndfile writes a FLAC output as STREAMINFO and a 40-byte
VORBIS_COMMENT (the libFLAC vendor string) with **no PADDING block** (measured with
libsndfile 1.2.2 / libFLAC 1.4.3). Metadata larger than that does not fit, and mutagen then
moves every audio byte further into the file (one read and one write of the whole audio,
in place in the temporary file). :func:`prepare_output` avoids that pass: before the first
write it asks libsndfile for a Vorbis comment (``COMMENT``) of blanks as large as the
carried blocks, so the encoder leaves room; :func:`finish_output` replaces that comment and
fills any rest with a PADDING block, and the audio stays where the encoder put it.

No processing note is appended: Vorbis comments have no coding-history field (the Xiph
list of recommended field names has none, and ``ENCODER`` by common use names the program
that encoded, not a history), so chainrun invents none.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from .common import CARRY_LIMIT, MetaError

_MAX_BLOCK = 2**24 - 1                # FLAC format: a metadata block's length is 24 bits

# Block type codes (FLAC format specification, METADATA_BLOCK_HEADER) -> (name, action, why).
_BLOCKS = {
    0: ("STREAMINFO", "rewritten", "describes the output's audio; written afresh by the encoder"),
    1: ("PADDING", "dropped", "filler"),
    2: ("APPLICATION", "carried", "metadata"),
    3: ("SEEKTABLE", "dropped", "byte offsets into the input's frames, stale in the output"),
    4: ("VORBIS_COMMENT", "carried", "comments copied in order; the vendor string is the output encoder's"),
    5: ("CUESHEET", "carried", "metadata; its sample offsets hold, length and rate never change"),
    6: ("PICTURE", "carried", "metadata"),
}


@dataclass(frozen=True)
class CarryItem:
    """What the output does with one block of the input: 'carried', 'rewritten' or 'dropped'."""

    id: str
    offset: int
    size: int
    action: str
    reason: str
    block: object = field(default=None, repr=False, compare=False)   # the mutagen block

    def as_dict(self) -> dict:
        """Plain data for the JSON report."""
        return {"block": self.id, "at_byte": self.offset, "bytes": self.size,
                "action": self.action, "reason": self.reason}


@dataclass(frozen=True)
class FlacMeta:
    """The metadata blocks of one FLAC file (see :func:`read_flac_meta`)."""

    path: str
    blocks: tuple[tuple[int, int, int, object], ...]   # (type code, header offset, length, mutagen block)
    notes: tuple[str, ...]                            # one line each: metadata not carried, and why


def _walk(path: str, fh) -> tuple[list[tuple[int, int, int]], int, list[str]]:
    """The block headers: (code, offset, length) each, where the stream starts, notes.

    Walked here (not by mutagen) so that each block's byte offset can be reported."""
    head = fh.read(10)
    start, notes = 0, []
    if head[:3] == b"ID3" and len(head) == 10:
        size = 0
        for b in head[6:10]:
            size = (size << 7) | (b & 0x7F)
        start = 10 + size + (10 if head[5] & 0x10 else 0)
        notes.append(f"{path}: note: an ID3v2 tag ({start} bytes) precedes the FLAC stream; it is not carried")
        fh.seek(start)
        head = fh.read(4)
    if head[:4] != b"fLaC":
        raise MetaError(f"{path}: error: not a FLAC file")
    heads, at = [], start + 4
    while True:
        fh.seek(at)
        raw = fh.read(4)
        if len(raw) < 4:
            break
        heads.append((raw[0] & 0x7F, at, int.from_bytes(raw[1:4], "big")))
        at += 4 + heads[-1][2]
        if raw[0] & 0x80:
            break
    return heads, start, notes


def read_flac_meta(path: str) -> FlacMeta:
    """Read the metadata blocks of a FLAC file without reading its audio.

    Blocks mutagen cannot parse give one-line notes (``<path>: note: ...``) and are not
    carried; they never raise.

    Raises
    ------
    MetaError
        If the file cannot be read or is not a FLAC file.
    """
    from mutagen.flac import FLAC, FLACNoHeaderError
    from mutagen import MutagenError

    try:
        with open(path, "rb") as fh:
            heads, _, notes = _walk(path, fh)
    except OSError as exc:
        raise MetaError(f"{path}: error: cannot read the file: {exc.strerror or exc}") from None
    try:
        parsed = FLAC(path)
    except FLACNoHeaderError:
        raise MetaError(f"{path}: error: not a FLAC file") from None
    except (MutagenError, ValueError, OverflowError) as exc:
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        notes.append(f"{path}: note: its metadata blocks cannot be read ({first}); none are carried")
        return FlacMeta(path, (), tuple(notes))
    blocks = []
    for k, blk in enumerate(parsed.metadata_blocks):
        code, at, length = heads[k] if k < len(heads) else (blk.code, -1, 0)
        blocks.append((code, at, length, blk))
    return FlacMeta(path, tuple(blocks), tuple(notes))


def plan_carry(meta: FlacMeta, keep: bool = True) -> list[CarryItem]:
    """What the output does with each block of the input, in the input's order.

    ``keep=False`` (recipe ``output.metadata: drop``) drops every metadata block. A second
    VORBIS_COMMENT or a block of the invalid type 127 is dropped; at most
    :data:`chainrun.audio.metadata.common.CARRY_LIMIT` bytes are carried in all.
    """
    items, total, seen_vc = [], 0, False
    for code, at, length, blk in meta.blocks:
        name, action, why = _BLOCKS.get(code, (f"type {code}", "carried", "unknown block type; copied as is"))
        if code == 127:
            action, why = "dropped", "type 127 is invalid in FLAC"
        elif code == 4 and seen_vc:
            action, why = "dropped", "a second VORBIS_COMMENT block (FLAC allows one)"
        elif action == "carried" and not keep:
            action, why = "dropped", "output.metadata is drop"
        elif action == "carried" and total + length > CARRY_LIMIT:
            action, why = "dropped", f"past the {CARRY_LIMIT // 2**20} MiB of metadata chainrun carries"
        seen_vc = seen_vc or code == 4
        if action == "carried":
            total += length
        items.append(CarryItem(name, at, length, action, why, blk))
    return items


def _carried(carry: list[CarryItem]) -> list[CarryItem]:
    return [i for i in carry if i.action == "carried"]


def _comments(item: CarryItem) -> list[tuple[str, str]]:
    return [(k, v) for k, v in item.block]


def prepare_output(sf_handle, carry: list[CarryItem]) -> int:
    """Ask the encoder to leave room for the carried blocks; returns the bytes reserved.

    Call it after opening the output (a ``soundfile.SoundFile`` in mode 'w') and before the
    first write. The room is a ``COMMENT`` of blanks in the encoder's Vorbis comment, which
    :func:`finish_output` replaces. Nothing is reserved if nothing is carried, or if the
    blocks would not fit in one Vorbis comment (then the audio is moved once, see the notes
    of this module).
    """
    need = 0
    for i in _carried(carry):
        if i.id == "VORBIS_COMMENT":
            need += sum(4 + len(f"{k}={v}".encode("utf-8")) for k, v in _comments(i))
        else:
            need += 4 + len(i.block.write())
    if not need:
        return 0
    # The blanks' comment takes 4 + len("COMMENT=") + size bytes; the carried blocks take
    # `need` plus the 4-byte PADDING header mutagen always writes: size = need - 8 fills it.
    size = max(need - 8, 1)
    if size > _MAX_BLOCK - 4096:
        return 0
    sf_handle.comment = " " * size
    return size


def finish_output(temp_path: str, carry: list[CarryItem]) -> None:
    """Put the carried blocks into the closed FLAC output, in the input's order.

    The output's STREAMINFO (and any SEEKTABLE the encoder wrote) stay first and as they
    are; its Vorbis comment keeps its vendor string and takes the input's comments (the
    input had none: it is left as the encoder wrote it, apart from a reservation). Room left
    by :func:`prepare_output` becomes a PADDING block; without enough room mutagen moves the
    audio (see the module notes).

    Raises
    ------
    MetaError
        One line naming the file; the caller removes the temporary file.
    """
    from mutagen.flac import FLAC, VCFLACDict
    from mutagen import MutagenError

    try:
        out = FLAC(temp_path)
        own = [b for b in out.metadata_blocks if b.code in (0, 3)]
        vc = out.tags if out.tags is not None else VCFLACDict()
        vc.clear()
        blocks, placed = list(own), False
        for i in _carried(carry):
            if i.id == "VORBIS_COMMENT":
                vc.extend(_comments(i))
                blocks.append(vc)
                placed = True
            else:
                blocks.append(i.block)
        if not placed and out.tags is not None:
            blocks.insert(len(own), vc)
        out.metadata_blocks[:] = blocks
        out.tags = vc if vc in blocks else None
        out.cuesheet = next((b for b in blocks if b.code == 5), None)
        out.seektable = next((b for b in blocks if b.code == 3), None)
        out.save(padding=lambda info: info.padding if info.padding >= 0 else 0)
    except (MutagenError, ValueError, OSError) as exc:
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise MetaError(f"{temp_path}: error: cannot write the FLAC metadata blocks: {first}") from None
