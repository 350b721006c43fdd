"""Denormals, security and resource bounds (issue #4).

* Long digital silence after loud content: the output still equals scipy.signal.sosfilt (within the
  documented flush tolerance) and the filter state is flushed, so a DOUBLE output becomes exactly 0.0.
* Safe YAML only; includes resolved relative to the including file and depth-limited.
* No output can land outside OUTDIR: ``..`` and absolute input names, links in the input tree, links
  inside OUTDIR.
* Limits on sections, order, block size and workers, each one clear line (exit 2, nothing written), and
  a block that shrinks with the channel count so memory stays bounded.
"""
from __future__ import annotations

import math
import os
import re

import numpy as np
import pytest
import soundfile as sf
from scipy import signal

from chainrun import app, design, load
from chainrun.batch import executors
from chainrun.batch import run as batch_run
from chainrun.recipe import MAX_INCLUDE_DEPTH, MAX_SECTIONS, RecipeError
from chainrun.fsutil import TEMP_TAG
from chainrun.render import MAX_BLOCK
from support import report_of

GAIN = "  - {type: gain, gain_db: -1}\n"
RECIPE = "format: 1\nname: Saltings Hour gentle pass\nchain:\n  - {type: highpass, freq: 60}\n" + GAIN


def noise(frames, channels=1, seed=1):
    return np.random.default_rng(seed).uniform(-0.3, 0.3, (frames, channels))


def outputs(folder) -> list[str]:
    return sorted(os.path.relpath(os.path.join(r, f), folder) for r, _, fs in os.walk(folder) for f in fs
                  if not f.startswith(".") and not f.startswith("chainrun-report"))


# =========================================================================== denormals

DECAY_RECIPE = """\
format: 1
name: Saltings Hour, a ringing chain
chain:
  - {type: highpass, freq: 60, order: 4}
  - {type: peak, freq: 760, gain_db: 9, q: 12}
  - {type: lowpass, freq: 9000, order: 8}
output: {subtype: DOUBLE}
"""


def _silence_needed(sos: np.ndarray, floor: float = 1e-200, start: float = 10.0) -> int:
    """Frames after which every state value of ``sos`` driven to ``start`` has fallen below ``floor``."""
    # analytic: the state decays no slower than r_max**n, r_max the largest pole radius (scipy.signal.tf2zpk
    # of each row's denominator); ``start`` covers the transient growth of the resonant rows
    radius = max(max(abs(np.roots(row[3:]))) for row in sos)
    return int(math.ceil(math.log(floor / start) / math.log(radius)))


