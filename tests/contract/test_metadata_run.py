"""Metadata travels with the audio through real runs (``chainrun run`` and render_file).

Sources: RIFF/WAVE chunk layout (Microsoft/IBM RIFF: id, little-endian size, payload, pad byte
after an odd size); the bext chunk (EBU Tech 3285 v2, 2011, 2.3) and its coding history rows
(EBU R 98); iXML (the iXML specification: BWFXML with SCENE and TAKE); AIFF 1.3 (Apple, 1989:
big-endian chunks, MARK = count, then id, position, pstring); FLAC metadata blocks (read back
with mutagen, the reference library). wavinfo (PyPI) is the independent reader of bext, iXML
and cue; every other chunk is compared byte for byte with a walker written here.
"""
import json
import os
import re
import struct

import numpy as np
import pytest
import soundfile as sf

from chainrun.audio.metadata import metadata_summary
from chainrun.audio.reader import probe
from chainrun.cli import main
from chainrun.render.file import render_file
from chainrun.render.policy import Policy

wavinfo = pytest.importorskip("wavinfo")
mutagen_flac = pytest.importorskip("mutagen.flac")

RATE = 48000
RECIPE = """format: 1
chain:
  - {type: peak, freq: 1000, gain_db: -4, q: 1}
output: {subtype: PCM_16, dither: tpdf}
guard: {on_over: scale}
"""
TIME_REF = RATE * (10 * 3600 + 5) + 123                    # 10:00:05 and 123 samples at 48 kHz
HISTORY = b"A=PCM,F=48000,W=24,M=stereo,T=boathouse field recorder\r\n"
IXML = (b'<?xml version="1.0" encoding="UTF-8"?><BWFXML><IXML_VERSION>1.5</IXML_VERSION>'
        b"<PROJECT>Tide Hour</PROJECT><SCENE>12A</SCENE><TAKE>3</TAKE></BWFXML>")


def ck(cid: bytes, payload: bytes, declared: int | None = None) -> bytes:
    """RIFF chunk: id, little-endian size, payload, a pad byte after an odd size."""
    return cid + struct.pack("<I", len(payload) if declared is None else declared) + payload + b"\0" * (len(payload) & 1)


def bext_payload(version=1) -> bytes:
    # EBU Tech 3285 v2, 2.3: Description 256, Originator 32, OriginatorReference 32, OriginationDate 10,
    # OriginationTime 8, TimeReferenceLow 4, TimeReferenceHigh 4, Version 2, UMID 64, 5 x int16 loudness,
    # Reserved 180 (602 bytes), then CodingHistory.
    fixed = struct.pack("<256s32s32s10s8sIIH64s5h180s", b"Boathouse interview, take 3", b"Boathouse Radio",
                        b"BHR-0113-3", b"2024-05-02", b"10:00:05", TIME_REF & 0xFFFFFFFF, TIME_REF >> 32,
                        version, bytes(range(64)), 0, 0, 0, 0, 0, bytes(180))
    return fixed + HISTORY


def cue_payload() -> bytes:
    # RIFF 'cue ': count, then per point id, position, 'data', chunk start, block start, sample offset
    return struct.pack("<I", 2) + struct.pack("<II4sIII", 1, 480, b"data", 0, 0, 480) \
        + struct.pack("<II4sIII", 2, 2400, b"data", 0, 0, 2400)


INFO = ck(b"LIST", b"INFO" + ck(b"INAM", b"Tide turning\0") + ck(b"ICMT", b"boathouse, low wind\0"))
ADTL = ck(b"LIST", b"adtl" + ck(b"labl", struct.pack("<I", 1) + b"heron\0"))
UNKNOWN = ck(b"zbhr", b"vendor odd")                         # 10 bytes; a chunk chainrun does not know


def tone(frames=4800, channels=2):
    t = np.arange(frames)[:, None] / RATE
    return 0.5 * np.sin(2 * np.pi * np.array([440.0, 660.0][:channels]) * t)


