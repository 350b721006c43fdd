"""Output container and subtype decisions: RF64 past 4 GiB, containers that cannot hold a subtype."""
import numpy as np
import pytest
import soundfile as sf

from chainrun.audio import formats, writer
from chainrun.audio.formats import output_format
from chainrun.audio.quantise import Quantiser
from chainrun.audio.reader import _Blocks, probe, unpack24
from chainrun.audio.source import Source
from chainrun.errors import AudioError
from chainrun.render import Policy, render_file, scan_file

UNITY = np.array([[1.0, 0.0, 0.0, 1.0, 0.0, 0.0]])


def _source(frames, channels=2, fmt="WAV", subtype="PCM_24"):
    return Source("x.wav", 48000, channels, frames, fmt, subtype, 0, 0)


def test_wav_past_4_gib_becomes_rf64():
    # common practice, no published source: a RIFF chunk size is 32 bits, so a WAV cannot describe
    # more than 4 GiB of data; RF64 is the 64-bit form (EBU Tech 3306, number from memory; verify).
    four_gib_of_pcm24_stereo = (1 << 32) // 6 + 1
    assert output_format(_source(four_gib_of_pcm24_stereo), "same") == ("RF64", "PCM_24")
    assert output_format(_source(60 * 60 * 48000), "same") == ("WAV", "PCM_24")      # one hour: 1 GB
    # the same frames as PCM_16 take 2/3 of the bytes and still fit
    assert output_format(_source(four_gib_of_pcm24_stereo), "PCM_16") == ("WAV", "PCM_16")


def test_rf64_output_is_written_and_reads_back(tmp_path, monkeypatch):
    x = np.linspace(-0.5, 0.5, 4000)
    sf.write(tmp_path / "in.wav", np.column_stack([x, -x]), 48000, subtype="PCM_24")
    monkeypatch.setattr(formats, "RF64_THRESHOLD", 0)       # as if the output passed 4 GiB
    res = render_file(probe(str(tmp_path / "in.wav")), str(tmp_path / "out.wav"), UNITY, 1.0,
                      Policy(dither="none"), "in.wav")
    assert res.status == "ok" and res.out_format == "RF64"
    info = sf.info(tmp_path / "out.wav")
    assert info.format == "RF64" and info.subtype == "PCM_24" and info.channels == 2
    back, _ = sf.read(tmp_path / "out.wav")
    # analytic: a unity chain without dither returns the input codes exactly
    np.testing.assert_array_equal(back, sf.read(tmp_path / "in.wav")[0])


def test_an_aiff_output_past_4_gib_is_refused_before_writing(tmp_path, monkeypatch):
    # common practice, no published source (the AIFF size fields are 32-bit, from memory): an AIFF cannot
    # describe more than 4 GiB of data and has no 64-bit form, so a wider subtype that would pass it is
    # refused with one line, and nothing is written
    four_gib_of_double_stereo = (1 << 32) // 16 + 1
    aiff = Source("x.aiff", 48000, 2, four_gib_of_double_stereo, "AIFF", "PCM_16", 0, 0)
    with pytest.raises(AudioError, match="pass the 4 GiB an AIFF file can describe"):
        output_format(aiff, "DOUBLE")
    assert output_format(aiff, "same") == ("AIFF", "PCM_16")          # a quarter of the bytes: fits
    x = np.zeros((100, 2))
    sf.write(tmp_path / "in.aiff", x, 48000, subtype="PCM_16")
    monkeypatch.setattr(formats, "RF64_THRESHOLD", 0)                   # as if the output passed 4 GiB
    res = render_file(probe(str(tmp_path / "in.aiff")), str(tmp_path / "out.aiff"), UNITY, 1.0,
                      Policy(), "in.aiff")
    assert res.status == "failed" and "\n" not in res.message and "AIFF" in res.message
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in.aiff"]


