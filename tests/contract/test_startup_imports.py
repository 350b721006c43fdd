"""What a command loads before it reads a sample: a recipe without raw ``iir`` sections is checked,
designed, assessed and filtered without importing scipy.signal (about 0.6 s and 75 MB of start-up,
benchmarks/RESULTS.md); raw ``iir`` sections still import it (scipy.signal.tf2sos).

chainrun's own promise (issue 17, start-up), no published source: a behaviour, checked from the
modules a fresh process holds when the command ends; its speed is measured in benchmarks/, not here.
"""
from __future__ import annotations

import json
import os
import subprocess
import sys

import chainrun.dsp.compiled as compiled
from support import REPO

PROBE = """
import json, sys
from chainrun.cli import main
status = main(sys.argv[2:])
with open(sys.argv[1], "w") as fh:
    json.dump({"status": status, "modules": sorted(m for m in sys.modules if m.startswith("scipy"))}, fh)
"""


def _modules_after(tmp_path, *argv, address_space: int | None = None) -> tuple[int, set[str]]:
    """Run ``chainrun ARGV`` in a fresh process (under an address-space limit of ``address_space``
    bytes if given); its exit status and the scipy modules it then holds."""
    out = tmp_path / "modules.json"
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(REPO), os.environ.get("PYTHONPATH", "")]))

    def limit():
        import resource
        resource.setrlimit(resource.RLIMIT_AS, (address_space, address_space))

    proc = subprocess.run([sys.executable, "-c", PROBE, str(out), *map(str, argv)], capture_output=True,
                          text=True, env=env, cwd=tmp_path, timeout=300,
                          preexec_fn=limit if address_space else None)
    assert proc.returncode == 0 and out.exists(), proc.stderr
    seen = json.loads(out.read_text())
    return seen["status"], set(seen["modules"])


def test_check_of_a_recipe_without_raw_sections_does_not_import_scipy_signal(tmp_path):
    # marsh-cleanup: a 4th-order Butterworth high-pass and four cookbook notches
    status, modules = _modules_after(tmp_path, "check", REPO / "recipes" / "marsh-cleanup.yaml",
                                     REPO / "recipes" / "boathouse-stems.yaml")
    assert status == 0
    assert "scipy.signal" not in modules and "scipy.optimize" not in modules, sorted(modules)
    # the guard's impulse response: chainrun's optional compiled loop, else scipy's kernel alone
    assert ("scipy.signal._sosfilt" in modules) == (not compiled.AVAILABLE)


def test_the_run_path_of_a_recipe_without_raw_sections_does_not_import_scipy_signal(tmp_path):
    # design, guard, filter, write and report; the meters are switched off here because they are
    # separate modules with their own dependencies (chainrun/meters/)
    status, modules = _modules_after(tmp_path, "run", REPO / "recipes" / "marsh-cleanup.yaml",
                                     REPO / "samples" / "marsh", "-o", tmp_path / "out", "--workers", "1",
                                     "--no-true-peak", "--no-loudness", "-q")
    assert status == 0
    assert (tmp_path / "out" / "dawn_ambience.wav").exists()
    assert "scipy.signal" not in modules and "scipy.optimize" not in modules, sorted(modules)


def test_the_default_run_path_with_every_meter_does_not_import_scipy_signal(tmp_path):
    # the meters take the true-peak interpolator (a Kaiser-window low-pass) and the K-weighting filter's
    # compiled loop from chainrun.dsp; two workers, so the loops are loaded before the workers fork
    status, modules = _modules_after(tmp_path, "run", REPO / "recipes" / "boathouse-stems.yaml",
                                     REPO / "samples", "-o", tmp_path / "out", "--workers", "2", "-q")
    assert status == 0
    assert (tmp_path / "out" / "boathouse" / "host_stem.wav").exists()
    assert "scipy.signal" not in modules and "scipy.optimize" not in modules, sorted(modules)
    # scipy's compiled loops alone, preloaded before the fork, unless chainrun's own serve
    kernels = {"scipy.signal._sosfilt", "scipy.signal._sigtools"}
    assert (kernels <= modules) if not compiled.AVAILABLE else not (kernels & modules)


def test_under_a_memory_limit_check_tries_only_what_it_loads(tmp_path):
    # under ``ulimit -v`` the command first tries what it will load (chainrun.cli); for check that is
    # the numpy designs and the sosfilt kernel, not scipy.signal
    status, modules = _modules_after(tmp_path, "check", REPO / "recipes" / "marsh-cleanup.yaml",
                                     address_space=2 << 30)
    assert status == 0
    assert "scipy.signal" not in modules and "scipy.optimize" not in modules, sorted(modules)


def test_a_raw_iir_section_still_imports_scipy_signal(tmp_path):
    # the counter-check: the probe sees scipy.signal when a command does need it (tf2sos)
    status, modules = _modules_after(tmp_path, "check", REPO / "recipes" / "unstable-hand-typed.yaml")
    assert status == 1                                       # the recipe is unstable on purpose
    assert "scipy.signal" in modules