def wav(path, before=b"", after=b"", data_size=None, riff_size=None, channels=2):
    """A WAV file: libsndfile's fmt and audio (PCM_24), our own chunks around them (struct)."""
    plain = str(path) + ".plain.wav"
    sf.write(plain, tone(channels=channels), RATE, "PCM_24")
    raw = open(plain, "rb").read()
    os.remove(plain)
    chunks = dict(walk_bytes(raw, "<"))
    body = b"WAVE" + ck(b"fmt ", chunks[b"fmt "]) + before + ck(b"data", chunks[b"data"], data_size) + after
    with open(path, "wb") as fh:
        fh.write(b"RIFF" + struct.pack("<I", len(body) if riff_size is None else riff_size) + body)
    return chunks[b"data"]


def walk_bytes(raw: bytes, order: str):
    """(id, payload) of every top-level chunk, walked here by the pad rule; the chunks must tile the file."""
    at, out = 12, []
    while at + 8 <= len(raw):
        cid, size = raw[at:at + 4], struct.unpack_from(order + "I", raw, at + 4)[0]
        out.append((cid, raw[at + 8:at + 8 + size]))
        at += 8 + size + (size & 1)
    assert at == len(raw)                                    # RIFF / EA IFF 85: chunks tile the file
    return out


def walk(path, order="<"):
    return walk_bytes(open(path, "rb").read(), order)


def run(tmp_path, indir, *extra, out="out", capsys=None):
    recipe = tmp_path / "tide-hour.yaml"
    recipe.write_text(RECIPE)
    code = main(["run", str(recipe), str(indir), "-o", str(tmp_path / out), *extra])
    doc = json.loads((tmp_path / out / "chainrun-report.json").read_text())
    return code, doc


def test_broadcast_wav_take_keeps_every_chunk_in_order(tmp_path):
    (tmp_path / "in").mkdir()
    src = tmp_path / "in" / "take3.wav"
    wav(src, ck(b"bext", bext_payload()) + ck(b"iXML", IXML) + INFO + ck(b"cue ", cue_payload()) + UNKNOWN, ADTL)
    code, doc = run(tmp_path, tmp_path / "in")
    assert code == 0
    out = str(tmp_path / "out" / "take3.wav")
    chunks = walk(out)
    ids = [c for c, _ in chunks]
    # input order kept; layout chunks written afresh; one JUNK filler where the reserved room is left over
    assert [i for i in ids if i not in (b"JUNK",)] == [b"fmt ", b"bext", b"iXML", b"LIST", b"cue ", b"zbhr",
                                                       b"data", b"LIST"]
    got = [(c, p) for c, p in chunks if c not in (b"fmt ", b"data", b"bext", b"JUNK")]
    assert got == [(b"iXML", IXML), (b"LIST", INFO[8:]), (b"cue ", cue_payload()),
                   (b"zbhr", b"vendor odd"), (b"LIST", ADTL[8:])]           # byte for byte
    w = wavinfo.WavInfoReader(out)                                           # wavinfo (reference reader)
    b = w.bext
    assert b.version == 2                                                    # EBU Tech 3285 v2
    assert b.description == "Boathouse interview, take 3" and b.originator == "Boathouse Radio"
    assert b.originator_ref == "BHR-0113-3" and b.time_reference == TIME_REF
    name = doc["recipe"]["name"]
    # EBU R 98: A=<algorithm>,F=<rate>,W=<word length>,M=<mode>,T=<text>, one row added to the old one
    rows = b.coding_history.split("\r\n")
    assert rows[0] == HISTORY.decode().rstrip("\r\n") and rows[2:] == [""]
    assert re.fullmatch(r"A=PCM,F=48000,W=16,M=stereo,T=chainrun \S+ " + re.escape(name), rows[1])
    assert w.ixml.source == IXML
    assert [c.sample_offset for c in w.cues.cues] == [480, 2400]
    raw_bext = dict(chunks)[b"bext"]
    src_bext = bext_payload()
    # EBU Tech 3285: description .. time reference (0..346) and UMID (348..412) kept byte for byte
    assert raw_bext[:346] == src_bext[:346] and raw_bext[348:412] == src_bext[348:412]
    # EBU Tech 3285 v2: int16 of round(100 x value), 0x7FFF not known. The take is 0.1 s, shorter than one
    # 400 ms block (ITU-R BS.1770-4), so only the output's max true peak is known; it is the report's.
    tp = max(c["true_peak_dbtp"] for c in doc["files"][0]["output_meters"]["channels"])
    assert struct.unpack_from("<5h", raw_bext, 412) == (0x7FFF, 0x7FFF, round(100 * tp), 0x7FFF, 0x7FFF)
    items = {(i["chunk"], i["action"]) for i in doc["files"][0]["metadata"]["items"]}
    assert {("bext", "rewritten"), ("iXML", "carried"), ("zbhr", "carried"), ("data", "rewritten")} <= items
    y, _ = sf.read(out)
    assert y.shape == (4800, 2)                              # soundfile: the audio's length unchanged


