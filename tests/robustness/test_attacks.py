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
from support import temporaries

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


# --- B: resume never trusts an output made from a file that is no longer there -------------------

def _same_size_and_mtime_other_file(path: Path, seed: int) -> None:
    """Put another recording in place of ``path``: same size, same modification time, another inode."""
    st = path.stat()
    info = sf.info(str(path))
    other = path.with_name(".replacement.wav")
    data = np.random.default_rng(seed).uniform(-0.3, 0.3, (info.frames, info.channels))
    sf.write(str(other), data, info.samplerate, subtype=info.subtype)
    assert other.stat().st_size == st.st_size
    os.utime(other, ns=(st.st_atime_ns, st.st_mtime_ns))
    os.replace(other, path)


def test_an_input_replaced_between_render_and_journal_is_not_recorded(tmp_path, run_cli, monkeypatch):
    import chainrun.batch.executors as executors

    write_season(tmp_path / "in", {"marsh/curlew.wav": 20_000, "marsh/tide.wav": 20_000})
    (tmp_path / "r.yaml").write_text(RECIPE)
    victim = tmp_path / "in" / "marsh" / "tide.wav"
    real = executors.render_file

    def render_then_swap(src, dst, *a, **k):
        r = real(src, dst, *a, **k)
        if src.path == str(victim):
            _same_size_and_mtime_other_file(victim, 99)      # after the renderer's own check
        return r

    monkeypatch.setattr(executors, "render_file", render_then_swap)
    status, _, err = run_cli("run", tmp_path / "r.yaml", tmp_path / "in", "-o", tmp_path / "out", "--workers", "1")
    monkeypatch.undo()
    assert status == 1 and "tide.wav" in err and "replaced or changed right after it was rendered" in err, err
    journal = (tmp_path / "out" / ".chainrun-journal.jsonl").read_text()
    assert "tide.wav" not in journal and "curlew.wav" in journal
    # the next run renders the file now there: its output equals a run of that file alone
    status, _, err = run_cli("run", tmp_path / "r.yaml", tmp_path / "in", "-o", tmp_path / "out", "--workers", "1")
    assert status == 0, err
    status, _, err = run_cli("run", tmp_path / "r.yaml", victim, "-o", tmp_path / "alone", "--workers", "1")
    assert status == 0, err
    assert (tmp_path / "out" / "marsh" / "tide.wav").read_bytes() == (tmp_path / "alone" / "tide.wav").read_bytes()


def test_an_input_replaced_after_its_journal_line_is_rendered_again(tmp_path, run_cli):
    write_season(tmp_path / "in", {"marsh/tide.wav": 200_000})     # > 128 KiB: the middle is not hashed
    (tmp_path / "r.yaml").write_text(RECIPE)
    victim = tmp_path / "in" / "marsh" / "tide.wav"
    argv = ("run", tmp_path / "r.yaml", tmp_path / "in", "-o", tmp_path / "out", "--workers", "1")
    assert run_cli(*argv)[0] == 0
    # another file with the same head, tail, size and modification time: only the middle differs
    raw = bytearray(victim.read_bytes())
    st = victim.stat()
    mid = len(raw) // 2
    raw[mid:mid + 3000] = bytes(3000)
    other = victim.with_name(".other.wav")
    other.write_bytes(bytes(raw))
    os.utime(other, ns=(st.st_atime_ns, st.st_mtime_ns))
    os.replace(other, victim)
    status, _, err = run_cli(*argv)
    assert status == 0 and "already delivered" not in err, err
    assert run_cli("run", tmp_path / "r.yaml", victim, "-o", tmp_path / "alone", "--workers", "1")[0] == 0
    assert (tmp_path / "out" / "marsh" / "tide.wav").read_bytes() == (tmp_path / "alone" / "tide.wav").read_bytes()


# --- C: nested output folders ---------------------------------------------------------------------

def test_a_run_into_a_parent_folder_leaves_another_runs_subfolder_alone(tmp_path, run_cli):
    (tmp_path / "r.yaml").write_text(RECIPE)
    write_season(tmp_path / "evening", {"tide.wav": 12_000})
    write_season(tmp_path / "season", {"sub/tide.wav": 12_000, "marsh/heron.wav": 12_000})
    # an earlier run into out/sub
    assert run_cli("run", tmp_path / "r.yaml", tmp_path / "evening", "-o", tmp_path / "out" / "sub",
                   "--workers", "1")[0] == 0
    before = (tmp_path / "out" / "sub" / "tide.wav").read_bytes()
    journal = (tmp_path / "out" / "sub" / ".chainrun-journal.jsonl").read_bytes()
    # a run into out/ whose tree has a folder 'sub'
    status, _, err = run_cli("run", tmp_path / "r.yaml", tmp_path / "season", "-o", tmp_path / "out",
                             "--workers", "1")
    assert status == 1, err
    said = [ln for ln in err.splitlines() if ln.startswith(str(tmp_path / "season" / "sub" / "tide.wav"))]
    assert len(said) == 1 and "holds another run's lock or resume journal" in said[0], err
    assert (tmp_path / "out" / "sub" / "tide.wav").read_bytes() == before
    assert (tmp_path / "out" / "sub" / ".chainrun-journal.jsonl").read_bytes() == journal
    assert (tmp_path / "out" / "marsh" / "heron.wav").exists()


