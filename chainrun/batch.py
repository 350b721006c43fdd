"""Batch: discover inputs, map them into OUTDIR, design per rate, render in workers.

The output tree mirrors the input: a folder argument's files keep their path
relative to that folder; a file argument lands at the top of OUTDIR. Nothing
is ever written outside OUTDIR, and OUTDIR may not lie inside an input folder.
"""
from __future__ import annotations

import hashlib
import importlib
import json
import multiprocessing
import os
import signal
import stat
import sys
import time
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field, replace

from . import __version__
from .design import Chain, design
from .guard import Assessment, assess, check_raw_sections
from .recipe import Recipe, RecipeError
from .journal import ForeignFileError, Journal, LockedError, OutdirLock, check_journal, clean_leftovers
from .audio.source import Source
from .errors import AudioError, BatchError
from .fsutil import TEMP_TAG
from .interrupt import allow_rendering, ctrl_c_stops_rendering, on_sigint, rendering_stopped, stop_point as _stop_point
from .audio.reader import cut_short, probe
from .render import MAX_BLOCK, MIN_BLOCK, Policy, render_file
from .results import FAILED, INTERRUPTED, MAC_METADATA, NOT_AUDIO, QUIET_SKIPS, FileResult  # noqa: F401 (re-exported)
from .text import fault, first_line, reason as _reason

__all__ = ["BatchError", "Job", "Plan", "RateDesign", "BatchResult", "discover", "prepare", "claim_outdir",
           "execute", "run_batch", "job_key"]

MAX_WORKERS = 64
# Workers are forked on Linux (instant start; the parent holds no threads of its own when the pool
# starts, and the progress bar runs without its monitor thread); elsewhere they start fresh.
_POOL_CONTEXT = multiprocessing.get_context("fork" if sys.platform.startswith("linux") else "spawn")

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


BROKEN_LINK = "a link to nothing (broken symbolic link); there is nothing to read"


def _skip(path: str, rel: str, why: str) -> FileResult:
    return FileResult(input=path, relpath=rel, status="skipped", message=why)


def _fail(path: str, rel: str, why: str) -> FileResult:
    """An input found (or named) that cannot be rendered: failed, so the batch does not end 'all ok'."""
    return FileResult(input=path, relpath=rel, status="failed", message=why)


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


def design_fault(recipe: Recipe, rate: int, exc: BaseException) -> RecipeError:
    """A located, one-line RecipeError for a fault (not a RecipeError) raised designing or assessing at ``rate``.

    The section that cannot be designed on its own is named; if each can, the recipe itself.
    """
    from .design import design_section

    why = fault(exc)
    for section in recipe.sections:
        try:
            design_section(section, rate)
        except RecipeError:
            continue
        except Exception:
            return RecipeError.at(section.locate("freq"), f"{section.title} cannot be designed at {rate} Hz "
                                                          f"({why}); change its parameters, and please report it")
    return RecipeError(recipe.path, 1, 1, f"the chain cannot be designed or assessed at {rate} Hz ({why}); "
                                          "please report it")


def probe_job(job: Job) -> Source | FileResult:
    """The header of one discovered input, or a failed result saying in one line why it cannot be read."""
    try:
        with open(job.input, "rb"):     # a plain open first: its error names the cause (permission denied)
            pass
    except OSError as exc:
        return FileResult(job.input, job.relpath, "failed", f"cannot read: {_reason(exc)}")
    try:
        src = probe(job.input)
    except AudioError as exc:
        return FileResult(job.input, job.relpath, "failed", str(exc))
    short = cut_short(src)
    if short:
        return FileResult(job.input, job.relpath, "failed", short, source=src)
    return src


def design_and_assess(recipe: Recipe, rate: int) -> tuple[Chain, Assessment]:
    """The recipe designed and assessed at ``rate`` (what ``check``, ``plot`` and a batch all need).

    Raises
    ------
    RecipeError
        For a recipe that cannot be used at ``rate``, and also, located by
        :func:`design_fault`, for a fault (any other exception) in design or guard.
    """
    try:
        chain = design(recipe, rate)
        return chain, assess(chain, recipe.guard, recipe)
    except RecipeError:
        raise
    except Exception as fault:      # a fault, not a recipe error: still one located line
        raise design_fault(recipe, rate, fault) from None


