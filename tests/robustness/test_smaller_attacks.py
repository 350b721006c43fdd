"""The smaller attacks of issue 19, item 11: includes that leave the recipe's folder or loop, a
hand-edited journal, odd AIFF rates, float extremes, long paths, unwritable containers, huge names.

The expectations are chainrun's own contract (README, RELIABILITY.md): bad input gets one located,
human line; nothing is lost; no internal error, traceback or warning spam.
"""
from __future__ import annotations

import os
import re

import pytest

from chainrun.recipe import RecipeError, load, loads

GAIN = "  - {type: gain, gain_db: -1}\n"


# =========================================================================== includes (f, g)

def _outside(tmp_path):
    """shows/marsh/dawn.yaml including ../../secret.yaml, a YAML file outside the recipe's folder."""
    (tmp_path / "shows" / "marsh").mkdir(parents=True)
    secret = tmp_path / "secret.yaml"
    secret.write_text("format: 1\nname: SECRET-VALUE-7f3a\nchain: SECRET-LINE-9c1e\n")
    top = tmp_path / "shows" / "marsh" / "dawn.yaml"
    top.write_text("format: 1\ninclude: ../../secret.yaml\nchain:\n" + GAIN)
    return top, secret


def test_an_include_outside_the_recipes_folder_is_refused_without_reading_it(tmp_path, run_cli):
    top, secret = _outside(tmp_path)
    with pytest.raises(RecipeError) as info:
        load(top)
    msg = str(info.value)
    # one located line at the include's value, naming the key and where it points; nothing of the target
    assert (info.value.line, info.value.col) == (2, 10) and "\n" not in msg
    assert "include '../../secret.yaml' points outside" in msg and str(secret) in msg
    assert "SECRET" not in msg
    status, out, err = run_cli("check", top)
    assert status == 1 and "points outside" in err and "SECRET" not in out + err
    # the user may allow it: then the target is read like any include (and its own error shows)
    status, out, err = run_cli("check", "--allow-outside-includes", top)
    assert status == 1 and f"{secret}:3:8: error" in err
    with pytest.raises(RecipeError, match=re.escape(f"{secret}:3:8")):
        load(top, allow_outside_includes=True)


def test_an_include_through_a_link_out_of_the_folder_is_refused(tmp_path):
    (tmp_path / "house").mkdir()
    (tmp_path / "house" / "eq.yaml").write_text("format: 1\nchain:\n" + GAIN)
    (tmp_path / "show").mkdir()
    os.symlink("../house", tmp_path / "show" / "house")          # a link inside the folder, pointing out of it
    top = tmp_path / "show" / "r.yaml"
    top.write_text("format: 1\ninclude: house/eq.yaml\nchain:\n" + GAIN)
    with pytest.raises(RecipeError, match="points outside"):
        load(top)
    assert len(load(top, allow_outside_includes=True).sections) == 2


def test_includes_inside_the_top_recipes_folder_still_load(tmp_path, repo_root):
    # an included file may include a sibling folder's file, as long as it stays under the top recipe's folder
    (tmp_path / "house" / "marsh").mkdir(parents=True)
    (tmp_path / "house" / "base.yaml").write_text("format: 1\nchain:\n" + GAIN)
    (tmp_path / "house" / "marsh" / "eq.yaml").write_text("format: 1\ninclude: ../base.yaml\nchain:\n" + GAIN)
    top = tmp_path / "r.yaml"
    top.write_text("format: 1\ninclude: house/marsh/eq.yaml\nchain:\n" + GAIN)
    assert len(load(top).sections) == 3
    assert len(load(repo_root / "recipes" / "boathouse-stems.yaml").sections) == 7       # the bundled include


