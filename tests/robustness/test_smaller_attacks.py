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
