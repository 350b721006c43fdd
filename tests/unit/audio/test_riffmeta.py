"""Metadata chunks of WAV-family files: layout, carry plan, bext, writing through libsndfile.

Sources: chunk layout of RIFF/WAVE and of RF64 (EBU Tech 3306 / ITU-R BS.2088: 'RF64' header
with size 0xFFFFFFFF, 'ds64' first with riffSize, dataSize, sampleCount, table); the bext chunk
(EBU Tech 3285 v2, 2011, 2.3); coding history rows (EBU R 98). Input files are built here byte
by byte with struct; their audio is written by soundfile (libsndfile). wavinfo (PyPI) is the
independent reader of bext, iXML, cue and LIST-INFO on the results.
"""

import os
import struct

import numpy as np
import pytest
import soundfile as sf

from chainrun.audio.metadata import bext as bx
from chainrun.audio.metadata import riff as rm
from chainrun.audio.metadata import riff_write as rw
from chainrun.audio.metadata.common import MetaError, Reservation

wavinfo = pytest.importorskip("wavinfo")

RATE = 48000


def ck(cid: bytes, payload: bytes, declared: int | None = None, pad: bool = True) -> bytes:
    """A RIFF chunk: id, little-endian size, payload, pad byte after an odd size (RIFF rule)."""
    size = len(payload) if declared is None else declared
    return cid + struct.pack("<I", size) + payload + (b"\0" * (len(payload) & 1) if pad else b"")


def bext_payload(version=1, history=b"A=PCM,F=48000,W=24,M=stereo,T=boathouse recorder\r\n",
                 loudness=(0, 0, 0, 0, 0)) -> bytes:
    # EBU Tech 3285 v2, 2.3: Description 256, Originator 32, OriginatorReference 32,
    # OriginationDate 10, OriginationTime 8, TimeReferenceLow 4, TimeReferenceHigh 4,
    # Version 2, UMID 64, five loudness int16, Reserved 180, then CodingHistory.
    fixed = struct.pack("<256s32s32s10s8sIIH64s5h180s", b"Saltmarsh dawn chorus, take 3",
                        b"Boathouse Radio", b"BHR-2024-0113", b"2024-05-02", b"05:12:00",
                        (RATE * 18720 + 17) & 0xFFFFFFFF, (RATE * 18720 + 17) >> 32, version,
                        bytes(range(64)), *loudness, b"\x55" * 180)
    assert len(fixed) == 602                               # EBU Tech 3285: fixed part is 602 bytes
    return fixed + history


def cue_payload() -> bytes:
    # RIFF 'cue ': count, then id, position, 'data', chunk start, block start, sample offset
    return struct.pack("<I", 2) + struct.pack("<II4sIII", 1, 100, b"data", 0, 0, 100) \
        + struct.pack("<II4sIII", 2, 700, b"data", 0, 0, 700)


INFO = ck(b"LIST", b"INFO" + ck(b"INAM", b"Tide turning\0") + ck(b"ICMT", b"marsh edge, low wind\0"))
ADTL = ck(b"LIST", b"adtl" + ck(b"labl", struct.pack("<I", 1) + b"heron\0"))
IXML = b'<?xml version="1.0"?><BWFXML><PROJECT>Marsh</PROJECT><NOTE>heron</NOTE></BWFXML>'


def audio(frames=1000, channels=2):
    t = np.arange(frames * channels).reshape(frames, channels)
    return ((t * 7919) % 2000 / 2000.0 - 0.5) * 0.8


def source(tmp_path, before=b"", after=b"", fmt="WAV", subtype="PCM_24", channels=2, name="in.wav",
           riff_size=None, data_size=None, patch_fmt=None):
    """An input: libsndfile's fmt and audio, our own chunks around them (built with struct)."""
    plain = tmp_path / ("plain-" + name)
    sf.write(plain, audio(channels=channels), RATE, subtype, format=fmt)
    raw = plain.read_bytes()
    at, chunks = 12, {}
    while at < len(raw):
        cid, size = raw[at:at + 4], struct.unpack_from("<I", raw, at + 4)[0]
        if cid == b"data" and size == 0xFFFFFFFF:
            size = struct.unpack_from("<Q", raw, 20 + 8)[0]       # RF64: ds64 dataSize
        chunks[cid] = raw[at + 8:at + 8 + size]
        at += 8 + size + (size & 1)
    fmt_payload = patch_fmt(chunks[b"fmt "]) if patch_fmt else chunks[b"fmt "]
    data = chunks[b"data"]
    body = b"WAVE" + ck(b"fmt ", fmt_payload) + before + ck(b"data", data, data_size) + after
    path = tmp_path / name
    path.write_bytes(b"RIFF" + struct.pack("<I", len(body) if riff_size is None else riff_size) + body)
    return str(path)