def test_loads_keeps_includes_inside_the_working_folder(tmp_path, monkeypatch):
    (tmp_path / "w").mkdir()
    (tmp_path / "house.yaml").write_text("format: 1\nchain:\n" + GAIN)
    monkeypatch.chdir(tmp_path / "w")
    text = "format: 1\ninclude: ../house.yaml\nchain:\n" + GAIN
    with pytest.raises(RecipeError, match="points outside"):
        loads(text)
    assert len(loads(text, allow_outside_includes=True).sections) == 2


def test_plot_and_run_refuse_an_outside_include_unless_allowed(tmp_path, run_cli, write_audio):
    top, _ = _outside(tmp_path)
    ok = tmp_path / "shows" / "marsh" / "ok.yaml"
    ok.write_text("format: 1\ninclude: ../../house.yaml\nchain:\n" + GAIN)
    (tmp_path / "house.yaml").write_text("format: 1\nchain:\n" + GAIN)
    src = write_audio("in/a.wav", [[0.1, -0.1]] * 64)
    status, _, err = run_cli("plot", ok, "-o", tmp_path / "p.svg")
    assert status == 2 and "points outside" in err and len(err.splitlines()) == 1
    status, _, err = run_cli("run", ok, src, "-o", tmp_path / "out")
    assert status == 2 and "points outside" in err and len(err.splitlines()) == 1
    assert not (tmp_path / "out").exists()
    status, _, err = run_cli("plot", "--allow-outside-includes", ok, "-o", tmp_path / "p.svg")
    assert status == 0 and (tmp_path / "p.svg").exists()
    status, _, err = run_cli("run", "--allow-outside-includes", "-q", ok, src, "-o", tmp_path / "out")
    assert status == 0, err


def test_a_symlink_loop_include_is_called_a_loop(tmp_path, run_cli):
    os.symlink("b.yaml", tmp_path / "a.yaml")
    os.symlink("a.yaml", tmp_path / "b.yaml")
    top = tmp_path / "r.yaml"
    top.write_text("format: 1\ninclude: a.yaml\nchain:\n" + GAIN)
    with pytest.raises(RecipeError) as info:
        load(top)
    # ELOOP (POSIX: too many levels of symbolic links) is not "does not exist"
    assert (info.value.line, info.value.col) == (2, 10) and "symbolic link loop" in str(info.value)
    assert "does not exist" not in str(info.value) and "\n" not in str(info.value)
    status, _, err = run_cli("check", top)
    assert status == 1 and "symbolic link loop" in err and len(err.splitlines()) == 1


# =========================================================================== a hand-edited journal (a)

JOURNAL_EDITS = {
    "seconds as text": (lambda d: d["result"].__setitem__("seconds", "fast"), "entry.result.seconds is text"),
    "a status nobody writes": (lambda d: d["result"].__setitem__("status", 3), "entry.result.status is 3"),
    "a peak as text": (lambda d: d["result"]["output_meters"]["channels"][0].__setitem__("true_peak", "loud"),
                       "entry.result.output_meters.channels[0].true_peak is text"),
    "a metadata note as a number": (lambda d: d["result"]["metadata"].__setitem__("notes", [7]),
                                    "entry.result.metadata.notes[0] is an integer"),
    "relpath as a list": (lambda d: d.__setitem__("relpath", ["a.wav"]), "entry.relpath is a list"),
}


