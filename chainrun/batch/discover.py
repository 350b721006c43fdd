"""Discovery: find the audio under the inputs and map each file to its path inside OUTDIR.

The output tree mirrors the input: a folder argument's files keep their path
relative to that folder; a file argument lands at the top of OUTDIR. Nothing
is ever written outside OUTDIR, and OUTDIR may not lie inside an input folder.
"""
from __future__ import annotations

import os
import stat
from dataclasses import dataclass, field

from ..errors import BatchError
from ..fsutil import TEMP_TAG
from ..results import FAILED, MAC_METADATA, NOT_AUDIO, SKIPPED, FileResult
from ..text import reason as _reason

__all__ = ["Job", "Plan", "discover", "AUDIO_EXTENSIONS"]

# Extensions taken as audio without looking inside (lower case).
AUDIO_EXTENSIONS = frozenset({
    ".wav", ".wave", ".bwf", ".rf64", ".w64", ".flac", ".aif", ".aiff", ".aifc", ".caf",
    ".au", ".snd", ".ogg", ".oga", ".opus", ".mp3",
})
# First bytes of containers libsndfile reads, for files without a known extension.
_MAGIC = (b"RIFF", b"RIFX", b"RF64", b"BW64", b"FORM", b"fLaC", b"OggS", b"caff", b".snd", b"riff")


@dataclass(frozen=True)
class Job:
    """One file to render: where it is, where it goes, and its name relative to OUTDIR."""

    input: str
    relpath: str
    output: str


@dataclass
class Plan:
    """What discovery found: the files to render, and those it set aside (with why)."""

    jobs: list[Job] = field(default_factory=list)
    skipped: list[FileResult] = field(default_factory=list)


def _inside(path: str, folder: str) -> bool:
    path, folder = os.path.realpath(path), os.path.realpath(folder)
    return path == folder or path.startswith(folder.rstrip(os.sep) + os.sep)


def _looks_like_audio(path: str) -> bool:
    if os.path.splitext(path)[1].lower() in AUDIO_EXTENSIONS:
        return True
    try:
        with open(path, "rb") as fh:
            head = fh.read(4)
    except OSError:
        return False
    return head in _MAGIC


BROKEN_LINK = "a link to nothing (broken symbolic link); there is nothing to read"


def _skip(path: str, rel: str, why: str) -> FileResult:
    return FileResult(input=path, relpath=rel, status=SKIPPED, message=why)


def _fail(path: str, rel: str, why: str) -> FileResult:
    """An input found (or named) that cannot be rendered: failed, so the batch does not end 'all ok'."""
    return FileResult(input=path, relpath=rel, status=FAILED, message=why)


