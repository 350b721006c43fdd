"""OUTDIR bookkeeping: one writer at a time, leftovers cleaned, finished files remembered.

* :class:`OutdirLock` — ``OUTDIR/.chainrun.lock``, held with ``flock`` for the
  whole run and holding the owner's pid and host. The kernel drops the lock when
  its process dies, so a lock left by a killed run is detected and taken over.
* :func:`clean_leftovers` — removes temporary outputs (``.<name>.chainrun-part-*``)
  that a killed run left behind. Only names of that pattern, only inside OUTDIR.
* :class:`Journal` — ``OUTDIR/.chainrun-journal.jsonl``, one JSON line appended
  and fsynced after each file is delivered: its job key (recipe digest and the
  policy that shapes the output), the input's fingerprint and the output's. A
  later run skips a file whose entry still matches on all three.
* :func:`claim_outdir` — all of the above at the start of a run: create OUTDIR, take its lock,
  refuse foreign files at chainrun's names, clean leftovers.
"""
from __future__ import annotations

import errno
import fcntl
import hashlib
import json
import os
import socket
import stat
import time
from dataclasses import dataclass

from ..errors import BatchError
from ..fsutil import is_temp_name
from .journal_types import line_problem

__all__ = ["LockedError", "ForeignFileError", "OutdirLock", "check_journal", "clean_leftovers", "fingerprint",
           "Journal", "LOCK_NAME", "JOURNAL_NAME", "claim_outdir"]

LOCK_NAME = ".chainrun.lock"
JOURNAL_NAME = ".chainrun-journal.jsonl"
_SAMPLE = 1 << 16          # bytes hashed at the head and at the tail of a file for its fingerprint


class LockedError(Exception):
    """Another live run holds the output folder."""


class ForeignFileError(OSError):
    """One of chainrun's own names in OUTDIR holds something chainrun did not make; it is left untouched.

    ``str()`` is the whole one-line refusal; ``strerror`` is the reason alone.
    """

    def __str__(self) -> str:
        return f"{self.filename}: error: {self.strerror}; remove it or choose another OUTDIR"


class OutdirLock:
    """Exclusive lock on an output folder, released on close or when the process dies."""

    def __init__(self, outdir: str):
        self.path = os.path.join(outdir, LOCK_NAME)
        self.fd: int | None = None
        self.took_over: dict | None = None

    def acquire(self) -> "OutdirLock":
        while True:
            # The lock file is truncated below: a link planted at its name (symbolic or hard, to a recording
            # say), a FIFO or a device is refused by _open_own_file, never written through.
            fd = _open_own_file(self.path, os.O_RDWR | os.O_CREAT)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                owner = _read_owner(fd)
                os.close(fd)
                raise LockedError(_locked_message(self.path, owner)) from None
            # The owner unlinks the lock file when it releases it: a lock won on a file that is no longer
            # at this path (or was replaced) protects nothing, so try again on the file that is there now.
            try:
                st, now = os.fstat(fd), os.stat(self.path, follow_symlinks=False)
                same = (st.st_dev, st.st_ino) == (now.st_dev, now.st_ino)
            except FileNotFoundError:
                same = False
            if same:
                break
            fcntl.flock(fd, fcntl.LOCK_UN)
            os.close(fd)
        self.fd = fd
        try:
            previous = _read_owner(fd)
            if previous and previous.get("pid") != os.getpid():
                self.took_over = previous       # its process is gone: the kernel released its lock
            me = {"pid": os.getpid(), "host": socket.gethostname(),
                  "started": time.strftime("%Y-%m-%dT%H:%M:%S%z")}
            os.ftruncate(fd, 0)
            os.pwrite(fd, (json.dumps(me) + "\n").encode(), 0)
            os.fsync(fd)
        except BaseException:        # a full disk, Ctrl-C: do not leave a lock file behind
            self.release()
            raise
        return self

    def release(self) -> None:
        if self.fd is None:
            return
        try:
            # Only the file verified when it was taken is truncated, and only while no other name shares its
            # data; the name is removed only if it still holds that file.
            st = os.fstat(self.fd)
            if st.st_nlink <= 1:
                os.ftruncate(self.fd, 0)
            now = os.stat(self.path, follow_symlinks=False)
            if (now.st_dev, now.st_ino) == (st.st_dev, st.st_ino):
                os.unlink(self.path)
        except OSError:
            pass
        # The descriptor is given up only once the name is gone: a release that a Ctrl-C cut short above
        # can be called again and still removes the lock file.
        fd, self.fd = self.fd, None
        try:
            fcntl.flock(fd, fcntl.LOCK_UN)
        finally:
            os.close(fd)

    def __enter__(self) -> "OutdirLock":
        return self.acquire()

    def __exit__(self, *exc) -> None:
        self.release()