@pytest.mark.parametrize("edit", JOURNAL_EDITS, ids=list(JOURNAL_EDITS))
def test_a_hand_edited_journal_line_is_ignored_with_a_located_warning(tmp_path, run_cli, write_audio, edit):
    import json

    import numpy as np

    from chainrun.batch.outdir import JOURNAL_NAME

    rng = np.random.default_rng(3)
    for name in ("a.wav", "b.wav"):
        write_audio(f"in/{name}", rng.uniform(-0.3, 0.3, (4800, 2)), subtype="PCM_24")
    recipe = tmp_path / "r.yaml"
    recipe.write_text("format: 1\nchain:\n" + GAIN)
    out = tmp_path / "out"
    status, _, err = run_cli("run", "-q", "--workers", "1", recipe, tmp_path / "in", "-o", out)
    assert status == 0, err
    journal = out / JOURNAL_NAME
    entries = [json.loads(line) for line in journal.read_text().splitlines()]
    number = next(i for i, e in enumerate(entries, 1) if e["relpath"] == "a.wav")
    change, words = JOURNAL_EDITS[edit]
    change(entries[number - 1])
    journal.write_text("".join(json.dumps(e) + "\n" for e in entries))
    report = out / "chainrun-report.json"
    os.utime(report, ns=(0, 0))
    # before the fix: "chainrun: internal error: TypeError ..." after rendering, last run's reports left in place
    status, _, err = run_cli("run", "-q", "--workers", "1", recipe, tmp_path / "in", "-o", out)
    assert status == 0, err
    warnings = [line for line in err.splitlines() if ": warning: " in line]
    assert warnings == [f"{journal}:{number}: warning: {warnings[0].split(': warning: ', 1)[1]}"]
    assert words in warnings[0] and "line ignored" in warnings[0]
    assert "1 file(s) already delivered" in err                       # b.wav kept, a.wav rendered again
    assert os.stat(report).st_mtime_ns > 0                             # the reports are this run's
    files = {f["relpath"]: f["status"] for f in json.loads(report.read_text())["files"]}
    assert files == {"a.wav": "ok", "b.wav": "ok"}
    # a.wav is recorded again by a later line: the next run keeps both files, and has nothing to warn about
    # unless the bad line does not even say which file it was about
    status, _, err = run_cli("run", "-q", "--workers", "1", recipe, tmp_path / "in", "-o", out)
    assert status == 0 and "2 file(s) already delivered" in err
    assert (": warning: " in err) == (edit == "relpath as a list")


def test_journal_types_accept_what_the_renderer_records(tmp_path, write_audio):
    import json

    import numpy as np

    from chainrun import filter_file, loads
    from chainrun.batch.journal_types import line_problem

    src = write_audio("a.wav", np.random.default_rng(4).uniform(-0.3, 0.3, (48000, 2)), subtype="PCM_24")
    r = filter_file(loads("format: 1\nloudness: {target_lufs: -20}\nguard: {on_over: scale}\nchain:\n" + GAIN),
                    str(src), str(tmp_path / "o.wav"))
    fp = {"size": 1, "mtime_ns": 2, "inode": 3, "ctime_ns": 4, "sample_sha256": "ab"}
    line = json.loads(json.dumps({"relpath": "a.wav", "key": "k", "input": fp, "output": fp,
                                  "result": r.to_record()}))
    assert r.output_meters.loudness is not None and line_problem(line) is None
    line["result"]["output_meters"]["loudness"]["channel_weights"] = ["one"]
    assert line_problem(line) == "entry.result.output_meters.loudness.channel_weights[0] is text, not a number"


# =========================================================================== the cluster's last input check (k)

