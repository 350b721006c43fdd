"""Bad input matrix (issue #4): every bad input gets one located line, nothing is lost or half-written.

Each case puts one bad thing into a small batch beside a good recording and runs ``chainrun run`` on
the folder. What every case must show (the contract in README.md):

* exit status 1, and never a traceback (the ``run_cli`` fixture fails on one);
* exactly one line on stderr that starts with the bad path, and it is the report's own message for
  that file, word for word (``PATH: error: MESSAGE``) — one line, located, in the console and in
  ``chainrun-report.json``;
* nothing under the bad file's output name and no temporary file left in OUTDIR;
* the rest of the batch completes: the good recording is delivered byte for byte as a run of it alone
  delivers it;
* every input is unchanged (sha256 of the input tree before and after).

Recipe-side problems (bad YAML, wrong types, huge orders, include cycles ...) are checked at the
``run`` entry point too: exit 2, one located line, nothing written (OUTDIR is not even created).

The scenario: the Saltings Hour, a community radio programme recorded in a boathouse and on the marsh.
"""
from __future__ import annotations

import io
import os
import re
import struct
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from chainrun.cli import main
from chainrun.fsutil import TEMP_TAG
from chainrun.text import shown
from support import report_of, temporaries

# The marsh chain: wind rumble out, a presence lift. The 5 kHz peak is above Nyquist for an 8 kHz file.
RECIPE = """\
format: 1
name: Saltings Hour marsh chain
chain:
  - {type: highpass, freq: 60, order: 2, label: wind}
  - {type: peak, freq: 5000, gain_db: 2, q: 1, label: presence}
  - {type: gain, gain_db: -3}
"""
GOOD_REL = os.path.join("boathouse", "host_take.wav")


def _good_signal() -> np.ndarray:
    return np.random.default_rng(404).uniform(-0.3, 0.3, (3000, 2))


def wav_bytes(data, rate: int = 48000, subtype: str = "PCM_16", fmt: str = "WAV") -> bytes:
    buf = io.BytesIO()
    sf.write(buf, data, rate, format=fmt, subtype=subtype)
    return buf.getvalue()


def noise(frames: int, channels: int = 1, seed: int = 7) -> np.ndarray:
    return np.random.default_rng(seed).uniform(-0.3, 0.3, (frames, channels))


def canonical_wav(frames: int = 4000) -> bytearray:
    """A PCM_16 mono WAV with the 44-byte canonical header (fmt tag at 20, channels 22, rate 24, data 36)."""
    b = bytearray(wav_bytes(noise(frames)))
    assert b[:4] == b"RIFF" and b[12:16] == b"fmt " and b[36:40] == b"data"     # the layout relied on
    return b


def patched(b: bytearray, offset: int, fmt: str, value: int) -> bytes:
    c = bytearray(b)
    c[offset:offset + struct.calcsize(fmt)] = struct.pack(fmt, value)
    return bytes(c)


@pytest.fixture(scope="module")
def reference(tmp_path_factory) -> bytes:
    """The good recording rendered alone: what it must be whatever else is in the batch."""
    d = tmp_path_factory.mktemp("reference")
    (d / "in" / "boathouse").mkdir(parents=True)
    sf.write(str(d / "in" / GOOD_REL), _good_signal(), 48000, subtype="PCM_24")
    (d / "r.yaml").write_text(RECIPE)
    import contextlib

    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
        assert main(["run", str(d / "r.yaml"), str(d / "in"), "-o", str(d / "out"), "--workers", "1"]) == 0
    return (d / "out" / GOOD_REL).read_bytes()


# =========================================================================== the case harness


@dataclass
class Case:
    path: str                    # the bad input as chainrun names it (str, may hold surrogate escapes)
    rel: str                     # its relpath in the report (before shown())
    words: tuple[str, ...]       # the message must contain each of these
    any_words: tuple[str, ...] = ()   # ... and at least one of these
    status: str = "failed"
    args: list = field(default_factory=list)          # extra inputs on the command line
    options: list = field(default_factory=list)       # extra options
    during: object = None        # callable(outdir) run in a thread alongside the batch
    changed_by_test: dict = field(default_factory=dict)   # rel -> new sha256, for inputs the test changes
    permissions: bool = False    # run with permission bits enforced (also for root)
    output_expected_absent: bool = True