@pytest.mark.slow
@pytest.mark.parametrize("subtype", ["FLOAT", "DOUBLE"])
def test_float_rf64_output_is_bit_identical_on_a_rerun(tmp_path, monkeypatch, subtype):
    # A float WAV or RF64 carries a PEAK chunk with a time stamp in seconds; libsndfile writes RF64's at
    # open, so chainrun zeroes its time stamp afterwards. Two renders more than a second apart must give
    # the same bytes (README: reruns are bit-identical), and the samples must read back unchanged.
    import time

    x = np.random.default_rng(3).uniform(-0.9, 0.9, (3000, 2))
    sf.write(tmp_path / "in.wav", x, 48000, subtype=subtype)
    monkeypatch.setattr(formats, "RF64_THRESHOLD", 0)       # as if the output passed 4 GiB
    outs = []
    for k in range(2):
        res = render_file(probe(str(tmp_path / "in.wav")), str(tmp_path / f"out{k}.wav"), UNITY, 1.0,
                          Policy(), "in.wav")
        assert res.status == "ok" and res.out_format == "RF64"
        outs.append((tmp_path / f"out{k}.wav").read_bytes())
        time.sleep(1.1)
    assert b"PEAK" in outs[0]                  # the chunk is there (libsndfile writes it for float RF64)
    assert outs[0] == outs[1]
    back, _ = sf.read(tmp_path / "out0.wav")   # soundfile as the reference reader
    np.testing.assert_array_equal(back, sf.read(tmp_path / "in.wav")[0])


@pytest.mark.parametrize("fmt, subtype", [("FLAC", "FLOAT"), ("FLAC", "DOUBLE"), ("FLAC", "PCM_32")])
def test_container_that_cannot_hold_the_subtype(fmt, subtype):
    with pytest.raises(AudioError, match=f"a {fmt} file cannot hold {subtype}"):
        output_format(_source(1000, fmt=fmt, subtype="PCM_16"), subtype)


@pytest.mark.parametrize("subtype", ["same", "PCM_24", "FLOAT"])
def test_lossy_input_cannot_be_written_back_as_it_is(subtype):
    # libsndfile 1.2.2 writes only Vorbis and Opus into Ogg: no output.subtype helps, so none is suggested
    with pytest.raises(AudioError, match=r"chainrun cannot write OGG files \(VORBIS\).*convert the recording to WAV"):
        output_format(_source(1000, fmt="OGG", subtype="VORBIS"), subtype)


def test_an_encoding_not_written_back_names_the_subtypes_its_container_holds():
    with pytest.raises(AudioError, match="ULAW cannot be written back as it is; set output.subtype to one of "
                                         "PCM_16, PCM_24, PCM_32, FLOAT, DOUBLE$"):
        output_format(_source(1000, fmt="WAV", subtype="ULAW"), "same")
    with pytest.raises(AudioError, match="a FLAC file cannot hold FLOAT; set output.subtype to one of PCM_16, PCM_24$"):
        output_format(_source(1000, fmt="FLAC", subtype="PCM_16"), "FLOAT")


# --- 24-bit samples packed by chainrun --------------------------------------------------------------

@pytest.mark.parametrize("dither", [False, True])
@pytest.mark.parametrize("frames, channels", [(1, 1), (3, 3), (1001, 2), (4096, 1), (7, 5)])
def test_packed24_gives_the_three_low_bytes_of_each_code(frames, channels, dither):
    rng = np.random.default_rng(frames * 10 + channels)
    y = rng.uniform(-1.1, 1.1, (channels, frames))                # beyond full scale too: some codes clip
    y[0, 0] = -1.0                                                # the lowest code
    counted = rng.random((channels, frames)) < 0.3                # some already counted by the clip policy
    expected, expected_clipped = Quantiser("PCM_24", dither, seed=9).codes(y, counted)
    # analytic: a 24-bit little-endian sample is the low three bytes of its two's-complement int32, in
    # the order of the samples (numpy's own byte view is the oracle); big-endian is the same three reversed
    little = expected.reshape(-1).astype("<i4").view(np.uint8).reshape(-1, 4)[:, :3]
    n = 3 * expected.size
    for big_endian, want in ((False, little), (True, little[:, ::-1])):
        q = Quantiser("PCM_24", dither, seed=9)
        got = q.packed24(y, counted, big_endian=big_endian, out=np.full(n + 7, 0xAA, dtype=np.uint8))
        assert got[:n].tobytes() == np.ascontiguousarray(want).tobytes()
        assert (got[n:] == 0xAA).all()                            # nothing written past the samples
        assert q.clipped == expected_clipped