def test_a_run_started_in_a_subfolder_during_a_run_is_left_alone(tmp_path, run_cli, monkeypatch):
    import chainrun.batch.executors as executors

    (tmp_path / "r.yaml").write_text(RECIPE)
    write_season(tmp_path / "season", {"a/first.wav": 24_000, "sub/tide.wav": 12_000})   # longest first
    real = executors.render_file
    foreign = tmp_path / "out" / "sub"

    def render_then_other_run(src, dst, *a, **k):
        r = real(src, dst, *a, **k)
        if not foreign.exists():                 # another batch claims out/sub after our first file
            foreign.mkdir(parents=True)
            (foreign / ".chainrun.lock").write_text('{"pid": 1, "host": "elsewhere"}\n')
            (foreign / "tide.wav").write_bytes(b"the other run's output")
        return r

    monkeypatch.setattr(executors, "render_file", render_then_other_run)
    status, _, err = run_cli("run", tmp_path / "r.yaml", tmp_path / "season", "-o", tmp_path / "out",
                             "--workers", "1")
    assert status == 1 and "holds another run's lock" in err, err
    assert (foreign / "tide.wav").read_bytes() == b"the other run's output"


def test_an_outdir_deleted_mid_run_is_not_recreated(tmp_path, run_cli, monkeypatch):
    import shutil

    import chainrun.batch.executors as executors

    (tmp_path / "r.yaml").write_text(RECIPE)
    write_season(tmp_path / "season", {"a/first.wav": 24_000, "b/second.wav": 12_000})
    real = executors.render_file
    out = tmp_path / "out"

    def render_then_delete(src, dst, *a, **k):
        r = real(src, dst, *a, **k)
        shutil.rmtree(out, ignore_errors=True)   # someone clears the output folder mid-run
        return r

    monkeypatch.setattr(executors, "render_file", render_then_delete)
    status, _, err = run_cli("run", tmp_path / "r.yaml", tmp_path / "season", "-o", out, "--workers", "1")
    assert status == 1, err
    said = [ln for ln in err.splitlines() if ln.startswith(str(tmp_path / "season" / "b" / "second.wav"))]
    assert len(said) == 1 and "disappeared during the run; not re-created" in said[0], err
    assert not (out / "b").exists()


# --- D: every file under an input root is accounted for -------------------------------------------

def test_hidden_recordings_are_delivered_or_listed_never_dropped(tmp_path, run_cli):
    (tmp_path / "r.yaml").write_text(RECIPE)
    root = tmp_path / "marsh"
    delivered = [".take.wav", ".hidden/heron.wav", "dawn.chainrun-part-notes.wav", "..slack.wav"]
    write_season(root, {rel: 6_000 for rel in delivered})
    write_season(root, {"tide.wav": 6_000})
    (root / "._tide.wav").write_bytes(b"\0\5\26\7" + bytes(60))           # AppleDouble metadata
    leftover = ".tide.wav.chainrun-part-0123abcd"                          # exactly a temporary's name
    (root / leftover).write_bytes((root / "tide.wav").read_bytes())
    status, _, err = run_cli("run", tmp_path / "r.yaml", root, "-o", tmp_path / "out", "--workers", "1")
    assert status == 0, err
    report = json.loads((tmp_path / "out" / "chainrun-report.json").read_text())
    by_rel = {f["relpath"]: f for f in report["files"]}
    for rel in [*delivered, "tide.wav"]:
        assert by_rel[rel]["status"] == "ok", (rel, by_rel.get(rel))
        assert sf.info(str(tmp_path / "out" / rel)).frames == 6_000      # and the clean-up left it alone
    assert by_rel["._tide.wav"]["status"] == "skipped"
    assert by_rel[leftover]["status"] == "skipped" and "temporary file" in by_rel[leftover]["message"]
    assert len(by_rel) == len(delivered) + 3                               # every file, once