def test_outputs_identical_for_block_sizes_and_reruns(tmp_path):
    (tmp_path / "in").mkdir()
    wav(tmp_path / "in" / "take3.wav", ck(b"bext", bext_payload()) + ck(b"iXML", IXML) + INFO, ADTL)
    outs = []
    for n, extra in enumerate(([], ["--block-size", "1000"], ["--block-size", "7"], [])):
        code, _ = run(tmp_path, tmp_path / "in", *extra, out=f"o{n}")
        assert code == 0
        outs.append((tmp_path / f"o{n}" / "take3.wav").read_bytes())
    assert outs[0] == outs[1] == outs[2] == outs[3]          # common practice: bit-identical outputs


def test_flac_comments_and_picture_travel(tmp_path):
    from mutagen.flac import FLAC, Picture

    (tmp_path / "in").mkdir()
    src = str(tmp_path / "in" / "slipway.flac")
    sf.write(src, tone(), RATE, "PCM_16", format="FLAC")
    f = FLAC(src)
    f["TITLE"] = "Slipway generator"
    f["ARTIST"] = ["Boathouse Radio", "Marsh crew"]
    pic = Picture()
    pic.type, pic.mime, pic.desc, pic.data = 3, "image/png", "the slipway", b"\x89PNG\r\n\x1a\n" + bytes(300)
    f.add_picture(pic)
    f.save()
    code, doc = run(tmp_path, tmp_path / "in")
    assert code == 0
    out = FLAC(str(tmp_path / "out" / "slipway.flac"))                       # mutagen (reference library)
    assert out["TITLE"] == ["Slipway generator"] and out["ARTIST"] == ["Boathouse Radio", "Marsh crew"]
    assert len(out.pictures) == 1 and out.pictures[0].data == pic.data and out.pictures[0].desc == "the slipway"
    assert sf.read(str(tmp_path / "out" / "slipway.flac"))[0].shape == (4800, 2)


def aiff_chunk(cid: bytes, payload: bytes) -> bytes:
    """AIFF 1.3 / EA IFF 85 chunk: id, big-endian size, payload, a pad byte after an odd size."""
    return cid + struct.pack(">I", len(payload)) + payload + b"\0" * (len(payload) & 1)