def render(src, out, fmt="WAV", subtype="PCM_24", keep=True, block=256, loudness=None, channels=2):
    """What the writer does: open, prepare, write the audio in blocks, close, finish."""
    layout = rm.read_layout(src)
    carry = rm.plan_carry(layout, keep)
    x = pcm24(src, layout)
    f = sf.SoundFile(out, "w", RATE, channels, subtype, format=fmt)
    sf._snd.sf_command(f._file, 0x1050, sf._ffi.NULL, 0)      # SFC_SET_ADD_PEAK_CHUNK off, as chainrun
    res = rw.prepare_output(f, carry)
    for i in range(0, len(x), block):
        f.write(x[i:i + block])
    f.close()
    changes = rw.finish_output(out, res, carry, bx.coding_history_row(RATE, channels, 24, "chainrun 0.1.0 Marsh"),
                               loudness)
    return carry, changes


def pcm24(path, layout):
    """The audio bytes the layout points at, decoded here (little-endian 24-bit, numpy only)."""
    with open(path, "rb") as fh:
        fh.seek(layout.data_offset)
        raw = np.frombuffer(fh.read(layout.data_size), np.uint8).reshape(-1, 3).astype(np.int32)
    codes = (raw[:, 0] | raw[:, 1] << 8 | raw[:, 2] << 16) << 8 >> 8
    return (codes / 2.0**23).reshape(-1, layout.fmt.channels)


def heard(tmp_path, name="in.wav"):
    """The source's audio as libsndfile reads it from the plain file it wrote."""
    return sf.read(tmp_path / ("plain-" + name))[0]


def walk(path):
    """Chunk ids and payloads of a RIFF/RF64 file, walked here independently (pad rule)."""
    raw = open(path, "rb").read()
    at, out = 12, []
    while at + 8 <= len(raw):
        cid, size = raw[at:at + 4], struct.unpack_from("<I", raw, at + 4)[0]
        if size == 0xFFFFFFFF and raw[:4] == b"RF64":
            size = struct.unpack_from("<Q", raw, 28)[0]
        out.append((cid, raw[at + 8:at + 8 + size]))
        at += 8 + size + (size & 1)
    assert at == len(raw)                                   # RIFF: chunks tile the file exactly
    return out


# ---------------------------------------------------------------- bext


def test_bext_fields_at_tech3285_offsets_and_wavinfo_agrees(tmp_path):
    p = bext_payload()
    b = bx.parse_bext(p)
    assert b.description.rstrip(b"\0") == b"Saltmarsh dawn chorus, take 3"   # EBU Tech 3285: offset 0
    assert b.originator.rstrip(b"\0") == b"Boathouse Radio"                  # offset 256
    assert b.origination_date == b"2024-05-02" and b.origination_time == b"05:12:00"  # 320, 330
    assert b.time_reference == RATE * 18720 + 17                             # 338 low + 342 high
    assert b.version == 1 and b.umid == bytes(range(64))                     # 346, 348
    src = source(tmp_path, before=ck(b"bext", p))
    w = wavinfo.WavInfoReader(src).bext                                      # wavinfo (reference reader)
    assert (w.description, w.originator, w.time_reference) == (
        "Saltmarsh dawn chorus, take 3", "Boathouse Radio", RATE * 18720 + 17)


def test_update_bext_keeps_fields_raises_version_and_never_invents_loudness():
    p = bext_payload(version=2, loudness=(-1800, 500, -100, -1500, -1600))
    q = bx.update_bext(p, "A=PCM,F=48000,W=24,M=stereo,T=x\r\n")
    # EBU Tech 3285: everything before Version, UMID and Reserved kept byte for byte
    assert q[:346] == p[:346] and q[348:412] == p[348:412] and q[422:602] == p[422:602]
    assert struct.unpack_from("<H", q, 346)[0] == 2
    # EBU Tech 3285 v2: 0x7FFF = not known; the input's values describe the old audio
    assert struct.unpack_from("<5h", q, 412) == (0x7FFF,) * 5
    assert q[602:] == p[602:] + b"A=PCM,F=48000,W=24,M=stereo,T=x\r\n"
    r = bx.update_bext(p, None, {"loudness_value": -23.0, "max_true_peak_level": -1.04})
    # EBU Tech 3285 v2, 2.4: int16 of round(100 x value)
    assert struct.unpack_from("<5h", r, 412) == (-2300, 0x7FFF, -104, 0x7FFF, 0x7FFF)
    assert bx.update_bext(bext_payload(history=b"no line end"), "R\r\n")[602:] == b"no line end\r\nR\r\n"