_WHAT = {LOCK_NAME: "lock file", JOURNAL_NAME: "resume journal"}
_KINDS = {stat.S_IFIFO: "a named pipe (FIFO)", stat.S_IFCHR: "a character device", stat.S_IFBLK: "a block device",
          stat.S_IFSOCK: "a socket"}


def _foreign(path: str, st: os.stat_result, created: bool = False) -> ForeignFileError | None:
    """Why the file ``st`` at ``path`` is not one chainrun made (None if it may be), as the error to raise.

    No link at all (``st_nlink`` 0) is a file unlinked since it was opened: the lock retries, a journal
    entry appended to it is lost, nothing else is touched. A file this call ``created`` is not asked for
    its owner (a file system may give new files another, as NFS does to root's).
    """
    kind = stat.S_IFMT(st.st_mode)
    if kind == stat.S_IFDIR:
        return None                       # opened for writing it fails with EISDIR; read, it says so
    if kind != stat.S_IFREG:
        reason = f"it is {_KINDS.get(kind, 'not a regular file')}, not a regular file"
    elif st.st_nlink > 1:
        reason = f"it has {st.st_nlink} links: another name points at the same data, perhaps a recording"
    elif st.st_uid != os.geteuid() and not created:
        reason = f"it belongs to uid {st.st_uid}, not to this user (uid {os.geteuid()})"
    else:
        return None
    what = _WHAT.get(os.path.basename(path), "file")
    return ForeignFileError(errno.EEXIST, f"not chainrun's own {what} ({reason})", path)


def _open_own_file(path: str, flags: int) -> int:
    """Open one of chainrun's own files in OUTDIR, refusing anything at its name that chainrun did not make.

    Its data is truncated or appended to, so it must be a regular file with no other name (a hard link
    to a recording would be written into) owned by this user. A symbolic link is refused by
    ``O_NOFOLLOW``; ``O_NONBLOCK`` keeps the open of a FIFO from waiting for ever; the file is checked
    with ``fstat`` after opening (what is checked is what is written), and by ``lstat`` before, so that a
    device is not even opened.

    Raises
    ------
    ForeignFileError
        If the name holds a hard link, a FIFO, a device or another user's file; nothing was written.
    OSError
        If it cannot be opened (a symbolic link: ELOOP with a message saying so).
    """
    try:
        before = os.lstat(path)
    except OSError:
        before = None                    # nothing there yet (created below), or the open gives the reason
    if before is not None and not stat.S_ISLNK(before.st_mode):
        problem = _foreign(path, before)
        if problem is not None:
            raise problem
    flags |= os.O_NOFOLLOW | os.O_CLOEXEC | os.O_NONBLOCK | os.O_NOCTTY
    created = False
    try:
        try:
            fd = os.open(path, flags | os.O_EXCL, 0o644) if flags & os.O_CREAT else None
            created = fd is not None
        except FileExistsError:
            fd = None
        if fd is None:
            fd = os.open(path, flags, 0o644)
    except OSError as exc:
        if exc.errno == errno.ELOOP:
            raise OSError(errno.ELOOP, f"{os.path.basename(path)} is a symbolic link; chainrun does not follow "
                                       "links for its own files (remove it)", path) from None
        raise
    try:
        problem = _foreign(path, os.fstat(fd), created)
        if problem is None:
            fcntl.fcntl(fd, fcntl.F_SETFL, fcntl.fcntl(fd, fcntl.F_GETFL) & ~os.O_NONBLOCK)
    except BaseException:
        os.close(fd)
        raise
    if problem is not None:
        os.close(fd)
        raise problem
    return fd


