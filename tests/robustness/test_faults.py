"""Disk, permission and process faults (issue #4): a clear error, no partial file, inputs untouched, the
report still written where at all possible — and one writer per output folder.

Real faults where the sandbox allows them: a read-only bind mount, a small tmpfs that fills up, a file
size limit (RLIMIT_FSIZE, with SIGXFSZ ignored so that writes fail with EFBIG) in a real subprocess,
permission bits enforced for root by dropping CAP_DAC_OVERRIDE (the ``permissions_apply`` fixture),
real processes killed with SIGKILL. Where a mount is not allowed, the test says so and simulates the
fault in-process (named in the test) or skips.
"""
from __future__ import annotations

import errno
import fcntl
import json
import os
import resource
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from chainrun.batch import outdir as journal_mod
from chainrun.batch.outdir import JOURNAL_NAME, LOCK_NAME, LockedError, OutdirLock
from support import by_rel, report_of, temporaries

RECIPE = """\
format: 1
name: Saltings Hour marsh chain
chain:
  - {type: highpass, freq: 60, order: 2}
  - {type: peak, freq: 3000, gain_db: 2, q: 1}
  - {type: gain, gain_db: -3}
"""


def noise(frames, channels=1, seed=1):
    return np.random.default_rng(seed).uniform(-0.3, 0.3, (frames, channels))


def audio_outputs(folder) -> list[str]:
    return sorted(os.path.relpath(os.path.join(r, f), folder) for r, _, fs in os.walk(folder) for f in fs
                  if not f.startswith(".") and not f.startswith("chainrun-report"))


@pytest.fixture
def season(tmp_path):
    """A small season: two boathouse stems and a marsh take (the marsh one is large)."""
    top = tmp_path / "in"
    (top / "boathouse").mkdir(parents=True)
    (top / "marsh").mkdir()
    sf.write(str(top / "boathouse" / "host.wav"), noise(3000, 1, 1), 48000, subtype="PCM_16")
    sf.write(str(top / "boathouse" / "guest.wav"), noise(3000, 1, 2), 48000, subtype="PCM_16")
    sf.write(str(top / "marsh" / "dawn.wav"), noise(200_000, 2, 3), 48000, subtype="PCM_24")   # 1.2 MB out
    (tmp_path / "recipe.yaml").write_text(RECIPE)
    return top


def chainrun_proc(*argv, preexec_fn=None, env=None, **kw) -> subprocess.Popen:
    e = {k: v for k, v in os.environ.items() if k != "PYTHONWARNINGS"}
    e.update(env or {})
    return subprocess.Popen([sys.executable, "-m", "chainrun", *map(str, argv)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=e, preexec_fn=preexec_fn, **kw)


def fill(path) -> None:
    """Write zeros to ``path`` until its file system is full."""
    fd = os.open(path, os.O_WRONLY | os.O_CREAT, 0o644)
    try:
        while True:
            os.write(fd, b"\0" * 4096)
    except OSError as exc:
        assert exc.errno == errno.ENOSPC
    finally:
        os.close(fd)


def file_size_limit(nbytes: int):
    def limit():
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)     # so that a write past the limit fails with EFBIG
        resource.setrlimit(resource.RLIMIT_FSIZE, (nbytes, nbytes))
    return limit


# =========================================================================== read-only output


def test_read_only_output_folder_refused_with_one_line_nothing_written(tmp_path, season, run_cli, mounts,
                                                                       tree_hashes, monkeypatch):
    out = tmp_path / "out"
    out.mkdir()
    (out / "earlier.txt").write_text("left by the producer\n")
    before_in, before_out = tree_hashes(season), tree_hashes(out)
    if not mounts.read_only(out):
        # simulation (no mount here): the lock file cannot be created, as on a read-only file system
        real_open = os.open

        def ro_open(path, flags, *a, **k):
            if str(path).startswith(str(out)) and flags & (os.O_WRONLY | os.O_RDWR | os.O_CREAT):
                raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(path))
            return real_open(path, flags, *a, **k)

        monkeypatch.setattr(journal_mod.os, "open", ro_open)
    status, stdout, err = run_cli("run", tmp_path / "recipe.yaml", season, "-o", out, "--workers", "1")
    assert status == 2, err                              # README.md 'Commands': 2 for a usage problem, no audio touched
    assert err.splitlines() == [f"{out}: error: cannot use the output folder: read-only file system"], err
    assert tree_hashes(out) == before_out and tree_hashes(season) == before_in


