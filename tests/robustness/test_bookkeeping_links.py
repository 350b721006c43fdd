"""chainrun's own names in OUTDIR (the lock and the resume journal) are truncated and appended to: whatever
is found there that chainrun did not make is refused, never written through (issue #19).

``O_NOFOLLOW`` stops symbolic links only (``tests/robustness/test_faults.py``). Here: a hard link to a recording (the
same data under a second name), a FIFO, a device, another user's file. Each must refuse the whole run, in
one line naming the path, before any audio is read, and leave the thing at the name as it was. The
expected behaviour rests on POSIX semantics (link(2), mkfifo(3), rename(2), open(2) with O_NONBLOCK), not
on chainrun's own code.
"""
from __future__ import annotations

import hashlib
import json
import os
import stat
import subprocess
import sys

import numpy as np
import pytest
import soundfile as sf

from chainrun.batch.outdir import JOURNAL_NAME, LOCK_NAME, OutdirLock

RECIPE = """\
format: 1
name: Boathouse tidy chain
chain:
  - {type: highpass, freq: 80, order: 2}
  - {type: gain, gain_db: -3}
"""

NAMES = {"lock": (LOCK_NAME, "lock file"), "journal": (JOURNAL_NAME, "resume journal")}


@pytest.fixture
def session(tmp_path):
    """Two boathouse takes and a recipe; returns the input folder."""
    top = tmp_path / "in"
    top.mkdir()
    rng = np.random.default_rng(19)
    for name in ("host.wav", "guest.wav"):
        sf.write(str(top / name), rng.uniform(-0.3, 0.3, (4000, 1)), 48000, subtype="PCM_16")
    (tmp_path / "recipe.yaml").write_text(RECIPE)
    return top


def state(path) -> tuple:
    """What must not change: the bytes (sha256), size, modification time, link count and owner."""
    st = os.stat(path, follow_symlinks=False)
    digest = hashlib.sha256(open(path, "rb").read()).hexdigest() if stat.S_ISREG(st.st_mode) else None
    return digest, st.st_size, st.st_mtime_ns, st.st_nlink, st.st_uid, stat.S_IFMT(st.st_mode)


def run_proc(*argv, timeout=120) -> subprocess.CompletedProcess:
    env = {k: v for k, v in os.environ.items() if k != "PYTHONWARNINGS"}
    return subprocess.run([sys.executable, "-m", "chainrun", *map(str, argv)], capture_output=True, text=True,
                          env=env, timeout=timeout)


def assert_refused(status, stdout, err, path, what, reason):
    assert status == 2 and stdout == "", err
    lines = err.splitlines()
    assert len(lines) == 1, err                          # one line, no traceback
    assert lines[0].startswith(f"{path}: error: not chainrun's own {what} ("), lines[0]
    assert reason in lines[0] and lines[0].endswith("; remove it or choose another OUTDIR"), lines[0]


@pytest.mark.parametrize("which", ["lock", "journal"])
def test_a_hard_link_to_a_recording_at_a_bookkeeping_name_refuses_the_run(tmp_path, session, run_cli, which):
    name, what = NAMES[which]
    out = tmp_path / "out"
    out.mkdir()
    take = session / "host.wav"
    os.link(take, out / name)                            # POSIX link(2): the same data under a second name
    before = state(take)
    status, stdout, err = run_cli("run", tmp_path / "recipe.yaml", session, "-o", out, "--workers", "1")
    # before the fix: the lock truncated host.wav to 0 bytes; the journal appended a JSON line to it
    assert_refused(status, stdout, err, out / name, what, "it has 2 links: another name points at the same "
                                                          "data, perhaps a recording")
    assert state(take) == before and state(out / name) == before
    assert sorted(os.listdir(out)) == [name]             # refused before any audio: nothing delivered