def check_journal(outdir: str) -> None:
    """Refuse OUTDIR if its journal's name holds something chainrun must not append to.

    Called once the lock is held, before any audio: the run is refused rather than the journal
    skipped, so that a hard link to a recording there is noticed. What cannot be opened at all (a
    symbolic link, a folder) is left to :class:`Journal`, which turns resuming off with a note.

    Raises
    ------
    ForeignFileError
        If the journal's name holds a hard link, a FIFO, a device or another user's file.
    """
    try:
        os.close(_open_own_file(os.path.join(outdir, JOURNAL_NAME), os.O_RDONLY))
    except ForeignFileError:
        raise
    except OSError:
        pass


def _alive(pid) -> bool:
    try:
        os.kill(int(pid), 0)
    except ProcessLookupError:
        return False
    except (PermissionError, ValueError, TypeError, OverflowError):
        return True
    return True


def _locked_message(path: str, owner: dict | None) -> str:
    who = f"pid {owner.get('pid', '?')} on host {owner.get('host', '?')}" if owner else "another process"
    since = f", since {owner['started']}" if owner and "started" in owner else ""
    if owner and owner.get("host") == socket.gethostname() and not _alive(owner.get("pid")):
        return (f"{path}: error: the chainrun run that took this output folder ({who}{since}) is gone, but "
                "processes it started still hold it; wait for them to end, or end them, then run again")
    return (f"{path}: error: another chainrun run ({who}{since}) is writing into this output folder; "
            "wait for it to finish or choose another folder")


def _read_owner(fd: int) -> dict | None:
    try:
        data = os.pread(fd, 4096, 0)
        return json.loads(data.decode()) if data.strip() else None
    except (OSError, ValueError):
        return None


def clean_leftovers(outdir: str) -> list[str]:
    """Remove temporary outputs of earlier, interrupted runs under ``outdir``; returns what was removed.

    A subfolder that holds a lock of its own is another run's OUTDIR, perhaps one rendering right now:
    it is not entered (a run into it cleans it).
    """
    removed = []
    for root, dirs, files in os.walk(outdir):
        dirs[:] = [d for d in dirs if not os.path.lexists(os.path.join(root, d, LOCK_NAME))]
        for name in files:
            if is_temp_name(name):     # the exact shape only: discovery never delivers to such a name
                path = os.path.join(root, name)
                try:
                    os.unlink(path)
                    removed.append(path)
                except OSError:
                    pass
    return removed


def fingerprint(path: str) -> dict:
    """Size, modification time, inode, change time and a hash of the first and last 64 KiB of a file.

    The inode tells a file put in place of another (same size and modification time) apart; the change
    time moves with every write and with a modification time set back.
    """
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        st = os.fstat(fh.fileno())          # the file that is hashed, not whatever the name holds later
        h.update(fh.read(_SAMPLE))
        if st.st_size > 2 * _SAMPLE:
            fh.seek(st.st_size - _SAMPLE)
            h.update(fh.read(_SAMPLE))
    return {"size": st.st_size, "mtime_ns": st.st_mtime_ns, "inode": st.st_ino, "ctime_ns": st.st_ctime_ns,
            "sample_sha256": h.hexdigest()}


@dataclass
class Entry:
    relpath: str
    key: str
    input: dict
    output: dict
    result: dict