def test_packed24_skips_the_range_search_only_when_no_code_can_leave_the_range():
    # the known peak lets the search be skipped; a wrong "peak" would show as a wrapped code, so give
    # the true one and check the count and bytes still match the full search
    y = np.array([[0.5, -0.999, 0.25, 1.0]])
    q1, q2 = Quantiser("PCM_24", False, 0), Quantiser("PCM_24", False, 0)
    a = q1.packed24(y)[:12]
    b = q2.packed24(y, peak=1.0)[:12]
    assert a.tobytes() == b.tobytes() and q1.clipped == q2.clipped == 1     # 1.0 is one above the top code
    assert a[9:12].tobytes() == b"\xff\xff\x7f"                            # the top code, 2**23 - 1


@pytest.mark.parametrize("fmt", sorted(formats._PACKED_24))
@pytest.mark.parametrize("frames, channels", [(1, 1), (1001, 2), (4096, 1), (7, 5)])
@pytest.mark.parametrize("dither", [False, True])
def test_packed_24_bit_output_is_byte_identical_to_libsndfile(tmp_path, fmt, frames, channels, dither):
    # oracle: libsndfile's own conversion, which takes the top 24 bits of int32 data (the path every
    # other subtype still goes through); chainrun packs PCM_24 itself and hands libsndfile raw bytes
    rng = np.random.default_rng(5)
    y = rng.uniform(-1.2, 1.2, (channels, frames))          # beyond full scale too: the codes clip
    y[0, 0] = -1.0
    src = _source(frames, channels, fmt, "PCM_24")
    written = []
    for packed in (True, False):
        path = tmp_path / f"{fmt}-{packed}.bin"
        out = writer._Output(str(path), src, fmt, "PCM_24")
        assert out.packed                                      # this container takes the packed path
        out.packed = packed
        q = Quantiser("PCM_24", dither=dither, seed=0)
        half = frames // 2
        out.put(q, y[:, :half])
        out.put(q, y[:, half:])
        out.close()
        written.append(path.read_bytes())
    assert written[0] == written[1]


@pytest.mark.parametrize("frames, channels", [(1, 1), (3, 3), (1001, 2), (4096, 1), (7, 5)])
def test_unpack24_reads_the_three_bytes_of_each_sample_as_code_over_2_to_the_23(frames, channels):
    rng = np.random.default_rng(frames * 10 + channels + 1)
    codes = rng.integers(-2 ** 23, 2 ** 23, (frames, channels)).astype(np.int32)
    codes[0, 0], codes[-1, -1] = -2 ** 23, 2 ** 23 - 1          # the extreme codes
    # analytic: the bytes are the low three of each little-endian int32 (numpy's byte view is the
    # oracle), and a normalised reading is code / 2**23 (libsndfile's convention, which soundfile uses)
    little = codes.reshape(-1).astype("<i4").view(np.uint8).reshape(-1, 4)[:, :3].reshape(-1)
    padded = np.full(little.size + 5, 0xFF, dtype=np.uint8)     # what follows the samples must not show
    padded[:little.size] = little
    out = np.full((channels, frames + 3), np.nan)
    got = unpack24(padded[:little.size + 1], frames, channels, out)
    np.testing.assert_array_equal(got, codes.T / 2.0 ** 23)
    assert np.isnan(out[:, frames:]).all()                      # nothing written past the frames
    with pytest.raises(ValueError, match="one byte past the last sample"):
        unpack24(padded[:little.size], frames, channels, out)


