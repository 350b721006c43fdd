"""Output container and subtype decisions: RF64 past 4 GiB, containers that cannot hold a subtype."""
import numpy as np
import pytest
import soundfile as sf

from chainrun import render
from chainrun.render import AudioError, Policy, Source, output_format, probe, render_file

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
    monkeypatch.setattr(render, "RF64_THRESHOLD", 0)       # as if the output passed 4 GiB
    res = render_file(probe(str(tmp_path / "in.wav")), str(tmp_path / "out.wav"), UNITY, 1.0,
                      Policy(dither="none"), "in.wav")
    assert res.status == "ok" and res.out_format == "RF64"
    info = sf.info(tmp_path / "out.wav")
    assert info.format == "RF64" and info.subtype == "PCM_24" and info.channels == 2
    back, _ = sf.read(tmp_path / "out.wav")
    # analytic: a unity chain without dither returns the input codes exactly
    np.testing.assert_array_equal(back, sf.read(tmp_path / "in.wav")[0])


@pytest.mark.parametrize("fmt, subtype", [("FLAC", "FLOAT"), ("FLAC", "DOUBLE"), ("FLAC", "PCM_32")])
def test_container_that_cannot_hold_the_subtype(fmt, subtype):
    with pytest.raises(AudioError, match=f"a {fmt} file cannot hold {subtype}"):
        output_format(_source(1000, fmt=fmt, subtype="PCM_16"), subtype)


def test_lossy_input_cannot_be_written_back_as_it_is():
    with pytest.raises(AudioError, match="cannot be written back as it is; set output.subtype"):
        output_format(_source(1000, fmt="OGG", subtype="VORBIS"), "same")
