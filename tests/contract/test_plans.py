"""Batch plans (``chainrun run --plan``), several input folders, and recipes given as inputs.

The contract checked here is chainrun's own, from the README's "Commands" and "Batch plans"
sections; the audio is checked against analytic values (a gain section multiplies every sample
by 10**(dB/20)) or against the plain ``run`` of the same recipe.
"""
from __future__ import annotations

import json
import os

import numpy as np
import soundfile as sf

FLOAT_GAIN = """\
format: 1
name: {name}
chain:
  - {{type: gain, gain_db: {db}}}
output: {{subtype: FLOAT}}
"""


def _recipe(tmp_path, name: str, db: float, folder: str = "recipes") -> str:
    path = tmp_path / folder / f"{name}.yaml"
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(FLOAT_GAIN.format(name=name, db=db), encoding="utf-8")
    return f"{folder}/{name}.yaml"


def _plan(tmp_path, rows: list[str], name: str = "plan.yaml"):
    path = tmp_path / name
    path.write_text("format: 1\nbatch:\n" + "".join(f"  - {r}\n" for r in rows), encoding="utf-8")
    return path


def _noise(write_audio, name: str, seed: int = 1):
    x = np.random.default_rng(seed).uniform(-0.25, 0.25, 4800)
    write_audio(name, x, subtype="FLOAT")
    return x.astype(np.float32).astype(np.float64)


def _report(out) -> dict:
    return json.loads((out / "chainrun-report.json").read_text(encoding="utf-8"))


def _gain_of(out_file, x) -> float:
    y, _ = sf.read(str(out_file), dtype="float64")
    return float(np.dot(y, x) / np.dot(x, x))


def test_overlapping_globs_first_row_wins(tmp_path, write_audio, run_cli):
    xh = _noise(write_audio, "boathouse/host_1.wav", 1)
    xg = _noise(write_audio, "boathouse/guest_1.wav", 2)
    _recipe(tmp_path, "host", -6)
    _recipe(tmp_path, "rest", -12)
    plan = _plan(tmp_path, ['{inputs: "boathouse/host*.wav", recipe: recipes/host.yaml}',
                            '{inputs: "boathouse/*.wav", recipe: recipes/rest.yaml}'])
    status, out, err = run_cli("run", "--plan", plan, "-o", tmp_path / "out", "--workers", "1")
    assert status == 0, err
    # analytic: a gain section of g dB multiplies every sample by 10**(g/20)
    assert abs(_gain_of(tmp_path / "out/boathouse/host_1.wav", xh) - 10 ** (-6 / 20)) < 1e-6
    assert abs(_gain_of(tmp_path / "out/boathouse/guest_1.wav", xg) - 10 ** (-12 / 20)) < 1e-6
    # chainrun's own contract (README, "Batch plans"): the report names each file's recipe
    files = {f["relpath"]: f for f in _report(tmp_path / "out")["files"]}
    assert files["boathouse/host_1.wav"]["recipe_name"] == "host"
    assert files["boathouse/guest_1.wav"]["recipe_name"] == "rest"
    html = (tmp_path / "out/chainrun-report.html").read_text(encoding="utf-8")
    assert 'id="r0-rate-48000"' in html and 'id="r1-rate-48000"' in html     # a chain section per recipe and rate


def test_missing_recipe_is_a_located_error_and_no_audio_is_touched(tmp_path, write_audio, run_cli, tree_hashes):
    _noise(write_audio, "in/a.wav")
    plan = _plan(tmp_path, ['{inputs: "in/*.wav", recipe: recipes/none.yaml}'])
    before = tree_hashes(tmp_path)
    status, out, err = run_cli("run", "--plan", plan, "-o", tmp_path / "out")
    line = "  - {inputs: \"in/*.wav\", recipe: recipes/none.yaml}"
    # chainrun's own contract (README, "Commands"): exit 2, one located line, nothing written
    assert status == 2
    assert err.strip().splitlines() == [err.strip()]
    assert err.startswith(f"{plan}:3:{line.index('recipes/none.yaml') + 1}: error: recipe 'recipes/none.yaml' "
                          "does not exist")
    assert not (tmp_path / "out").exists()
    assert tree_hashes(tmp_path) == before


def test_plan_errors_are_located_like_recipe_errors(tmp_path, run_cli):
    _recipe(tmp_path, "r", -1)
    plan = _plan(tmp_path, ['{inputs: "in/*.wav", recipe: recipes/r.yaml, recipie: x}'])
    status, _, err = run_cli("run", "--plan", plan, "-o", tmp_path / "out")
    col = '  - {inputs: "in/*.wav", recipe: recipes/r.yaml, recipie: x}'.index("recipie") + 1
    # chainrun's own contract (README, "Commands"): path:line:col: error: what; what is allowed
    assert status == 2 and err.startswith(f"{plan}:3:{col}: error: unknown key 'recipie' in batch[0]")
    plan2 = _plan(tmp_path, ['{inputs: "../elsewhere/*.wav", recipe: recipes/r.yaml}'], "p2.yaml")
    status, _, err = run_cli("run", "--plan", plan2, "-o", tmp_path / "out")
    assert status == 2 and f"{plan2}:3:" in err and "leaves the plan's folder" in err


