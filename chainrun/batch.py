"""Batch: discover inputs, map them into OUTDIR, design per rate, render in workers.

The output tree mirrors the input: a folder argument's files keep their path
relative to that folder; a file argument lands at the top of OUTDIR. Nothing
is ever written outside OUTDIR, and OUTDIR may not lie inside an input folder.
"""
from __future__ import annotations

import hashlib
import json
import multiprocessing
import os
import stat
import sys
import time
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from dataclasses import dataclass, field

from . import __version__
from .design import Chain, design
from .guard import Assessment, assess, check_raw_sections
from .recipe import Recipe, RecipeError
from .journal import Journal, LockedError, OutdirLock, clean_leftovers
from .render import DEFAULT_BLOCK, MAX_BLOCK, TEMP_TAG, AudioError, FileResult, Policy, Source, probe, render_file

__all__ = ["BatchError", "Job", "Plan", "RateDesign", "BatchResult", "discover", "prepare", "claim_outdir",
           "execute", "run_batch", "job_key"]

MAX_WORKERS = 64
# Workers are forked on Linux (instant start; the parent holds no threads of its own when the pool
# starts, and the progress bar runs without its monitor thread); elsewhere they start fresh.
_POOL_CONTEXT = multiprocessing.get_context("fork" if sys.platform.startswith("linux") else "spawn")
MIN_BLOCK = 1

# Extensions taken as audio without looking inside (lower case).
AUDIO_EXTENSIONS = frozenset({
    ".wav", ".wave", ".bwf", ".rf64", ".w64", ".flac", ".aif", ".aiff", ".aifc", ".caf",
    ".au", ".snd", ".ogg", ".oga", ".opus", ".mp3",
})
# First bytes of containers libsndfile reads, for files without a known extension.
_MAGIC = (b"RIFF", b"RIFX", b"RF64", b"BW64", b"FORM", b"fLaC", b"OggS", b"caff", b".snd", b"riff")


class BatchError(Exception):
    """A problem with the whole batch (usage, recipe rejected): exit status 2."""


@dataclass(frozen=True)
class Job:
    """One file to render: where it is, where it goes, and its name relative to OUTDIR."""

    input: str
    relpath: str
    output: str


@dataclass
class Plan:
    jobs: list[Job] = field(default_factory=list)
    skipped: list[FileResult] = field(default_factory=list)


@dataclass(frozen=True)
class RateDesign:
    """The chain and its assessment at one rate, or why it cannot be used there."""

    rate: int
    chain: Chain | None
    assessment: Assessment | None
    error: str | None = None

    @property
    def usable(self) -> bool:
        return self.error is None and self.assessment is not None and self.assessment.accepted


@dataclass
class BatchResult:
    recipe: Recipe
    policy: Policy
    outdir: str
    designs: dict[int, RateDesign]
    results: list[FileResult]
    seconds: float
    interrupted: bool = False
    notes: list[str] = field(default_factory=list)
    pictures: dict = field(default_factory=dict)      # rate -> Future of the report's response picture

    def count(self, status: str) -> int:
        return sum(r.status == status for r in self.results)

    @property
    def all_ok(self) -> bool:
        """True when nothing needs attention: every file ok (files skipped as not audio do not count)."""
        return not self.interrupted and all(r.status in ("ok", "skipped") for r in self.results)


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