def test_aiff_name_anno_mark_travel(tmp_path):
    (tmp_path / "in").mkdir()
    src = tmp_path / "in" / "host.aiff"
    sf.write(str(src), tone(), RATE, "PCM_24", format="AIFF")
    raw = src.read_bytes()
    chunks = walk_bytes(raw, ">")
    # AIFF 1.3 MARK: numMarkers, then id (2 bytes), position (4 bytes, sample frames), pstring name
    mark = struct.pack(">HHI", 2, 1, 480) + b"\x05heron" + struct.pack(">HI", 2, 2400) + b"\x03owl"
    extra = [(b"NAME", b"Host stem"), (b"ANNO", b"boathouse, take 3"), (b"MARK", mark)]
    body = b"AIFF" + b"".join(aiff_chunk(c, p) for c, p in chunks if c == b"COMM") \
        + b"".join(aiff_chunk(c, p) for c, p in extra) + b"".join(aiff_chunk(c, p) for c, p in chunks if c != b"COMM")
    src.write_bytes(b"FORM" + struct.pack(">I", len(body)) + body)
    code, _ = run(tmp_path, tmp_path / "in")
    assert code == 0
    got = walk(str(tmp_path / "out" / "host.aiff"), ">")
    assert [(c, p) for c, p in got if c in (b"NAME", b"ANNO", b"MARK")] == extra     # byte for byte, in order
    ids = [c for c, _ in got]
    assert ids.index(b"MARK") < ids.index(b"SSND")
    assert sf.read(str(tmp_path / "out" / "host.aiff"))[0].shape == (4800, 2)       # soundfile


def test_drop_policy_keeps_only_the_audio(tmp_path):
    src = tmp_path / "take3.wav"
    wav(src, ck(b"bext", bext_payload()) + ck(b"iXML", IXML) + INFO, ADTL)
    sos = np.array([[1.0, 0.0, 0.0, 1.0, 0.0, 0.0]])          # analytic: the identity filter
    res = render_file(probe(str(src)), str(tmp_path / "o.wav"), sos, 1.0, Policy(metadata=False), "take3.wav")
    assert res.status == "ok", res.message
    assert [c for c, _ in walk(str(tmp_path / "o.wav"))] == [b"fmt ", b"data"]
    dropped = {i["chunk"]: i["reason"] for i in res.metadata["items"] if i["action"] == "dropped"}
    assert set(dropped) == {"bext", "iXML", "LIST"}
    y, _ = sf.read(str(tmp_path / "o.wav"))
    x, _ = sf.read(str(src))
    assert np.array_equal(y, x)                              # analytic: identity filter, same PCM_24 codes


def test_malformed_bext_is_noted_and_the_rest_delivered(tmp_path, capsys):
    (tmp_path / "in").mkdir()
    short = ck(b"bext", b"too short for Tech 3285")         # EBU Tech 3285: the fixed part is 602 bytes
    wav(tmp_path / "in" / "take4.wav", short + ck(b"iXML", IXML))
    code, doc = run(tmp_path, tmp_path / "in")
    assert code == 0
    err = capsys.readouterr().err
    note = [line for line in err.splitlines() if "bext" in line]
    assert len(note) == 1 and "take4.wav: note: chunk 'bext' at byte 36" in note[0]   # RIFF: 12 + 8 + 16
    f = doc["files"][0]
    assert f["status"] == "ok" and any("'bext' at byte 36" in n for n in f["metadata"]["notes"])
    out = walk(str(tmp_path / "out" / "take4.wav"))
    assert (b"iXML", IXML) in out and b"bext" not in [c for c, _ in out]


def test_streamed_wav_with_list_reads_only_its_audio(tmp_path):
    (tmp_path / "in").mkdir()
    data = wav(tmp_path / "in" / "stream.wav", after=INFO, data_size=0xFFFFFFFF, riff_size=0xFFFFFFFF)
    code, doc = run(tmp_path, tmp_path / "in")
    assert code == 0
    out = str(tmp_path / "out" / "stream.wav")
    assert [(c, p) for c, p in walk(out) if c == b"LIST"] == [(b"LIST", INFO[8:])]
    # the audio part decoded here (little-endian 24-bit PCM), independent of libsndfile and chainrun
    b = np.frombuffer(data, np.uint8).reshape(-1, 3).astype(np.int32)
    codes = (b[:, 0] | b[:, 1] << 8 | b[:, 2] << 16) << 8 >> 8
    frames = len(codes) // 2
    assert doc["files"][0]["frames"] == frames == 4800
    in_peak = 20 * np.log10(np.abs(codes).max() / 2.0**23)
    got = max(c["peak_dbfs"] for c in doc["files"][0]["input_meters"]["channels"])
    assert got == pytest.approx(in_peak, abs=1e-9)           # analytic: the meter saw only the audio
    y, _ = sf.read(out)
    assert y.shape == (frames, 2)