class Ctx:
    def __init__(self, tmp: Path):
        self.tmp, self.inp, self.out = tmp, tmp / "in", tmp / "out"
        self.marsh = self.inp / "marsh"
        self.marsh.mkdir(parents=True)

    def put(self, name: str, data: bytes) -> str:
        p = self.marsh / name
        p.write_bytes(data)
        return str(p)

    def audio(self, name: str, data, rate=48000, subtype="PCM_16", fmt=None) -> str:
        p = self.marsh / name
        sf.write(str(p), data, rate, subtype=subtype, format=fmt)
        return str(p)


CASES: dict[str, object] = {}


def case(fn):
    CASES[fn.__name__] = fn
    return fn


def rel(path: str, ctx: Ctx) -> str:
    return os.path.relpath(path, ctx.inp)


# --- damaged and empty files -------------------------------------------------------------------------

@case
def zero_byte_file(ctx):
    p = ctx.put("dawn_chorus.wav", b"")
    return Case(p, rel(p, ctx), ("not readable as audio",))


@case
def header_cut_short(ctx):
    p = ctx.put("tide_turn.wav", bytes(canonical_wav()[:30]))
    return Case(p, rel(p, ctx), ("not readable as audio",))


@case
def header_without_any_data(ctx):
    p = ctx.put("curlew.wav", bytes(canonical_wav()[:44]))      # declares 8000 bytes, holds none: a copy cut short
    return Case(p, rel(p, ctx), ("cut short", "declares 8000 bytes", "holds 0", "0 of 4000 frames"))


@case
def data_chunk_cut_short(ctx):
    p = ctx.put("mudflat.wav", bytes(canonical_wav()[:44 + 101]))   # a copy that stopped after 101 bytes
    return Case(p, rel(p, ctx), ("cut short", "declares 8000 bytes", "holds 101", "50 of 4000 frames"))


@case
def header_declares_more_data_than_exists(ctx):
    p = ctx.put("reedbed.wav", patched(canonical_wav(), 40, "<I", 1_000_000))
    return Case(p, rel(p, ctx), ("cut short", "declares 1000000 bytes", "holds 8000"))