def test_include_cycle_inside_a_plans_recipe(tmp_path, write_audio, run_cli):
    _noise(write_audio, "in/a.wav")
    (tmp_path / "recipes").mkdir()
    (tmp_path / "recipes/a.yaml").write_text("format: 1\ninclude: b.yaml\nchain:\n  - {type: gain, gain_db: -1}\n")
    (tmp_path / "recipes/b.yaml").write_text("format: 1\ninclude: a.yaml\nchain:\n  - {type: gain, gain_db: -1}\n")
    plan = _plan(tmp_path, ['{inputs: "in/*.wav", recipe: recipes/a.yaml}'])
    status, _, err = run_cli("run", "--plan", plan, "-o", tmp_path / "out")
    # chainrun's own contract (README, "Recipes"): a recipe may not include itself; exit 2, no audio touched
    assert status == 2 and "include cycle" in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "out").exists()


def test_same_file_named_twice_is_rendered_once_by_the_first_row(tmp_path, write_audio, run_cli):
    x = _noise(write_audio, "in/a.wav")
    _recipe(tmp_path, "first", -3)
    _recipe(tmp_path, "second", -9)
    plan = _plan(tmp_path, ['{inputs: ["in/a.wav", "in/a.wav"], recipe: recipes/first.yaml}',
                            '{inputs: "in/a.wav", recipe: recipes/second.yaml}'])
    status, _, err = run_cli("run", "--plan", plan, "-o", tmp_path / "out", "--workers", "1")
    assert status == 0, err
    files = _report(tmp_path / "out")["files"]
    assert [f["relpath"] for f in files] == ["in/a.wav"]
    assert abs(_gain_of(tmp_path / "out/in/a.wav", x) - 10 ** (-3 / 20)) < 1e-6     # analytic, as above
    assert f"{plan}:4:5: warning: batch[1]" in err and "earlier row" in err


def test_row_matching_nothing_warns_and_unmatched_files_are_skipped(tmp_path, write_audio, run_cli):
    _noise(write_audio, "in/take.wav")
    _noise(write_audio, "in/music.wav")
    _recipe(tmp_path, "r", -1)
    plan = _plan(tmp_path, ['{inputs: "in/take*.wav", recipe: recipes/r.yaml}',
                            '{inputs: "marsh/**", recipe: recipes/r.yaml}'])
    status, out, err = run_cli("run", "--plan", plan, "-o", tmp_path / "out")
    # chainrun's own contract (README, "Batch plans"): a warning, located at the row; skipped files are fine
    assert status == 0, err
    assert f"{plan}:4:5: warning: batch[1] inputs 'marsh/**' match no file" in err
    files = {f["relpath"]: f for f in _report(tmp_path / "out")["files"]}
    assert files["in/music.wav"]["status"] == "skipped"
    assert "no row of the plan matches it" in files["in/music.wav"]["message"]
    assert not (tmp_path / "out/in/music.wav").exists() and (tmp_path / "out/in/take.wav").exists()


def test_resume_after_one_recipe_changed(tmp_path, write_audio, run_cli):
    xa = _noise(write_audio, "a/one.wav", 1)
    _noise(write_audio, "b/two.wav", 2)
    _recipe(tmp_path, "ra", -2)
    _recipe(tmp_path, "rb", -4)
    plan = _plan(tmp_path, ['{inputs: "a/**", recipe: recipes/ra.yaml}', '{inputs: "b/**", recipe: recipes/rb.yaml}'])
    out = tmp_path / "out"
    assert run_cli("run", "--plan", plan, "-o", out, "--workers", "1")[0] == 0
    _recipe(tmp_path, "rb", -5)
    status, _, err = run_cli("run", "--plan", plan, "-o", out, "--workers", "1")
    assert status == 0, err
    # chainrun's own contract (README, "Commands": resume): only files whose recipe changed render again
    files = {f["relpath"]: f for f in _report(out)["files"]}
    assert files["a/one.wav"].get("resumed") is True
    assert not files["b/two.wav"].get("resumed")
    assert abs(_gain_of(out / "a/one.wav", xa) - 10 ** (-2 / 20)) < 1e-6               # analytic, as above
    xb, _ = sf.read(str(tmp_path / "b/two.wav"), dtype="float64")
    assert abs(_gain_of(out / "b/two.wav", xb) - 10 ** (-5 / 20)) < 1e-6