def test_short_bext_is_refused_by_the_parser():
    with pytest.raises(ValueError, match="601 bytes, fewer than the 602"):   # EBU Tech 3285: 602-byte fixed part
        bx.parse_bext(bytes(601))


def test_coding_history_row_and_time_reference():
    # value from memory of EBU R 98-1999 (A=, F=, W=, M=, T=, comma separated, CR LF); verify
    assert bx.coding_history_row(48000, 2, 24, "chainrun 0.1.0 Marsh, dawn") == \
        "A=PCM,F=48000,W=24,M=stereo,T=chainrun 0.1.0 Marsh; dawn\r\n"
    assert bx.coding_history_row(44100, 1, 16, "x").startswith("A=PCM,F=44100,W=16,M=mono,T=")
    assert ",M=" not in bx.coding_history_row(48000, 6, 24, "x")
    # analytic: 5 h 12 min = 18720 s; 17 samples into the next second
    assert bx.format_time_reference(RATE * 18720 + 17, RATE) == "05:12:00:00017"
    assert bx.format_time_reference(44100 * 3661 + 44099, 44100) == "01:01:01:44099"


# ---------------------------------------------------------------- carrying


@pytest.mark.parametrize("fmt", ["WAV", "WAVEX", "RF64"])
def test_every_chunk_carried_in_order_with_the_same_payload(tmp_path, fmt):
    before = (ck(b"bext", bext_payload()) + ck(b"iXML", IXML) + ck(b"JUNK", bytes(50))
              + ck(b"cue ", cue_payload()) + ck(b"PEAK", bytes(24)) + ck(b"zyxw", b"vendor odd"))
    after = INFO + ADTL + ck(b"id3 ", b"ID3\x04\x00\x00\x00\x00\x00\x00")
    src = source(tmp_path, before, after)
    out = str(tmp_path / "out.wav")
    carry, _ = render(src, out, fmt=fmt)
    ids = [c for c, _ in walk(out)]
    head = [b"ds64"] if fmt == "RF64" else []
    tail_fact = [b"fact"] if fmt == "WAVEX" else []
    # the input's order, layout chunks written afresh, PEAK/JUNK dropped, one JUNK filler last before data
    assert ids == head + [b"fmt "] + tail_fact + [b"bext", b"iXML", b"cue ", b"zyxw", b"JUNK", b"data",
                                                  b"LIST", b"LIST", b"id3 "]
    got = dict((c, p) for c, p in walk(out) if c not in (b"LIST",))
    assert got[b"iXML"] == IXML and got[b"cue "] == cue_payload() and got[b"zyxw"] == b"vendor odd"
    assert [p for c, p in walk(out) if c == b"LIST"] == [INFO[8:], ADTL[8:]]
    assert {i.id: i.action for i in carry}["PEAK"] == "dropped"
    w = wavinfo.WavInfoReader(out)                                            # wavinfo (reference reader)
    assert w.bext.version == 2 and w.bext.description == "Saltmarsh dawn chorus, take 3"
    assert w.bext.coding_history.endswith("T=boathouse recorder\r\nA=PCM,F=48000,W=24,M=stereo,"
                                          "T=chainrun 0.1.0 Marsh\r\n")
    assert w.ixml.source == IXML
    assert [c.sample_offset for c in w.cues.cues] == [100, 700]
    assert w.info.title == "Tide turning"
    y, rate = sf.read(out)
    assert rate == RATE and np.array_equal(y, heard(tmp_path))               # soundfile: audio untouched


def test_output_bit_identical_for_block_sizes_and_reruns(tmp_path):
    src = source(tmp_path, ck(b"bext", bext_payload()) + ck(b"iXML", IXML), INFO)
    outs = []
    for n, block in enumerate((7, 1000, 7)):
        render(src, str(tmp_path / f"o{n}.wav"), block=block)
        outs.append((tmp_path / f"o{n}.wav").read_bytes())
    assert outs[0] == outs[1] == outs[2]              # common practice: bit-identical outputs


def test_drop_keeps_only_the_audio(tmp_path):
    src = source(tmp_path, ck(b"bext", bext_payload()) + ck(b"iXML", IXML), INFO)
    out = str(tmp_path / "out.wav")
    carry, _ = render(src, out, keep=False)
    assert [c for c, _ in walk(out)] == [b"fmt ", b"data"]
    assert {i.id: i.action for i in carry} == {"fmt ": "rewritten", "bext": "dropped", "iXML": "dropped",
                                               "data": "rewritten", "LIST": "dropped"}


