"""``chainrun run --cluster``: the same batch on Dask workers, with a local run's guarantees.

Every cluster here listens on 127.0.0.1 only; every process a test starts is bounded in time and
stopped by the test. The reference for the audio is a local run (``--workers 1``) of the same batch,
itself checked against scipy.signal.sosfilt elsewhere (tests/contract/test_run_cli.py): a cluster run must be
byte-identical to it. The worker killed by a "killer" file is a Dask ``--preload`` module that wraps
the worker-side function (the worker process really dies, with os._exit, mid-task).
"""
from __future__ import annotations

import importlib.util
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

from support import REPO, report_of, temporaries

HAVE_DASK = importlib.util.find_spec("distributed") is not None
needs_dask = pytest.mark.skipif(not HAVE_DASK, reason="Dask's distributed scheduler is not installed "
                                                      "(pip install 'chainrun[cluster]')")

RECIPE = """\
format: 1
name: Saltings Hour marsh chain
chain:
  - {type: highpass, freq: 60, order: 4, label: tide rumble}
  - {type: peak, freq: 2500, gain_db: 1.5, q: 1}
  - {type: gain, gain_db: -3}
"""
FILES = {   # relpath: (frames, channels, rate, subtype)
    "boathouse/host.wav": (48_000, 2, 48000, "PCM_24"),
    "boathouse/guest.wav": (44_000, 2, 48000, "PCM_24"),
    "boathouse/room_tone.wav": (40_000, 1, 48000, "PCM_16"),
    "marsh/dawn.wav": (42_000, 1, 44100, "FLOAT"),
    "marsh/curlew.flac": (38_000, 2, 44100, "PCM_16"),
    "marsh/ebb.wav": (36_000, 2, 48000, "PCM_24"),
}
SLOW_BLOCK = "64"          # the block size never changes the output; a small one makes a file take seconds
REPORTS = ("chainrun-report.json", "chainrun-report.csv", "chainrun-report.html")
PRELOAD = '''\
"""Dask worker preload: a file whose name holds "killer" takes its worker process down, mid-task."""
import os
import chainrun.batch.cluster as cluster

_real = cluster._render_on_worker


def _render_on_worker(task, event_name):
    if "killer" in task.job.relpath:
        os._exit(13)
    return _real(task, event_name)


cluster._render_on_worker = _render_on_worker
'''


def env() -> dict:
    e = {k: v for k, v in os.environ.items() if k != "PYTHONWARNINGS"}
    e["PYTHONPATH"] = str(REPO) + (os.pathsep + e["PYTHONPATH"] if e.get("PYTHONPATH") else "")
    return e


def chainrun(*argv, **kw) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "chainrun", *map(str, argv)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=env(), **kw)


def finals(outdir: Path) -> dict[str, bytes]:
    out = {}
    for root, _, files in os.walk(outdir):
        for f in files:
            if not f.startswith(".") and not f.startswith("chainrun-report"):    # reports, earlier ones dated
                p = os.path.join(root, f)
                out[os.path.relpath(p, outdir)] = Path(p).read_bytes()
    return out


def wait_until(cond, timeout: float, what: str):
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        got = cond()
        if got:
            return got
        time.sleep(0.05)
    raise AssertionError(f"timed out after {timeout} s waiting for {what}")


def stop(proc: subprocess.Popen) -> None:
    if proc.poll() is None:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=10)


@pytest.fixture(scope="module")
def batch(tmp_path_factory):
    """The inputs, the recipe and the outputs of a local run (the reference)."""
    d = tmp_path_factory.mktemp("cluster")
    rng = np.random.default_rng(716)
    for rel, (frames, ch, rate, subtype) in FILES.items():
        (d / "in" / rel).parent.mkdir(parents=True, exist_ok=True)
        sf.write(str(d / "in" / rel), rng.uniform(-0.4, 0.4, (frames, ch)), rate, subtype=subtype)
    (d / "recipe.yaml").write_text(RECIPE)
    proc = chainrun("run", d / "recipe.yaml", d / "in", "-o", d / "reference", "--workers", "1")
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 0, err
    ref = finals(d / "reference")
    assert len(ref) == len(FILES)
    return d, ref