def design_rates(recipe: Recipe, rates: set[int]) -> dict[int, RateDesign]:
    """Design and assess the recipe at every rate in the batch (pure, before any audio)."""
    out = {}
    for rate in sorted(rates):
        try:
            chain, a = design_and_assess(recipe, rate)
        except RecipeError as exc:
            out[rate] = RateDesign(rate, None, None, str(exc))
            continue
        err = next((str(p) for p in a.problems if p.severity == "error"), None)
        out[rate] = RateDesign(rate, chain, a, err)
    return out


def make_policy(recipe: Recipe, *, on_over: str | None = None, block_size: int | None = None,
                true_peak: bool = True) -> Policy:
    return Policy.from_recipe(recipe, on_over=on_over, block_size=block_size, true_peak=true_peak)


@dataclass
class Prepared:
    """A batch ready to render: what to do with each file, decided before any audio is read."""

    recipe: Recipe
    policy: Policy
    outdir: str
    designs: dict[int, RateDesign]
    work: list[tuple[Job, Source]]
    results: list[FileResult]       # already decided: skipped, unreadable, rejected at their rate
    refused: list[tuple[Job, FileResult]] = field(default_factory=list)   # those rejected at their rate


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
        src = probe_job(job)
        if isinstance(src, FileResult):
            results.append(src)
            continue
        probed.append((job, src))
    designs = design_rates(recipe, {src.rate for _, src in probed})
    work, refused = [], []
    for job, src in probed:
        d = designs[src.rate]
        if d.usable:
            work.append((job, src))
        else:
            r = FileResult(job.input, job.relpath, "rejected", f"the recipe cannot be used at {src.rate} Hz: "
                           f"{d.error}", source=src)
            refused.append((job, r))
            results.append(r)
    if probed and not work:
        first = next(iter(designs.values()))
        raise BatchError(f"{first.error}; the recipe is rejected at every sample rate in the batch "
                         f"({', '.join(map(str, designs))} Hz); no audio was touched")
    return Prepared(recipe, policy, outdir, designs, work, results, refused)


# The largest block in samples (frames x channels): a file with many channels is read in fewer frames
# per block, so memory stays bounded (the block size never changes the output).
MAX_BLOCK_SAMPLES = MAX_BLOCK


