"""Files on disk: temporary names, atomic writes, fsync.

Every file chainrun delivers (audio, reports, pictures) is written to a temporary name
``.<name>.chainrun-part-<random>`` in its destination folder, flushed and fsynced, and only
then renamed over its final name, so a final name never holds an incomplete file. The leftover
clean-up of an interrupted run knows that one pattern, exactly (:func:`is_temp_name`).
"""
from __future__ import annotations

import os
import re
import secrets
import sys

__all__ = ["TEMP_TAG", "is_temp_name", "temp_path_for", "fsync_path", "remove_quietly", "atomic_write_text",
           "HELD_FOLDERS", "open_below", "still_at"]

TEMP_TAG = ".chainrun-part-"              # temporary outputs: .<name>.chainrun-part-<random>
# The exact shape of a name temp_path_for makes: a dot, the (perhaps shortened) final name, the tag,
# 8 lower-case hex digits, and the scale policy's scratch suffix. Nothing else is a temporary file.
_TEMP_NAME = re.compile(r"\..+" + re.escape(TEMP_TAG) + r"[0-9a-f]{8}(?:\.f64)?", re.DOTALL)
_NAME_MAX = 255          # bytes in one file name on the usual file systems, when the folder cannot say


def is_temp_name(name: str) -> bool:
    """True for a file name of exactly the shape :func:`temp_path_for` gives (``.NAME.chainrun-part-1a2b3c4d``)."""
    return _TEMP_NAME.fullmatch(name) is not None


def temp_path_for(final: str, suffix: str = "") -> str:
    """``.<name>.chainrun-part-<hex><suffix>`` beside ``final``.

    The temporary name is 24 bytes longer than the final one (plus ``suffix``), so a name near the
    folder's limit (PC_NAME_MAX) is shortened here; the final name is kept. Leftovers are found by
    their exact shape (:func:`is_temp_name`), so a shortened name is cleaned up like any other.
    """
    d, name = os.path.split(final)
    tail = os.fsencode(f"{TEMP_TAG}{secrets.token_hex(4)}{suffix}")
    try:   # never above 255: FAT and exFAT say 1530 (bytes for 255 UTF-16 characters) but hold 255
        limit = min(os.pathconf(d or ".", "PC_NAME_MAX") or _NAME_MAX, _NAME_MAX)
    except (OSError, ValueError):
        limit = _NAME_MAX
    raw = os.fsencode(name)
    room = limit - 1 - len(tail)
    return os.path.join(d, os.fsdecode(b"." + raw[:room] + tail))


def fsync_path(path: str, directory: bool = False) -> None:
    """fsync a file, or with ``directory`` a folder (so that a rename in it is on disk)."""
    fd = os.open(path, os.O_RDONLY | (os.O_DIRECTORY if directory else 0))
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def remove_quietly(path: str | None) -> None:
    """Remove ``path`` if it is there; never raises."""
    if path:
        try:
            os.unlink(path)
        except OSError:        # gone already, or its folder went read-only: nothing more can be done
            pass


def atomic_write_text(path: str, text: str) -> None:
    """Write ``text`` (UTF-8) to ``path`` through a temporary name, fsynced, then renamed into place."""
    tmp = temp_path_for(path)
    try:
        with open(tmp, "x", encoding="utf-8", newline="") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    finally:
        remove_quietly(tmp)


# Output folders held open (Linux): a file written as /proc/self/fd/N/NAME lands in the folder open as N.
HELD_FOLDERS = sys.platform.startswith("linux") and os.path.isdir("/proc/self/fd")
_DIR_FLAGS = os.O_RDONLY | getattr(os, "O_DIRECTORY", 0) | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_CLOEXEC", 0)


def open_below(outdir: str, folder: str, create: bool = True) -> int:
    """Open ``folder`` (inside ``outdir``) one name at a time from OUTDIR, creating what is missing, never
    following a link (a link is ELOOP or ENOTDIR); returns the open folder's descriptor."""
    fd = os.open(outdir, _DIR_FLAGS & ~getattr(os, "O_NOFOLLOW", 0))
    try:
        rel = os.path.relpath(os.path.normpath(folder), os.path.normpath(outdir))
        for part in ([] if rel == "." else rel.split(os.sep)):
            if create:
                try:
                    os.mkdir(part, dir_fd=fd)
                except FileExistsError:
                    pass
            nfd = os.open(part, _DIR_FLAGS, dir_fd=fd)
            os.close(fd)
            fd = nfd
    except BaseException:
        os.close(fd)
        raise
    return fd


def still_at(outdir: str, folder: str, fd: int) -> bool:
    """True if the folder open as ``fd`` is still the one reached from OUTDIR without a link."""
    try:
        again = open_below(outdir, folder, create=False)
    except OSError:
        return False
    try:
        a, b = os.fstat(again), os.fstat(fd)
        return (a.st_dev, a.st_ino) == (b.st_dev, b.st_ino)
    finally:
        os.close(again)
