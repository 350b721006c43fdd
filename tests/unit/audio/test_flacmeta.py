"""FLAC metadata blocks carried into libsndfile's FLAC output.

Sources: block layout of the FLAC format specification (xiph.org, METADATA_BLOCK_CUESHEET
from memory; verify); inputs are written by soundfile (libsndfile) and tagged by mutagen
(PyPI), which is also the independent reader of the results.
"""

import struct

import numpy as np
import pytest
import soundfile as sf

from chainrun.audio.metadata import flac as fm
from chainrun.audio.metadata.common import MetaError

mutagen_flac = pytest.importorskip("mutagen.flac")
RATE = 48000


def audio(frames=9000):
    t = np.arange(frames * 2).reshape(frames, 2)
    return ((t * 7919) % 2000 / 2000.0 - 0.5) * 0.8


def cuesheet_bytes() -> bytes:
    # FLAC format, CUESHEET (from memory of the xiph.org specification; verify): catalog 128,
    # lead-in u64, flags byte + 258 reserved, track count u8; each track: offset u64, number u8,
    # ISRC 12, flags byte + 13 reserved, index count u8; each index: offset u64, number u8, 3 reserved.
    head = b"BHR0000000001".ljust(128, b"\0") + struct.pack(">Q", 0) + b"\0" * 259 + bytes([2])
    track = struct.pack(">QB12s14sB", 0, 1, b"GBXXX2400001", b"\0" * 14, 1) + struct.pack(">QB3s", 0, 1, b"\0" * 3)
    lead_out = struct.pack(">QB12s14sB", 9000, 255, b"\0" * 12, b"\0" * 14, 0)
    return head + track + lead_out


def source(tmp_path, seektable=False):
    path = tmp_path / "in.flac"
    sf.write(path, audio(), RATE, "PCM_24")
    m = mutagen_flac.FLAC(path)
    m.tags["TITLE"] = "Tide turning"
    m.tags.append(("ARTIST", "Boathouse Radio"))
    m.tags.append(("title", "second title, same key"))
    pic = mutagen_flac.Picture()
    pic.type, pic.mime, pic.desc = 3, "image/png", "the marsh at dawn"
    pic.width = pic.height = 16
    pic.depth, pic.data = 24, b"\x89PNG" + bytes(range(256)) * 30
    m.add_picture(pic)
    m.cuesheet = mutagen_flac.CueSheet(cuesheet_bytes())
    app = mutagen_flac.MetadataBlock(b"BHRm" + b"heron seen at 05:12")
    app.code = 2
    m.metadata_blocks.append(app)
    if seektable:
        m.seektable = mutagen_flac.SeekTable(struct.pack(">QQH", 0, 0, 4096))
    m.save()
    return str(path)


def render(src, out, keep=True, reserve=True):
    carry = fm.plan_carry(fm.read_flac_meta(src), keep)
    x, _ = sf.read(src)
    f = sf.SoundFile(out, "w", RATE, 2, "PCM_24")
    if reserve:
        fm.prepare_output(f, carry)
    for i in range(0, len(x), 1000):
        f.write(x[i:i + 1000])
    f.close()
    before = open(out, "rb").read()
    fm.finish_output(str(out), carry)
    return carry, before


def blocks(path):
    """(code, rendered bytes) of every non-padding block, as mutagen reads them."""
    return [(b.code, b.write()) for b in mutagen_flac.FLAC(path).metadata_blocks if b.code != 1]


def audio_offset(raw: bytes) -> int:
    at = 4                                      # FLAC format: 'fLaC', then blocks with a 4-byte header
    while True:
        last, n = raw[at] & 0x80, int.from_bytes(raw[at + 1:at + 4], "big")
        at += 4 + n
        if last:
            return at


