"""Discovery: find the audio under the inputs and map each file to its path inside OUTDIR.

The output tree mirrors the input: with one folder argument, its files keep their path
relative to that folder; with several, each folder's files go under that folder's own
name in OUTDIR (``cardA/TAKE001.WAV``, ``cardB/TAKE001.WAV``; a name met twice gets
``-2``, ``-3``...), so equal names in different folders are all delivered. A file
argument lands at the top of OUTDIR, however many are given. Nothing is ever written
outside OUTDIR, and OUTDIR may not lie inside an input folder.

:func:`discover_plan` does the same for a batch plan: every file under the folders its
rows name, mirrored relative to the plan's folder, each tied to the first row matching it.
"""
from __future__ import annotations

import os
import stat
from dataclasses import dataclass, field

from ..errors import BatchError
from ..fsutil import is_temp_name
from ..results import FAILED, MAC_METADATA, NOT_AUDIO, SKIPPED, FileResult
from ..text import reason as _reason
from .outdir import JOURNAL_NAME, LOCK_NAME

__all__ = ["Job", "Plan", "discover", "discover_plan", "root_names", "AUDIO_EXTENSIONS"]

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
    recipe: int = 0          # which of the batch's recipes renders it (a plan's row order; 0 otherwise)
    outdir: str = ""         # the batch's OUTDIR ("" when unknown): its subfolders are checked before writing


# chainrun's bookkeeping names in an output folder
_BOOKKEEPING = (LOCK_NAME, JOURNAL_NAME)


def foreign_run_folder(outdir: str, output: str) -> str | None:
    """The first folder below OUTDIR on the way to ``output`` that holds another run's lock or journal.

    Another batch writes (or wrote) there, with its own resume journal: writing into it would
    silently overwrite that run's outputs. OUTDIR itself is this run's and not checked.
    """
    if not outdir:
        return None
    top = os.path.normpath(outdir)
    rel = os.path.relpath(os.path.dirname(os.path.normpath(output)), top)
    if rel == "." or rel.startswith(".."):
        return None
    folder = top
    for part in rel.split(os.sep):
        folder = os.path.join(folder, part)
        if any(os.path.lexists(os.path.join(folder, name)) for name in _BOOKKEEPING):
            return folder
    return None


def foreign_run_message(folder: str) -> str:
    return (f"its output folder {folder} holds another run's lock or resume journal (another batch writes "
            "there); left alone, not rendered: choose another OUTDIR or move that folder")


@dataclass
class Plan:
    """What discovery found: the files to render, and those it set aside (with why)."""

    jobs: list[Job] = field(default_factory=list)
    skipped: list[FileResult] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)


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


class _Collector:
    """Adds found files to a :class:`Plan`: once each, never out of OUTDIR, no two on one output name."""

    def __init__(self, plan: Plan, outdir: str | None):
        self.plan, self.outdir = plan, outdir
        self.out_real = os.path.realpath(outdir) if outdir is not None else None
        self.seen_inputs: dict[str, str] = {}
        self.seen_outputs: dict[str, str] = {}

    def __call__(self, path: str, rel: str, recipe: int = 0) -> None:
        plan, outdir, out_real = self.plan, self.outdir, self.out_real
        real = os.path.realpath(path)
        if out_real is not None and _inside(real, out_real):
            plan.skipped.append(_skip(path, rel, f"a link into the output folder {outdir}; outputs are not "
                                                 "read as inputs"))
            return
        if real in self.seen_inputs:
            plan.skipped.append(_skip(path, rel, f"the same file as {self.seen_inputs[real]}; rendered once"))
            return
        if out_real is None:
            self.seen_inputs[real] = path
            plan.jobs.append(Job(path, rel, "", recipe))
            return
        output = os.path.normpath(os.path.join(outdir, rel))
        if not _inside(os.path.dirname(output), out_real) or os.path.isabs(rel) \
                or os.pardir in os.path.normpath(rel).split(os.sep):
            plan.skipped.append(_fail(path, rel, "its output name would leave OUTDIR (through a link in the "
                                                 "output folder); not rendered"))
            return
        key = os.path.normcase(output)
        if key in self.seen_outputs:
            plan.skipped.append(_fail(path, rel, f"its output name collides with that of {self.seen_outputs[key]}; "
                                                 "rename one of them"))
            return
        if is_temp_name(os.path.basename(output)):
            plan.skipped.append(_fail(path, rel, "its name has the exact shape of chainrun's temporary files "
                                                 "(.NAME.chainrun-part-XXXXXXXX), which the clean-up removes; "
                                                 "rename it to render it"))
            return
        foreign = foreign_run_folder(outdir, output)
        if foreign is not None:
            plan.skipped.append(_fail(path, rel, foreign_run_message(foreign)))
            return
        self.seen_inputs[real], self.seen_outputs[key] = path, path
        plan.jobs.append(Job(path, rel, output, recipe, outdir))