def test_read_only_output_subfolder_fails_its_files_only(tmp_path, season, run_cli, mounts, tree_hashes,
                                                         permissions_apply):
    out = tmp_path / "out"
    (out / "marsh").mkdir(parents=True)
    before = tree_hashes(season)
    if mounts.read_only(out / "marsh"):
        status, _, err = run_cli("run", tmp_path / "recipe.yaml", season, "-o", out, "--workers", "1")
        why = "read-only file system"
    else:                                                # no mount: a folder without write permission
        os.chmod(out / "marsh", 0o555)
        with permissions_apply():
            status, _, err = run_cli("run", tmp_path / "recipe.yaml", season, "-o", out, "--workers", "1")
        os.chmod(out / "marsh", 0o755)
        why = "permission denied"
    assert status == 1, err
    rep = by_rel(report_of(out / "chainrun-report.json"))
    assert rep["marsh/dawn.wav"]["status"] == "failed" and rep["marsh/dawn.wav"]["output"] is None
    msg = rep["marsh/dawn.wav"]["message"]
    assert msg == f"cannot write into its output folder {out / 'marsh'}: {why}; nothing was delivered"
    assert [ln for ln in err.splitlines() if "dawn.wav" in ln and not ln.startswith("chainrun: [")] == [f"{season / 'marsh' / 'dawn.wav'}: error: {msg}"]
    assert {rep[r]["status"] for r in ("boathouse/host.wav", "boathouse/guest.wav")} == {"ok"}
    assert audio_outputs(out) == ["boathouse/guest.wav", "boathouse/host.wav"]
    assert temporaries(out) == [] and tree_hashes(season) == before


def test_output_folder_without_write_permission(tmp_path, season, run_cli, permissions_apply, tree_hashes):
    out = tmp_path / "out"
    out.mkdir()
    os.chmod(out, 0o555)
    before = tree_hashes(season)
    try:
        with permissions_apply():
            status, _, err = run_cli("run", tmp_path / "recipe.yaml", season, "-o", out, "--workers", "1")
    finally:
        os.chmod(out, 0o755)
    assert status == 2 and err.splitlines() == [f"{out}: error: cannot use the output folder: permission denied"]
    assert os.listdir(out) == [] and tree_hashes(season) == before


# =========================================================================== full disk, file size limit


def test_disk_full_fails_the_file_that_does_not_fit_and_keeps_the_rest(tmp_path, season, run_cli, mounts,
                                                                      tree_hashes):
    disk = tmp_path / "disk"
    if not mounts.tmpfs(disk, "1m"):
        pytest.skip("cannot mount a small tmpfs here (needs root in a privileged container); "
                    "tests/unit/batch/test_batch.py simulates ENOSPC in-process")
    out = disk / "out"
    before = tree_hashes(season)
    status, _, err = run_cli("run", tmp_path / "recipe.yaml", season, "-o", out, "--workers", "1")
    assert status == 1, err
    rep = by_rel(report_of(out / "chainrun-report.json"))       # the report still fits once the file failed
    bad = rep["marsh/dawn.wav"]
    assert bad["status"] == "failed" and bad["output"] is None
    # a clear error: what ran out, and that nothing was delivered (not "not readable as audio")
    assert "no space left on device" in bad["message"] and "nothing was delivered" in bad["message"], bad
    assert "not readable" not in bad["message"]
    assert [ln for ln in err.splitlines() if "dawn.wav" in ln and not ln.startswith("chainrun: [")] == [f"{season / 'marsh' / 'dawn.wav'}: error: "
                                                                  f"{bad['message']}"]
    assert not (out / "marsh" / "dawn.wav").exists() and temporaries(out) == []      # no partial file
    assert audio_outputs(out) == ["boathouse/guest.wav", "boathouse/host.wav"]
    assert tree_hashes(season) == before                                              # input untouched


def test_disk_already_full_refuses_the_batch_with_one_line(tmp_path, season, run_cli, mounts, tree_hashes):
    disk = tmp_path / "disk"
    if not mounts.tmpfs(disk, "64k"):
        pytest.skip("cannot mount a small tmpfs here")
    out = disk / "out"
    out.mkdir()
    fill(out / "filler.bin")                             # somebody else filled the card
    before = tree_hashes(season)
    status, _, err = run_cli("run", tmp_path / "recipe.yaml", season, "-o", out, "--workers", "1")
    assert status == 2
    assert err.splitlines() == [f"{out}: error: cannot use the output folder: no space left on device"], err
    assert sorted(os.listdir(out)) == ["filler.bin"] and tree_hashes(season) == before