def _skip(path: str, rel: str, why: str) -> FileResult:
    return FileResult(input=path, relpath=rel, status="skipped", message=why)


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
        if real in seen_inputs:
            plan.skipped.append(_skip(path, rel, f"the same file as {seen_inputs[real]}; rendered once"))
            return
        if out_real is None:
            seen_inputs[real] = path
            plan.jobs.append(Job(path, rel, ""))
            return
        output = os.path.normpath(os.path.join(outdir, rel))
        if not _inside(os.path.dirname(output), out_real) or os.path.isabs(rel) or rel.startswith(".."):
            plan.skipped.append(_skip(path, rel, "its output name would leave OUTDIR; skipped"))
            return
        key = os.path.normcase(output)
        if key in seen_outputs:
            plan.skipped.append(_skip(path, rel, f"its output name collides with that of {seen_outputs[key]}; "
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
            _walk(arg, add, plan)
        else:
            if out_real is not None and _inside(arg, out_real):
                raise BatchError(f"{arg}: error: this input lies inside the output folder {outdir}; "
                                 "choose an output folder outside every input")
            name = os.path.basename(arg)
            if not os.path.exists(arg):
                plan.skipped.append(_skip(arg, name, "a link to nothing (broken symbolic link)"))
            else:
                add(arg, name)
    return plan


def _walk(top: str, add, plan: Plan) -> None:
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
            plan.skipped.append(_skip(folder, rel, f"folder cannot be listed: {(exc.strerror or str(exc)).lower()}"))
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
                    plan.skipped.append(_skip(path, rel, f"cannot be opened: {(exc.strerror or '').lower()}"))
                    continue
                key = (est.st_dev, est.st_ino)
                if key in visited:
                    plan.skipped.append(_skip(path, rel, "a link back to a folder already searched "
                                                         "(symbolic link loop); not followed"))
                    continue
                visited.add(key)
                if not e.name.startswith("."):
                    subfolders.append(path)
                continue
            if e.name.startswith("._"):
                plan.skipped.append(_skip(path, rel, "a macOS metadata file, not audio"))
                continue
            if e.name.startswith(".") or TEMP_TAG in e.name:
                continue
            if e.is_symlink() and not os.path.exists(path):
                plan.skipped.append(_skip(path, rel, "a link to nothing (broken symbolic link)"))
                continue
            try:
                mode = os.stat(path).st_mode
            except OSError as exc:
                plan.skipped.append(_skip(path, rel, f"cannot be read: {(exc.strerror or '').lower()}"))
                continue
            if not stat.S_ISREG(mode):
                plan.skipped.append(_skip(path, rel, "not a regular file"))
                continue
            if _looks_like_audio(path):
                add(path, rel)
            else:
                plan.skipped.append(_skip(path, rel, "not audio (by name and by content)"))
        stack.extend(reversed(subfolders))


def design_rates(recipe: Recipe, rates: set[int]) -> dict[int, RateDesign]:
    """Design and assess the recipe at every rate in the batch (pure, before any audio)."""
    out = {}
    for rate in sorted(rates):
        try:
            chain = design(recipe, rate)
        except RecipeError as exc:
            out[rate] = RateDesign(rate, None, None, str(exc))
            continue
        a = assess(chain, recipe.guard, recipe)
        err = next((str(p) for p in a.problems if p.severity == "error"), None)
        out[rate] = RateDesign(rate, chain, a, err)
    return out


def make_policy(recipe: Recipe, *, on_over: str | None = None, block_size: int | None = None,
                true_peak: bool = True) -> Policy:
    block = DEFAULT_BLOCK if block_size is None else block_size
    if not MIN_BLOCK <= block <= MAX_BLOCK:
        raise BatchError(f"--block-size {block} is out of range; allowed: {MIN_BLOCK} to {MAX_BLOCK} frames")
    g, o = recipe.guard, recipe.output
    return Policy(on_over=on_over or g.on_over, ceiling_dbfs=g.ceiling_dbfs,
                  true_peak_ceiling_dbtp=g.true_peak_ceiling_dbtp, subtype=o.subtype, dither=o.dither,
                  block_size=block, true_peak=true_peak)


@dataclass
class Prepared:
    """A batch ready to render: what to do with each file, decided before any audio is read."""

    recipe: Recipe
    policy: Policy
    outdir: str
    designs: dict[int, RateDesign]
    work: list[tuple[Job, Source]]
    results: list[FileResult]       # already decided: skipped, unreadable, rejected at their rate


def prepare(recipe: Recipe, inputs: list[str], outdir: str, policy: Policy) -> Prepared:
    """Check the recipe, discover and probe the inputs, design at every rate.

    Raises
    ------
    BatchError
        For usage problems, a recipe unstable at any rate (raw sections), or a
        recipe that is rejected at every sample rate in the batch.
    """
    raw = check_raw_sections(recipe)
    if raw:
        raise BatchError(f"{raw[0]}; no audio was touched")
    plan = discover(inputs, outdir)
    results = list(plan.skipped)
    probed: list[tuple[Job, Source]] = []
    for job in plan.jobs:
        try:
            probed.append((job, probe(job.input)))
        except AudioError as exc:
            results.append(FileResult(job.input, job.relpath, "failed", str(exc)))
    designs = design_rates(recipe, {src.rate for _, src in probed})
    work = []
    for job, src in probed:
        d = designs[src.rate]
        if d.usable:
            work.append((job, src))
        else:
            results.append(FileResult(job.input, job.relpath, "rejected",
                                      f"the recipe cannot be used at {src.rate} Hz: {d.error}", source=src))
    if probed and not work:
        first = next(iter(designs.values()))
        raise BatchError(f"{first.error}; the recipe is rejected at every sample rate in the batch "
                         f"({', '.join(map(str, designs))} Hz); no audio was touched")
    return Prepared(recipe, policy, outdir, designs, work, results)


def _render_job(job: Job, src: Source, sos, bound: float, policy: Policy) -> FileResult:
    folder = os.path.dirname(job.output) or "."
    try:
        os.makedirs(folder, exist_ok=True)
    except OSError as exc:
        return FileResult(job.input, job.relpath, "failed",
                          f"cannot create its output folder {folder}: {(exc.strerror or str(exc)).lower()}",
                          source=src)
    return render_file(src, job.output, sos, bound, policy, seed_key=job.relpath.replace(os.sep, "/"),
                       relpath=job.relpath)


def _worker_init() -> None:
    # Workers ignore Ctrl-C: the parent decides, cancels what has not started and
    # lets running files finish their atomic write or clean up.
    import signal as _signal
    _signal.signal(_signal.SIGINT, _signal.SIG_IGN)


def job_key(recipe: Recipe, policy: Policy) -> str:
    """What decides an output's bytes besides its input: recipe, policy and chainrun version."""
    payload = json.dumps({"recipe": recipe.digest, "version": __version__, "on_over": policy.on_over,
                          "ceiling_dbfs": policy.ceiling_dbfs, "true_peak_ceiling_dbtp": policy.true_peak_ceiling_dbtp,
                          "subtype": policy.subtype, "dither": policy.dither}, sort_keys=True)
    return hashlib.sha256(payload.encode()).hexdigest()


def claim_outdir(outdir: str) -> tuple[OutdirLock, list[str]]:
    """Create OUTDIR, take its lock and clean what an interrupted run left; returns the lock and notes.

    Raises
    ------
    BatchError
        If another live run holds the folder, or it cannot be created.
    """
    try:
        os.makedirs(outdir, exist_ok=True)
        lock = OutdirLock(outdir).acquire()
    except LockedError as exc:
        raise BatchError(str(exc)) from None
    except OSError as exc:
        raise BatchError(f"{outdir}: error: cannot use the output folder: "
                         f"{(exc.strerror or str(exc)).lower()}") from None
    notes = []
    if lock.took_over:
        notes.append(f"took over the lock left by pid {lock.took_over.get('pid')} on host "
                     f"{lock.took_over.get('host')} (that run is gone)")
    removed = clean_leftovers(outdir)
    if removed:
        notes.append(f"removed {len(removed)} unfinished temporary file(s) left by an interrupted run")
    return lock, notes


def execute(prep: Prepared, workers: int = 1, progress=None, resume: bool = True, started=None) -> BatchResult:
    """Render every prepared file, ``workers`` at a time; Ctrl-C stops cleanly.

    The caller holds OUTDIR (see :func:`claim_outdir`). With ``resume``, files the
    journal shows as delivered for the same job key, input and output are not
    rendered again. ``progress`` is called with each finished FileResult;
    ``started`` once, when the worker processes (if any) have been started, which
    is the earliest moment the caller may start threads of its own.
    """
    if not 1 <= workers <= MAX_WORKERS:
        raise BatchError(f"--workers {workers} is out of range; allowed: 1 to {MAX_WORKERS}")
    t0 = time.perf_counter()
    results = list(prep.results)
    notes: list[str] = []
    interrupted = False
    journal = Journal(prep.outdir)
    key = job_key(prep.recipe, prep.policy)

    todo = []
    for job, src in prep.work:
        entry = journal.finished(job.relpath, key, job.input, job.output) if resume else None
        if entry is None:
            todo.append((job, src))
            continue
        r = FileResult.from_record(entry.result, job.input, job.relpath, job.output, src)
        r.extra["resumed"] = True
        results.append(r)
    if len(todo) < len(prep.work):
        notes.append(f"{len(prep.work) - len(todo)} file(s) already delivered by an earlier run with the same "
                     "recipe and inputs; kept as they are (use --redo to render them again)")

    def args(job: Job, src: Source):
        d = prep.designs[src.rate]
        return job, src, d.chain.sos, d.assessment.peak_gain, prep.policy

    def finished(job: Job, r: FileResult) -> None:
        if r.status in ("ok", "clipped"):
            journal.record(job.relpath, key, job.input, job.output, r.to_record())
        results.append(r)
        if progress:
            progress(r)

    # Longest files first, so the pool does not end waiting on one long file.
    todo.sort(key=lambda js: -js[1].frames * js[1].channels)
    if workers == 1 or len(todo) <= 1:
        if started:
            started()
        try:
            for job, src in todo:
                try:
                    r = _render_job(*args(job, src))
                except Exception as exc:  # a fault outside render_file's own handling: this file only
                    r = FileResult(job.input, job.relpath, "failed", f"unexpected fault: {type(exc).__name__}: {exc}",
                                   source=src)
                finished(job, r)
        except KeyboardInterrupt:
            interrupted = True
    else:
        pool = ProcessPoolExecutor(max_workers=min(workers, len(todo)), initializer=_worker_init,
                                   mp_context=_POOL_CONTEXT)
        pending = {pool.submit(_render_job, *args(job, src)): job for job, src in todo}
        if started:
            started()          # with "fork", every worker exists once the first job is submitted
        try:
            while pending:
                done, _ = wait(pending, return_when=FIRST_COMPLETED)
                for fut in done:
                    job = pending.pop(fut)
                    try:
                        r = fut.result()
                    except Exception as exc:  # a worker died: the file is failed, the batch goes on
                        r = FileResult(job.input, job.relpath, "failed", f"the worker rendering it stopped: {exc}")
                    finished(job, r)
        except KeyboardInterrupt:
            interrupted = True
            for fut in pending:
                fut.cancel()
        finally:
            pool.shutdown(wait=True, cancel_futures=True)
            for fut, job in pending.items():
                if fut.done() and not fut.cancelled() and fut.exception() is None:
                    finished(job, fut.result())
    done_inputs = {r.input for r in results}
    for job, src in prep.work:
        if job.input not in done_inputs:
            results.append(FileResult(job.input, job.relpath, "failed", "not rendered: the batch was interrupted",
                                      source=src))
    order = {job.input: i for i, (job, _) in enumerate(prep.work)}
    results.sort(key=lambda r: (order.get(r.input, -1), r.relpath))
    return BatchResult(prep.recipe, prep.policy, prep.outdir, prep.designs, results,
                       time.perf_counter() - t0, interrupted, notes)


def run_batch(recipe: Recipe, inputs: list[str], outdir: str, *, workers: int = 1,
              policy: Policy | None = None, progress=None, resume: bool = True) -> BatchResult:
    """Filter ``inputs`` into ``outdir`` with ``recipe``: :func:`prepare`, then :func:`execute` holding OUTDIR."""
    prep = prepare(recipe, inputs, outdir, policy or make_policy(recipe))
    lock, notes = claim_outdir(outdir)
    try:
        result = execute(prep, workers, progress, resume)
    finally:
        lock.release()
    result.notes[:0] = notes
    return result
