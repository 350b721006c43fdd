"""Interruptions (issue #4): a real batch, killed at many points, loses nothing and resumes.

A real ``python -m chainrun run`` process renders a small season (four recordings, a tiny block size so
it takes a few seconds) and is stopped with SIGKILL or SIGINT at a kill point: a moment after it starts,
when OUTDIR's lock appears, when the k-th temporary output appears (plus a delay), when the k-th final
output appears, when the JSON report appears. Then:

* every file under a final output name is byte-identical to the output of an uninterrupted run, or
  absent — never incomplete; a report present under its final name is complete JSON;
* after SIGKILL with ``--workers 2``, no worker outlives the batch (they would go on writing unrecorded
  outputs and hold OUTDIR's lock);
* SIGINT exits cleanly: status 1, one line saying it was interrupted, no traceback, no temporary file
  left, the lock released — with ``--workers 1`` and ``--workers 2``;
* the next run (resuming is the default; ``--redo`` would force re-rendering) removes the leftovers
  (``.*.chainrun-part-*``), takes over a stale lock with a note, keeps the outputs the journal shows as
  complete for the same recipe digest and input fingerprint (their bytes and modification times do not
  change), renders the rest, and ends with every output bit-identical to the uninterrupted run.

The figures (kill points tried, where the signal landed, outputs kept, files lost) are collected and
written to ``CHAINRUN_FIGURES/interruptions.json`` when that variable names a folder.
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
from support import REPO, temporaries

pytestmark = pytest.mark.slow

RECIPE = """\
format: 1
name: Saltings Hour boathouse chain
chain:
  - {type: highpass, freq: 70, order: 4, label: slipway rumble}
  - {type: notch, freq: 50, q: 20, label: winch hum}
  - {type: peak, freq: 3000, gain_db: 2, q: 1}
  - {type: gain, gain_db: -2}