def test_file_size_limit_in_a_real_process(tmp_path, season, tree_hashes):
    """RLIMIT_FSIZE at 400 kB: the 1.2 MB marsh output cannot be written (EFBIG); the rest can."""
    out = tmp_path / "out"
    before = tree_hashes(season)
    proc = chainrun_proc("run", tmp_path / "recipe.yaml", season, "-o", out, "--workers", "2",
                         preexec_fn=file_size_limit(400_000))
    stdout, err = proc.communicate(timeout=300)
    assert proc.returncode == 1, err
    assert "Traceback" not in err
    rep = by_rel(report_of(out / "chainrun-report.json"))
    bad = rep["marsh/dawn.wav"]
    assert bad["status"] == "failed" and "file too large" in bad["message"], bad
    assert "nothing was delivered" in bad["message"]
    assert [ln for ln in err.splitlines() if "dawn.wav" in ln and not ln.startswith("chainrun: [")] == [f"{season / 'marsh' / 'dawn.wav'}: error: "
                                                                  f"{bad['message']}"]
    assert audio_outputs(out) == ["boathouse/guest.wav", "boathouse/host.wav"]
    assert temporaries(out) == [] and tree_hashes(season) == before


def test_html_report_too_large_puts_no_report_in_place_and_keeps_the_json_aside(tmp_path, season, tree_hashes):
    """RLIMIT_FSIZE at 30 kB: the stems (6 kB each) and the JSON and CSV reports fit, the HTML report does not;
    the three are written together or none is, so none is put in OUTDIR and the JSON and CSV go to the
    temporary folder."""
    out = tmp_path / "out"
    os.remove(season / "marsh" / "dawn.wav")
    proc = chainrun_proc("run", tmp_path / "recipe.yaml", season, "-o", out, "--workers", "1",
                         preexec_fn=file_size_limit(30_000))
    stdout, err = proc.communicate(timeout=300)
    assert proc.returncode == 1, err                     # the batch is ok, but a report is missing
    html = out / "chainrun-report.html"
    last = err.splitlines()[-1]
    assert last.startswith(f"{html}: error: cannot write the report: file too large; the reports were written to "), err
    assert last.endswith(" instead, all three together or none; the files listed above as ok were delivered"), err
    aside = last.split("the reports were written to ")[1].split(" instead")[0].split(", ")
    assert [os.path.splitext(p)[1] for p in aside] == [".json", ".csv"]        # the HTML page fits nowhere
    rep = report_of(Path(aside[0]))
    assert {f["status"] for f in rep["files"]} == {"ok"}
    assert not any((out / f"chainrun-report.{k}").exists() for k in ("json", "csv", "html"))
    assert temporaries(out) == []
    assert f"report: {', '.join(aside)}" in stdout
    for p in aside:
        os.remove(p)


def test_report_that_cannot_be_written_where_asked_goes_to_the_temporary_folder(tmp_path, season, run_cli,
                                                                               mounts, monkeypatch):
    disk = tmp_path / "disk"
    if not mounts.tmpfs(disk, "64k"):
        pytest.skip("cannot mount a small tmpfs here")
    fill(disk / "filler.bin")                            # the report's disk is full
    spare = tmp_path / "spare-tmp"
    spare.mkdir()
    import tempfile

    monkeypatch.setattr(tempfile, "tempdir", str(spare))
    out = tmp_path / "out"
    status, _, err = run_cli("run", tmp_path / "recipe.yaml", season, "-o", out, "--workers", "1",
                             "--report", disk / "season.json")
    assert status == 1, err
    (fallback,) = spare.glob("chainrun-report-*.json")
    stem = str(fallback)[:-len(".json")]
    assert f"{disk / 'season.json'}: error: cannot write the report: no space left on device; the reports were " \
           f"written to {stem}.json, {stem}.csv, {stem}.html instead, all three together or none; the files " \
           "listed above as ok were delivered" in err.splitlines()
    rep = report_of(fallback)
    assert {f["relpath"]: f["status"] for f in rep["files"]} == {"boathouse/guest.wav": "ok",
                                                                 "boathouse/host.wav": "ok", "marsh/dawn.wav": "ok"}
    assert audio_outputs(out) == ["boathouse/guest.wav", "boathouse/host.wav", "marsh/dawn.wav"]
    assert temporaries(disk) == []