class Journal:
    """The record of files already delivered into an output folder."""

    def __init__(self, outdir: str):
        self.path = os.path.join(outdir, JOURNAL_NAME)
        self.entries: dict[str, Entry] = {}
        self.problem: str | None = None      # why the journal cannot be read, if it cannot
        self.warnings: list[str] = []        # one located line per line ignored (cut short, edited by hand)
        bad: list[tuple[int, object, str]] = []
        last: dict[str, int] = {}
        try:
            with os.fdopen(_open_own_file(self.path, os.O_RDONLY), encoding="utf-8",
                           errors="surrogateescape") as fh:
                for number, line in enumerate(fh, 1):
                    if not line.strip():
                        continue
                    try:
                        d = json.loads(line)
                    except ValueError:
                        d, why = None, "not a complete JSON record (cut short, or edited)"
                    else:
                        why = line_problem(d)
                    if why:
                        bad.append((number, d.get("relpath") if isinstance(d, dict) else None, why))
                        continue
                    self.entries[d["relpath"]] = Entry(d["relpath"], d["key"], d["input"], d["output"], d["result"])
                    last[d["relpath"]] = number
        except FileNotFoundError:
            pass
        except OSError as exc:      # a folder or a link at its name, no permission: every file is rendered
            self.problem = f"{self.path}: {(exc.strerror or str(exc)).lower()}"
        # a bad line whose file a later line records again (rendered since) is not worth a warning any more
        self.warnings = [f"{self.path}:{n}: warning: {why}; line ignored, its file is rendered again"
                         for n, rel, why in bad if not (isinstance(rel, str) and last.get(rel, 0) > n)]

    def finished(self, relpath: str, key: str, input_path: str, output_path: str) -> Entry | None:
        """The entry of a delivered file if input, output and job key all still match."""
        e = self.entries.get(relpath)
        if e is None or e.key != key:
            return None
        try:
            if fingerprint(input_path) != e.input or fingerprint(output_path) != e.output:
                return None
        except OSError:
            return None
        return e

    def record(self, relpath: str, key: str, input_path: str, output_path: str, result: dict) -> None:
        """Append one delivered file (one line, fsynced)."""
        entry = {"relpath": relpath, "key": key, "input": fingerprint(input_path),
                 "output": fingerprint(output_path), "result": result}
        line = json.dumps(entry, ensure_ascii=True) + "\n"
        fd = _open_own_file(self.path, os.O_RDWR | os.O_APPEND | os.O_CREAT)
        try:
            # A line cut short (a torn write at power loss) would swallow the next entry: start afresh.
            size = os.fstat(fd).st_size
            if size and os.pread(fd, 1, size - 1) != b"\n":
                line = "\n" + line
            os.write(fd, line.encode())
            os.fsync(fd)
        finally:
            os.close(fd)
        self.entries[relpath] = Entry(relpath, key, entry["input"], entry["output"], result)


def claim_outdir(outdir: str) -> tuple[OutdirLock, list[str]]:
    """Create OUTDIR, take its lock and clean what an interrupted run left; returns the lock and notes.

    Raises
    ------
    BatchError
        If another live run holds the folder, it cannot be created, or the lock's or the journal's name
        holds something chainrun did not make (a hard link, a FIFO, a device, another user's file).
    """
    try:
        os.makedirs(outdir, exist_ok=True)
        lock = OutdirLock(outdir).acquire()
    except (LockedError, ForeignFileError) as exc:
        raise BatchError(str(exc)) from None
    except OSError as exc:
        raise BatchError(f"{outdir}: error: cannot use the output folder: "
                         f"{(exc.strerror or str(exc)).lower()}") from None
    try:
        check_journal(outdir)
        notes = []
        if lock.took_over:
            notes.append(f"took over the lock left by pid {lock.took_over.get('pid')} on host "
                         f"{lock.took_over.get('host')} (that run is gone)")
        removed = clean_leftovers(outdir)
        if removed:
            notes.append(f"removed {len(removed)} unfinished temporary file(s) left by an interrupted run")
    except ForeignFileError as exc:     # refused before any audio is read
        lock.release()
        raise BatchError(str(exc)) from None
    except BaseException:        # Ctrl-C here: the caller never gets the lock, so release it now
        lock.release()
        raise
    return lock, notes