class Scheduler:
    """A real ``dask scheduler`` and ``dask worker`` processes on 127.0.0.1, started and stopped here."""

    def __init__(self, folder: Path, workers: int = 2):
        self.folder = folder
        self.procs: list[subprocess.Popen] = []
        folder.mkdir(parents=True, exist_ok=True)
        (folder / "chainrun_killer_preload.py").write_text(PRELOAD)
        e = env()
        # Set on the scheduler we start: a file may take down one worker, not two; one task per worker thread.
        e["DASK_DISTRIBUTED__SCHEDULER__ALLOWED_FAILURES"] = "1"
        e["DASK_DISTRIBUTED__SCHEDULER__WORKER_SATURATION"] = "1.0"
        e["PYTHONPATH"] = f"{folder}{os.pathsep}{e['PYTHONPATH']}"
        self.env = e
        info = folder / "scheduler.json"
        self.scheduler = self._start(["distributed.cli.dask_scheduler", "--host", "127.0.0.1", "--port", "0",
                                      "--no-dashboard", "--scheduler-file", str(info), "--idle-timeout", "600"])
        wait_until(lambda: info.exists() and info.stat().st_size > 0, 60, "the scheduler to start")
        self.address = json.loads(info.read_text())["address"]
        assert self.address.startswith("tcp://127.0.0.1:")
        for _ in range(workers):
            self._start(["distributed.cli.dask_worker", self.address, "--host", "127.0.0.1", "--nthreads", "1",
                         "--nworkers", "1", "--no-dashboard", "--death-timeout", "60",
                         "--preload", "chainrun_killer_preload", "--local-directory", str(folder / "space")])
        self.wait_for_workers(workers)

    def _start(self, args: list[str]) -> subprocess.Popen:
        proc = subprocess.Popen([sys.executable, "-m", *args], cwd=self.folder, env=self.env,
                                stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True)
        self.procs.append(proc)
        return proc

    def client(self):
        from distributed import Client

        return Client(self.address, timeout=30)

    def wait_for_workers(self, n: int) -> None:
        with self.client() as c:
            c.wait_for_workers(n, timeout=60)

    def worker_pids(self) -> dict[str, int]:
        with self.client() as c:
            return c.run(os.getpid)

    def close(self) -> None:
        for proc in reversed(self.procs):       # the workers (and their nannies' children), then the scheduler
            if proc.poll() is None:
                try:
                    os.killpg(proc.pid, signal.SIGTERM)
                except OSError:
                    pass
        for proc in self.procs:
            try:
                proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                os.killpg(proc.pid, signal.SIGKILL)
                proc.wait(timeout=10)


@pytest.fixture(scope="module")
def scheduler(tmp_path_factory):
    if not HAVE_DASK:
        pytest.skip("Dask's distributed scheduler is not installed")
    s = Scheduler(tmp_path_factory.mktemp("scheduler"))
    try:
        yield s
    finally:
        s.close()


# =========================================================================== the missing extra


def test_without_dask_cluster_says_which_extra_to_install(batch, tmp_path, run_cli, monkeypatch):
    d, _ = batch

    class Blocker:
        def find_spec(self, name, path=None, target=None):
            if name == "distributed" or name.startswith("distributed."):
                raise ImportError(f"No module named {name!r} (blocked by the test)")
            return None

    for name in [m for m in sys.modules if m == "distributed" or m.startswith("distributed.")]:
        monkeypatch.delitem(sys.modules, name)
    monkeypatch.setattr(sys, "meta_path", [Blocker(), *sys.meta_path])
    status, out, err = run_cli("run", str(d / "recipe.yaml"), str(d / "in"), "-o", str(tmp_path / "out"),
                               "--cluster", "local:2")
    assert status == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "pip install 'chainrun[cluster]'" in lines[0], err
    assert not (tmp_path / "out").exists()