def _blocks(path, block):
    """Every block _Blocks reads from ``path``, joined, and whether it took the raw path."""
    reader = _Blocks(probe(str(path)), block)
    try:
        parts = [x for _, x, _ in reader]
    finally:
        reader.close()
    return np.concatenate(parts, axis=1), reader.raw


@pytest.mark.parametrize("fmt", sorted(formats._UNPACKED_24))
@pytest.mark.parametrize("frames, channels, block", [(1, 1, 16), (1001, 2, 64), (4096, 1, 4096), (777, 5, 100),
                                                     (5000, 2, 65536)])
def test_raw_24_bit_reading_gives_libsndfile_s_numbers(tmp_path, fmt, frames, channels, block):
    # oracle: libsndfile's own conversion (soundfile.read as float64), which every other input still uses
    rng = np.random.default_rng(frames + channels)
    x = rng.uniform(-1.0, 1.0, (frames, channels))
    x[0, 0], x[-1, -1] = -1.0, 1.0                               # the extreme codes (+1.0 clips to the top one)
    path = tmp_path / f"in.{fmt.lower()}"
    sf.write(path, x, 48000, subtype="PCM_24", format=fmt)
    got, raw = _blocks(path, block)
    assert raw                                                   # this container takes the raw path
    np.testing.assert_array_equal(got, sf.read(path, dtype="float64", always_2d=True)[0].T)


@pytest.mark.parametrize("fmt, subtype, endian", [("WAV", "PCM_24", "BIG"), ("AIFF", "PCM_24", "FILE"),
                                                  ("FLAC", "PCM_24", "FILE"), ("WAV", "PCM_16", "FILE"),
                                                  ("CAF", "PCM_24", "FILE")])
def test_other_inputs_keep_libsndfile_s_reading(tmp_path, fmt, subtype, endian):
    # a big-endian WAV (RIFX) reports itself as WAV, PCM_24: its first bytes send it to libsndfile
    x = np.random.default_rng(3).uniform(-1.0, 1.0, (1001, 2))
    path = tmp_path / f"in.{fmt.lower()}"
    sf.write(path, x, 48000, subtype=subtype, format=fmt, endian=endian)
    got, raw = _blocks(path, 100)
    assert not raw
    np.testing.assert_array_equal(got, sf.read(path, dtype="float64", always_2d=True)[0].T)


def test_packed_path_is_only_for_containers_it_knows(tmp_path):
    # FLAC compresses and CAF is not in the table: both keep libsndfile's own conversion
    for fmt in ("FLAC", "CAF"):
        out = writer._Output(str(tmp_path / f"x.{fmt.lower()}"), _source(10, 1, fmt, "PCM_24"), fmt, "PCM_24")
        assert not out.packed
        out.close()


@pytest.mark.parametrize("subtype, top", [("ULAW", 32124), ("ALAW", 32256)])
def test_companded_inputs_at_their_largest_code_read_as_clipped(tmp_path, subtype, top):
    # ITU-T G.711 (from memory): the largest u-law magnitude is 8031 in 14-bit steps (32124 in 16 bits), the
    # largest A-law 4032 in 13-bit steps (32256); soundfile (reference reader) decodes +-1.0 to exactly that
    path = tmp_path / f"{subtype}.wav"
    sf.write(path, np.array([0.0, 1.0, -1.0, 0.5, 0.25]), 8000, subtype=subtype)
    back, _ = sf.read(path, dtype="int16")
    assert list(back[1:3]) == [top, -top]
    reading = scan_file(probe(str(path))).input_meters.channels[0]
    assert reading.clipped_samples == 2                 # the two samples at the largest code, and no other