def test_explicitly_named_odd_names(tmp_path, run_cli):
    (tmp_path / "r.yaml").write_text(RECIPE)
    write_season(tmp_path / "in", {"..take.wav": 6_000, ".keep.chainrun-part-final.wav": 6_000})
    exact = tmp_path / "in" / ".dawn.wav.chainrun-part-89abcdef"
    exact.write_bytes((tmp_path / "in" / "..take.wav").read_bytes())        # found by its RIFF magic
    status, _, err = run_cli("run", tmp_path / "r.yaml", tmp_path / "in" / "..take.wav",
                             tmp_path / "in" / ".keep.chainrun-part-final.wav", exact,
                             "-o", tmp_path / "out", "--workers", "1")
    assert status == 1, err
    said = [ln for ln in err.splitlines() if ln.startswith(str(exact))]
    assert len(said) == 1 and "exact shape of chainrun's temporary files" in said[0], err
    assert sf.info(str(tmp_path / "out" / "..take.wav")).frames == 6_000
    assert sf.info(str(tmp_path / "out" / ".keep.chainrun-part-final.wav")).frames == 6_000
    assert not (tmp_path / "out" / exact.name).exists()
    # a second run (resume, clean-up of leftovers) keeps both delivered outputs
    run_cli("run", tmp_path / "r.yaml", tmp_path / "in" / "..take.wav",
            tmp_path / "in" / ".keep.chainrun-part-final.wav", "-o", tmp_path / "out", "--workers", "1")
    assert (tmp_path / "out" / ".keep.chainrun-part-final.wav").exists()


# --- E: resource limits end with one clear line and an exit --------------------------------------

def _limited_run(tmp_path, which, value, workers):
    import resource

    write_season(tmp_path / "in", {f"marsh/take{i}.wav": 20_000 for i in range(4)})
    (tmp_path / "r.yaml").write_text(RECIPE)

    def limit():
        resource.setrlimit(which, (value, value))

    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONWARNINGS", "OPENBLAS_NUM_THREADS")}
    try:
        return subprocess.run([sys.executable, "-m", "chainrun", "run", str(tmp_path / "r.yaml"),
                               str(tmp_path / "in"), "-o", str(tmp_path / "out"), "--workers", str(workers)],
                              capture_output=True, text=True, timeout=120, preexec_fn=limit, env=env)
    except subprocess.TimeoutExpired as exc:
        raise AssertionError(f"hung under the limit: {exc.stderr!r}") from None


@pytest.mark.parametrize("nofile", [10, 14])
def test_too_few_file_descriptors_for_the_pool(tmp_path, nofile):
    import resource

    proc = _limited_run(tmp_path, resource.RLIMIT_NOFILE, nofile, 2)
    assert proc.returncode in (0, 1), proc.stderr
    assert "Traceback" not in proc.stderr and "internal error" not in proc.stderr, proc.stderr
    assert "could not be started (too many open files)" in proc.stderr, proc.stderr
    for ln in proc.stderr.splitlines():      # every line is chainrun's own, one per file or about the run
        assert ln.startswith(("chainrun: ", str(tmp_path))), proc.stderr
    assert not (tmp_path / "out" / LOCK_NAME).exists() and temporaries(tmp_path / "out") == []


@pytest.mark.parametrize("mib", [200, 250, 300])
def test_a_memory_limit_too_small_is_one_line(tmp_path, mib):
    import resource

    proc = _limited_run(tmp_path, resource.RLIMIT_AS, mib << 20, 2)
    assert proc.returncode == 2, proc.stderr
    assert proc.stderr.splitlines() == [f"chainrun: error: the memory limit (ulimit -v, {mib} MiB of address space) "
                                        "is too small for chainrun to start; raise it (500 MiB is ample for one "
                                        "worker)"], proc.stderr
    assert not (tmp_path / "out").exists()


# --- F: an output folder swapped for a link mid-run -----------------------------------------------

def test_an_output_folder_swapped_for_a_link_mid_run_writes_nothing_outside(tmp_path, run_cli, monkeypatch):
    import chainrun.batch.executors as executors

    (tmp_path / "r.yaml").write_text(RECIPE)
    write_season(tmp_path / "in", {"a/first.wav": 24_000, "sub/tide.wav": 12_000})
    outside = tmp_path / "catalogue"
    outside.mkdir()
    out = tmp_path / "out"
    real = executors.render_file

    def swap_then_render(src, dst, *a, **k):
        if src.path.endswith("tide.wav"):        # its folder is open now: swap it for a link to outside
            os.rename(out / "sub", out / "sub.moved")
            os.symlink(outside, out / "sub")
        return real(src, dst, *a, **k)

    monkeypatch.setattr(executors, "render_file", swap_then_render)
    status, _, err = run_cli("run", tmp_path / "r.yaml", tmp_path / "in", "-o", out, "--workers", "1")
    assert status == 1, err
    said = [ln for ln in err.splitlines() if ln.startswith(str(tmp_path / "in" / "sub" / "tide.wav"))]
    assert len(said) == 1 and "was moved or replaced" in said[0], err
    assert os.listdir(outside) == []                                   # nothing written outside OUTDIR
    assert os.listdir(out / "sub.moved") == []                         # and the output was removed
    assert sf.info(str(out / "a" / "first.wav")).frames == 24_000