@pytest.mark.parametrize("block", ["65536", "1000"])
def test_long_silence_after_loud_content_equals_sosfilt_and_flushes_to_exact_zero(tmp_path, write_recipe,
                                                                                 run_cli, block):
    rate = 48000
    recipe = write_recipe(DECAY_RECIPE)
    sos = design(load(str(recipe)), rate).sos
    loud = noise(24_000, 2, seed=8) * 3.0              # 0.5 s near full scale, the peak boosting it further
    need = _silence_needed(sos)
    period = 65536                                     # dsp.flush.FLUSH_PERIOD: the flush runs this often
    x = np.concatenate([loud, np.zeros((need + 3 * period, 2))])
    x /= 2 * np.abs(x).max()
    src = tmp_path / "in" / "tide_out.wav"
    src.parent.mkdir()
    sf.write(str(src), x, rate, subtype="DOUBLE")
    status, _, err = run_cli("run", recipe, src, "-o", tmp_path / "out", "--workers", "1", "--block-size", block)
    assert status == 0, err
    y, _ = sf.read(str(tmp_path / "out" / "tide_out.wav"), dtype="float64", always_2d=True)
    ref = signal.sosfilt(sos, x, axis=0)               # scipy.signal.sosfilt (reference library), all at once
    # analytic: zeroing state values below 1e-200 every 65536 frames moves later outputs by at most the
    # chain's gain times the values dropped, far below 1e-190 here
    np.testing.assert_allclose(y, ref, rtol=0, atol=1e-190)
    np.testing.assert_array_equal(y[:period], ref[:period])            # exactly equal before the first flush
    # the state was flushed: once it fell below 1e-200 and a flush point passed, the output is exactly 0.0
    settled = len(loud) + need
    first_flush_after = (settled // period + 1) * period
    assert np.all(y[first_flush_after:] == 0.0)
    assert np.any(y[len(loud):len(loud) + 1000] != 0.0)                   # it really was ringing


def test_silence_flush_does_not_depend_on_the_block_size(tmp_path, write_recipe, run_cli):
    recipe = write_recipe(DECAY_RECIPE)
    x = np.concatenate([noise(5000, 1, seed=3), np.zeros((300_000, 1))])
    src = tmp_path / "in" / "slack_water.wav"
    src.parent.mkdir()
    sf.write(str(src), x, 48000, subtype="DOUBLE")
    got = []
    for block in ("65536", "4097", "300000"):
        out = tmp_path / f"out{block}"
        assert run_cli("run", recipe, src, "-o", out, "--workers", "1", "--block-size", block)[0] == 0
        got.append((out / "slack_water.wav").read_bytes())
    assert got[0] == got[1] == got[2]                  # DEVELOPERS.md: bit-identical whatever the block size


# =========================================================================== safe YAML, includes


@pytest.mark.parametrize("text, marker", [
    ("format: 1\nname: !!python/object/apply:builtins.open ['{marker}', 'w']\nchain:\n" + GAIN, "!!python"),
    ("format: 1\nchain:\n  - !!python/object/apply:builtins.open ['{marker}', 'w']\n", "!!python"),
    ("format: 1\nchain:\n  - !!python/object:builtins.dict {type: gain, gain_db: 1}\n", "!!python"),
    ("format: 1\nname: !!python/name:os.system\nchain:\n" + GAIN, "!!python"),
    ("format: 1\nguard: !!python/object/new:dict {}\nchain:\n" + GAIN, "!!python"),
    ("format: 1\nname: !local_tag text\nchain:\n" + GAIN, "!local_tag"),
])
def test_tags_that_would_build_python_objects_are_refused_with_a_location(tmp_path, write_recipe, text, marker):
    touched = tmp_path / "created-by-yaml"
    text = text.replace("{marker}", str(touched))
    path = write_recipe(text)
    with pytest.raises(RecipeError) as info:
        load(path)
    e = info.value
    line = next(i for i, ln in enumerate(text.splitlines(), 1) if marker in ln)
    assert (e.line, e.col) == (line, text.splitlines()[line - 1].index(marker) + 1), str(e)
    assert "tag" in e.message and "\n" not in str(e)
    assert not touched.exists()                        # nothing was constructed, let alone run


def _include_chain(tmp_path, depth: int):
    """r0.yaml includes r1.yaml ... includes r{depth}.yaml (which includes nothing)."""
    for i in range(depth + 1):
        inc = f"include: r{i + 1}.yaml\n" if i < depth else ""
        (tmp_path / f"r{i}.yaml").write_text(f"format: 1\n{inc}chain:\n" + GAIN)
    return tmp_path / "r0.yaml"


def test_includes_nested_up_to_the_limit_load(tmp_path):
    recipe = load(_include_chain(tmp_path, MAX_INCLUDE_DEPTH))
    assert len(recipe.sections) == MAX_INCLUDE_DEPTH + 1 and len(recipe.includes) == MAX_INCLUDE_DEPTH


@pytest.mark.parametrize("extra", [1, 5])
def test_includes_nested_beyond_the_limit_are_a_located_error(tmp_path, extra, run_cli):
    top = _include_chain(tmp_path, MAX_INCLUDE_DEPTH + extra)
    with pytest.raises(RecipeError) as info:
        load(top)
    e = info.value
    # the include line of the file whose include would go one level too deep
    assert os.path.basename(e.path) == f"r{MAX_INCLUDE_DEPTH}.yaml" and (e.line, e.col) == (2, 10), str(e)
    assert f"allowed: up to {MAX_INCLUDE_DEPTH}" in e.message
    src = tmp_path / "in.wav"
    sf.write(str(src), noise(1000), 48000, subtype="PCM_16")
    status, _, err = run_cli("run", top, src, "-o", tmp_path / "out")
    assert status == 2 and len(err.splitlines()) == 1 and not (tmp_path / "out").exists()


def test_includes_are_resolved_from_the_including_file_not_the_working_folder(tmp_path, monkeypatch):
    (tmp_path / "house").mkdir()
    (tmp_path / "shows" / "marsh").mkdir(parents=True)
    (tmp_path / "house" / "eq.yaml").write_text("format: 1\nchain:\n  - {type: notch, freq: 50, q: 20}\n")
    top = tmp_path / "shows" / "marsh" / "dawn.yaml"
    top.write_text("format: 1\ninclude: ../../house/eq.yaml\nchain:\n" + GAIN)
    (tmp_path / "elsewhere").mkdir()
    monkeypatch.chdir(tmp_path / "elsewhere")
    recipe = load(top, allow_outside_includes=True)     # house/ lies outside shows/marsh/: allowed explicitly
    assert [s.kind for s in recipe.sections] == ["notch", "gain"]
    assert recipe.includes == (os.path.normpath(str(tmp_path / "house" / "eq.yaml")),)


@pytest.mark.parametrize("target, part", [
    ("/etc/hostname", "is not a relative path"),
    ("''", "is not a relative path"),
    ("house", "is a folder"),
    ("missing.yaml", "does not exist"),
])
def test_include_targets_that_are_refused(tmp_path, target, part):
    (tmp_path / "house").mkdir()
    top = tmp_path / "r.yaml"
    top.write_text(f"format: 1\ninclude: {target}\nchain:\n" + GAIN)
    with pytest.raises(RecipeError, match=re.escape(part)) as info:
        load(top)
    assert (info.value.line, info.value.col) == (2, 10) and "\n" not in str(info.value)


def test_a_recipe_over_1_mib_is_refused_at_run(tmp_path, run_cli):
    path = tmp_path / "huge.yaml"
    path.write_text("format: 1\nchain:\n" + GAIN + "# " + "x" * (1 << 20) + "\n")
    src = tmp_path / "in.wav"
    sf.write(str(src), noise(1000), 48000, subtype="PCM_16")
    status, _, err = run_cli("run", path, src, "-o", tmp_path / "out")
    assert status == 2 and err.startswith(f"{path}:1:1: error: recipe is ") and "allowed: up to 1048576" in err
    assert len(err.splitlines()) == 1 and not (tmp_path / "out").exists()


def test_an_alias_bomb_is_refused_at_run(tmp_path, run_cli):
    lines = ["format: 1", "a0: &a0 [1, 1, 1, 1, 1, 1, 1, 1, 1, 1]"]
    lines += [f"a{i}: &a{i} [" + ", ".join([f"*a{i - 1}"] * 10) + "]" for i in range(1, 9)]
    path = tmp_path / "laughs.yaml"
    path.write_text("\n".join(lines + ["chain: *a8", ""]))
    src = tmp_path / "in.wav"
    sf.write(str(src), noise(1000), 48000, subtype="PCM_16")
    status, _, err = run_cli("run", path, src, "-o", tmp_path / "out")
    assert status == 2 and "YAML nodes" in err and len(err.splitlines()) == 1
    assert not (tmp_path / "out").exists()


# =========================================================================== nothing outside OUTDIR


@pytest.fixture
def layout(tmp_path):
    (tmp_path / "in" / "boathouse").mkdir(parents=True)
    (tmp_path / "elsewhere").mkdir()
    sf.write(str(tmp_path / "in" / "boathouse" / "host.wav"), noise(2000, 1, 1), 48000, subtype="PCM_16")
    sf.write(str(tmp_path / "elsewhere" / "visiting.wav"), noise(2000, 1, 2), 48000, subtype="PCM_16")
    (tmp_path / "recipe.yaml").write_text(RECIPE)
    return tmp_path


def _inside(path, folder) -> bool:
    path, folder = os.path.realpath(path), os.path.realpath(folder)
    return path == folder or path.startswith(folder + os.sep)


def _all_outputs_inside(report, out):
    for f in report["files"]:
        if f["output"] is not None:
            assert _inside(f["output"], out), f["output"]


def test_dotdot_and_absolute_input_names_land_at_the_top_of_outdir(layout, run_cli, monkeypatch):
    monkeypatch.chdir(layout / "in" / "boathouse")
    out = layout / "out"
    status, _, err = run_cli("run", layout / "recipe.yaml", "../boathouse/../boathouse/host.wav",
                             str(layout / "elsewhere" / "visiting.wav"), "-o", out, "--workers", "1")
    assert status == 0, err
    assert outputs(out) == ["host.wav", "visiting.wav"]
    _all_outputs_inside(report_of(out), out)


def test_links_in_the_input_tree_pointing_outside_are_read_but_written_inside(layout, run_cli, tree_hashes):
    os.symlink(layout / "elsewhere" / "visiting.wav", layout / "in" / "boathouse" / "guest.wav")
    os.symlink(layout / "elsewhere", layout / "in" / "archive")
    before = tree_hashes(layout / "elsewhere")
    out = layout / "out"
    status, _, err = run_cli("run", layout / "recipe.yaml", layout / "in", "-o", out, "--workers", "1")
    assert status == 0, err
    # the same recording reached twice (a file link and a folder link): rendered once, the second is a note
    assert outputs(out) in (["archive/visiting.wav", "boathouse/host.wav"],
                            ["boathouse/guest.wav", "boathouse/host.wav"])
    _all_outputs_inside(report_of(out), out)
    assert tree_hashes(layout / "elsewhere") == before


def test_a_linked_outdir_subfolder_pointing_outside_is_not_written_through(layout, run_cli, tree_hashes):
    out = layout / "out"
    out.mkdir()
    os.symlink(layout / "elsewhere", out / "boathouse")      # OUTDIR/boathouse -> a folder outside OUTDIR
    sf.write(str(layout / "in" / "top.wav"), noise(2000, 1, 3), 48000, subtype="PCM_16")
    before = tree_hashes(layout / "elsewhere")
    status, _, err = run_cli("run", layout / "recipe.yaml", layout / "in", "-o", out, "--workers", "1")
    assert status == 1, err
    entry = [f for f in report_of(out)["files"] if f["relpath"] == "boathouse/host.wav"][0]
    assert entry["status"] == "failed" and "would leave OUTDIR" in entry["message"]
    assert [ln for ln in err.splitlines() if "host.wav" in ln] == \
        [f"{layout / 'in' / 'boathouse' / 'host.wav'}: error: {entry['message']}"]
    assert tree_hashes(layout / "elsewhere") == before       # nothing written through the link
    assert (out / "top.wav").is_file()


def test_a_link_at_an_output_name_is_replaced_not_followed(layout, run_cli):
    out = layout / "out" / "boathouse"
    out.mkdir(parents=True)
    precious = layout / "elsewhere" / "visiting.wav"
    original = precious.read_bytes()
    os.symlink(precious, out / "host.wav")                   # OUTDIR/boathouse/host.wav -> a file outside
    status, _, err = run_cli("run", layout / "recipe.yaml", layout / "in", "-o", layout / "out", "--workers", "1")
    assert status == 0, err
    assert precious.read_bytes() == original                  # the link's target is untouched
    assert not os.path.islink(out / "host.wav") and sf.info(str(out / "host.wav")).frames == 2000


def test_a_link_in_the_input_tree_into_outdir_is_not_read_as_input(layout, run_cli):
    out = layout / "out"
    assert run_cli("run", layout / "recipe.yaml", layout / "in", "-o", out, "--workers", "1")[0] == 0
    os.symlink(out, layout / "in" / "last_week")              # in/last_week -> OUTDIR
    status, _, err = run_cli("run", layout / "recipe.yaml", layout / "in", "-o", out, "--workers", "1")
    assert status == 0, err
    (note,) = [ln for ln in err.splitlines() if "last_week" in ln]
    assert "note: skipped: a link into the output folder" in note
    assert outputs(out) == ["boathouse/host.wav"]             # no out/last_week/... copies of outputs


def test_an_outdir_that_is_a_link_into_the_input_is_refused(layout, run_cli):
    os.symlink(layout / "in" / "boathouse", layout / "out")
    status, _, err = run_cli("run", layout / "recipe.yaml", layout / "in", "-o", layout / "out")
    assert status == 2 and "lies inside the input folder" in err and len(err.splitlines()) == 1


# =========================================================================== limits, each one line


@pytest.mark.parametrize("argv, part", [
    (["--workers", "0"], "--workers must be at least 1"),
    (["--workers", "65"], "--workers 65 is out of range; allowed: 1 to 64"),
    (["--workers", "many"], "--workers must be a whole number"),
    (["--block-size", "0"], "--block-size must be at least 1"),
    (["--block-size", str(MAX_BLOCK + 1)], f"--block-size {MAX_BLOCK + 1} is out of range; allowed: 1 to {MAX_BLOCK}"),
    (["--block-size", "-4"], "--block-size must be at least 1"),
    (["--on-over", "fold"], "invalid choice: 'fold'"),
])
def test_option_limits_exit_2_with_one_line_and_nothing_written(tmp_path, run_cli, argv, part):
    recipe = tmp_path / "r.yaml"
    recipe.write_text(RECIPE)
    src = tmp_path / "in.wav"
    sf.write(str(src), noise(1000), 48000, subtype="PCM_16")
    status, stdout, err = run_cli("run", recipe, src, "-o", tmp_path / "out", *argv)
    assert status == 2
    assert len(err.splitlines()) == 1 and part in err, err
    assert not (tmp_path / "out").exists() and stdout == ""


@pytest.mark.parametrize("chain, part", [
    (GAIN * (MAX_SECTIONS + 1), f"more than {MAX_SECTIONS} sections"),
    ("  - {type: lowpass, freq: 9000, order: 9}\n", "order 9 is out of range; allowed: 1 to 8"),
    ("  - {type: iir, b: [1], a: [1, 0, 0, 0, 0, 0, 0, 0, 0, 0.1]}\n", "allowed: 1 to 9 (order up to 8)"),
    ("  - {type: peak, freq: 1000, gain_db: 121, q: 1}\n", "gain_db 121 dB is out of range"),
    ("  - {type: notch, freq: 1000, bw: 11}\n", "bw 11 octaves is out of range"),
])
def test_recipe_limits_exit_2_with_one_line_and_nothing_written(tmp_path, run_cli, chain, part):
    recipe = tmp_path / "r.yaml"
    recipe.write_text("format: 1\nchain:\n" + chain)
    src = tmp_path / "in.wav"
    sf.write(str(src), noise(1000), 48000, subtype="PCM_16")
    status, _, err = run_cli("run", recipe, src, "-o", tmp_path / "out")
    assert status == 2 and len(err.splitlines()) == 1 and part in err, err
    assert re.match(rf"^{re.escape(str(recipe))}:\d+:\d+: error: ", err)
    assert not (tmp_path / "out").exists()


def test_many_channels_read_in_fewer_frames_per_block(tmp_path, run_cli, monkeypatch):
    # A header may promise up to 1024 channels; the block of 65536 frames would then be 512 MiB of float64
    # per buffer, several buffers per file and per worker. The batch shortens the block so a block holds at
    # most MAX_BLOCK samples; the block size never changes the output (checked against block size 7).
    seen = []
    real = executors.render_file

    def spy(src, dst, sos, bound, policy, **kw):
        seen.append((src.channels, policy.block_size))
        return real(src, dst, sos, bound, policy, **kw)

    monkeypatch.setattr(executors, "render_file", spy)
    recipe = tmp_path / "r.yaml"
    recipe.write_text(RECIPE)
    src = tmp_path / "in" / "array.wav"
    src.parent.mkdir()
    sf.write(str(src), noise(1200, 1024, seed=5), 48000, subtype="PCM_16")
    outs = []
    for block in (str(MAX_BLOCK), "7"):
        out = tmp_path / f"out{block}"
        status, _, err = run_cli("run", recipe, src, "-o", out, "--workers", "1", "--block-size", block,
                                 "--no-true-peak")
        assert status == 0, err
        outs.append((out / "array.wav").read_bytes())
    assert seen[0] == (1024, MAX_BLOCK // 1024) and seen[1] == (1024, 7)
    assert seen[0][0] * seen[0][1] <= MAX_BLOCK
    assert outs[0] == outs[1]


def test_default_workers_never_exceed_the_limit(tmp_path, run_cli, monkeypatch):
    monkeypatch.setattr(app, "cores", lambda: 512)          # a large machine
    calls = []
    real = app.execute

    def spy(prep, workers=1, *a, **k):
        calls.append(workers)
        return real(prep, 1, *a, **k)

    monkeypatch.setattr(app, "execute", spy)
    recipe = tmp_path / "r.yaml"
    recipe.write_text(RECIPE)
    src = tmp_path / "in.wav"
    sf.write(str(src), noise(1000), 48000, subtype="PCM_16")
    status, _, err = run_cli("run", recipe, src, "-o", tmp_path / "out")
    assert status == 0, err                                  # before: "internal error: BatchError: --workers 512"
    assert calls == [batch_run.MAX_WORKERS]


def test_a_fault_designing_at_one_rate_is_a_located_line_not_an_internal_error(tmp_path, run_cli, monkeypatch):
    # design and guard are pure numerics; should one raise something other than RecipeError at some rate,
    # the batch names the section and the rate instead of failing with "internal error"
    from chainrun import guard          # design_and_assess lives in the guard and calls design there
    real = guard.design

    def fragile(recipe, rate):
        if rate == 44100:
            raise OverflowError("math range error")
        return real(recipe, rate)

    monkeypatch.setattr(guard, "design", fragile)
    import sys

    design_mod = sys.modules["chainrun.design"]      # (the package's name 'design' is the function)

    real_section = design_mod.design_section
    monkeypatch.setattr(design_mod, "design_section",
                        lambda s, rate: (_ for _ in ()).throw(OverflowError("math range error"))
                        if rate == 44100 and s.kind == "highpass" else real_section(s, rate))
    recipe = tmp_path / "r.yaml"
    recipe.write_text(RECIPE)
    (tmp_path / "in").mkdir()
    sf.write(str(tmp_path / "in" / "a44.wav"), noise(1000), 44100, subtype="PCM_16")
    sf.write(str(tmp_path / "in" / "b48.wav"), noise(1000), 48000, subtype="PCM_16")
    status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", tmp_path / "out", "--workers", "1")
    assert status == 1, err
    entry = [f for f in report_of(tmp_path / "out")["files"] if f["relpath"] == "a44.wav"][0]
    assert entry["status"] == "rejected"                  # located at the freq of the section (line 4, col 28)
    assert f"{recipe}:4:28: error: chain[0] highpass 60 Hz cannot be designed at 44100 Hz (OverflowError: math " \
           "range error)" in entry["message"]
    assert (tmp_path / "out" / "b48.wav").is_file()
    assert not any(TEMP_TAG in f for _, _, fs in os.walk(tmp_path / "out") for f in fs)


@pytest.mark.parametrize("on_over", ["reject", "scale"])
@pytest.mark.parametrize("extra", [0, 1, 5])
def test_a_name_as_long_as_the_file_system_allows_is_delivered(tmp_path, run_cli, tree_hashes, extra, on_over):
    # A legal name of up to NAME_MAX (255) bytes; '.NAME.chainrun-part-XXXXXXXX' would be 24 bytes longer
    # (and the scale policy's scratch file 4 more), so the temporary names are shortened instead and the
    # final name is kept. The limit is what pathconf(PC_NAME_MAX) says for the output folder, 255 on the
    # usual Linux file systems (from memory).
    limit = os.pathconf(str(tmp_path), "PC_NAME_MAX")
    name = "saltings_" + "x" * (limit - len("saltings_") - len(".wav") - extra) + ".wav"
    assert len(os.fsencode(name)) == limit - extra
    recipe = tmp_path / "r.yaml"
    recipe.write_text(RECIPE)
    (tmp_path / "in").mkdir()
    sf.write(str(tmp_path / "in" / name), noise(3000, 2, seed=9), 48000, subtype="PCM_24")
    before = tree_hashes(tmp_path / "in")
    status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", tmp_path / "out", "--workers", "1",
                             "--on-over", on_over)
    assert status == 0, err
    assert outputs(tmp_path / "out") == [name]
    assert not [f for f in os.listdir(tmp_path / "out") if TEMP_TAG in f]
    assert report_of(tmp_path / "out")["files"][0]["status"] == "ok"
    assert tree_hashes(tmp_path / "in") == before


def test_temporary_names_stay_within_255_bytes_where_the_file_system_says_more(tmp_path, monkeypatch):
    # vfat and exFAT report PC_NAME_MAX 1530 on Linux (bytes for 255 UTF-16 characters, from memory of
    # the kernel's statfs) yet hold names of 255 characters; a temporary name is never longer than 255
    from chainrun import fsutil

    monkeypatch.setattr(fsutil.os, "pathconf", lambda path, name: 1530)
    final = str(tmp_path / ("saltings_" + "x" * 235 + ".wav"))       # 248 bytes: legal anywhere
    for suffix in ("", ".f64"):
        temp = os.path.basename(fsutil.temp_path_for(final, suffix))
        assert len(os.fsencode(temp)) <= 255 and temp.startswith(".saltings_") and TEMP_TAG in temp
