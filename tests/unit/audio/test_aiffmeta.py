"""AIFF / AIFF-C chunks carried into libsndfile's output.

Sources: Apple, Audio Interchange File Format 1.3 (1989): FORM/AIFF, big-endian sizes, pad
byte after an odd payload, MARK / COMT / INST / APPL / NAME / AUTH / '(c) ' / ANNO layouts
(from memory; verify); Apple AIFF-C draft (1991): FORM/AIFC, FVER timestamp 0xA2805140
(from memory; verify). Audio is written by soundfile (libsndfile); chunks are built here with
struct. Independent readers: Python's aifc module (stdlib, to 3.12) for markers, mutagen
(PyPI) for the 'ID3 ' chunk.
"""

import struct
import warnings

import numpy as np
import pytest
import soundfile as sf

from chainrun.audio.metadata import aiff as am
from chainrun.audio.metadata.common import MetaError

RATE = 48000


def ck(cid: bytes, payload: bytes, declared=None, pad=True) -> bytes:
    """AIFF 1.3: id, big-endian size (pad not counted), payload, pad byte after odd sizes."""
    n = len(payload) if declared is None else declared
    return cid + struct.pack(">I", n) + payload + (b"\0" * (len(payload) & 1) if pad else b"")


def pstring(text: bytes) -> bytes:
    # AIFF 1.3: count byte, text, pad byte so that the whole is even
    s = bytes([len(text)]) + text
    return s + b"\0" * (len(s) & 1)


MARK = struct.pack(">H", 2) + struct.pack(">hI", 1, 100) + pstring(b"heron") \
    + struct.pack(">hI", 2, 700) + pstring(b"tide")
COMT = struct.pack(">H", 1) + struct.pack(">IhH", 0, 1, 9) + b"low wind\0" + b"\0"
INST = struct.pack(">bbbbbbh", 60, 0, 0, 127, 1, 127, 0) + struct.pack(">hhh", 1, 1, 2) + struct.pack(">hhh", 0, 0, 0)
APPL = b"BHRm" + b"boathouse session 7"
PRE = [(b"NAME", b"Tide turning"), (b"AUTH", b"Boathouse Radio"), (b"(c) ", b"2024 BHR"),
       (b"MARK", MARK), (b"INST", INST), (b"COMT", COMT)]
POST = [(b"ANNO", b"recorded on the tidal marsh"), (b"APPL", APPL)]


def audio(frames=1001, channels=2):
    t = np.arange(frames * channels).reshape(frames, channels)
    return ((t * 7919) % 2000 / 2000.0 - 0.5) * 0.8


def walk(path):
    """(id, payload) of every chunk, walked here independently (AIFF 1.3 pad rule)."""
    raw = open(path, "rb").read()
    at, out = 12, []
    while at + 8 <= len(raw):
        cid, n = raw[at:at + 4], struct.unpack(">I", raw[at + 4:at + 8])[0]
        out.append((cid, raw[at + 8:at + 8 + n]))
        at += 8 + n + (n & 1)
    return out


def source(tmp_path, pre=PRE, post=POST, subtype="PCM_16", extra_after=b"", form_size=None):
    plain = tmp_path / "plain.aiff"
    sf.write(plain, audio(), RATE, subtype, format="AIFF")
    parts = dict(walk(plain))
    kind = open(plain, "rb").read()[8:12]
    body = kind
    if kind == b"AIFC":
        body += ck(b"FVER", struct.pack(">I", 0xA2805140))   # AIFF-C draft: version 1 timestamp
    body += ck(b"COMM", parts[b"COMM"])
    body += b"".join(ck(c, p) for c, p in pre) + ck(b"SSND", parts[b"SSND"])
    body += b"".join(ck(c, p) for c, p in post) + extra_after
    path = tmp_path / "in.aiff"
    path.write_bytes(b"FORM" + struct.pack(">I", len(body) if form_size is None else form_size) + body)
    return str(path)


def render(src, out, keep=True, subtype="PCM_16"):
    layout = am.read_layout(src)
    carry = am.plan_carry(layout, keep)
    x, _ = sf.read(src)
    f = sf.SoundFile(out, "w", RATE, 2, subtype, format="AIFF")
    sf._snd.sf_command(f._file, 0x1050, sf._ffi.NULL, 0)        # SFC_SET_ADD_PEAK_CHUNK off, as chainrun
    res = am.prepare_output(f, carry)
    for i in range(0, len(x), 256):
        f.write(x[i:i + 256])
    f.close()
    am.finish_output(str(out), res, carry)
    return layout, carry


def metadata(chunks):
    return [(c, p) for c, p in chunks if c not in (b"COMM", b"SSND", b"FVER", b"JUNK")]