@pytest.mark.parametrize("reserve", [True, False])
def test_every_carried_block_equal_in_the_output(tmp_path, reserve):
    src = source(tmp_path)
    out = tmp_path / "out.flac"
    carry, before = render(src, out, reserve=reserve)
    a, b = mutagen_flac.FLAC(src), mutagen_flac.FLAC(out)
    # mutagen (reference library) reads both files
    assert list(b.tags) == list(a.tags)
    assert b.tags.vendor.startswith("reference libFLAC")        # the output encoder's vendor string stays
    assert [p.write() for p in b.pictures] == [p.write() for p in a.pictures]
    assert b.cuesheet.write() == a.cuesheet.write() == cuesheet_bytes()
    assert [c for c, _ in blocks(out)] == [c for c, _ in blocks(src)]      # input's order
    assert blocks(out)[1:] == blocks(src)[1:]                               # all but STREAMINFO
    # soundfile (libsndfile) decodes the same audio before and after the blocks are written
    tmp_before = tmp_path / "before.flac"
    tmp_before.write_bytes(before)
    np.testing.assert_array_equal(sf.read(out)[0], sf.read(tmp_before)[0])
    np.testing.assert_array_equal(sf.read(out)[0], sf.read(src)[0])
    assert {i.id: i.action for i in carry}["PADDING"] == "dropped"


def test_reservation_leaves_the_audio_bytes_in_place(tmp_path):
    src = source(tmp_path)
    out = tmp_path / "out.flac"
    _, before = render(src, out, reserve=True)
    after = open(out, "rb").read()
    # analytic: the frames start at the same byte and are the same bytes, so nothing was moved
    assert audio_offset(after) == audio_offset(before)
    assert after[audio_offset(after):] == before[audio_offset(before):]
    assert len(after) == len(before)


def test_without_reservation_mutagen_moves_the_audio(tmp_path):
    src = source(tmp_path)
    out = tmp_path / "out.flac"
    _, before = render(src, out, reserve=False)
    after = open(out, "rb").read()
    # analytic: libsndfile leaves no padding, so the larger blocks push the frames further in
    assert audio_offset(after) > audio_offset(before)
    assert after[audio_offset(after):] == before[audio_offset(before):]


def test_seektable_dropped_and_drop_policy(tmp_path):
    src = source(tmp_path, seektable=True)
    carry = fm.plan_carry(fm.read_flac_meta(src))
    assert {i.id: i.action for i in carry}["SEEKTABLE"] == "dropped"
    out = tmp_path / "out.flac"
    render(src, out)
    assert mutagen_flac.FLAC(out).seektable is None          # mutagen (reference library)
    out2 = tmp_path / "bare.flac"
    carry, _ = render(src, out2, keep=False)
    m = mutagen_flac.FLAC(out2)
    assert list(m.tags) == [] and m.pictures == [] and m.cuesheet is None
    assert all(i.action != "carried" for i in carry)


def test_reruns_are_bit_identical(tmp_path):
    src = source(tmp_path)
    render(src, tmp_path / "a.flac")
    render(src, tmp_path / "b.flac")
    assert (tmp_path / "a.flac").read_bytes() == (tmp_path / "b.flac").read_bytes()


def test_not_flac_and_unreadable_blocks(tmp_path):
    bad = tmp_path / "x.flac"
    bad.write_bytes(b"RIFF\0\0\0\0WAVE")
    with pytest.raises(MetaError) as e:
        fm.read_flac_meta(str(bad))
    assert str(e.value) == f"{bad}: error: not a FLAC file"
    src = source(tmp_path)
    raw = bytearray(open(src, "rb").read())
    m = mutagen_flac.FLAC(src)
    # a second CUESHEET block: FLAC allows one; mutagen refuses to read the blocks
    at = audio_offset(bytes(raw))
    cue = cuesheet_bytes()
    last = 4
    while not raw[last] & 0x80:
        last += 4 + int.from_bytes(raw[last + 1:last + 4], "big")
    raw[last] &= 0x7F
    raw[at:at] = bytes([0x85]) + len(cue).to_bytes(3, "big") + cue
    two = tmp_path / "two.flac"
    two.write_bytes(bytes(raw))
    meta = fm.read_flac_meta(str(two))
    assert meta.blocks == () and len(meta.notes) == 1 and "\n" not in meta.notes[0]
    assert meta.notes[0].startswith(f"{two}: note: its metadata blocks cannot be read")
    assert m.cuesheet is not None