def test_a_malformed_cluster_address_is_one_line(batch, tmp_path, run_cli):
    d, _ = batch
    for address in ("local:0", "local:two", "somewhere"):
        status, _, err = run_cli("run", str(d / "recipe.yaml"), str(d / "in"), "-o", str(tmp_path / "out"),
                                 "--cluster", address)
        assert status == 2 and len(err.strip().splitlines()) == 1 and "tcp://HOST:PORT" in err, err
    assert not (tmp_path / "out").exists()


# =========================================================================== same bytes as a local run


@needs_dask
@pytest.mark.slow
def test_local_cluster_batch_is_byte_identical_to_a_local_run(batch, tmp_path):
    d, ref = batch
    out = tmp_path / "out"
    proc = chainrun("run", d / "recipe.yaml", d / "in", "-o", out, "--cluster", "local:2")
    _, err = proc.communicate(timeout=180)
    assert proc.returncode == 0, err
    assert finals(out) == ref               # byte-identical to the local run (the reference)
    assert not temporaries(out)
    report = report_of(out)
    workers = {f["relpath"]: f.get("worker") for f in report["files"]}
    assert set(workers) == set(FILES)
    assert all(w and w.startswith("tcp://127.0.0.1:") for w in workers.values()), workers
    assert report["summary"]["wall_seconds"] > 0
    assert "Traceback" not in err


@needs_dask
@pytest.mark.slow
def test_a_local_cluster_starts_without_a_warning_when_port_8787_is_taken(batch, tmp_path, run_cli):
    # Dask's scheduler starts its HTTP endpoints on 8787 by default even with the dashboard off, and
    # warns when that port is held (by a second run, or any other program): a local cluster must take
    # any free port instead. run_cli fails the test on any Python warning.
    import socket
    d, ref = batch
    holder = socket.socket()
    try:
        holder.bind(("0.0.0.0", 8787))
    except OSError:
        pass                            # already held by someone else: the case under test all the same
    else:
        holder.listen()
    try:
        status, _, err = run_cli("run", "-q", d / "recipe.yaml", d / "in", "-o", tmp_path / "out",
                                 "--cluster", "local:1")
    finally:
        holder.close()
    assert status == 0, err
    assert finals(tmp_path / "out") == ref


@needs_dask
@pytest.mark.slow
def test_a_running_scheduler_renders_the_batch_and_a_second_run_resumes(batch, scheduler, tmp_path):
    d, ref = batch
    out = tmp_path / "out"
    proc = chainrun("run", d / "recipe.yaml", d / "in", "-o", out, "--cluster", scheduler.address)
    _, err = proc.communicate(timeout=180)
    assert proc.returncode == 0, err
    assert finals(out) == ref
    pids = scheduler.worker_pids()
    assert {f["worker"] for f in report_of(out)["files"]} <= set(pids)
    # the client alone wrote the journal: a second run keeps every file
    proc = chainrun("run", d / "recipe.yaml", d / "in", "-o", out, "--cluster", scheduler.address)
    _, err = proc.communicate(timeout=180)
    assert proc.returncode == 0, err
    assert all(f.get("resumed") for f in report_of(out)["files"])


@needs_dask
def test_a_worker_that_cannot_see_outdir_is_refused_in_one_line(batch, scheduler, tmp_path, monkeypatch):
    d, _ = batch
    # The workers see the same file system here; a worker "elsewhere" is one that finds another OUTDIR
    # under the same path. Simulated by the one check that tells them apart: the lock this run holds.
    from chainrun.batch.cluster import _worker_sees

    out = tmp_path / "out"
    out.mkdir()
    (out / ".chainrun.lock").write_text('{"pid": 1, "host": "elsewhere"}\n')
    why = _worker_sees(str(out), str(out / ".chainrun.lock"), '{"pid": 2, "host": "here"}\n', None, None,
                       __import__("chainrun.version").version.__version__)
    assert why and "another folder" in why
    # and a run whose first input the workers see otherwise than this process is refused before any
    # audio is read: here this process alone is shown another size (os.stat patched in this process only)
    from chainrun.batch.cluster import ClusterExecutor
    from chainrun.errors import BatchError

    first = d / "in" / "boathouse" / "host.wav"
    real_stat = os.stat

    def stat(path, *a, **k):
        st = real_stat(path, *a, **k)
        if os.fspath(path) == str(first):
            return os.stat_result((st.st_mode, st.st_ino, st.st_dev, st.st_nlink, st.st_uid, st.st_gid,
                                   st.st_size + 1, st.st_atime, st.st_mtime, st.st_ctime))
        return st

    monkeypatch.setattr(os, "stat", stat)
    ex = ClusterExecutor(scheduler.address)
    with pytest.raises(BatchError) as info:
        ex.open(str(out), str(first))
    ex.close()
    message = str(info.value)
    assert "sees another file at" in message and "every worker sees" in message and "\n" not in message