def test_two_roots_with_the_same_file_names_are_all_delivered(tmp_path, write_audio, run_cli, repo_root):
    for folder in ("cardA", "cardB", "x/card", "y/card"):
        _noise(write_audio, f"{folder}/TAKE001.WAV")
    recipe = repo_root / "recipes/marsh-cleanup.yaml"
    status, out, err = run_cli("run", recipe, tmp_path / "cardA", tmp_path / "cardB", tmp_path / "x/card",
                               tmp_path / "y/card", "-o", tmp_path / "out")
    # chainrun's own contract (README, "Commands"): several folders each mirror under their own name
    assert status == 0, err
    for name in ("cardA", "cardB", "card", "card-2"):
        assert (tmp_path / "out" / name / "TAKE001.WAV").is_file()
        assert f"{name}/TAKE001.WAV" in out
    # one folder keeps today's layout: its files at the top of OUTDIR
    assert run_cli("run", recipe, tmp_path / "cardA", "-o", tmp_path / "one")[0] == 0
    assert (tmp_path / "one/TAKE001.WAV").is_file() and not (tmp_path / "one/cardA").exists()


def test_check_gates_every_recipe_a_plan_names(tmp_path, run_cli):
    _recipe(tmp_path, "good", -1)
    (tmp_path / "recipes/bad.yaml").write_text("format: 1\nchain:\n  - {type: iir, b: [1], a: [1, -1.1]}\n")
    plan = _plan(tmp_path, ['{inputs: "a/**", recipe: recipes/good.yaml}', '{inputs: "b/**", recipe: recipes/bad.yaml}'])
    status, out, err = run_cli("check", plan)
    # analytic: 1/(1 - 1.1 z^-1) has its pole at z = 1.1, outside the unit circle: unstable, rejected
    assert status == 1
    assert "2 recipe(s) checked" in out and "1 rejected" in out and "bad.yaml" in err
    good = _plan(tmp_path, ['{inputs: "a/**", recipe: recipes/good.yaml}'], "good-plan.yaml")
    status, out, _ = run_cli("check", good, "--json")
    assert status == 0 and [e["path"] for e in json.loads(out)["recipes"]] == [str(tmp_path / "recipes/good.yaml")]


def test_recipe_given_as_an_input_is_refused(tmp_path, write_audio, run_cli, tree_hashes):
    _noise(write_audio, "host.wav")
    _noise(write_audio, "guest.wav")
    _recipe(tmp_path, "host", -1)
    _recipe(tmp_path, "guest", -2)
    before = tree_hashes(tmp_path)
    status, _, err = run_cli("run", tmp_path / "recipes/host.yaml", tmp_path / "host.wav",
                             tmp_path / "recipes/guest.yaml", tmp_path / "guest.wav", "-o", tmp_path / "out")
    # chainrun's own contract (README, "Commands"): exit 2, one line suggesting --plan, no audio touched
    assert status == 2 and len(err.strip().splitlines()) == 1 and "--plan" in err
    assert err.startswith(f"{tmp_path / 'recipes/guest.yaml'}: error:")
    assert not (tmp_path / "out").exists() and tree_hashes(tmp_path) == before
    status, _, err = run_cli("run", "--plan", tmp_path / "p.yaml", tmp_path / "recipes/host.yaml", "-o",
                             tmp_path / "out")
    assert status == 2 and "not both" in err


def test_one_row_plan_gives_the_plain_runs_bytes(tmp_path, write_audio, run_cli, repo_root):
    rng = np.random.default_rng(7)
    src = tmp_path / "src"
    write_audio("src/boathouse/host.wav", rng.uniform(-0.5, 0.5, (9600, 2)), subtype="PCM_24")
    write_audio("src/marsh/dawn.wav", rng.uniform(-0.5, 0.5, 9600), rate=44100, subtype="PCM_24")
    recipe = src / "r.yaml"
    recipe.write_text("format: 1\nchain:\n  - {type: highpass, freq: 80, order: 4}\n"
                      "  - {type: peak, freq: 3000, gain_db: 2, q: 1}\noutput: {subtype: PCM_16, dither: tpdf}\n")
    plan = _plan(src, ['{inputs: "**", recipe: r.yaml}'])
    assert run_cli("run", recipe, src, "-o", tmp_path / "plain", "--workers", "1")[0] == 0
    assert run_cli("run", "--plan", plan, "-o", tmp_path / "planned", "--workers", "2")[0] == 0
    # the plain run of the same recipe is the reference: every delivered file byte for byte the same
    for rel in ("boathouse/host.wav", "marsh/dawn.wav"):
        assert (tmp_path / "plain" / rel).read_bytes() == (tmp_path / "planned" / rel).read_bytes()
    assert sorted(os.listdir(tmp_path / "plain")) == sorted(os.listdir(tmp_path / "planned"))