def _render_job(job: Job, src: Source, sos, bound: float, policy: Policy) -> FileResult:
    folder = os.path.dirname(job.output) or "."

    def fail(why: str) -> FileResult:
        return FileResult(job.input, job.relpath, "failed", why, source=src)

    try:
        os.makedirs(folder, exist_ok=True)
    except OSError as exc:
        return fail(f"cannot create its output folder {folder}: {_reason(exc)}")
    if os.path.isdir(job.output) and not os.path.islink(job.output):
        return fail(f"a folder already has its output name ({job.output}); move that folder away")
    if not os.access(folder, os.W_OK | os.X_OK, effective_ids=os.access in os.supports_effective_ids):
        try:
            read_only = bool(os.statvfs(folder).f_flag & os.ST_RDONLY)
        except OSError:
            read_only = False
        return fail(f"cannot write into its output folder {folder}: "
                    f"{'read-only file system' if read_only else 'permission denied'}; nothing was delivered")
    if src.channels * policy.block_size > MAX_BLOCK_SAMPLES:
        policy = replace(policy, block_size=max(MIN_BLOCK, MAX_BLOCK_SAMPLES // src.channels))
    return render_file(src, job.output, sos, bound, policy, seed_key=job.relpath.replace(os.sep, "/"),
                       relpath=job.relpath)


def _worker_init(parent: int | None = None) -> None:
    if sys.platform.startswith("linux"):
        # A worker must not outlive its batch: if the parent is killed (SIGKILL, a crash), the kernel kills
        # the worker too. Otherwise it would go on writing outputs that no journal records, and hold the
        # output folder's lock (inherited with fork) for ever.
        try:
            import ctypes

            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(1, int(signal.SIGKILL), 0, 0, 0)     # PR_SET_PDEATHSIG
        except (OSError, AttributeError):
            pass
    if parent is not None and os.getppid() != parent:       # the parent died before prctl took effect
        os._exit(1)
    allow_rendering()
    if signal.getsignal(signal.SIGINT) is not signal.SIG_IGN:   # a batch run in the background ignores it
        signal.signal(signal.SIGINT, on_sigint)


def _render_in_worker(job: Job, src: Source, sos, bound: float, policy: Policy) -> FileResult:
    interrupted = FileResult(job.input, job.relpath, "failed", INTERRUPTED, source=src)
    if rendering_stopped():
        return interrupted
    try:
        return _render_job(job, src, sos, bound, policy)     # execute gave it one thread: one core
    except KeyboardInterrupt:
        return interrupted


def job_key(recipe: Recipe, policy: Policy) -> str:
    """What decides an output's bytes besides its input: recipe, policy and chainrun version."""
    payload = json.dumps({"recipe": recipe.digest, "version": __version__, **policy.output_key()}, sort_keys=True)
    return hashlib.sha256(payload.encode()).hexdigest()


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


def execute(prep: Prepared, workers: int = 1, progress=None, resume: bool = True) -> BatchResult:
    """Render every prepared file, ``workers`` at a time; Ctrl-C stops cleanly.

    The caller holds OUTDIR (see :func:`claim_outdir`). With ``resume``, files the
    journal shows as delivered for the same job key, input and output are not
    rendered again. ``progress`` is called with each finished FileResult.
    """
    if not 1 <= workers <= MAX_WORKERS:
        raise BatchError(f"--workers {workers} is out of range; allowed: 1 to {MAX_WORKERS}")
    t0 = time.perf_counter()
    results = list(prep.results)
    notes: list[str] = []
    interrupted = False
    journal = Journal(prep.outdir)
    if journal.problem:
        notes.append(f"the resume journal cannot be read ({journal.problem}); every file is rendered")
    key = job_key(prep.recipe, prep.policy)

    todo = []
    for job, src in prep.work:
        entry = journal.finished(job.relpath, key, job.input, job.output) if resume else None
        try:
            r = FileResult.from_record(entry.result, job.input, job.relpath, job.output, src) if entry else None
        except Exception:      # an entry that matches but cannot be read back: render the file again
            r = None
        if r is None:
            todo.append((job, src))
            continue
        r.extra["resumed"] = True
        results.append(r)
    for job, r in prep.refused:
        _note_earlier_output(job, r)
    if len(todo) < len(prep.work):
        notes.append(f"{len(prep.work) - len(todo)} file(s) already delivered by an earlier run with the same "
                     "recipe and inputs; kept as they are (use --redo to render them again)")

    # --workers is the number of cores the batch may keep busy: one file per worker process, or, when
    # a single file is left to render, that file's pipeline threads; one worker is one core.
    in_process = workers == 1 or len(todo) <= 1
    policy = replace(prep.policy, threads=workers if in_process else 1)

    def args(job: Job, src: Source):
        d = prep.designs[src.rate]
        return job, src, d.chain.sos, d.assessment.peak_gain, policy

    journal_failed: list[str] = []

    accounted: set[str] = set()

    def finished(job: Job, r: FileResult) -> None:
        if job.input in accounted:      # a Ctrl-C between this and the caller's bookkeeping: once only
            return
        _note_earlier_output(job, r)
        if r.status in ("ok", "clipped") and not journal_failed:
            try:
                journal.record(job.relpath, key, job.input, job.output, r.to_record())
            except OSError as exc:      # the file is delivered; only a later run's resume is affected
                journal_failed.append(f"{journal.path}: {_reason(exc)}")
        results.append(r)
        accounted.add(job.input)
        if progress:
            progress(r)

    tried_again: set[str] = set()      # files a broken worker pool took down, rendered once more
    # Longest files first, so the pool does not end waiting on one long file.
    todo.sort(key=lambda js: -js[1].frames * js[1].channels)
    if in_process:
        try:
            with ctrl_c_stops_rendering():
                for job, src in todo:
                    _stop_point()
                    try:
                        r = _render_job(*args(job, src))
                    except Exception as exc:  # a fault outside render_file's own handling: this file only
                        r = FileResult(job.input, job.relpath, FAILED, f"unexpected fault: {type(exc).__name__}: "
                                       f"{first_line(exc)}; nothing was delivered", source=src)
                    finished(job, r)
        except KeyboardInterrupt:
            interrupted = True
    else:
        # The workers are forked: what the parent has imported they share. The guard has
        # imported scipy.signal already; make sure, so that no worker pays its import again.
        importlib.import_module("scipy.signal")
        allow_rendering()           # the workers fork with the flag as it is here
        # At most one file waits in the pool beyond those rendering. A worker that dies (the out-of-memory
        # killer, say) breaks its pool, and every file the pool holds fails with it, so the pool holds few;
        # those files are tried once more, each alone, so that only the one that kills its worker fails.
        # The files not yet handed over go to a new pool.
        size = min(workers, len(todo))
        waiting = list(todo)
        again: list[tuple[Job, Source]] = []
        pool: ProcessPoolExecutor | None = None
        broken = False
        pending: dict = {}          # future -> (job, src, rendering alone)

        def next_to_submit():
            if again:
                return None if pending else again
            if waiting and len(pending) <= size and not any(alone for _, _, alone in pending.values()):
                return waiting
            return None

        try:
            while waiting or again or pending:
                if pool is None:
                    pool = ProcessPoolExecutor(max_workers=size, initializer=_worker_init,
                                               initargs=(os.getpid(),), mp_context=_POOL_CONTEXT)
                while not broken and (source := next_to_submit()) is not None:   # Ctrl-C here stops them too
                    job, src = source[0]
                    try:
                        fut = pool.submit(_render_in_worker, *args(job, src))
                    except (BrokenProcessPool, RuntimeError):   # broken while submitting (3.11 may say
                        broken = True                           # "cannot schedule new futures")
                        break
                    pending[fut] = (job, src, source is again)
                    source.pop(0)
                if pending:
                    done, _ = wait(pending, return_when=FIRST_COMPLETED)
                    for fut in done:
                        job, src, _ = pending[fut]
                        try:
                            r = fut.result()
                        except Exception as exc:  # a worker died: the file is failed, the batch goes on
                            if isinstance(exc, BrokenProcessPool):
                                broken = True
                                if job.relpath not in tried_again:
                                    tried_again.add(job.relpath)
                                    again.append((job, src))
                                    del pending[fut]
                                    continue
                            text = first_line(exc, type(exc).__name__)
                            r = FileResult(job.input, job.relpath, "failed", f"the worker rendering it stopped: "
                                           f"{text}; nothing was delivered", source=src)
                        finished(job, r)
                        del pending[fut]            # after: a Ctrl-C in between leaves it to the finally
                if broken and not pending:         # every file the broken pool held is accounted for
                    pool.shutdown(wait=True)
                    pool, broken = None, False
        except KeyboardInterrupt:
            interrupted = True
            for fut in pending:
                fut.cancel()
            if pool is not None:
                _stop_workers(pool)
        finally:
            while pool is not None:
                try:
                    pool.shutdown(wait=True, cancel_futures=True)
                    break
                except KeyboardInterrupt:      # Ctrl-C again: the workers are already stopping
                    interrupted = True
                    _stop_workers(pool)
            for fut, (job, _, _) in pending.items():
                if fut.done() and not fut.cancelled() and fut.exception() is None:
                    finished(job, fut.result())
    if tried_again:
        notes.append(f"a worker process stopped while rendering (killed from outside, or out of memory?); the "
                     f"{len(tried_again)} file(s) its pool held were rendered again, each on its own")
    if journal_failed:
        notes.append(f"the resume journal cannot be written ({journal_failed[0]}); the files are delivered, "
                     "but a later run renders them again")
    # Every writer has stopped: a temporary file left by a worker that died, or by a Ctrl-C that came while
    # a file was being cleaned up, goes now rather than at the next run.
    removed = clean_leftovers(prep.outdir)
    if removed:
        notes.append(f"removed {len(removed)} unfinished temporary file(s) of files that were not delivered")
    done_inputs = {r.input for r in results}
    for job, src in prep.work:
        if job.input not in done_inputs:
            results.append(FileResult(job.input, job.relpath, "failed", INTERRUPTED, source=src))
    order = {job.input: i for i, (job, _) in enumerate(prep.work)}
    results.sort(key=lambda r: (order.get(r.input, -1), r.relpath))
    return BatchResult(prep.recipe, prep.policy, prep.outdir, prep.designs, results,
                       time.perf_counter() - t0, interrupted, notes)


def _note_earlier_output(job: Job, r: FileResult) -> None:
    """Say so when a file rejected or failed in this run has an earlier run's output under its name.

    That file is left as it was (its recipe may no longer exist, so it could not be made again), but
    it is not this run's result, and someone collecting OUTDIR must not take it for one.
    """
    if r.status not in ("rejected", "failed") or r.message == INTERRUPTED or r.output is not None:
        return
    try:
        if not os.path.isfile(job.output) or os.path.samefile(job.output, job.input):
            return
    except OSError:
        return
    note = "; the file under its output name is an earlier run's, left as it was, not this run's result"
    if not (r.message or "").endswith(note):
        r.message = (r.message or "not delivered") + note


def _stop_workers(pool: ProcessPoolExecutor) -> None:
    """Pass Ctrl-C on to every worker (each stops its file and skips the rest of its queue)."""
    for proc in list((getattr(pool, "_processes", None) or {}).values()):
        try:
            os.kill(proc.pid, signal.SIGINT)
        except (OSError, AttributeError, TypeError):
            pass


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