@pytest.mark.parametrize("subtype", ["PCM_16", "PCM_24", "FLOAT"])
def test_chunks_round_trip_in_order(tmp_path, subtype):
    src = source(tmp_path, subtype=subtype)
    out = tmp_path / "out.aiff"
    layout, carry = render(src, out, subtype=subtype)
    assert layout.notes == () and layout.audio_error is None
    got = walk(out)
    ids = [c for c, _ in got]
    # byte comparison of each payload, in the input's order, before and after SSND as in the input
    assert metadata(got) == PRE + POST
    ssnd = ids.index(b"SSND")
    assert all(ids.index(c) < ssnd for c, _ in PRE) and all(ids.index(c) > ssnd for c, _ in POST)
    raw = open(out, "rb").read()
    assert struct.unpack(">I", raw[4:8])[0] + 8 == len(raw)      # AIFF 1.3: FORM size
    np.testing.assert_array_equal(sf.read(out)[0], sf.read(src)[0])   # soundfile (libsndfile)
    assert [i.action for i in carry if i.id in ("COMM", "SSND")] == ["rewritten", "rewritten"]


def test_independent_readers(tmp_path):
    mutagen_aiff = pytest.importorskip("mutagen.aiff")
    from mutagen.id3 import TIT2
    tagged = tmp_path / "tagged.aiff"
    sf.write(tagged, audio(), RATE, "PCM_16", format="AIFF")
    m = mutagen_aiff.AIFF(tagged)
    m.add_tags()
    m.tags.add(TIT2(encoding=3, text=["Marsh at dawn"]))
    m.save()
    id3 = [p for c, p in walk(tagged) if c == b"ID3 "][0]
    src = source(tmp_path, post=POST + [(b"ID3 ", id3)])
    out = tmp_path / "out.aiff"
    render(src, out)
    assert str(mutagen_aiff.AIFF(out).tags["TIT2"]) == "Marsh at dawn"     # mutagen (reference library)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)
        aifc = pytest.importorskip("aifc")
        with aifc.open(str(out)) as a:                                      # stdlib aifc (reference reader)
            assert a.getmarkers() == [(1, 100, b"heron"), (2, 700, b"tide")]


def test_odd_sizes_and_missing_pad(tmp_path):
    # NAME of odd length written without its pad byte: the next chunk is found one byte early
    src = source(tmp_path, pre=[], post=[(b"AUTH", b"odd"), (b"ANNO", b"kept")])
    raw = open(src, "rb").read()
    fixed = raw.replace(b"AUTH\0\0\0\x03odd\0ANNO", b"AUTH\0\0\0\x03oddANNO")
    fixed = fixed[:4] + struct.pack(">I", len(fixed) - 8) + fixed[8:]
    open(src, "wb").write(fixed)
    layout = am.read_layout(src)
    assert len(layout.notes) == 1 and "has an odd size and no pad byte" in layout.notes[0]
    out = tmp_path / "out.aiff"
    render(src, out)
    assert metadata(walk(out)) == [(b"AUTH", b"odd"), (b"ANNO", b"kept")]


def test_chunk_past_the_end_and_wrong_form_size(tmp_path):
    src = source(tmp_path, extra_after=b"ANNO" + struct.pack(">I", 5000) + b"cut short", form_size=12)
    layout = am.read_layout(src)
    assert [n.split(": note: ")[1].split(" ")[:3] for n in layout.notes] == [
        ["the", "FORM", "size"], ["chunk", "'ANNO'", "at"]]
    assert all(n.startswith(f"{src}: note: ") and "\n" not in n for n in layout.notes)
    carry = am.plan_carry(layout)
    assert [i.action for i in carry if i.id == "ANNO"] == ["carried", "dropped"]
    out = tmp_path / "out.aiff"
    render(src, out)
    assert metadata(walk(out)) == PRE + POST
    np.testing.assert_array_equal(sf.read(out)[0], sf.read(src)[0])


def test_not_aiff_no_ssnd_and_drop(tmp_path):
    bad = tmp_path / "x.aiff"
    bad.write_bytes(b"RIFF\0\0\0\0WAVE")
    with pytest.raises(MetaError) as e:
        am.read_layout(str(bad))
    assert str(e.value) == f"{bad}: error: not an AIFF or AIFF-C file"
    body = b"AIFF" + ck(b"COMM", struct.pack(">hIh10s", 2, 0, 16, b"\x40\x0e\xbb\x80" + b"\0" * 6))
    bad.write_bytes(b"FORM" + struct.pack(">I", len(body)) + body)
    assert am.read_layout(str(bad)).audio_error == "it has no 'SSND' chunk"
    src = source(tmp_path)
    out = tmp_path / "bare.aiff"
    render(src, out, keep=False)
    assert metadata(walk(out)) == []


def test_reruns_bit_identical(tmp_path):
    src = source(tmp_path)
    render(src, tmp_path / "a.aiff")
    render(src, tmp_path / "b.aiff")
    assert (tmp_path / "a.aiff").read_bytes() == (tmp_path / "b.aiff").read_bytes()


def test_exact_room_needs_no_filler(tmp_path):
    # analytic: these chunks take 116 bytes; 116 - 8 is a multiple of 4, so libsndfile's rounded
    # room holds them exactly and no filler chunk is left before SSND
    pre = [c for c in PRE if c[0] != b"MARK"]
    src = source(tmp_path, pre=pre, post=[(b"MARK", MARK)])
    out = tmp_path / "out.aiff"
    render(src, out)
    got = walk(out)
    assert b"JUNK" not in [c for c, _ in got]
    assert metadata(got) == pre + [(b"MARK", MARK)]