# =========================================================================== one writer per output folder


def _slow_run(tmp_path, season, out, workers=1):
    return chainrun_proc("run", tmp_path / "recipe.yaml", season, "-o", out, "--workers", workers,
                         "--block-size", "16")


def _wait(cond, timeout=60.0):
    t0 = time.monotonic()
    while not cond():
        if time.monotonic() - t0 > timeout:
            raise AssertionError("timed out waiting")
        time.sleep(0.002)


def test_second_run_into_the_same_outdir_refuses_naming_pid_and_host(tmp_path, season, run_cli):
    out = tmp_path / "out"
    ref = tmp_path / "ref"
    status, _, err = run_cli("run", tmp_path / "recipe.yaml", season, "-o", ref, "--workers", "1")
    assert status == 0, err
    first = _slow_run(tmp_path, season, out)
    try:
        _wait(lambda: temporaries(out))                  # the first run is rendering
        status, stdout, err = run_cli("run", tmp_path / "recipe.yaml", season, "-o", out, "--workers", "1")
        assert status == 2 and stdout == ""
        lines = err.splitlines()
        assert len(lines) == 1, err
        assert lines[0].startswith(f"{out / LOCK_NAME}: error: another chainrun run (pid {first.pid} on host "
                                   f"{socket.gethostname()}, since "), lines[0]
        assert lines[0].endswith("is writing into this output folder; wait for it to finish or choose another "
                                 "folder")
    finally:
        _, ferr = first.communicate(timeout=300)
    assert first.returncode == 0, ferr                   # the first run was not disturbed
    for rel in audio_outputs(ref):
        assert (out / rel).read_bytes() == (ref / rel).read_bytes()


@pytest.mark.parametrize("workers", [1, 2])
def test_stale_lock_of_a_killed_run_is_taken_over_with_a_note(tmp_path, season, run_cli, workers):
    out = tmp_path / "out"
    first = _slow_run(tmp_path, season, out, workers)
    _wait(lambda: temporaries(out))
    first.kill()                                         # SIGKILL: no chance to release anything
    first.communicate(timeout=60)
    assert (out / LOCK_NAME).exists()                    # the lock file is left behind ...
    # ... and, with --workers 2, its workers die with it (PR_SET_PDEATHSIG); before, they lived on holding the
    # lock (inherited with fork), so this run was refused naming a process that no longer existed
    status, _, err = run_cli("run", tmp_path / "recipe.yaml", season, "-o", out, "--workers", "1")
    assert status == 0, err
    assert f"chainrun: note: took over the lock left by pid {first.pid} on host {socket.gethostname()} " \
           "(that run is gone)" in err.splitlines()
    assert "unfinished temporary file(s) left by an interrupted run" in err
    assert temporaries(out) == [] and not (out / LOCK_NAME).exists()


def test_lock_won_on_a_file_the_owner_just_unlinked_is_not_a_lock(tmp_path, monkeypatch):
    # The owner releases by truncating and unlinking the lock file, then unlocking. A second run that opened
    # the old file and gets the lock the moment it is released holds a lock on a file that is no longer at
    # the path; a third run creates a new file there and locks it too: two writers. The lock must be retried
    # on the file that is at the path.
    out = str(tmp_path)
    a = OutdirLock(out).acquire()
    real_flock = fcntl.flock
    state = {"released": False}

    def flock(fd, op):
        if not state["released"] and op & fcntl.LOCK_EX:
            state["released"] = True
            a.release()                                  # the owner finishes right between open and flock
        return real_flock(fd, op)

    monkeypatch.setattr(journal_mod.fcntl, "flock", flock)
    b = OutdirLock(out).acquire()
    monkeypatch.setattr(journal_mod.fcntl, "flock", real_flock)
    try:
        assert os.path.exists(b.path) and os.stat(b.path).st_ino == os.fstat(b.fd).st_ino
        with pytest.raises(LockedError, match=f"pid {os.getpid()} on host"):
            OutdirLock(out).acquire()                    # a third run is refused: one writer
    finally:
        b.release()