def test_a_cluster_run_checks_the_input_once_more_before_its_journal_line(tmp_path, run_cli, write_audio,
                                                                           monkeypatch):
    import importlib.util
    import json

    import numpy as np
    import soundfile as sf

    if importlib.util.find_spec("distributed") is None:
        pytest.skip("Dask's distributed scheduler is not installed")
    import distributed

    rng = np.random.default_rng(5)
    for name in ("curlew.wav", "tide.wav"):
        write_audio(f"in/{name}", rng.uniform(-0.3, 0.3, (20_000, 2)), subtype="PCM_24")
    victim = tmp_path / "in" / "tide.wav"
    recipe = tmp_path / "r.yaml"
    recipe.write_text("format: 1\nchain:\n" + GAIN)
    real_wait = distributed.wait
    swapped = []

    def wait_then_swap(futures, *a, **k):
        # in the parent, after the worker rendered tide.wav and before its result is accounted for: another
        # recording put in its place (same size and modification time, another inode)
        done, rest = real_wait(futures, *a, **k)
        for fut in done:
            if not swapped and fut.status == "finished" and fut.result().relpath == "tide.wav":
                st = victim.stat()
                other = tmp_path / "other.wav"
                sf.write(str(other), rng.uniform(-0.3, 0.3, (20_000, 2)), 48000, subtype="PCM_24")
                assert other.stat().st_size == st.st_size
                os.utime(other, ns=(st.st_atime_ns, st.st_mtime_ns))
                os.replace(other, victim)
                swapped.append(fut)
        return done, rest

    monkeypatch.setattr(distributed, "wait", wait_then_swap)
    status, _, err = run_cli("run", "-q", recipe, tmp_path / "in", "-o", tmp_path / "out", "--cluster", "local:1")
    monkeypatch.undo()
    # chainrun's own contract (RELIABILITY.md, issue 19 item 9): whatever renders the file, an input replaced
    # after it was rendered is failed and not journaled (before: the cluster recorded it as delivered)
    assert swapped and status == 1 and "tide.wav" in err and "replaced or changed right after it was rendered" in err, err
    journal = [json.loads(line)["relpath"] for line in (tmp_path / "out" / ".chainrun-journal.jsonl").open()]
    assert journal == ["curlew.wav"]


# =========================================================================== odd AIFF rates (b)

def _aiff_with_rate(path, ext80: bytes):
    import numpy as np
    import soundfile as sf

    sf.write(str(path), np.random.default_rng(6).uniform(-0.3, 0.3, (4800, 2)), 48000, subtype="PCM_16")
    data = bytearray(path.read_bytes())
    at = data.index(b"COMM") + 16           # id, size, channels (2), frames (4), bits (2): then the rate (10)
    data[at:at + 10] = ext80
    path.write_bytes(bytes(data))
    return path


def test_the_aiff_rate_is_read_as_libsndfile_writes_it(tmp_path):
    import numpy as np
    import soundfile as sf

    from chainrun.audio.metadata.aiff import extended, read_layout

    # the reference is libsndfile's own writer: each rate it writes reads back exactly
    for rate in (8000, 11025, 44100, 48000, 96000, 192000, 768000):
        path = tmp_path / f"r{rate}.aiff"
        sf.write(str(path), np.zeros((10, 1)), rate, subtype="PCM_16")
        assert read_layout(str(path)).rate == rate
    # IEEE 754 double extended: exponent 0x7FFF with a zero fraction is infinity, otherwise NaN
    assert extended(bytes.fromhex("7fff8000000000000000")) == float("inf")
    assert extended(bytes.fromhex("ffff8000000000000000")) == float("-inf")
    assert extended(bytes.fromhex("7fffc000000000000000")) != extended(bytes.fromhex("7fffc000000000000000"))
    assert extended(bytes(10)) == 0.0 and extended(bytes.fromhex("3ffe8000000000000000")) == 0.5


@pytest.mark.parametrize("ext80, shown", [
    ("7fffc000000000000000", "nan"),       # libsndfile reads it as 67108864 Hz (measured, libsndfile 1.2.2)
    ("7fff8000000000000000", "inf"),       # the same
    ("00000000000000000000", "0"),         # libsndfile reads 1 Hz
    ("3ffe8000000000000000", "0.5"),       # libsndfile reads 1 Hz
    ("4013f424000000000000", "2e+06"),     # 2 MHz
])
def test_an_aiff_with_an_absurd_rate_is_refused_naming_the_rate(tmp_path, run_cli, ext80, shown):
    (tmp_path / "in").mkdir()
    src = _aiff_with_rate(tmp_path / "in" / "tideline.aiff", bytes.fromhex(ext80))
    recipe = tmp_path / "r.yaml"
    recipe.write_text("format: 1\nchain:\n" + GAIN)
    # before the fix: designed at 67 MHz (or 1 Hz) and delivered ok
    status, _, err = run_cli("run", "-q", recipe, src, "-o", tmp_path / "out")
    lines = [line for line in err.splitlines() if "tideline.aiff" in line]
    assert status == 1 and len(lines) == 1 and "error:" in lines[0], err
    assert f"declares a sample rate of {shown} Hz; accepted: 1 to 1000000 Hz" in lines[0]
    assert not (tmp_path / "out" / "tideline.aiff").exists()