def test_streamed_wav_whose_end_cannot_be_told_is_refused_in_one_line(tmp_path, capsys):
    (tmp_path / "in").mkdir()
    wav(tmp_path / "in" / "stream.wav", after=ck(b"QQQQ", b"x" * 12), data_size=0xFFFFFFFF, riff_size=0xFFFFFFFF)
    code, doc = run(tmp_path, tmp_path / "in")
    assert code != 0
    f = doc["files"][0]
    assert f["status"] == "failed" and "cannot tell where the audio ends" in f["message"]
    lines = [line for line in capsys.readouterr().err.splitlines() if "stream.wav" in line]
    assert len(lines) == 1 and "Traceback" not in lines[0]
    assert not os.path.exists(tmp_path / "out" / "stream.wav")


def test_metadata_summary_of_a_broadcast_take(tmp_path):
    src = tmp_path / "take3.wav"
    wav(src, ck(b"bext", bext_payload()) + ck(b"iXML", IXML) + INFO)
    for given in (str(src), probe(str(src))):
        s = metadata_summary(given)
        assert s["description"] == "Boathouse interview, take 3"
        assert s["time_reference"] == TIME_REF
        assert s["time_reference_hms"] == "10:00:05:00123"     # analytic: 123 samples past 10:00:05 at 48 kHz
        assert s["scene"] == "12A" and s["take"] == "3"         # iXML specification: SCENE, TAKE
        assert [c["id"] for c in s["chunks"]] == ["fmt ", "bext", "iXML", "LIST", "data"]
        assert s["chunks"][1]["at_byte"] == 36                  # RIFF: 12-byte header, fmt chunk 8 + 16


def test_rf64_promotion_counts_the_metadata_bytes(tmp_path):
    from chainrun.audio.formats import RF64_THRESHOLD, output_format
    from chainrun.audio.metadata.carry import OutputMeta

    src_path = tmp_path / "take3.wav"
    wav(src_path, ck(b"bext", bext_payload()) + ck(b"iXML", IXML))
    src = probe(str(src_path))
    extra = OutputMeta(src.meta).extra_bytes()
    # RIFF: chunk header 8 + payload + pad for bext (602 + history + room for one row) and iXML
    assert extra >= 8 + len(bext_payload()) + 8 + len(IXML)
    frames = (RF64_THRESHOLD - extra // 2) // (2 * 3)        # analytic: the samples alone fit, with metadata not
    from dataclasses import replace
    big = replace(src, frames=frames)
    assert output_format(big, "same") == ("WAV", "PCM_24")
    assert output_format(big, "same", extra) == ("RF64", "PCM_24")


def test_scan_shows_a_take_s_metadata(tmp_path, capsys):
    # README "Commands": scan shows each file's metadata summary; --json gives all of it.
    # EBU Tech 3285: the time reference counts samples since midnight, so TIME_REF at 48 kHz is
    # 10:00:05 and 123 samples (analytic).
    (tmp_path / "in").mkdir()
    take = tmp_path / "in" / "take3.wav"
    wav(take, before=ck(b"bext", bext_payload()) + ck(b"iXML", IXML), after=INFO + ck(b"cue ", cue_payload()))
    assert main(["scan", str(take)]) == 0
    out = capsys.readouterr().out
    line = out.splitlines()[2]
    assert "description 'Boathouse interview, take 3'" in line and "time reference 10:00:05:00123" in line
    assert "scene 12A" in line and "take 3" in line
    assert "carries bext, iXML, LIST, cue" in line and "fmt" not in line
    assert main(["scan", "--json", str(take)]) == 0
    meta = json.loads(capsys.readouterr().out)["files"][0]["metadata"]
    assert meta["time_reference"] == TIME_REF and meta["scene"] == "12A" and meta["take"] == "3"
    assert [c["id"] for c in meta["chunks"]] == ["fmt ", "bext", "iXML", "data", "LIST", "cue "]