def test_a_link_planted_at_the_lock_name_is_never_followed(tmp_path, season, run_cli, tree_hashes):
    precious = tmp_path / "elsewhere" / "catalogue.txt"
    precious.parent.mkdir()
    precious.write_text("the season's only catalogue\n")
    out = tmp_path / "out"
    out.mkdir()
    os.symlink(precious, out / LOCK_NAME)                # the lock file is truncated when taken
    before = tree_hashes(season)
    status, _, err = run_cli("run", tmp_path / "recipe.yaml", season, "-o", out, "--workers", "1")
    assert status == 2 and len(err.splitlines()) == 1, err
    assert "symbolic link" in err and err.startswith(f"{out}: error: cannot use the output folder:")
    assert precious.read_text() == "the season's only catalogue\n"
    assert tree_hashes(season) == before


def test_a_link_planted_at_the_journal_name_is_never_followed(tmp_path, season, run_cli):
    precious = tmp_path / "elsewhere" / "catalogue.txt"
    precious.parent.mkdir()
    precious.write_text("the season's only catalogue\n")
    out = tmp_path / "out"
    out.mkdir()
    os.symlink(precious, out / JOURNAL_NAME)             # the journal is appended to
    status, _, err = run_cli("run", tmp_path / "recipe.yaml", season, "-o", out, "--workers", "1")
    assert status == 0, err                              # the files are delivered; only resuming is affected
    assert precious.read_text() == "the season's only catalogue\n"
    notes = [ln for ln in err.splitlines() if "resume journal" in ln]
    assert len(notes) == 2 and all(ln.startswith("chainrun: note: the resume journal cannot be") for ln in notes)
    assert audio_outputs(out) == ["boathouse/guest.wav", "boathouse/host.wav", "marsh/dawn.wav"]


def test_a_folder_at_the_journal_name_does_not_stop_the_batch(tmp_path, season, run_cli):
    out = tmp_path / "out"
    (out / JOURNAL_NAME).mkdir(parents=True)
    status, _, err = run_cli("run", tmp_path / "recipe.yaml", season, "-o", out, "--workers", "1")
    assert status == 0, err
    assert "resume journal cannot be read" in err and "is a directory" in err
    assert audio_outputs(out) == ["boathouse/guest.wav", "boathouse/host.wav", "marsh/dawn.wav"]


# =========================================================================== the resume journal


def _journal_lines(out) -> list[str]:
    return (out / JOURNAL_NAME).read_text().splitlines(keepends=True)