def test_a_wav_above_one_megahertz_is_refused(tmp_path, run_cli, write_audio):
    src = write_audio("fast.wav", [[0.1, -0.1]] * 4800, rate=2_000_000)
    status, _, err = run_cli("scan", src)
    assert status == 1 and "declares a sample rate of 2000000 Hz; accepted: 1 to 1000000 Hz" in err
    ok = write_audio("ok.wav", [[0.1, -0.1]] * 4800, rate=1_000_000)
    status, _, err = run_cli("scan", ok)
    assert status == 0, err


# =========================================================================== float extremes (e)

@pytest.mark.parametrize("policy", ["reject", "clip", "scale"])
def test_double_samples_near_the_largest_float_meter_without_warnings(tmp_path, run_cli, write_audio, policy):
    """The meters and each policy read a file of +-1.7977e308 without a numpy warning, with defined figures."""
    import json
    import math

    import numpy as np

    big = np.finfo(np.float64).max                     # IEEE 754 binary64: about 1.7977e308
    x = np.zeros((4800, 2))
    x[::2], x[1::2] = big, -big                        # the running sum of x overflows to inf, then inf - inf
    src = write_audio("in/flood.wav", x, subtype="DOUBLE")
    recipe = tmp_path / "r.yaml"
    recipe.write_text(f"format: 1\nguard: {{on_over: {policy}}}\nchain:\n" + GAIN)
    # run_cli fails on any Python warning (numpy's "invalid value encountered in reduce" before the fix)
    status, out, err = run_cli("scan", src)
    # float samples past full scale are recoverable, not clipped (issue 18 item 2): scan exits 0
    assert status == 0 and "9600 sample(s) over full scale (float)" in out, out + err
    status, _, err = run_cli("run", "-q", recipe, src, "-o", tmp_path / "out")
    # reject: one line, nothing delivered; clip: delivered, one line; scale: 6165 dB down, delivered ok
    assert status == (0 if policy == "scale" else 1), err
    assert len([line for line in err.splitlines() if "flood.wav" in line]) == (policy != "scale")
    report = json.loads((tmp_path / "out" / "chainrun-report.json").read_text())["files"][0]
    ch = report["input_meters"]["channels"][0]
    # analytic: 20*log10(1.7977e308) = 6164.09 dB; the RMS and the DC offset have no binary64 value along the
    # way (x**2 and the sum overflow) and read None, chainrun's own convention for a non-finite figure
    assert ch["peak_dbfs"] == pytest.approx(20 * math.log10(big)) and ch["rms"] is None and ch["dc_offset"] is None


# =========================================================================== containers chainrun cannot write (i)

@pytest.mark.parametrize("name, fmt, subtype", [("rip.ogg", "OGG", "VORBIS"), ("memo.opus", "OGG", "OPUS"),
                                                ("podcast.mp3", "MP3", "MPEG_LAYER_III")])