@pytest.mark.parametrize("kind", ["fifo", "device"])
@pytest.mark.parametrize("which", ["lock", "journal"])
def test_a_fifo_or_a_device_at_a_bookkeeping_name_refuses_the_run_at_once(tmp_path, session, which, kind):
    name, what = NAMES[which]
    out = tmp_path / "out"
    out.mkdir()
    if kind == "fifo":
        os.mkfifo(out / name)
        reason = "it is a named pipe (FIFO), not a regular file"
    else:
        try:      # the numbers of /dev/null (Linux devices.txt: char 1,3); chainrun must not even open it
            os.mknod(out / name, stat.S_IFCHR | 0o666, os.makedev(1, 3))
        except PermissionError:
            pytest.skip("creating a device node is not allowed here (CAP_MKNOD)")
        reason = "it is a character device, not a regular file"
    before = state(out / name)
    # before the fix: a FIFO at the journal's name blocked the run for ever in open(2), holding the lock
    proc = run_proc("run", tmp_path / "recipe.yaml", session, "-o", out, "--workers", "1", timeout=120)
    assert_refused(proc.returncode, proc.stdout, proc.stderr, out / name, what, reason)
    assert state(out / name) == before
    assert sorted(os.listdir(out)) == [name]


@pytest.mark.skipif(not hasattr(os, "geteuid") or os.geteuid() != 0, reason="chown to another uid needs root")
@pytest.mark.parametrize("which", ["lock", "journal"])
def test_another_users_file_at_a_bookkeeping_name_refuses_the_run(tmp_path, session, run_cli, which):
    name, what = NAMES[which]
    out = tmp_path / "out"
    out.mkdir()
    theirs = out / name
    theirs.write_text('{"someone": "else"}\n')
    os.chown(theirs, 12345, 12345)
    before = state(theirs)
    status, stdout, err = run_cli("run", tmp_path / "recipe.yaml", session, "-o", out, "--workers", "1")
    # before the fix: root truncated and removed that user's lock file, or appended to their journal
    assert_refused(status, stdout, err, theirs, what, "it belongs to uid 12345, not to this user (uid 0)")
    assert state(theirs) == before
    assert sorted(os.listdir(out)) == [name]


def test_a_name_linked_to_the_lock_while_it_is_held_keeps_its_data(tmp_path):
    lock = OutdirLock(str(tmp_path)).acquire()
    kept = tmp_path / "kept-lock.json"
    os.link(lock.path, kept)                             # a second name made for the lock's data meanwhile
    lock.release()
    # POSIX unlink(2) removes one name; the data stays under the other, and is not truncated (before the
    # fix release() truncated it through the fd, emptying the other name)
    assert json.loads(kept.read_text())["pid"] == os.getpid()
    assert not os.path.lexists(lock.path)


def test_a_lock_released_after_its_name_was_replaced_leaves_the_new_file(tmp_path):
    lock = OutdirLock(str(tmp_path)).acquire()
    os.rename(lock.path, tmp_path / "moved")
    (tmp_path / LOCK_NAME).write_text("not the lock chainrun holds\n")
    lock.release()                                       # POSIX: the name now holds another inode
    assert (tmp_path / LOCK_NAME).read_text() == "not the lock chainrun holds\n"


def test_reports_written_over_a_hard_link_to_a_recording_leave_the_recording_alone(tmp_path, session, run_cli,
                                                                                  monkeypatch):
    # A report name that holds a recording (here a hard link to one) is not a report chainrun wrote, so
    # it is left as it is: neither the data (which writing through the link would destroy) nor the name
    # is touched; the JSON goes to the temporary folder instead.
    import tempfile

    monkeypatch.setattr(tempfile, "tempdir", str(tmp_path))
    out = tmp_path / "out"
    out.mkdir()
    take = session / "guest.wav"
    for report in ("chainrun-report.json", "chainrun-report.csv", "chainrun-report.html"):
        os.link(take, out / report)
    before = state(take)
    status, _, err = run_cli("run", tmp_path / "recipe.yaml", session, "-o", out, "--workers", "1")
    assert status == 1 and err.count("the report was not written there") == 3, err
    assert state(take) == before and os.stat(take).st_nlink == 4          # data and every name unchanged
    fallback = [p for p in os.listdir(tmp_path) if p.startswith("chainrun-report-") and p.endswith(".json")]
    assert len(fallback) == 1 and json.loads((tmp_path / fallback[0]).read_text())["files"]