def test_a_journal_line_cut_short_does_not_swallow_the_next_entry(tmp_path, season, run_cli):
    out = tmp_path / "out"
    os.remove(season / "marsh" / "dawn.wav")
    status, _, err = run_cli("run", tmp_path / "recipe.yaml", season / "boathouse" / "host.wav", "-o", out,
                             "--workers", "1")
    assert status == 0, err
    lines = _journal_lines(out)
    (out / JOURNAL_NAME).write_text(lines[0][: len(lines[0]) // 2])       # a torn write (power loss)
    status, _, err = run_cli("run", tmp_path / "recipe.yaml", season / "boathouse" / "guest.wav", "-o", out,
                             "--workers", "1")
    assert status == 0, err
    status, _, err = run_cli("run", tmp_path / "recipe.yaml", season / "boathouse" / "guest.wav", "-o", out,
                             "--workers", "1")
    assert status == 0, err
    assert "1 file(s) already delivered by an earlier run" in err          # guest.wav's entry was readable


def test_a_journal_entry_that_matches_but_cannot_be_read_back_is_rendered_again(tmp_path, season, run_cli):
    out = tmp_path / "out"
    status, _, err = run_cli("run", tmp_path / "recipe.yaml", season, "-o", out, "--workers", "1")
    assert status == 0, err
    before = {rel: (out / rel).read_bytes() for rel in audio_outputs(out)}
    entries = [json.loads(ln) for ln in _journal_lines(out)]
    entries[0]["result"] = "not a record"                                  # foreign or damaged
    entries[1]["result"]["input_meters"] = {"channels": "nonsense"}
    (out / JOURNAL_NAME).write_text("".join(json.dumps(e) + "\n" for e in entries))
    status, _, err = run_cli("run", tmp_path / "recipe.yaml", season, "-o", out, "--workers", "1")
    assert status == 0, err
    assert "1 file(s) already delivered by an earlier run" in err           # the third entry is intact
    assert {rel: (out / rel).read_bytes() for rel in audio_outputs(out)} == before


# =========================================================================== a worker dies


def _children(pid: int) -> list[int]:
    kids = []
    for tid in os.listdir(f"/proc/{pid}/task"):
        try:
            kids += [int(c) for c in Path(f"/proc/{pid}/task/{tid}/children").read_text().split()]
        except OSError:
            pass
    return kids


def _writing_children(pid: int) -> list[int]:
    """Children of ``pid`` that hold a temporary output open: the workers rendering a file.

    The run has another child, the one drawing the report's pictures; it writes no audio.
    """
    writing = []
    for kid in _children(pid):
        try:
            fds = os.listdir(f"/proc/{kid}/fd")
        except OSError:
            continue
        for fd in fds:
            try:
                if ".chainrun-part-" in os.readlink(f"/proc/{kid}/fd/{fd}"):
                    writing.append(kid)
                    break
            except OSError:
                pass
    return writing


def test_a_worker_killed_mid_file_costs_nothing_its_files_are_rendered_again(tmp_path, season, run_cli):
    # The out-of-memory killer picks a worker once: the pool breaks and every file it held fails with it;
    # those files are rendered once more, each on its own, so the batch still delivers everything
    out = tmp_path / "out"
    ref = tmp_path / "ref"
    assert run_cli("run", tmp_path / "recipe.yaml", season, "-o", ref, "--workers", "1")[0] == 0
    proc = _slow_run(tmp_path, season, out, workers=2)
    _wait(lambda: _writing_children(proc.pid))
    victims = _writing_children(proc.pid)
    assert victims
    os.kill(victims[0], signal.SIGKILL)
    stdout, err = proc.communicate(timeout=300)
    assert proc.returncode == 0, err
    assert "Traceback" not in err
    assert "a worker process stopped while rendering" in err and "rendered again, each on its own" in err
    rep = report_of(out / "chainrun-report.json")
    assert {f["status"] for f in rep["files"] if f["relpath"] in audio_outputs(ref)} == {"ok"}
    assert temporaries(out) == []
    assert audio_outputs(out) == audio_outputs(ref)
    for rel in audio_outputs(ref):                       # bit-identical to a run that was never disturbed
        assert (out / rel).read_bytes() == (ref / rel).read_bytes()


def test_a_file_that_kills_every_worker_fails_alone(tmp_path, season, run_cli, monkeypatch):
    # A file that kills whichever worker renders it (here by _exit; in life, say, a decoder crash) breaks
    # the pool twice: after the second time only that file fails, the rest are delivered
    from chainrun.batch import executors

    real = executors._render_job

    def deadly(job, *args):
        if job.relpath == os.path.join("boathouse", "host.wav"):
            os._exit(3)
        return real(job, *args)

    ref = tmp_path / "ref"
    assert run_cli("run", tmp_path / "recipe.yaml", season, "-o", ref, "--workers", "1")[0] == 0
    monkeypatch.setattr(executors, "_render_job", deadly)      # the forked workers inherit it
    out = tmp_path / "out"
    status, _, err = run_cli("run", tmp_path / "recipe.yaml", season, "-o", out, "--workers", "2")
    assert status == 1, err
    failed = [f for f in report_of(out / "chainrun-report.json")["files"] if f["status"] == "failed"]
    assert [f["relpath"] for f in failed] == [os.path.join("boathouse", "host.wav")], failed
    assert "the worker rendering it stopped" in failed[0]["message"]
    rest = [rel for rel in audio_outputs(ref) if rel != os.path.join("boathouse", "host.wav")]
    assert audio_outputs(out) == rest and len(rest) == 2
    for rel in rest:
        assert (out / rel).read_bytes() == (ref / rel).read_bytes()


def test_leftover_clean_up_does_not_enter_another_run_s_outdir(tmp_path):
    # A run into out/ must not remove the temporary file of a run rendering into out/sub/ right now (seen:
    # that run's delivery failed). A subfolder with a lock of its own is another OUTDIR; its run cleans it.
    from chainrun.batch.outdir import LOCK_NAME, clean_leftovers
    from chainrun.fsutil import TEMP_TAG

    (tmp_path / "out" / "sub").mkdir(parents=True)
    (tmp_path / "out" / "old").mkdir()
    (tmp_path / "out" / "sub" / LOCK_NAME).write_text("{}")
    busy = tmp_path / "out" / "sub" / f".long.wav{TEMP_TAG}e30a6920"
    stale = tmp_path / "out" / "old" / f".take.wav{TEMP_TAG}0badf00d"
    busy.write_bytes(b"being written")
    stale.write_bytes(b"left by a killed run")
    assert clean_leftovers(str(tmp_path / "out")) == [str(stale)]
    assert busy.exists() and not stale.exists()