# =========================================================================== faults


@needs_dask
@pytest.mark.slow
def test_a_worker_killed_mid_file_loses_nothing_and_leaves_nothing_half_written(batch, scheduler, tmp_path):
    d, ref = batch
    out = tmp_path / "out"
    pids = scheduler.worker_pids()
    proc = chainrun("run", d / "recipe.yaml", d / "in", "-o", out, "--cluster", scheduler.address,
                    "--block-size", SLOW_BLOCK)
    try:
        wait_until(lambda: temporaries(out), 120, "a file to be rendering")
        victim = sorted(pids.values())[0]
        os.kill(victim, signal.SIGKILL)                      # mid-file: its temporary output is being written
        _, err = proc.communicate(timeout=240)
    finally:
        stop(proc)
    assert proc.returncode == 0, err
    assert finals(out) == ref                                # nothing lost, every output complete and identical
    assert not temporaries(out)                              # nothing half-written left behind
    assert "stopped while rendering" in err, err
    scheduler.wait_for_workers(2)                            # the nanny restarted it


@needs_dask
@pytest.mark.slow
def test_a_file_that_kills_two_workers_fails_with_that_reason(batch, scheduler, tmp_path):
    d, ref = batch
    inputs = tmp_path / "in"
    (inputs / "boathouse").mkdir(parents=True)
    for name in ("host.wav", "guest.wav"):
        (inputs / "boathouse" / name).write_bytes((d / "in" / "boathouse" / name).read_bytes())
    (inputs / "boathouse" / "killer.wav").write_bytes((d / "in" / "boathouse" / "room_tone.wav").read_bytes())
    out = tmp_path / "out"
    proc = chainrun("run", d / "recipe.yaml", inputs, "-o", out, "--cluster", scheduler.address)
    try:
        _, err = proc.communicate(timeout=240)
    finally:
        stop(proc)
    assert proc.returncode == 1, err
    files = {f["relpath"]: f for f in report_of(out)["files"]}
    killer = files[os.path.join("boathouse", "killer.wav")]
    assert killer["status"] == "failed" and "stopped 2 times" in killer["message"], killer
    got = finals(out)
    assert set(got) == {os.path.join("boathouse", n) for n in ("host.wav", "guest.wav")}
    assert all(got[k] == ref[k] for k in got)
    assert not temporaries(out)
    scheduler.wait_for_workers(2)