@pytest.mark.parametrize("chosen", ["same", "PCM_24"])
def test_lossy_containers_are_refused_with_what_to_use_instead(tmp_path, run_cli, name, fmt, subtype, chosen):
    import numpy as np
    import soundfile as sf

    if subtype not in sf.available_subtypes(fmt):           # pragma: no cover - depends on libsndfile
        pytest.skip(f"this libsndfile cannot write {fmt} {subtype}")
    src = tmp_path / name
    sf.write(str(src), np.random.default_rng(8).uniform(-0.3, 0.3, (9600, 2)), 48000, format=fmt, subtype=subtype)
    recipe = tmp_path / "r.yaml"
    recipe.write_text(f"format: 1\noutput: {{subtype: {chosen}}}\nchain:\n" + GAIN)
    status, _, err = run_cli("run", "-q", recipe, src, "-o", tmp_path / "out")
    # before the fix: "a OGG file cannot hold PCM_24; choose another output.subtype", though none works
    lines = [line for line in err.splitlines() if name in line]
    assert status == 1 and len(lines) == 1, err
    assert f"chainrun cannot write {fmt} files ({subtype})" in lines[0] and "convert the recording to WAV" in lines[0]
    assert "choose another output.subtype" not in err and not (tmp_path / "out" / name).exists()


# =========================================================================== paths too long for libsndfile (h)

def _path_of_length(root, length: int, source: bytes):
    """A copy of ``source`` at an absolute path of exactly ``length`` bytes below ``root``."""
    folder = str(root)
    while length - len(folder) - 1 > 200:                     # folders of up to 200 bytes, files too
        folder = os.path.join(folder, "f" * min(200, length - len(folder) - 1 - 20))
    os.makedirs(folder, exist_ok=True)
    path = os.path.join(folder, "e" * (length - len(folder) - 1 - 4) + ".wav")
    assert len(os.fsencode(path)) == length
    with open(path, "wb") as fh:
        fh.write(source)
    return path


def test_a_path_too_long_for_libsndfile_is_called_that(tmp_path, run_cli, write_audio):
    import numpy as np

    data = write_audio("a.wav", np.random.default_rng(9).uniform(-0.3, 0.3, (4800, 2))).read_bytes()
    fits = _path_of_length(tmp_path / "fits", 1023, data)
    too_long = _path_of_length(tmp_path / "long", 1030, data)
    status, _, err = run_cli("scan", fits)
    assert status == 0, err                        # measured: libsndfile 1.2.2 opens 1023 bytes, not 1024
    # before the fix: "not readable as audio: Supplied filename too long"
    status, _, err = run_cli("scan", too_long)
    assert status == 1 and len(err.splitlines()) == 1
    assert err.startswith(too_long) and "its path is 1030 bytes long" in err and "at most 1023 bytes" in err
    assert "not readable as audio" not in err


# =========================================================================== 8SVX / 16SVX reruns (c)

@pytest.mark.parametrize("policy", ["reject", "scale"])
def test_svx_reruns_are_byte_identical(tmp_path, run_cli, policy):
    import numpy as np
    import soundfile as sf

    x = np.random.default_rng(10).uniform(-0.3, 0.3, (9600, 1))
    (tmp_path / "in").mkdir()
    for name, subtype in (("gull.8svx", "PCM_S8"), ("heron.16svx", "PCM_16")):
        sf.write(str(tmp_path / "in" / name), x, 48000, format="SVX", subtype=subtype)
    recipe = tmp_path / "r.yaml"
    recipe.write_text(f"format: 1\nguard: {{on_over: {policy}}}\nchain:\n" + GAIN)
    outs = []
    for n, workers in enumerate(("1", "1")):
        status, _, err = run_cli("run", "-q", "--workers", workers, recipe, tmp_path / "in", "-o", tmp_path / f"o{n}")
        assert status == 0, err
        outs.append({name: (tmp_path / f"o{n}" / name).read_bytes() for name in ("gull.8svx", "heron.16svx")})
    # before the fix: libsndfile wrote the temporary name (random) into the NAME chunk, so every run differed
    assert outs[0] == outs[1]
    for name, data in outs[0].items():
        at = data.index(b"NAME")
        size = int.from_bytes(data[at + 4:at + 8], "big")
        # the NAME chunk holds the file's own (final) name, as libsndfile writes it for a file it names itself
        assert data[at + 8:at + 8 + size].rstrip(b"\0") == name.encode()
        assert sf.info(str(tmp_path / "o0" / name)).frames == 9600


