"""The Python API (README.md, "Python API"): the same results as the command line.

chainrun's own contract, no published source: a script that imports chainrun gets the same
checks, the same output bytes and the same reports as the commands.
"""
from __future__ import annotations

import hashlib
import os
import re
from pathlib import Path

import chainrun
from chainrun.cli import main
from support import REPO



def _sha(path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def _outputs(folder: Path) -> dict[str, str]:
    return {str(p.relative_to(folder)): _sha(p) for p in sorted(folder.rglob("*"))
            if p.is_file() and not p.name.startswith((".", "chainrun-report"))}


def test_public_names_are_the_documented_handful():
    assert set(chainrun.__all__) == {"__version__", "load", "loads", "from_dict", "design", "assess", "filter_file",
                                     "check", "run", "scan", "plot", "write_reports", "Recipe", "RecipeError",
                                     "Chain", "Assessment", "FileResult", "BatchResult", "run_batch"}


def test_run_from_python_delivers_the_command_line_s_bytes(tmp_path, capsys):
    recipe = str(REPO / "recipes" / "boathouse-stems.yaml")
    assert main(["run", recipe, str(REPO / "samples"), "-o", str(tmp_path / "cli"), "--workers", "1"]) == 0
    capsys.readouterr()
    outcome = chainrun.run(recipe, [str(REPO / "samples")], str(tmp_path / "api"), workers=2)
    assert outcome.result.all_ok and set(outcome.report_paths) == {"json", "csv", "html"}
    assert _outputs(tmp_path / "api") == _outputs(tmp_path / "cli") != {}


def test_render_one_file_equals_a_run_of_that_file(tmp_path, capsys):
    recipe = chainrun.load(REPO / "recipes" / "boathouse-stems.yaml")
    take = REPO / "samples" / "boathouse" / "host_stem.wav"
    assert main(["run", str(REPO / "recipes" / "boathouse-stems.yaml"), str(take), "-o", str(tmp_path / "cli")]) == 0
    capsys.readouterr()
    r = chainrun.filter_file(recipe, str(take), str(tmp_path / "host_stem.wav"))
    assert r.status == "ok" and r.output == str(tmp_path / "host_stem.wav")
    assert _sha(tmp_path / "host_stem.wav") == _sha(tmp_path / "cli" / "host_stem.wav")


def test_render_refuses_a_rate_the_recipe_cannot_serve(tmp_path, write_audio):
    import numpy as np

    take = write_audio("in/low.wav", np.zeros((800, 1)), 8000, "PCM_16")
    recipe = chainrun.loads("format: 1\nchain:\n  - {type: peak, freq: 6000, gain_db: 3, q: 1}\n")
    r = chainrun.filter_file(recipe, str(take), str(tmp_path / "out.wav"))
    # analytic: 6000 Hz is above Nyquist (4000 Hz) at 8 kHz, so the section cannot exist there
    assert r.status == "rejected" and "Nyquist" in r.message and not (tmp_path / "out.wav").exists()


def test_the_readme_example_runs(tmp_path, monkeypatch):
    text = (REPO / "README.md").read_text(encoding="utf-8")
    section = text[text.index("## Python API"):]
    code = re.search(r"```python\n(.*?)```", section, re.S).group(1)
    for name in ("recipes", "samples"):
        os.symlink(REPO / name, tmp_path / name)
    monkeypatch.chdir(tmp_path)
    code = code.replace('"/tmp/', f'"{tmp_path}/')
    exec(compile(code, "README.md (Python API)", "exec"), {})
    assert (tmp_path / "out" / "chainrun-report.html").exists() and (tmp_path / "host_stem.wav").exists()
