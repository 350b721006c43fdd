"""Attacks on a running batch from outside: stop signals, swapped inputs, nested output folders,
hidden recordings, resource limits, a folder swapped for a link.

Each test runs real ``python -m chainrun`` processes (or the batch itself) and checks the outcome
against the file system: bytes, names, the lock, the report. The expectations are chainrun's own
contract (RELIABILITY.md); the exit status for a death by signal follows the shell convention
128 + signal number (POSIX `sh`, "Exit Status for Commands": a command killed by a signal reports
a status greater than 128; bash and dash use 128 + N — common practice).
"""
from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from chainrun.batch.outdir import LOCK_NAME
from chainrun.fsutil import TEMP_TAG

RECIPE = """\
format: 1
name: Saltings Hour marsh chain
chain:
  - {type: highpass, freq: 80, order: 2, label: reed rumble}
  - {type: peak, freq: 2500, gain_db: 1.5, q: 1}
  - {type: gain, gain_db: -3}
"""


def chainrun(*argv, **kw) -> subprocess.Popen:
    env = {k: v for k, v in os.environ.items() if k != "PYTHONWARNINGS"}
    env.update(kw.pop("env", {}))
    return subprocess.Popen([sys.executable, "-m", "chainrun", *map(str, argv)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=env, **kw)


def temporaries(outdir: Path) -> list[str]:
    return sorted(os.path.join(r, f) for r, _, fs in os.walk(outdir) for f in fs if TEMP_TAG in f)


def write_season(root: Path, names: dict[str, int], rate: int = 48000) -> None:
    rng = np.random.default_rng(7)
    for rel, frames in names.items():
        (root / rel).parent.mkdir(parents=True, exist_ok=True)
        sf.write(str(root / rel), rng.uniform(-0.3, 0.3, (frames, 2)), rate, subtype="PCM_24")


def children_of(pid: int) -> list[int]:
    found = []
    for p in os.listdir("/proc"):
        if not p.isdigit():
            continue
        try:
            with open(f"/proc/{p}/stat") as fh:
                fields = fh.read().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[1]) == pid and fields[0] != "Z":
            found.append(int(p))
    return found


# --- A: SIGTERM, SIGHUP, SIGQUIT are taken like Ctrl-C -------------------------------------------

@pytest.mark.parametrize("signame,workers", [("SIGTERM", 1), ("SIGTERM", 2), ("SIGHUP", 2), ("SIGQUIT", 1)])
def test_stop_signals_are_taken_like_ctrl_c(tmp_path, signame, workers):
    signum = getattr(signal, signame)
    write_season(tmp_path / "in", {f"marsh/take{i}.wav": 40_000 for i in range(4)})
    (tmp_path / "r.yaml").write_text(RECIPE)
    out = tmp_path / "out"
    proc = chainrun("run", tmp_path / "r.yaml", tmp_path / "in", "-o", out, "--workers", workers,
                    "--block-size", "32")
    t0 = time.monotonic()
    while not temporaries(out):
        assert proc.poll() is None, proc.communicate()
        assert time.monotonic() - t0 < 60, "no temporary file appeared"
        time.sleep(0.002)
    time.sleep(0.1)
    kids = children_of(proc.pid)
    proc.send_signal(signum)
    stdout, stderr = proc.communicate(timeout=60)
    # common practice (shell convention): 128 + the signal's number
    assert proc.returncode == 128 + signum, stderr
    assert "Traceback" not in stderr
    lines = stderr.splitlines()
    assert f"chainrun: stopped by {signame}, as by Ctrl-C; exit status {128 + signum}" in lines, stderr
    assert any(ln.startswith("chainrun: interrupted") for ln in lines), stderr
    assert temporaries(out) == []
    assert not (out / LOCK_NAME).exists()
    report = json.loads((out / "chainrun-report.json").read_text())
    assert report["summary"]["interrupted"] is True
    delivered = [f for f in report["files"] if f["status"] == "ok"]
    for f in delivered:                      # what the report calls delivered is there, complete
        assert sf.info(str(out / f["relpath"])).frames == 40_000
    time.sleep(1.5)
    assert [k for k in kids if alive(k)] == []        # no worker outlives the batch


def alive(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().rsplit(")", 1)[1].split()[0] != "Z"
    except OSError:
        return False