@case
def aiff_sound_chunk_cut_short(ctx):
    b = wav_bytes(noise(4000), fmt="AIFF")
    p = ctx.put("sluice.aiff", b[: len(b) // 2])
    return Case(p, rel(p, ctx), ("cut short", "declares 8008 bytes"))


@case
def au_data_cut_short(ctx):
    b = wav_bytes(noise(4000), fmt="AU")
    p = ctx.put("foghorn.au", b[: len(b) // 2])
    return Case(p, rel(p, ctx), ("cut short", "declares 8000 bytes"))


@case
def rf64_cut_short(ctx):
    b = wav_bytes(noise(4000), fmt="RF64")
    p = ctx.put("long_take.wav", b[: len(b) // 2])
    return Case(p, rel(p, ctx), ("cut short", "ds64"))


@case
def wavex_24bit_cut_short(ctx):
    b = wav_bytes(noise(4000, 2), subtype="PCM_24", fmt="WAVEX")
    p = ctx.put("stereo_pair.wav", b[: len(b) // 2])
    return Case(p, rel(p, ctx), ("cut short", "declares 24000 bytes"))


@case
def flac_stream_cut_short(ctx):
    b = wav_bytes(noise(40_000, 2), fmt="FLAC")
    p = ctx.put("reed_warbler.flac", b[: len(b) // 2])     # the frame count is in STREAMINFO; the decoder finds out
    return Case(p, rel(p, ctx), ("not readable as audio",))


# --- not audio at all, or not an encoding chainrun can deliver ------------------------------------

@case
def text_file_named_wav(ctx):
    p = ctx.put("running_order.wav", b"01 intro - boathouse\n02 marsh walk\n" * 20)
    return Case(p, rel(p, ctx), ("not readable as audio",))


@case
def picture_named_wav(ctx):
    p = ctx.put("cover.wav", b"\x89PNG\r\n\x1a\n" + bytes(range(256)) * 4)
    return Case(p, rel(p, ctx), ("not readable as audio",))


@case
def riff_magic_without_extension(ctx):
    p = ctx.put("take_untitled", b"RIFF\x10\x00\x00\x00WAVEjunk" + bytes(200))     # found by content
    return Case(p, rel(p, ctx), ("not readable as audio",))


@case
def unknown_format_tag(ctx):
    p = ctx.put("recorder_x.wav", patched(canonical_wav(), 20, "<H", 0x1234))
    return Case(p, rel(p, ctx), ("not readable as audio",))


@case
def zero_channels_in_header(ctx):
    p = ctx.put("no_channels.wav", patched(canonical_wav(), 22, "<H", 0))
    return Case(p, rel(p, ctx), ("not readable as audio", "channel count is zero"))


@case
def absurd_channel_count_in_header(ctx):
    p = ctx.put("many_channels.wav", patched(canonical_wav(), 22, "<H", 65535))
    return Case(p, rel(p, ctx), ("not readable as audio", "too many channels"))


@case
def zero_sample_rate_in_header(ctx):
    p = ctx.put("no_rate.wav", patched(canonical_wav(), 24, "<I", 0))
    return Case(p, rel(p, ctx), ("not readable as audio",))


@case
def ulaw_cannot_be_written_back_as_same(ctx):
    p = ctx.audio("phone_in.wav", noise(4000), subtype="ULAW")
    return Case(p, rel(p, ctx), ("encoding ULAW cannot be written back", "output.subtype"))


@case
def ima_adpcm_cannot_be_written_back_as_same(ctx):
    p = ctx.audio("old_recorder.wav", noise(4000), subtype="IMA_ADPCM")
    return Case(p, rel(p, ctx), ("encoding IMA_ADPCM cannot be written back", "output.subtype"))


@case
def lossy_vorbis_cannot_be_written_back_as_same(ctx):
    if "VORBIS" not in sf.available_subtypes("OGG"):            # pragma: no cover - depends on libsndfile
        pytest.skip("this libsndfile cannot write Ogg Vorbis test files")
    p = ctx.audio("stream_rip.ogg", noise(4000), fmt="OGG", subtype="VORBIS")
    return Case(p, rel(p, ctx), ("cannot write OGG files (VORBIS)", "convert the recording to WAV"))


# --- samples that must not be passed on, rates the recipe cannot serve ----------------------------

@case
def nan_in_a_float_file(ctx):
    x = noise(4000)
    x[1234, 0] = np.nan
    p = ctx.audio("glitch.wav", x, subtype="FLOAT")
    return Case(p, rel(p, ctx), ("sample 1234 of channel 1 is nan", "does not pass NaN or Inf on"))


@case
def inf_in_a_double_file_in_a_later_block(ctx):
    x = noise(80_000, 2)
    x[70_000, 1] = -np.inf                   # past the first 65536-frame block, second channel
    p = ctx.audio("spike.wav", x, subtype="DOUBLE")
    return Case(p, rel(p, ctx), ("sample 70000 of channel 2 is -inf",))


@case
def section_above_nyquist_for_an_8khz_file(ctx):
    p = ctx.audio("phone_line.wav", noise(4000), rate=8000)
    # design: the 5 kHz peak of RECIPE is above the 4 kHz Nyquist frequency of an 8 kHz file
    return Case(p, rel(p, ctx), ("cannot be used at 8000 Hz", "recipe.yaml:5:", "chain[1].freq 5000 Hz",
                                 "at or above Nyquist (4000 Hz)"), status="rejected")


@case
def header_claiming_a_rate_of_1_hz(ctx):
    p = ctx.put("slow.wav", patched(canonical_wav(), 24, "<I", 1))
    return Case(p, rel(p, ctx), ("cannot be used at 1 Hz", "Nyquist (0.5 Hz)"), status="rejected")


# --- permissions, links, special files --------------------------------------------------------------

@case
def unreadable_file(ctx):
    p = ctx.audio("private_interview.wav", noise(4000))
    os.chmod(p, 0)
    return Case(p, rel(p, ctx), ("cannot read: permission denied",), permissions=True)


@case
def folder_that_cannot_be_searched(ctx):
    d = ctx.marsh / "locked"
    d.mkdir()
    sf.write(str(d / "inside.wav"), noise(4000), 48000, subtype="PCM_16")
    os.chmod(d, 0)
    return Case(str(d), rel(str(d), ctx), ("folder cannot be listed: permission denied",
                                           "files in it were not rendered"), permissions=True)


@case
def folder_that_can_be_entered_but_not_listed(ctx):
    d = ctx.marsh / "drop_box"
    d.mkdir()
    sf.write(str(d / "inside.wav"), noise(4000), 48000, subtype="PCM_16")
    os.chmod(d, 0o111)
    return Case(str(d), rel(str(d), ctx), ("folder cannot be listed: permission denied",), permissions=True)


@case
def file_link_that_loops_to_itself(ctx):
    p = ctx.marsh / "loop.wav"
    os.symlink("loop.wav", p)
    return Case(str(p), rel(str(p), ctx), ("cannot be read", "too many levels of symbolic links"))


@case
def broken_link(ctx):
    p = ctx.marsh / "on_the_other_card.wav"
    os.symlink("/nonexistent/card/take.wav", p)
    return Case(str(p), rel(str(p), ctx), ("a link to nothing", "broken symbolic link"))


@case
def pipe_named_on_the_command_line(ctx):
    p = ctx.tmp / "live_feed.wav"
    os.mkfifo(p)                 # opening it to read would wait for a writer for ever
    return Case(str(p), "live_feed.wav", ("not a regular file",), args=[str(p)])


# --- names ---------------------------------------------------------------------------------------------

@case
def name_that_is_not_utf8(ctx):
    raw = os.fsencode(str(ctx.marsh)) + b"/m\xe9t\xe9o_radio.wav"       # Latin-1 bytes, as an old card writes
    with open(raw, "wb") as fh:
        fh.write(b"not audio in a Latin-1 name\n" * 4)
    p = os.fsdecode(raw)
    return Case(p, rel(p, ctx), ("not readable as audio",))


@case
def name_with_a_newline(ctx):
    p = ctx.put("two\nlines.wav", b"a text file with a newline in its name\n" * 4)
    return Case(p, rel(p, ctx), ("not readable as audio",))


@case
def name_with_a_terminal_escape(ctx):
    p = ctx.put("red\x1b[31mtake.wav", b"a text file with an escape sequence in its name\n" * 4)
    return Case(p, rel(p, ctx), ("not readable as audio",))


@case
def two_inputs_with_the_same_output_name(ctx):
    other = ctx.tmp / "card_b" / "boathouse_take.wav"
    other.parent.mkdir()
    sf.write(str(other), noise(2000, seed=2), 48000, subtype="PCM_16")
    first = ctx.tmp / "card_a" / "boathouse_take.wav"
    first.parent.mkdir()
    sf.write(str(first), noise(2000, seed=3), 48000, subtype="PCM_16")
    # both land at OUTDIR/boathouse_take.wav: the first named is rendered, the second refused
    return Case(str(other), "boathouse_take.wav", ("collides with that of", "rename one of them"),
                args=[str(first), str(other)], output_expected_absent=False)


@case
def folder_already_at_the_output_name(ctx):
    p = ctx.audio("heron.wav", noise(2000))
    (ctx.out / "marsh" / "heron.wav" / "notes").mkdir(parents=True)
    return Case(p, rel(p, ctx), ("a folder already has its output name",), output_expected_absent=False)


# --- inputs that change while chainrun reads them ------------------------------------------------


def _when_rendering(outdir: Path, name: str, action, timeout: float = 30.0):
    """Wait (in a thread) until the temporary output of ``name`` appears, then do ``action``."""
    def watch():
        t0 = time.monotonic()
        while time.monotonic() - t0 < timeout:
            for root, _, files in os.walk(outdir):
                if any(f.startswith(f".{name}{TEMP_TAG}") for f in files):
                    action()
                    return
            time.sleep(0.0005)
    return watch


@case
def input_growing_while_read(ctx):
    p = ctx.audio("growing.wav", noise(60_000, 2))
    appended = b"\x01\x02" * 5000

    def grow():
        with open(p, "ab") as fh:            # another program still writing the recording
            fh.write(appended)

    import hashlib

    after = hashlib.sha256(Path(p).read_bytes() + appended).hexdigest()
    return Case(p, rel(p, ctx), ("changed while being read", "nothing was delivered"),
                options=["--block-size", "16"], during=_when_rendering(ctx.out, "growing.wav", grow),
                changed_by_test={rel(p, ctx): after})


@case
def input_shrinking_while_read(ctx):
    p = ctx.audio("shrinking.wav", noise(60_000, 2))
    size = os.path.getsize(p)

    def shrink():
        os.truncate(p, size // 3)

    import hashlib

    after = hashlib.sha256(Path(p).read_bytes()[: size // 3]).hexdigest()
    # either, depending on when the reader notices: the frames run out, or the size differs at the end
    return Case(p, rel(p, ctx), (), any_words=("ended early", "changed while being read"),
                options=["--block-size", "16"], during=_when_rendering(ctx.out, "shrinking.wav", shrink),
                changed_by_test={rel(p, ctx): after})


@case
def input_deleted_while_read(ctx):
    p = ctx.audio("withdrawn.wav", noise(60_000, 2))
    return Case(p, rel(p, ctx), ("disappeared while being read",), options=["--block-size", "16"],
                during=_when_rendering(ctx.out, "withdrawn.wav", lambda: os.unlink(p)),
                changed_by_test={rel(p, ctx): None})



# =========================================================================== the matrix


@pytest.mark.parametrize("name", list(CASES))
def test_bad_input_gets_one_located_line_and_the_batch_completes(name, tmp_path, run_cli, reference,
                                                                 tree_hashes, permissions_apply):
    ctx = Ctx(tmp_path)
    (ctx.inp / "boathouse").mkdir()
    sf.write(str(ctx.inp / GOOD_REL), _good_signal(), 48000, subtype="PCM_24")
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text(RECIPE)
    c: Case = CASES[name](ctx)
    before = tree_hashes(ctx.inp)
    argv = ["run", recipe, ctx.inp, *c.args, "-o", ctx.out, "--workers", "1", *c.options]
    watcher = threading.Thread(target=c.during, args=(), daemon=True) if c.during else None
    try:
        if watcher:
            watcher.start()
        if c.permissions:
            with permissions_apply():
                status, stdout, err = run_cli(*argv)
        else:
            status, stdout, err = run_cli(*argv)
    finally:
        if watcher:
            watcher.join(timeout=60)
        for root, dirs, _ in os.walk(ctx.inp):        # give the tmp_path cleanup its rights back
            for d in dirs:
                os.chmod(os.path.join(root, d), 0o755)
        for p in Path(ctx.marsh).rglob("*"):
            if not p.is_symlink() and p.is_file():
                os.chmod(p, 0o644)

    assert status == 1, err                              # README.md 'Commands': 1 when any file is not ok
    report = report_of(ctx.out)
    entries = [f for f in report["files"] if f["input"] == shown(c.path)]
    assert len(entries) == 1, [f["input"] for f in report["files"]]
    (entry,) = entries
    assert entry["relpath"] == shown(c.rel)
    assert entry["status"] == c.status, entry
    message = entry["message"]
    assert message and "\n" not in message and "Traceback" not in message
    for w in c.words:
        assert w.lower() in message.lower(), (w, message)
    if c.any_words:
        assert any(w in message for w in c.any_words), message
    # one line on stderr for it, located (it starts with the path), and the report's message word for word
    mine = [ln for ln in err.splitlines() if ln.startswith(shown(c.path) + ":")]
    word = {"failed": "error", "rejected": "rejected"}[c.status]
    assert mine == [f"{shown(c.path)}: {word}: {message}"], err
    assert all(ln.strip() for ln in err.splitlines())                   # no blank or broken lines
    # nothing delivered for it, no temporary file anywhere
    assert entry["output"] is None
    if c.output_expected_absent:
        assert not os.path.lexists(ctx.out / c.rel)
    assert temporaries(ctx.out) == []
    # the rest of the batch completed: the good take is exactly as a run of it alone delivers it
    good = [f for f in report["files"] if f["relpath"] == GOOD_REL]
    assert good and good[0]["status"] == "ok"
    assert (ctx.out / GOOD_REL).read_bytes() == reference
    # inputs never modified (except by the test itself, for the cases that change an input on purpose)
    after = tree_hashes(ctx.inp)
    expected = dict(before)
    for r, h in c.changed_by_test.items():
        if h is None:
            expected.pop(r)
        else:
            expected[r] = h
    assert after == expected


def test_the_matrix_has_at_least_30_cases():
    assert len(CASES) >= 30, len(CASES)


# =========================================================================== harmless oddities: exit 0, a note


def _batch(tmp_path):
    ctx = Ctx(tmp_path)
    (ctx.inp / "boathouse").mkdir()
    sf.write(str(ctx.inp / GOOD_REL), _good_signal(), 48000, subtype="PCM_24")
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text(RECIPE)
    return ctx, recipe


def test_a_file_named_twice_is_rendered_once_with_a_note(tmp_path, run_cli, reference, tree_hashes):
    ctx, recipe = _batch(tmp_path)
    good = str(ctx.inp / GOOD_REL)
    before = tree_hashes(ctx.inp)
    status, _, err = run_cli("run", recipe, ctx.inp, good, "-o", ctx.out, "--workers", "1")
    assert status == 0, err              # nothing is lost: README, "skipped (not audio, named twice)"
    (note,) = [ln for ln in err.splitlines() if ln.startswith(good + ":")]
    assert note == f"{good}: note: skipped: the same file as {good}; rendered once"
    assert (ctx.out / GOOD_REL).read_bytes() == reference
    assert (ctx.out / "host_take.wav").exists() is False        # not a second copy at the top
    assert tree_hashes(ctx.inp) == before


def test_a_zero_frame_false_start_is_skipped_with_a_note(tmp_path, run_cli, reference, tree_hashes):
    ctx, recipe = _batch(tmp_path)
    empty = ctx.audio("empty_take.wav", np.zeros((0, 1)))       # a header declaring no audio, and none there
    before = tree_hashes(ctx.inp)
    status, _, err = run_cli("run", recipe, ctx.inp, "-o", ctx.out, "--workers", "1")
    assert status == 0, err              # README 'Output and reports': a skipped file is not a failure
    (note,) = [ln for ln in err.splitlines() if ln.startswith(empty + ":")]
    entry = [f for f in report_of(ctx.out)["files"] if f["input"] == empty][0]
    assert entry["status"] == "skipped" and "no audio frames" in entry["message"]
    assert note == f"{empty}: note: skipped: {entry['message']}"
    assert not os.path.lexists(ctx.out / "marsh" / "empty_take.wav") and temporaries(ctx.out) == []
    assert (ctx.out / GOOD_REL).read_bytes() == reference
    assert tree_hashes(ctx.inp) == before


def test_a_folder_link_loop_is_searched_once_with_a_note(tmp_path, run_cli, reference, tree_hashes):
    ctx, recipe = _batch(tmp_path)
    os.symlink("..", ctx.inp / "boathouse" / "back_up")          # boathouse/back_up -> in/
    before = tree_hashes(ctx.inp)
    status, _, err = run_cli("run", recipe, ctx.inp, "-o", ctx.out, "--workers", "1")
    assert status == 0, err
    loop = str(ctx.inp / "boathouse" / "back_up")
    (note,) = [ln for ln in err.splitlines() if ln.startswith(loop + ":")]
    assert "symbolic link loop" in note and "note: skipped" in note
    entry = [f for f in report_of(ctx.out)["files"] if f["relpath"] == "boathouse/back_up"][0]
    assert entry["status"] == "skipped" and note.endswith(entry["message"])
    assert (ctx.out / GOOD_REL).read_bytes() == reference
    assert sorted(p.relative_to(ctx.out).as_posix() for p in ctx.out.rglob("*.wav")) == [GOOD_REL]
    assert tree_hashes(ctx.inp) == before


def test_a_folder_named_like_a_wav_file_is_searched(tmp_path, run_cli, reference, tree_hashes):
    ctx, recipe = _batch(tmp_path)
    folder = ctx.marsh / "session.wav"                 # a folder, whatever its name says
    folder.mkdir()
    sf.write(str(folder / "take1.wav"), noise(3000), 48000, subtype="PCM_16")
    before = tree_hashes(ctx.inp)
    status, _, err = run_cli("run", recipe, ctx.inp, "-o", ctx.out, "--workers", "1")
    assert status == 0, err
    assert (ctx.out / "marsh" / "session.wav").is_dir()
    assert sf.info(str(ctx.out / "marsh" / "session.wav" / "take1.wav")).frames == 3000
    assert (ctx.out / GOOD_REL).read_bytes() == reference
    assert tree_hashes(ctx.inp) == before


def test_a_folder_named_like_a_wav_file_on_the_command_line(tmp_path, run_cli):
    ctx, recipe = _batch(tmp_path)
    folder = ctx.tmp / "card.wav"
    folder.mkdir()
    sf.write(str(folder / "take1.wav"), noise(3000), 48000, subtype="PCM_16")
    status, _, err = run_cli("run", recipe, folder, "-o", ctx.out, "--workers", "1")
    assert status == 0, err
    assert (ctx.out / "take1.wav").is_file()          # a folder argument's files keep their path inside it


# =========================================================================== recipe side, at `run`

GAIN = "  - {type: gain, gain_db: -1}\n"

# (id, {file: text or bytes}, file the error is in, line, column marker, message part)
RECIPE_CASES = [
    ("bad YAML", {"r.yaml": "format: 1\nchain: [ {type: gain, gain_db: -1}\n"}, "r.yaml", 3, None, "invalid YAML"),
    ("tab indentation", {"r.yaml": "format: 1\nchain:\n\t- {type: gain, gain_db: -1}\n"}, "r.yaml", 3, None,
     "invalid YAML"),
    ("wrong type for freq", {"r.yaml": "format: 1\nchain:\n  - {type: highpass, freq: high}\n"}, "r.yaml", 3,
     "high}", "must be a number"),
    ("list for guard", {"r.yaml": "format: 1\nchain:\n" + GAIN + "guard: [1, 2]\n"}, "r.yaml", 4, "[",
     "guard must be a mapping"),
    ("huge order", {"r.yaml": "format: 1\nchain:\n  - {type: lowpass, freq: 9000, order: 1000}\n"}, "r.yaml", 3,
     "1000", "order 1000 is out of range; allowed: 1 to 8"),
    ("raw iir of order 40", {"r.yaml": "format: 1\nchain:\n  - {type: iir, b: [1], a: [" + ", ".join(["0.01"] * 41)
                             + "]}\n"}, "r.yaml", 3, "[0.01", "coefficients; allowed: 1 to 9"),
    ("include cycle", {"r.yaml": "format: 1\ninclude: house.yaml\nchain:\n" + GAIN,
                       "house.yaml": "format: 1\ninclude: r.yaml\nchain:\n" + GAIN}, "house.yaml", 2, "r.yaml",
     "include cycle"),
    ("include of itself", {"r.yaml": "format: 1\ninclude: r.yaml\nchain:\n" + GAIN}, "r.yaml", 2, "r.yaml",
     "include cycle"),
    ("python object tag", {"r.yaml": "format: 1\nchain:\n  - !!python/object/apply:os.system ['true']\n"},
     "r.yaml", 3, "!!python", "tags are not allowed"),
    ("not UTF-8", {"r.yaml": b"format: 1\nname: m\xe9t\xe9o\nchain:\n" + GAIN.encode()}, "r.yaml", 2, "\xe9",
     "not UTF-8"),
    ("65 sections", {"r.yaml": "format: 1\nchain:\n" + GAIN * 65}, "r.yaml", 67, "{", "more than 64 sections"),
    ("unstable raw iir", {"r.yaml": "format: 1\nchain:\n  - {type: iir, b: [1], a: [1, -1.01]}\n"}, "r.yaml", 3,
     "[1, -1.01]", "unstable"),
    ("empty file", {"r.yaml": ""}, "r.yaml", 1, None, "the recipe is empty"),
    ("iir coefficients beyond range", {"r.yaml": "format: 1\nchain:\n  - {type: iir, b: [1e12], a: [1]}\n"},
     "r.yaml", 3, "[1e12]", "allowed: up to 1e+09 times a[0]"),
    ("frequency too low to design", {"r.yaml": "format: 1\nchain:\n  - {type: highpass, freq: 1e-300}\n"},
     "r.yaml", 3, "1e-300", "too low to design"),
    ("rejected at every rate", {"r.yaml": "format: 1\nchain:\n  - {type: gain, gain_db: 30}\n"}, "r.yaml", 3,
     "{", "max_gain_db 24 dB"),
]


@pytest.mark.parametrize("files, err_file, line, marker, part", [c[1:] for c in RECIPE_CASES],
                         ids=[c[0] for c in RECIPE_CASES])
def test_recipe_problems_at_run_exit_2_and_nothing_is_written(tmp_path, run_cli, tree_hashes, files, err_file,
                                                               line, marker, part):
    rdir = tmp_path / "recipes"
    rdir.mkdir()
    for name, text in files.items():
        (rdir / name).write_bytes(text if isinstance(text, bytes) else text.encode())
    src = tmp_path / "in"
    src.mkdir()
    sf.write(str(src / "take.wav"), noise(2000), 48000, subtype="PCM_16")
    before = tree_hashes(tmp_path)
    out = tmp_path / "out"
    status, stdout, err = run_cli("run", rdir / "r.yaml", src, "-o", out, "--workers", "1")
    assert status == 2, err                              # README.md 'Commands': 2 usage or recipe rejected
    lines = err.splitlines()
    assert len(lines) == 1, err
    m = re.match(r"^(?P<path>.+?):(?P<line>\d+):(?P<col>\d+): error: (?P<msg>.+)$", lines[0])
    assert m, lines[0]
    assert os.path.basename(m["path"]) == err_file and int(m["line"]) == line, lines[0]
    if marker is not None:
        text = files[err_file]
        text = text.decode("utf-8", "replace") if isinstance(text, bytes) else text
        # the column is the first character of the marker on that line (worked out from the text itself)
        assert int(m["col"]) == text.splitlines()[line - 1].replace("\ufffd", "\xe9").index(marker) + 1, lines[0]
    assert part in m["msg"], lines[0]
    assert "no audio was touched" in lines[0]
    assert not out.exists()                              # nothing written, not even OUTDIR
    assert stdout == ""
    assert tree_hashes(tmp_path) == before


def test_a_recipe_that_is_a_pipe_does_not_hang(tmp_path, run_cli):
    fifo = tmp_path / "recipe.yaml"
    os.mkfifo(fifo)                                      # reading it would wait for a writer for ever
    src = tmp_path / "in"
    src.mkdir()
    sf.write(str(src / "take.wav"), noise(2000), 48000, subtype="PCM_16")
    status, _, err = run_cli("run", fifo, src, "-o", tmp_path / "out")
    assert status == 2 and len(err.splitlines()) == 1
    assert err.startswith(f"{fifo}:1:1: error:") and "not a regular file" in err
    assert not (tmp_path / "out").exists()


def test_an_include_that_is_a_pipe_does_not_hang(tmp_path, run_cli):
    os.mkfifo(tmp_path / "house.yaml")
    recipe = tmp_path / "r.yaml"
    recipe.write_text("format: 1\ninclude: house.yaml\nchain:\n" + GAIN)
    status, _, err = run_cli("check", recipe)
    assert status == 1 and f"{recipe}:2:10: error:" in err and "not a regular file" in err