def _check_folder(arg: str, outdir: str | None, out_real: str | None) -> None:
    if out_real is not None and _inside(out_real, arg):
        raise BatchError(f"{outdir}: error: the output folder lies inside the input folder {arg}; "
                         "choose an output folder outside every input")
    if out_real is not None and _inside(arg, out_real):
        raise BatchError(f"{arg}: error: this input lies inside the output folder {outdir}; "
                         "choose an output folder outside every input")


def root_names(folders: list[str]) -> list[str]:
    """The folder each input folder mirrors under when several are given: its own name, ``-2``... when met again."""
    names: list[str] = []
    used: set[str] = set()
    for folder in folders:
        base = os.path.basename(os.path.normpath(os.path.abspath(folder))) or "root"
        name, n = base, 1
        while os.path.normcase(name) in used:
            n += 1
            name = f"{base}-{n}"
        used.add(os.path.normcase(name))
        names.append(name)
    return names


def discover(inputs: list[str], outdir: str | None) -> Plan:
    """Find the audio under ``inputs`` and map each file to a path inside ``outdir``.

    With ``outdir`` None (scanning), files are only found, not mapped. With several
    folders among ``inputs``, each one's files go under its own name (:func:`root_names`).

    Raises
    ------
    BatchError
        If an input does not exist, or OUTDIR lies inside an input folder (or an
        input inside OUTDIR).
    """
    plan = Plan()
    add = _Collector(plan, outdir)
    out_real = add.out_real
    for arg in inputs:
        if not os.path.lexists(arg):
            raise BatchError(f"{arg}: error: no such file or folder")
    folders = [i for i, arg in enumerate(inputs) if os.path.isdir(arg)]
    names = root_names([inputs[i] for i in folders]) if len(folders) > 1 else []
    prefixes = dict(zip(folders, names))
    for i, arg in enumerate(inputs):
        if os.path.isdir(arg):
            _check_folder(arg, outdir, out_real)
            _walk(arg, add, plan, out_real, prefix=prefixes.get(i, ""))
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


TEMP_LEFTOVER = ("a temporary file of an unfinished chainrun write (.NAME.chainrun-part-XXXXXXXX), "
                 "not a recording; not rendered")
NO_ROW = "no row of the plan matches it; not rendered"


def _fixed_part(pattern: str) -> str:
    """The leading folders of a pattern that hold no wildcard: where to look for its files."""
    fixed = []
    for part in pattern.split("/"):
        if any(c in part for c in "*?["):
            break
        fixed.append(part)
    return "/".join(fixed)


