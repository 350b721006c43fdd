"""Writing a WAV-family output's metadata: room reserved before the audio, chunks filled in after.

:func:`prepare_output` reserves, before the first audio write, a JUNK chunk as large as the
chunks the input had before its audio (libsndfile's ``sf_set_chunk``; python-soundfile has no
chunk call, and libsndfile's own chunk writing rounds sizes up to 4 bytes, so chainrun writes
the chunks' bytes itself). :func:`finish_output`, after libsndfile closed the file, writes the
carried chunks into that room with a JUNK filler of exactly the rest, appends the chunks the
input had after its audio, and patches the RIFF (or RF64 ds64) size and the channel mask. Only
header bytes are written: the audio is never read again.
"""
from __future__ import annotations

import struct

from ..sndfile import reserve_chunk
from .bext import BEXT_ROW_MAX, update_bext
from .common import CarryItem, MetaError, Reservation
from .riff import RiffLayout, _metadata, _parse_fmt, read_layout

__all__ = ["prepare_output", "finish_output"]


def prepare_output(sf_handle, carry: list[CarryItem]) -> Reservation:
    """Reserve room before the audio for the chunks the input had there.

    Call it after opening the output (a ``soundfile.SoundFile`` in mode 'w') and before the
    first write. With ``sf_handle=None``, or nothing to carry before the audio, nothing is
    reserved and :func:`finish_output` appends every carried chunk after the audio.

    Raises
    ------
    MetaError
        If libsndfile refuses the reservation (e.g. audio was already written).
    """
    pre = _metadata(carry, True)
    if sf_handle is None or not pre:
        return Reservation(0)
    need = sum(8 + i.size + (i.size & 1) for i in pre) + (BEXT_ROW_MAX if any(i.id == "bext" for i in pre) else 0)
    size = (need + 3) & ~3            # libsndfile rounds a chunk up to 4 bytes
    reason = reserve_chunk(sf_handle, b"JUNK", size)
    if reason:
        raise MetaError(f"{sf_handle.name}: error: cannot reserve {size} bytes for metadata: {reason}")
    return Reservation(size)


def _blob(cid: str, payload: bytes) -> bytes:
    return cid.encode("latin-1") + struct.pack("<I", len(payload)) + payload + b"\0" * (len(payload) & 1)


def finish_output(temp_path: str, reservation: Reservation, carry: list[CarryItem],
                  bext_row: str | None = None, loudness: dict | None = None) -> list[str]:
    """Write the carried chunks into the closed output and patch its sizes and channel mask.

    Parameters
    ----------
    temp_path : str
        The output, closed by libsndfile, before fsync and rename.
    reservation : Reservation
        What :func:`prepare_output` returned.
    carry : list of CarryItem
        What :func:`plan_carry` returned.
    bext_row : str, optional
        One EBU R 98 row (:func:`chainrun.audio.metadata.bext.coding_history_row`) for the bext chunk.
    loudness : dict, optional
        Output measurements for the bext v2 loudness fields; missing ones are written unknown.

    Returns
    -------
    list of str
        One line per change made to libsndfile's own header (channel mask, valid bits).

    Raises
    ------
    MetaError
        One line naming the file; the caller removes the temporary file.
    """
    out = read_layout(temp_path)
    if out.audio_error or out.container == "W64":
        if out.audio_error:
            raise MetaError(f"{temp_path}: error: the written output is unreadable: {out.audio_error}")
        return []
    try:
        blobs = {id(i): _blob(i.id, update_bext(i.payload, bext_row, loudness) if i.id == "bext" else i.payload)
                 for i in _metadata(carry, True) + _metadata(carry, False)}
    except ValueError as exc:
        raise MetaError(f"{temp_path}: error: cannot write the bext chunk: {exc}") from None
    pre, post = _metadata(carry, True), _metadata(carry, False)
    changes = []
    with open(temp_path, "r+b") as fh:
        if reservation.size:
            data_at = out.data_offset - 8
            junk = [c for c in out.chunks if c.id == "JUNK" and c.offset + 8 + c.size == data_at]
            if not junk or junk[0].size != reservation.size:
                raise MetaError(f"{temp_path}: error: the space reserved for metadata is not before the audio")
            body = b"".join(blobs[id(i)] for i in pre)
            filler = reservation.size - len(body)
            if filler < 0:
                raise MetaError(f"{temp_path}: error: the metadata needs {len(body)} bytes, "
                                f"{reservation.size + 8} were reserved")
            fh.seek(junk[0].offset)
            fh.write(body + b"JUNK" + struct.pack("<I", filler) + b"\0" * filler)
        else:
            post = pre + post
        end = out.file_size
        if post:
            tail = b"\0" * (end & 1) + b"".join(blobs[id(i)] for i in post)
            fh.seek(end)
            fh.write(tail)
            end += len(tail)
            if out.container == "RIFF":
                if end - 8 > 0xFFFFFFFF:
                    raise MetaError(f"{temp_path}: error: with its metadata the output passes 4 GiB; "
                                    "it must be written as RF64")
                fh.seek(4)
                fh.write(struct.pack("<I", end - 8))
            else:
                ds64 = [c for c in out.chunks if c.id == "ds64"]
                if not ds64:
                    raise MetaError(f"{temp_path}: error: the RF64 output has no 'ds64' chunk to patch")
                fh.seek(ds64[0].offset + 8)
                fh.write(struct.pack("<Q", end - 8))
        changes += _patch_fmt(fh, out, carry)
    return changes


def _patch_fmt(fh, out: RiffLayout, carry: list[CarryItem]) -> list[str]:
    """Put the input's channel mask (and valid bits, same container width) into the output."""
    src = [i for i in carry if i.id == "fmt " and i.payload and len(i.payload) >= 16]
    dst = [c for c in out.chunks if c.id == "fmt "]
    if not src or not dst:
        return []
    a, b = _parse_fmt(src[0].payload), out.fmt
    if a.channel_mask is None or a.channels != b.channels:
        return []
    if b.channel_mask is None:
        return [f"channel mask {a.channel_mask:#x} not kept: the output's fmt chunk is not extensible"]
    changes, at = [], dst[0].offset + 8
    if a.channel_mask != b.channel_mask:
        fh.seek(at + 20)
        fh.write(struct.pack("<I", a.channel_mask))
        changes.append(f"channel mask {a.channel_mask:#x} kept (the encoder wrote {b.channel_mask:#x})")
    if a.bits == b.bits and a.valid_bits and a.valid_bits != b.valid_bits:
        fh.seek(at + 18)
        fh.write(struct.pack("<H", a.valid_bits))
        changes.append(f"valid bits {a.valid_bits} kept (the encoder wrote {b.valid_bits})")
    return changes