# =========================================================================== absurd names (j)

def test_names_and_labels_longer_than_200_characters_are_a_located_error(tmp_path, run_cli):
    from chainrun.recipe.yaml import MAX_NAME_CHARS

    assert MAX_NAME_CHARS == 200
    ok = loads(f"format: 1\nname: {'n' * 200}\nchain:\n  - {{type: gain, gain_db: -1, label: {'l' * 200}}}\n")
    assert len(ok.name) == 200 and len(ok.sections[0].label) == 200
    with pytest.raises(RecipeError) as info:
        loads(f"format: 1\nname: {'marsh ' * 150}\nchain:\n" + GAIN)
    assert (info.value.line, info.value.col) == (2, 7) and "name is 899 characters long; allowed: up to 200" in str(
        info.value)
    with pytest.raises(RecipeError) as info:
        loads(f"format: 1\nchain:\n  - {{type: gain, gain_db: -1, label: {'reed ' * 41}}}\n")
    assert (info.value.line, info.value.col) == (3, 38) and "chain[0].label is 204 characters long" in str(info.value)
    # a recipe under 1 MiB with a 900 kB name: one line at once (before: `plot` drew it for 154 s)
    huge = tmp_path / "huge.yaml"
    huge.write_text(f"format: 1\nname: \"{'Saltings dawn ' * 64000}\"\nchain:\n" + GAIN)
    status, _, err = run_cli("plot", huge, "-o", tmp_path / "p.png")
    assert status == 2 and err.startswith(f"{huge}:2:7: error: name is 896000 characters long") and len(
        err.splitlines()) == 1
    assert not (tmp_path / "p.png").exists()


# =========================================================================== glyphs the fonts lack (d)

CJK = "format: 1\nname: \"潮汐湿地 🌊 dawn\"\nchain:\n  - {type: peak, freq: 2500, gain_db: 1.5, q: 1, label: \"芦苇 🦆 Été\"}\n"


def test_cjk_and_emoji_names_plot_without_glyph_warnings_and_stay_readable(tmp_path, run_cli):
    from matplotlib import font_manager, ft2font

    from chainrun import assess, design
    from chainrun.report.figure import response_figure

    from chainrun.report.figure import _glyphs

    if 0x6F6E in _glyphs() or 0x1F30A in _glyphs():             # pragma: no cover - depends on the fonts
        pytest.skip("matplotlib here has a font with CJK or emoji glyphs")
    recipe = tmp_path / "cjk.yaml"
    recipe.write_text(CJK, encoding="utf-8")
    # run_cli fails on any Python warning: before the fix, matplotlib's "Glyph 28526 ... missing from font(s)"
    for suffix in ("png", "svg"):
        status, _, err = run_cli("plot", recipe, "-o", tmp_path / f"p.{suffix}")
        assert status == 0 and err == "", err
    r = loads(CJK)
    chain = design(r, 48000)
    texts = [t.get_text() for t in response_figure(r, chain, assess(chain, r.guard)).findobj(
        lambda o: hasattr(o, "get_text"))]
    title = next(t for t in texts if t.endswith(" at 48000 Hz"))
    # the default fonts (DejaVu Sans) have no CJK ideographs and no emoji; what they lack reads as \u escapes,
    # what they have (the accented É, é) stays as it is
    dejavu = ft2font.FT2Font(font_manager.findfont("DejaVu Sans")).get_charmap()
    assert 0x6F6E not in dejavu and 0x1F30A not in dejavu and 0xC9 in dejavu
    assert title == "\\u6f6e\\u6c50\\u6e7f\\u5730 \\U0001f30a dawn at 48000 Hz"
    assert any("\\u82a6\\u82c7 \\U0001f986 Été" in t for t in texts)