def discover_plan(plan, outdir: str | None) -> Plan:
    """Find the files a batch plan (:class:`chainrun.recipe.plan.BatchPlan`) names, each tied to its row's recipe.

    The folders its patterns start from are searched (as folder arguments are); each file found
    is named by its path relative to the plan's folder and rendered by the first row that
    matches it (``Job.recipe``). A file found there that no row matches is skipped, saying so.
    OUTDIR may lie inside the plan's folder: it is passed over, never searched. A row matching
    no file, or only files an earlier row takes, is a warning (``Plan.warnings``).

    Raises
    ------
    BatchError
        If an input folder lies inside OUTDIR.
    """
    from ..recipe.plan import match

    found = Plan()
    add = _Collector(found, outdir)
    out_real = add.out_real
    root = plan.root
    rows = [(row, tuple(p + "/**" if os.path.isdir(os.path.join(root, p)) else p for p in row.patterns))
            for row in plan.rows]
    starts: list[str] = []
    for _, patterns in rows:
        for p in patterns:
            start = os.path.normpath(os.path.join(root, _fixed_part(p)))
            if start not in starts:
                starts.append(start)
    # Search each folder once: one inside another is searched with it.
    folders = [s for s in starts if os.path.isdir(s)]
    folders = [f for f in folders if not any(o != f and _inside(f, o) for o in folders)]
    candidates: list[tuple[str, str]] = []

    def collect(path: str, rel: str) -> None:
        candidates.append((path, rel))

    for folder in folders:
        if out_real is not None and _inside(folder, out_real):
            raise BatchError(f"{folder}: error: this input lies inside the output folder {outdir}; "
                             "choose an output folder outside every input")
        _walk(folder, collect, found, out_real, base=root, pass_over_outdir=True)
    for start in starts:
        if os.path.isfile(start) and not any(_inside(start, f) for f in folders):
            candidates.append((start, os.path.relpath(start, root)))
    hits = [0] * len(rows)
    taken = [0] * len(rows)
    seen: set[str] = set()
    for path, rel in candidates:
        if rel in seen:
            continue
        seen.add(rel)
        first = None
        for k, (row, patterns) in enumerate(rows):
            if any(match(p, rel) for p in patterns):
                hits[k] += 1
                if first is None:
                    first = k
                    taken[k] += 1
        if first is None:
            found.skipped.append(_skip(path, rel, NO_ROW))
        else:
            add(path, rel, rows[first][0].recipe)
    for k, (row, _) in enumerate(rows):
        shown = ", ".join(f"'{p}'" for p in row.patterns)
        if not hits[k]:
            found.warnings.append(f"{row.where}: warning: {row.title} inputs {shown} match no file; "
                                  "patterns are relative to the plan's folder")
        elif not taken[k]:
            found.warnings.append(f"{row.where}: warning: {row.title} inputs {shown} match only files an earlier "
                                  "row takes; the first row matching a file renders it")
    return found


def _walk(top: str, add, plan: Plan, out_real: str | None = None, prefix: str = "", base: str | None = None,
          pass_over_outdir: bool = False) -> None:
    """Find the files under ``top``; each is named by its path relative to ``base`` (default ``top``) under ``prefix``."""
    base = top if base is None else base

    def relpath(path: str) -> str:
        rel = os.path.relpath(path, base)
        return os.path.join(prefix, rel) if prefix else rel

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
            rel = relpath(folder)
            plan.skipped.append(_fail(folder, rel, f"folder cannot be listed: {_reason(exc)}; "
                                                   "the files in it were not rendered"))
            continue
        subfolders = []
        for e in entries:
            path = e.path
            rel = relpath(path)
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
                    if pass_over_outdir and os.path.realpath(path) == out_real:
                        continue
                    plan.skipped.append(_skip(path, rel, "a link into the output folder; outputs are not read "
                                                         "as inputs, not searched"))
                    continue
                if key in visited:
                    plan.skipped.append(_skip(path, rel, "a link back to a folder already searched "
                                                         "(symbolic link loop); not followed"))
                    continue
                visited.add(key)
                subfolders.append(path)         # hidden folders too: every file under a root is accounted for
                continue
            if e.name.startswith("._"):
                plan.skipped.append(_skip(path, rel, MAC_METADATA))
                continue
            if is_temp_name(e.name):
                plan.skipped.append(_skip(path, rel, TEMP_LEFTOVER))
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