def test_rf64_ds64_riff_size_patched(tmp_path):
    # EBU Tech 3306: RF64 header size 0xFFFFFFFF, ds64.riffSize = file size - 8
    src = source(tmp_path, ck(b"iXML", IXML), INFO + ck(b"cue ", cue_payload()))
    out = str(tmp_path / "out.wav")
    render(src, out, fmt="RF64")
    raw = open(out, "rb").read()
    assert raw[:4] == b"RF64" and raw[4:8] == b"\xff\xff\xff\xff" and raw[12:16] == b"ds64"
    assert struct.unpack_from("<Q", raw, 20)[0] == len(raw) - 8
    assert walk(out)[-1] == (b"cue ", cue_payload())


def _sparse(path, head: bytes, size: int, tail: bytes = b"") -> bool:
    with open(path, "wb") as fh:
        fh.write(head)
        fh.truncate(size - len(tail))
        fh.seek(size - len(tail))
        fh.write(tail)
    return os.stat(path).st_blocks * 512 < 1 << 24


def test_rf64_past_4gib_gets_64_bit_riff_size(tmp_path):
    """A real >4 GiB RF64 from libsndfile is too slow for CI: a sparse file stands in for it,
    built here per EBU Tech 3306 (ds64 riffSize/dataSize above 2**32)."""
    data = (1 << 32) + 6 * 1000
    fmt = struct.pack("<HHIIHH", 1, 2, RATE, RATE * 6, 6, 24)
    head = b"RF64\xff\xff\xff\xffWAVE" + ck(b"ds64", struct.pack("<QQQI", 0, data, data // 6, 0)) \
        + ck(b"fmt ", fmt) + b"data\xff\xff\xff\xff"
    out = str(tmp_path / "big.wav")
    if not _sparse(out, head, len(head) + data):
        pytest.skip("the file system does not keep sparse files")
    src = source(tmp_path, after=INFO)
    carry = rm.plan_carry(rm.read_layout(src))
    rw.finish_output(out, Reservation(0), carry)
    size = os.path.getsize(out)
    with open(out, "rb") as fh:
        fh.seek(20)
        assert struct.unpack("<Q", fh.read(8))[0] == size - 8 > 1 << 32     # EBU Tech 3306: ds64 riffSize
        fh.seek(size - len(INFO))
        assert fh.read() == INFO


def test_riff_that_would_pass_4gib_is_refused(tmp_path):
    data = 0xFFFFFFFF - 64
    fmt = struct.pack("<HHIIHH", 1, 1, RATE, RATE * 3, 3, 24)
    head = b"RIFF" + struct.pack("<I", 36 + data) + b"WAVE" + ck(b"fmt ", fmt) + b"data" + struct.pack("<I", data)
    out = str(tmp_path / "near4g.wav")
    if not _sparse(out, head, len(head) + data + 1):
        pytest.skip("the file system does not keep sparse files")
    carry = rm.plan_carry(rm.read_layout(source(tmp_path, after=INFO)))
    with pytest.raises(MetaError, match="passes 4 GiB; it must be written as RF64"):
        rw.finish_output(out, Reservation(0), carry)


def test_extensible_channel_mask_and_valid_bits_kept(tmp_path):
    def back_pair_20_bits(p):        # WAVE_FORMAT_EXTENSIBLE: wValidBitsPerSample at 18, dwChannelMask at 20
        return p[:18] + struct.pack("<HI", 20, 0x30) + p[24:]
    src = source(tmp_path, ck(b"iXML", IXML), fmt="WAVEX", patch_fmt=back_pair_20_bits)
    out = str(tmp_path / "out.wav")
    _, changes = render(src, out, fmt="WAVEX")
    fmt = dict(walk(out))[b"fmt "]
    assert struct.unpack_from("<HI", fmt, 18) == (20, 0x30)
    assert any("0x30 kept" in c for c in changes)


# ---------------------------------------------------------------- malformed metadata


def test_chunk_running_past_the_end(tmp_path):
    src = source(tmp_path, ck(b"iXML", IXML), ck(b"LIST", b"INFO" + bytes(800), declared=5000))
    layout = rm.read_layout(src)
    at = [c for c in layout.chunks if c.id == "LIST"][0].offset
    assert layout.notes == (f"{src}: note: chunk 'LIST' at byte {at} says 5000 bytes but only 804 remain; "
                            "it is not carried",)
    out = str(tmp_path / "out.wav")
    carry, _ = render(src, out)
    assert [c for c, _ in walk(out)] == [b"fmt ", b"iXML", b"JUNK", b"data"]
    assert np.array_equal(sf.read(out)[0], heard(tmp_path))


def test_odd_chunk_without_pad_byte(tmp_path):
    src = source(tmp_path, ck(b"iXML", IXML + b"!", pad=False) + ck(b"bext", bext_payload()))
    layout = rm.read_layout(src)
    assert len(IXML + b"!") % 2 == 1 and "has an odd size and no pad byte" in layout.notes[0]
    out = str(tmp_path / "out.wav")
    render(src, out)
    got = walk(out)                                  # the output follows the pad rule
    assert got[1] == (b"iXML", IXML + b"!") and got[2][0] == b"bext"
    assert np.array_equal(sf.read(out)[0], heard(tmp_path))


def test_short_bext_and_oversized_ixml_are_not_carried(tmp_path):
    big = b"<BWFXML>" + b" " * (20 * 2**20) + b"</BWFXML>"
    src = source(tmp_path, ck(b"bext", bytes(600)) + ck(b"iXML", big) + ck(b"axml", b"<ebuCore/>"))
    layout = rm.read_layout(src)
    assert [n.split(": note: ", 1)[1] for n in layout.notes] == [
        "chunk 'bext' at byte 36: it has 600 bytes, fewer than the 602 of EBU Tech 3285; it is not carried",
        f"chunk 'iXML' at byte 644: it holds {len(big)} bytes, more than the 16 MiB chainrun carries; "
        "it is not carried"]
    out = str(tmp_path / "out.wav")
    render(src, out)
    assert [c for c, _ in walk(out)] == [b"fmt ", b"axml", b"JUNK", b"data"]


def test_list_lying_about_its_length_before_the_audio(tmp_path):
    src = source(tmp_path, ck(b"LIST", INFO[8:], declared=5000) + ck(b"iXML", IXML))
    layout = rm.read_layout(src)
    assert "chunk 'LIST' at byte 36 says 5000 bytes but its entries end at byte" in layout.notes[0]
    assert layout.audio_error is None and layout.data_size == 6000
    out = str(tmp_path / "out.wav")
    render(src, out)
    assert [c for c, _ in walk(out)] == [b"fmt ", b"iXML", b"JUNK", b"data"]


@pytest.mark.parametrize("placeholder", [0xFFFFFFFF, 0x7FFFFFFF, 0])
def test_streamed_wav_followed_by_list(tmp_path, placeholder):
    src = source(tmp_path, ck(b"iXML", IXML), INFO, riff_size=placeholder, data_size=placeholder)
    layout = rm.read_layout(src)
    assert layout.audio_error is None
    assert layout.data_size == 6000                  # analytic: 1000 frames x 2 channels x 3 bytes
    assert "the audio ends at byte" in layout.notes[-1] and "'LIST' chunk starts" in layout.notes[-1]
    out = str(tmp_path / "out.wav")
    render(src, out)
    assert walk(out)[-1] == (b"LIST", INFO[8:])
    assert np.array_equal(sf.read(out)[0], heard(tmp_path))  # no LIST bytes delivered as samples


def test_streamed_wav_to_the_end_and_unknown_trailer(tmp_path):
    src = source(tmp_path, riff_size=0xFFFFFFFF, data_size=0xFFFFFFFF, name="a.wav")
    assert rm.read_layout(src).data_size == 6000
    src = source(tmp_path, after=ck(b"zqzq", b"vendor"), riff_size=0xFFFFFFFF, data_size=0xFFFFFFFF, name="b.wav")
    layout = rm.read_layout(src)
    assert layout.audio_error.startswith("cannot tell where the audio ends")


def test_w64_layout_is_read_and_nothing_carried(tmp_path):
    path = str(tmp_path / "a.w64")
    sf.write(path, audio(), RATE, "PCM_16", format="W64")
    layout = rm.read_layout(path)
    assert layout.container == "W64" and layout.fmt.channels == 2 and layout.data_size == 4000
    assert rm.read_layout(path).audio_error is None


def test_not_a_wav_file(tmp_path):
    p = tmp_path / "x.wav"
    p.write_bytes(b"FORM\0\0\0\4AIFF")
    with pytest.raises(MetaError, match=r"x\.wav: error: not a WAV, RF64, BW64 or W64 file"):
        rm.read_layout(str(p))