"""
FILES = {   # relpath: (frames, channels, rate, subtype)
    "boathouse/host.wav": (40_000, 2, 48000, "PCM_24"),
    "boathouse/guest.wav": (36_000, 2, 48000, "PCM_24"),
    "boathouse/room_tone.wav": (30_000, 2, 48000, "PCM_16"),
    "marsh/dawn.wav": (34_000, 1, 44100, "FLOAT"),
}
SLOW_BLOCK = "32"
REPORTS = ("chainrun-report.json", "chainrun-report.csv", "chainrun-report.html")
FIGURES: list[dict] = []


def chainrun(*argv, **kw) -> subprocess.Popen:
    env = {k: v for k, v in os.environ.items() if k != "PYTHONWARNINGS"}
    return subprocess.Popen([sys.executable, "-m", "chainrun", *map(str, argv)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=env, **kw)


def finals(outdir: Path) -> dict[str, bytes]:
    """Files under their final output names (not chainrun's dot files, not temporaries, not reports)."""
    out = {}
    for root, _, files in os.walk(outdir):
        for f in files:
            if f.startswith(".") or f.startswith("chainrun-report"):     # reports, and earlier runs' dated ones
                continue
            p = os.path.join(root, f)
            out[os.path.relpath(p, outdir)] = Path(p).read_bytes()
    return out


def processes_mentioning(text: str) -> list[int]:
    found = []
    for pid in os.listdir("/proc"):
        if not pid.isdigit():
            continue
        try:
            with open(f"/proc/{pid}/cmdline", "rb") as fh:
                cmd = fh.read().replace(b"\0", b" ").decode(errors="replace")
            with open(f"/proc/{pid}/stat") as fh:
                state = fh.read().rsplit(")", 1)[1].split()[0]
        except OSError:
            continue
        if text in cmd and state != "Z":
            found.append(int(pid))
    return found


@pytest.fixture(scope="module")
def season(tmp_path_factory):
    """The inputs, the recipe and the outputs of one uninterrupted run (the reference)."""
    d = tmp_path_factory.mktemp("season")
    rng = np.random.default_rng(2024)
    for rel, (frames, ch, rate, subtype) in FILES.items():
        (d / "in" / rel).parent.mkdir(parents=True, exist_ok=True)
        sf.write(str(d / "in" / rel), rng.uniform(-0.4, 0.4, (frames, ch)), rate, subtype=subtype)
    (d / "recipe.yaml").write_text(RECIPE)
    proc = chainrun("run", d / "recipe.yaml", d / "in", "-o", d / "reference", "--workers", "1")
    out, err = proc.communicate(timeout=300)
    assert proc.returncode == 0, err
    ref = finals(d / "reference")
    assert sorted(ref) == sorted(FILES)
    hashes = {rel: (d / "in" / rel).read_bytes() for rel in FILES}
    return d, ref, hashes


def wait_for(proc: subprocess.Popen, outdir: Path, event: str, k: int, timeout: float = 60.0) -> bool:
    """Poll until the kill point's event; False if the run ended first."""
    seen_temps: set[str] = set()
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        if proc.poll() is not None:
            return False
        if event == "spawn":
            return True
        if outdir.exists():
            if event == "lock" and (outdir / LOCK_NAME).exists():
                return True
            if event == "temp":
                seen_temps.update(os.path.basename(t).split(TEMP_TAG)[0] for t in temporaries(outdir))
                if len(seen_temps) >= k:
                    return True
            if event == "final" and len(finals(outdir)) >= k:
                return True
            if event == "report" and (outdir / "chainrun-report.json").exists():
                return True
        time.sleep(0.001)
    raise AssertionError(f"kill point {event} {k} not reached in {timeout} s")


# (event, k, delay after it in s): spread over the whole life of a run
POINTS = [("spawn", 0, 0.3), ("lock", 0, 0.0), ("temp", 1, 0.0), ("temp", 1, 0.25), ("final", 1, 0.0),
          ("temp", 2, 0.1), ("final", 2, 0.02), ("temp", 3, 0.3), ("final", 3, 0.0), ("final", 4, 0.0),
          ("report", 0, 0.0)]
KILLS = [("SIGKILL", p, 1 if i % 2 == 0 else 2) for i, p in enumerate(POINTS)]
# SIGINT from the lock on: a Ctrl-C while Python is still importing numpy (before chainrun's code runs)
# ends with Python's own traceback; see RELIABILITY.md
INTS = [("SIGINT", p, 1 if i % 2 == 0 else 2) for i, p in enumerate(POINTS[1:])]


def _id(case) -> str:
    sig, (event, k, delay), w = case
    return f"{sig}-w{w}-{event}{k or ''}+{delay}s"


@pytest.mark.parametrize("case", KILLS + INTS, ids=[_id(c) for c in KILLS + INTS])
def test_killed_batch_loses_nothing_and_the_next_run_resumes(case, season, tmp_path):
    d, ref, input_bytes = season
    sig_name, (event, k, delay), workers = case
    sig = getattr(signal, sig_name)
    out = tmp_path / "out"
    proc = chainrun("run", d / "recipe.yaml", d / "in", "-o", out, "--workers", workers, "--block-size", SLOW_BLOCK)
    landed = wait_for(proc, out, event, k)
    if landed and delay:
        time.sleep(delay)
    landed = landed and proc.poll() is None
    if landed:
        proc.send_signal(sig)
    stdout, stderr = proc.communicate(timeout=120)
    if landed and proc.returncode == 0 and "interrupted" not in stderr:
        landed = False              # it ended between the last look and the signal: it had finished
    figure = {"signal": sig_name, "workers": workers, "point": f"{event} {k} +{delay}s", "landed": landed,
              "exit": proc.returncode}

    # 1. nothing under a final name is incomplete
    before = finals(out) if out.exists() else {}
    for rel, data in before.items():
        assert data == ref[rel], f"{rel} is under its final name but differs from the uninterrupted output"
    for name in REPORTS[:1]:
        if (out / name).exists():
            json.loads((out / name).read_text(encoding="utf-8"))      # a report is complete or absent
    left = temporaries(out) if out.exists() else []
    figure.update(complete_before=len(before), temporaries_left=len(left))

    if sig == signal.SIGINT and landed:
        # 2. Ctrl-C: one line, exit 1, no traceback, nothing left behind, the lock released
        assert proc.returncode == 1, stderr
        assert "Traceback" not in stderr and "Error" not in stderr, stderr
        said = [ln for ln in stderr.splitlines() if "interrupted" in ln]
        assert len(said) == 1 and said[0].startswith("chainrun: interrupted"), stderr
        assert all(ln.startswith("chainrun: ") for ln in stderr.splitlines()), stderr
        assert left == [], left
        assert not (out / LOCK_NAME).exists(), stderr
        if "not rendered" in said[0]:
            # stopped while rendering: the report is written, says so, and lists what was delivered; the
            # workers stopped too (before the fix they went on rendering after the report was due)
            report = json.loads((out / "chainrun-report.json").read_text(encoding="utf-8"))
            assert report["summary"]["interrupted"] is True
            delivered_at_stop = {f["relpath"] for f in report["files"] if f["status"] == "ok"}
            assert delivered_at_stop <= set(before)
            # the closing line: "chainrun: interrupted: 1 file delivered, 3 not rendered (...); reports written to ..."
            delivered = int(said[0].split("interrupted: ")[1].split(" ")[0])
            n = int(said[0].split(" not rendered")[0].rsplit(" ", 1)[1])
            assert n == sum(f["status"] == "not rendered" for f in report["files"])
            assert delivered == len(delivered_at_stop) and n + delivered == len(FILES)
            assert f"reports written to {out / 'chainrun-report.json'}" in said[0]
            figure["delivered_at_stop"] = len(delivered_at_stop)
        else:
            delivered_at_stop = set()           # stopped before rendering began, or while writing the reports
    elif sig == signal.SIGKILL and landed:
        assert proc.returncode == -signal.SIGKILL
        # 3. no worker outlives its batch (they are killed with it)
        t0 = time.monotonic()
        while processes_mentioning(str(out)) and time.monotonic() - t0 < 10:
            time.sleep(0.05)
        assert processes_mentioning(str(out)) == [], "a worker outlived the killed batch"
    else:
        assert proc.returncode == 0, stderr                 # it finished before the kill point

    mtimes = {rel: os.stat(out / rel).st_mtime_ns for rel in before}
    try:          # the killed run's lock file, if it got as far as writing its owner into it
        lock_left = json.loads((out / LOCK_NAME).read_text()).get("pid") == proc.pid
    except (OSError, ValueError, AttributeError):
        lock_left = False

    # 4. the next run cleans up, resumes and finishes; the outputs are those of an uninterrupted run
    again = chainrun("run", d / "recipe.yaml", d / "in", "-o", out, "--workers", "2")
    stdout2, stderr2 = again.communicate(timeout=300)
    assert again.returncode == 0, stderr2
    assert "Traceback" not in stderr2
    if left:
        assert f"removed {len(left)} unfinished temporary file(s) left by an interrupted run" in stderr2, stderr2
    if lock_left:                                            # a stale lock, detected and taken over, named
        assert f"took over the lock left by pid {proc.pid} on host" in stderr2, stderr2
    after = finals(out)
    lost = sum(after.get(rel) != ref[rel] for rel in FILES)     # missing, or not the uninterrupted bytes
    assert lost == 0 and after == ref                        # bit-identical to the uninterrupted run
    assert temporaries(out) == [] and not (out / LOCK_NAME).exists()
    report = json.loads((out / "chainrun-report.json").read_text(encoding="utf-8"))
    assert {f["relpath"]: f["status"] for f in report["files"]} == {rel: "ok" for rel in FILES}
    resumed = [f["relpath"] for f in report["files"] if f.get("resumed")]
    for rel in resumed:                                      # kept, not rendered again
        assert rel in before and os.stat(out / rel).st_mtime_ns == mtimes[rel], rel
    if sig == signal.SIGINT and landed:
        assert delivered_at_stop <= set(resumed)            # what Ctrl-C's report called delivered is kept
    if resumed:
        assert f"{len(resumed)} file(s) already delivered by an earlier run" in stderr2, stderr2
    assert {rel: (d / "in" / rel).read_bytes() for rel in FILES} == input_bytes      # inputs untouched
    figure.update(kept_by_resume=len(resumed), rendered_by_resume=len(FILES) - len(resumed), lost=lost)
    FIGURES.append(figure)


def test_interruption_figures():
    if len(FIGURES) < len(KILLS + INTS):
        pytest.skip("run the whole file to collect the figures")
    landed = [f for f in FIGURES if f["landed"]]
    summary = {
        "kill_points_tried": len(FIGURES),
        "sigkill_points": sum(f["signal"] == "SIGKILL" for f in FIGURES),
        "sigint_points": sum(f["signal"] == "SIGINT" for f in FIGURES),
        "landed_while_running": len(landed),
        "survived": len(FIGURES),          # a point is recorded only once every check above has passed
        "files_lost": sum(f["lost"] for f in FIGURES),
        "outputs_kept_by_resume": sum(f["kept_by_resume"] for f in FIGURES),
        "temporaries_left_by_sigkill": sum(f["temporaries_left"] for f in FIGURES if f["signal"] == "SIGKILL"),
        "points": FIGURES,
    }
    figures = os.environ.get("CHAINRUN_FIGURES")
    if figures:
        os.makedirs(figures, exist_ok=True)
        with open(os.path.join(figures, "interruptions.json"), "w") as fh:
            json.dump(summary, fh, indent=2)
    assert summary["sigkill_points"] >= 10 and summary["sigint_points"] >= 10
    # the kill points really interrupt runs (not just runs that had already finished); the last two points
    # (last output, JSON report) race with the end of a run that has only its reports left to write, so on a
    # fast moment of a shared machine one or two of them can land after it ended
    assert sum(f["signal"] == "SIGKILL" for f in landed) >= len(KILLS) - 2
    assert sum(f["signal"] == "SIGINT" for f in landed) >= len(INTS) - 2


def test_a_ctrl_c_that_python_wrapped_is_still_an_interruption(monkeypatch, capsys):
    # A Ctrl-C landing while a module defines its classes (matplotlib's import, for one) reaches chainrun
    # as RuntimeError("Error calling __set_name__ ...") caused by the KeyboardInterrupt; seen once in the
    # kill points above. It must end like any Ctrl-C: one line, exit 1, not "internal error".
    from chainrun import cli
    from chainrun.cli import check as cli_check

    def wrapped(args):
        try:
            raise KeyboardInterrupt
        except KeyboardInterrupt as ki:
            raise RuntimeError("Error calling __set_name__ on 'x' instance 'format' in 'Formatter'") from ki

    monkeypatch.setattr(cli_check, "main", wrapped)
    status = cli.main(["check", "recipes"])
    err = capsys.readouterr().err
    assert status == 1
    assert err.splitlines() == ["chainrun: interrupted; no partial file was left"]


def test_report_pictures_import_no_matplotlib(monkeypatch):
    # the pictures are drawn in the main thread now: a Ctrl-C must never land inside matplotlib's slow import,
    # so drawing them never imports it (nor chainrun.report.plot, the matplotlib figure)
    import builtins

    from chainrun.report import pictures
    from chainrun import assess, design, load

    imported = []
    real_import = builtins.__import__

    def spy(name, globals=None, locals=None, fromlist=(), level=0):
        if name.split(".")[0] == "matplotlib" or name in ("plot", "chainrun.report.plot", "figure"):
            imported.append(name)
        return real_import(name, globals, locals, fromlist, level)

    monkeypatch.setattr(builtins, "__import__", spy)
    recipe = load(os.path.join(str(REPO), "recipes", "marsh-cleanup.yaml"))
    chain = design(recipe, 48000)
    d = type("D", (), {"chain": chain, "assessment": assess(chain, recipe.guard, recipe)})()
    assert pictures.picture_of(recipe, d).startswith("<svg")
    assert imported == []


STALL_IN_SCIPY_IMPORT = r"""
import sys, time
marker = sys.argv.pop(1)


class StallScipy:          # stands for a slow disk: the first import from scipy takes a minute (scipy.signal,
    def find_spec(self, name, path=None, target=None):      # or the package that holds the sosfilt kernel)
        if name.split(".")[0] == "scipy":
            open(marker, "w").close()
            time.sleep(60)
        return None


sys.meta_path.insert(0, StallScipy())
sys.argv[0] = "chainrun"
from chainrun.cli import main
sys.exit(main())
"""


@pytest.mark.parametrize("command", ["run", "check"])
def test_a_ctrl_c_while_scipy_is_imported_is_one_line(command, season, tmp_path):
    # scipy (scipy.signal, or the sosfilt kernel alone) is imported on first use, inside the command's own
    # error handling, so a Ctrl-C in the first second of a run (while it imports) ends like any other:
    # one line, exit 1, nothing made
    d, _, hashes = season
    marker, outdir = tmp_path / "importing", tmp_path / "out"
    argv = ["run", d / "recipe.yaml", d / "in", "-o", outdir, "--workers", "1"] if command == "run" \
        else ["check", d / "recipe.yaml"]
    # with chainrun's optional compiled loops in use nothing of scipy is imported here at all; they are
    # switched off so that scipy's loops serve, as on a machine without the extension
    env = {k: v for k, v in os.environ.items() if k != "PYTHONWARNINGS"}
    env["CHAINRUN_NO_KERNEL"] = "1"
    proc = subprocess.Popen([sys.executable, "-c", STALL_IN_SCIPY_IMPORT, str(marker), *map(str, argv)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    deadline = time.monotonic() + 60
    while not marker.exists() and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.01)
    assert marker.exists(), proc.communicate(timeout=60)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 1, err
    assert err.splitlines() == ["chainrun: interrupted; no partial file was left"]
    if outdir.exists():
        assert finals(outdir) == {} and temporaries(outdir) == []
        assert not (outdir / LOCK_NAME).exists()
    assert {rel: (d / "in" / rel).read_bytes() for rel in FILES} == hashes


def test_the_command_line_starts_without_scipy_or_matplotlib():
    # what makes --help, usage errors and a Ctrl-C at start-up answer at once: the package and its command
    # line import numpy, soundfile and PyYAML only; scipy comes with the first design, meter or filter
    code = ("import sys, chainrun, chainrun.cli, chainrun.batch, chainrun.report; "
            "print(sorted({m.split('.')[0] for m in sys.modules} & {'scipy', 'matplotlib'}))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "[]"


class _FinaliserThatGetsCtrlC:
    def __del__(self):
        signal.raise_signal(signal.SIGINT)       # the Ctrl-C arrives while Python runs a finaliser


@pytest.mark.parametrize("workers", ["1", "2"])
def test_a_ctrl_c_inside_a_finaliser_still_stops_the_file(workers, tmp_path, write_audio, run_cli, monkeypatch):
    # Seen once in the kill points above: a Ctrl-C landing in SoundFile.__del__. A handler that raised
    # KeyboardInterrupt there had it printed with a traceback and dropped by Python, and the file went on.
    # chainrun's handler only sets a flag; the file stops at its next block and nothing is delivered.
    # (One file with --workers 2 renders in this process, with its pipeline threads.)
    from chainrun import interrupt
    from chainrun.audio.reader import _Blocks

    write_audio("in/long take.wav", np.random.default_rng(5).uniform(-0.3, 0.3, (40_000, 2)), 48000, "PCM_24")
    recipe = tmp_path / "r.yaml"
    recipe.write_text(RECIPE)
    real, calls = _Blocks._read, []

    def read(self):
        calls.append(1)
        if len(calls) == 3:
            _FinaliserThatGetsCtrlC()             # made and collected at once: its __del__ runs here
            deadline = time.monotonic() + 10      # with threads, the main thread runs the handler soon after
            while not interrupt.rendering_stopped() and time.monotonic() < deadline:
                time.sleep(0.001)
        return real(self)

    monkeypatch.setattr(_Blocks, "_read", read)
    before = signal.getsignal(signal.SIGINT)
    status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", tmp_path / "out", "--workers", workers,
                             "--block-size", "4000")
    assert status == 1, err
    assert "Exception ignored" not in err
    assert "chainrun: interrupted: 0 files delivered, 1 not rendered" in err
    assert finals(tmp_path / "out") == {} and temporaries(tmp_path / "out") == []
    assert len(calls) == 3                        # analytic: it stopped before reading the 4th of 10 blocks
    assert signal.getsignal(signal.SIGINT) is before and not interrupt.rendering_stopped()


def test_a_worker_s_ctrl_c_handler_never_raises(tmp_path, write_audio):
    # in a pool worker, the handler runs wherever the worker happens to be; it only asks the file to stop
    from chainrun import interrupt, render
    from chainrun.audio.reader import probe
    from chainrun.batch import executors
    from chainrun.batch.discover import Job
    from chainrun.results import INTERRUPTED

    src = probe(str(write_audio("in/a.wav", np.zeros((1000, 1)), 48000, "PCM_16")))
    job = Job(src.path, "a.wav", str(tmp_path / "out.wav"))
    try:
        interrupt.on_sigint(signal.SIGINT, None)           # would raise in the middle of anything if it could
        assert interrupt.rendering_stopped()
        r = executors._render_in_worker(job, src, np.array([[1.0, 0, 0, 1, 0, 0]]), 1.0, render.Policy())
        assert r.status == "not rendered" and r.message == INTERRUPTED and not os.path.exists(job.output)
    finally:
        interrupt.allow_rendering()


def test_a_ctrl_c_after_the_last_block_still_counts(tmp_path, write_audio, run_cli, monkeypatch):
    # A Ctrl-C while the last file is synced (after its last block) cannot stop that file any more; it is
    # delivered, and the run still ends as interrupted (exit 1, one line) instead of going on quietly
    from chainrun import interrupt
    from chainrun.render import file as render_file

    write_audio("in/take.wav", np.zeros((3000, 2)), 48000, "PCM_16")
    recipe = tmp_path / "r.yaml"
    recipe.write_text(RECIPE)
    real = render_file._fsync_path

    def sync(path, directory=False):
        if not directory:
            signal.raise_signal(signal.SIGINT)
        return real(path, directory)

    monkeypatch.setattr(render_file, "_fsync_path", sync)
    before = signal.getsignal(signal.SIGINT)
    status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", tmp_path / "out", "--workers", "1")
    assert status == 1, err
    assert err.splitlines()[-1] == ("chainrun: interrupted after the last file was rendered: 1 file delivered; "
                                    f"reports written to {', '.join(str(tmp_path / 'out' / n) for n in REPORTS)}")
    assert finals(tmp_path / "out") == {"take.wav": (tmp_path / "out" / "take.wav").read_bytes()}
    assert signal.getsignal(signal.SIGINT) is before and not interrupt.rendering_stopped()


@pytest.mark.parametrize("workers", ["1", "2"])
def test_a_stop_left_over_from_an_earlier_batch_does_not_stop_the_next(tmp_path, write_audio, run_cli, workers):
    # library use: a batch in the same process after one that was interrupted renders normally
    from chainrun import interrupt

    for k in range(3):
        write_audio(f"in/take{k}.wav", np.zeros((3000, 2)), 48000, "PCM_16")
    recipe = tmp_path / "r.yaml"
    recipe.write_text(RECIPE)
    interrupt.stop_rendering()                  # as a Ctrl-C that landed after the last handler was gone
    try:
        status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", tmp_path / "out", "--workers", workers)
    finally:
        interrupt.allow_rendering()
    assert status == 0, err
    assert sorted(finals(tmp_path / "out")) == ["take0.wav", "take1.wav", "take2.wav"]


def test_a_ctrl_c_that_lands_as_the_command_returns_is_one_line_not_a_traceback(monkeypatch, capsys):
    # Seen under load: the SIGINT of a kill point near the end reached main() after the command had
    # returned (in stopped_by) and ended the process with a KeyboardInterrupt traceback. chainrun's own
    # promise (README, Commands): an interruption is one line, exit 1. Here the signal is made to land
    # exactly there, in-process.
    import chainrun.cli as cli

    before = signal.getsignal(signal.SIGINT)
    monkeypatch.setattr(cli, "_command", lambda args: 0)
    landings = iter([True, False])

    def stopped_by():
        if next(landings):
            raise KeyboardInterrupt
        return None

    monkeypatch.setattr(cli, "stopped_by", stopped_by)
    status = cli.main(["check", "recipe.yaml"])
    err = capsys.readouterr().err
    assert status == 1
    assert err.splitlines() == ["chainrun: interrupted as the command finished; everything it wrote is complete"]
    assert signal.getsignal(signal.SIGINT) is before          # handlers given back for a library caller


def test_a_lock_release_cut_short_by_ctrl_c_can_be_called_again_and_removes_the_lock(tmp_path, monkeypatch):
    # Seen under load (the report kill point with two workers): a Ctrl-C inside the release left
    # .chainrun.lock behind, because the descriptor was given up before the name was removed and a
    # second release did nothing. chainrun's own promise (RELIABILITY.md): the lock is released.
    from chainrun.batch import outdir as outdir_mod

    lock = outdir_mod.OutdirLock(str(tmp_path)).acquire()
    real_unlink = outdir_mod.os.unlink
    cuts = iter([True])

    def unlink(path, *a, **k):
        if next(cuts, False):
            raise KeyboardInterrupt           # the signal lands just before the name is removed
        return real_unlink(path, *a, **k)

    monkeypatch.setattr(outdir_mod.os, "unlink", unlink)
    with pytest.raises(KeyboardInterrupt):
        lock.release()
    lock.release()                            # what the batch's clean-up does next
    assert not (tmp_path / LOCK_NAME).exists()
    assert lock.fd is None