@needs_dask
@pytest.mark.slow
def test_two_attempts_of_one_file_never_corrupt_it_and_a_finished_run_renders_nothing_more(batch, scheduler,
                                                                                           tmp_path):
    # A worker the scheduler thought lost may still finish its attempt while another worker renders the
    # same file again: each attempt writes its own temporary name and renames a complete file.
    from distributed import Event, wait

    from chainrun.batch.cluster import _render_on_worker
    from chainrun.batch.executors import Task
    from chainrun.batch.plan import prepare
    from chainrun.recipe import load
    from chainrun.render import Policy

    d, ref = batch
    recipe = load(str(d / "recipe.yaml"))
    out = tmp_path / "out"
    prep = prepare(recipe, [str(d / "in")], str(out), Policy.from_recipe(recipe))
    job, src = next((j, s) for j, s in prep.work if j.relpath == os.path.join("boathouse", "host.wav"))
    design = prep.designs[src.rate]
    slow = Policy.from_recipe(recipe, block_size=int(SLOW_BLOCK))
    task = Task(job, src, design.chain.sos, design.assessment.peak_gain, slow)
    with scheduler.client() as c:
        os.makedirs(out, exist_ok=True)
        (out / ".chainrun.lock").write_text("")     # as claim_outdir leaves it: outputs go only into a locked OUTDIR
        name = f"chainrun-stop-test-{os.getpid()}-{time.monotonic_ns()}"
        a = c.submit(_render_on_worker, task, name, pure=False)
        b = c.submit(_render_on_worker, task, name, pure=False)
        wait([a, b], timeout=180)
        ra, rb = a.result(), b.result()
        assert ra.status == rb.status == "ok", (ra.message, rb.message)
        assert ra.extra["worker"] != rb.extra["worker"]     # one attempt on each worker
        rel = os.path.join("boathouse", "host.wav")
        assert finals(out) == {rel: ref[rel]}
        assert not temporaries(out)
        mtime = os.stat(out / rel).st_mtime_ns
        # The run is over (its stop event set): a late attempt renders nothing and leaves the file alone.
        Event(name, client=c).set()
        late = c.submit(_render_on_worker, task, name, pure=False).result(timeout=60)
        assert late.status == "not rendered" and "interrupted" in late.message
        assert os.stat(out / rel).st_mtime_ns == mtime


@needs_dask
@pytest.mark.slow
def test_ctrl_c_during_a_cluster_run_stops_cleanly_and_the_next_run_resumes(batch, tmp_path):
    import psutil

    d, ref = batch
    out = tmp_path / "out"
    proc = chainrun("run", d / "recipe.yaml", d / "in", "-o", out, "--cluster", "local:2",
                    "--block-size", SLOW_BLOCK)
    try:
        wait_until(lambda: temporaries(out), 120, "a file to be rendering")
        children = psutil.Process(proc.pid).children(recursive=True)
        assert children                                       # the local cluster's worker processes
        proc.send_signal(signal.SIGINT)
        _, err = proc.communicate(timeout=60)
    finally:
        stop(proc)
    assert proc.returncode == 1, err
    assert "interrupted" in err and "Traceback" not in err, err
    assert not temporaries(out)
    got = finals(out)
    assert len(got) < len(FILES)                              # stopped before the end
    assert all(got[k] == ref[k] for k in got)                 # what is there is complete
    psutil.wait_procs(children, timeout=20)
    assert not [p for p in children if p.is_running() and p.status() != psutil.STATUS_ZOMBIE]
    proc = chainrun("run", d / "recipe.yaml", d / "in", "-o", out, "--cluster", "local:2")
    _, err = proc.communicate(timeout=180)
    assert proc.returncode == 0, err
    assert finals(out) == ref


@needs_dask
@pytest.mark.slow
def test_a_scheduler_that_goes_away_ends_the_run_with_one_line_and_a_report(batch, tmp_path):
    d, ref = batch
    s = Scheduler(tmp_path / "sched", workers=1)
    out = tmp_path / "out"
    try:
        proc = chainrun("run", d / "recipe.yaml", d / "in", "-o", out, "--cluster", s.address,
                        "--block-size", SLOW_BLOCK)
        try:
            wait_until(lambda: temporaries(out), 120, "a file to be rendering")
            os.killpg(s.scheduler.pid, signal.SIGKILL)
            _, err = proc.communicate(timeout=120)
        finally:
            stop(proc)
    finally:
        s.close()
    assert proc.returncode == 1, err
    gone = [line for line in err.splitlines() if "went away" in line and "note" in line]
    assert len(gone) == 1, err
    assert "Traceback" not in err
    files = report_of(out)["files"]
    assert len(files) == len(FILES)
    delivered = {f["relpath"] for f in files if f["status"] == "ok"}
    assert all(f["status"] == "failed" and "went away" in f["message"] for f in files
               if f["relpath"] not in delivered)
    got = finals(out)
    assert all(got[k] == ref[k] for k in got if k in delivered)