def discover(inputs: list[str], outdir: str | None) -> Plan:
    """Find the audio under ``inputs`` and map each file to a path inside ``outdir``.

    With ``outdir`` None (scanning), files are only found, not mapped.

    Raises
    ------
    BatchError
        If an input does not exist, or OUTDIR lies inside an input folder (or an
        input inside OUTDIR).
    """
    plan = Plan()
    out_real = os.path.realpath(outdir) if outdir is not None else None
    seen_inputs: dict[str, str] = {}
    seen_outputs: dict[str, str] = {}

    def add(path: str, rel: str) -> None:
        real = os.path.realpath(path)
        if out_real is not None and _inside(real, out_real):
            plan.skipped.append(_skip(path, rel, f"a link into the output folder {outdir}; outputs are not "
                                                 "read as inputs"))
            return
        if real in seen_inputs:
            plan.skipped.append(_skip(path, rel, f"the same file as {seen_inputs[real]}; rendered once"))
            return
        if out_real is None:
            seen_inputs[real] = path
            plan.jobs.append(Job(path, rel, ""))
            return
        output = os.path.normpath(os.path.join(outdir, rel))
        if not _inside(os.path.dirname(output), out_real) or os.path.isabs(rel) or rel.startswith(".."):
            plan.skipped.append(_fail(path, rel, "its output name would leave OUTDIR (through a link in the "
                                                 "output folder); not rendered"))
            return
        key = os.path.normcase(output)
        if key in seen_outputs:
            plan.skipped.append(_fail(path, rel, f"its output name collides with that of {seen_outputs[key]}; "
                                                 "rename one of them"))
            return
        seen_inputs[real], seen_outputs[key] = path, path
        plan.jobs.append(Job(path, rel, output))

    for arg in inputs:
        if not os.path.lexists(arg):
            raise BatchError(f"{arg}: error: no such file or folder")
        if os.path.isdir(arg):
            if out_real is not None and _inside(out_real, arg):
                raise BatchError(f"{outdir}: error: the output folder lies inside the input folder {arg}; "
                                 "choose an output folder outside every input")
            if out_real is not None and _inside(arg, out_real):
                raise BatchError(f"{arg}: error: this input lies inside the output folder {outdir}; "
                                 "choose an output folder outside every input")
            _walk(arg, add, plan, out_real)
        else:
            if out_real is not None and _inside(arg, out_real):
                raise BatchError(f"{arg}: error: this input lies inside the output folder {outdir}; "
                                 "choose an output folder outside every input")
            name = os.path.basename(arg)
            try:
                mode = os.stat(arg).st_mode
            except FileNotFoundError:
                plan.skipped.append(_fail(arg, name, BROKEN_LINK))
                continue
            except OSError as exc:
                plan.skipped.append(_fail(arg, name, f"cannot be read: {_reason(exc)}"))
                continue
            if not stat.S_ISREG(mode):     # a pipe or a device: opening it could wait for ever
                plan.skipped.append(_fail(arg, name, "not a regular file (a pipe, socket or device); "
                                                     "chainrun reads audio files only"))
                continue
            add(arg, name)
    return plan


def _walk(top: str, add, plan: Plan, out_real: str | None = None) -> None:
    visited: set[tuple[int, int]] = set()
    st = os.stat(top)
    visited.add((st.st_dev, st.st_ino))
    stack = [top]
    while stack:
        folder = stack.pop()
        try:
            with os.scandir(folder) as it:
                entries = sorted(it, key=lambda e: e.name)
        except OSError as exc:
            rel = os.path.relpath(folder, top)
            plan.skipped.append(_fail(folder, rel, f"folder cannot be listed: {_reason(exc)}; "
                                                   "the files in it were not rendered"))
            continue
        subfolders = []
        for e in entries:
            path = e.path
            rel = os.path.relpath(path, top)
            try:
                is_dir = e.is_dir(follow_symlinks=True)
            except OSError:
                is_dir = False
            if is_dir:
                try:
                    est = os.stat(path)
                except OSError as exc:
                    plan.skipped.append(_fail(path, rel, f"folder cannot be opened: {_reason(exc)}; "
                                                         "the files in it were not rendered"))
                    continue
                key = (est.st_dev, est.st_ino)
                if out_real is not None and _inside(path, out_real):
                    plan.skipped.append(_skip(path, rel, "a link into the output folder; outputs are not read "
                                                         "as inputs, not searched"))
                    continue
                if key in visited:
                    plan.skipped.append(_skip(path, rel, "a link back to a folder already searched "
                                                         "(symbolic link loop); not followed"))
                    continue
                visited.add(key)
                if not e.name.startswith("."):
                    subfolders.append(path)
                continue
            if e.name.startswith("._"):
                plan.skipped.append(_skip(path, rel, MAC_METADATA))
                continue
            if e.name.startswith(".") or TEMP_TAG in e.name:
                continue
            try:
                mode = os.stat(path).st_mode
            except FileNotFoundError:
                plan.skipped.append(_fail(path, rel, BROKEN_LINK if e.is_symlink() else "vanished while the folder "
                                                                                          "was searched"))
                continue
            except OSError as exc:          # e.g. a link that loops: too many levels of symbolic links
                plan.skipped.append(_fail(path, rel, f"cannot be read: {_reason(exc)}"))
                continue
            if not stat.S_ISREG(mode):
                plan.skipped.append(_skip(path, rel, "not a regular file"))
                continue
            if _looks_like_audio(path):
                add(path, rel)
            else:
                plan.skipped.append(_skip(path, rel, NOT_AUDIO))
        stack.extend(reversed(subfolders))
