"""The run loop: resume from the journal, hand the files to an executor, account for every file.

:func:`execute` renders a :class:`~.plan.Prepared` batch whose OUTDIR the caller holds;
:func:`run_batch` is prepare, claim OUTDIR, execute, release, without reports (for a whole run with
its reports, as the command line does it, see :func:`chainrun.app.run`).
"""
from __future__ import annotations

import contextlib
import hashlib
import json
import os
import time
from dataclasses import dataclass, field, replace
from typing import Iterator

from ..version import __version__
from ..errors import BatchError
from ..interrupt import ctrl_c_stops_rendering
from ..recipe import Recipe
from ..render import Policy
from ..results import DELIVERED, FAILED, NOT_RENDERED, INTERRUPTED, OK, REJECTED, SKIPPED, FileResult
from ..text import reason as _reason
from .discover import Job
from .executors import Executor, InlineExecutor, PoolExecutor, Task
from .groups import link_groups
from .outdir import Journal, claim_outdir, clean_leftovers
from .plan import Prepared, RateDesign, prepare, prepare_plan

__all__ = ["BatchResult", "MAX_WORKERS", "job_key", "choose_executor", "execute", "claimed", "run_batch"]

MAX_WORKERS = 64


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
    # One entry per recipe of the batch (a plan's, indexed by Job.recipe); the first is recipe/policy/designs.
    recipes: list[Recipe] = field(default_factory=list)
    policies: list[Policy] = field(default_factory=list)
    recipe_designs: list[dict[int, RateDesign]] = field(default_factory=list)
    recipe_of: dict[str, int] = field(default_factory=dict)   # input path -> its recipe's index
    plan_path: str | None = None

    def __post_init__(self):
        self.recipes = self.recipes or [self.recipe]
        self.policies = self.policies or [self.policy]
        self.recipe_designs = self.recipe_designs or [self.designs]

    def count(self, status: str) -> int:
        return sum(r.status == status for r in self.results)

    @property
    def all_ok(self) -> bool:
        """True when nothing needs attention: every file ok (files skipped as not audio do not count)."""
        return not self.interrupted and all(r.status in (OK, SKIPPED) for r in self.results)


def job_key(recipe: Recipe, policy: Policy) -> str:
    """What decides an output's bytes besides its input: recipe, policy and chainrun version."""
    payload = json.dumps({"recipe": recipe.digest, "version": __version__, **policy.output_key()}, sort_keys=True)
    return hashlib.sha256(payload.encode()).hexdigest()


def choose_executor(workers: int, files: int) -> Executor:
    """The executor for ``files`` files on ``workers`` cores.

    ``workers`` is the number of cores the batch may keep busy: one file per worker process, or, when
    a single file is left to render, that file's pipeline threads; one worker is one core.
    """
    if workers == 1 or files <= 1:
        return InlineExecutor(threads=workers)
    return PoolExecutor(workers)


def execute(prep: Prepared, workers: int = 1, progress=None, resume: bool = True,
            executor: Executor | None = None) -> BatchResult:
    """Render every prepared file, ``workers`` at a time; Ctrl-C stops cleanly.

    The caller holds OUTDIR (see :func:`~.outdir.claim_outdir`). With ``resume``, files the
    journal shows as delivered for the same job key, input and output are not
    rendered again. ``progress`` is called with each finished FileResult. ``executor``
    (default: :func:`choose_executor`) renders the files (see :mod:`.executors`).
    """
    if not 1 <= workers <= MAX_WORKERS:
        raise BatchError(f"--workers {workers} is out of range; allowed: 1 to {MAX_WORKERS}")
    t0 = time.perf_counter()
    results = list(prep.results)
    notes: list[str] = []
    journal = Journal(prep.outdir)
    if journal.problem:
        notes.append(f"the resume journal cannot be read ({journal.problem}); every file is rendered")
    notes.extend(journal.warnings)
    if prep.warnings:
        notes.extend(prep.warnings)
    keys = [job_key(recipe, policy) for recipe, policy in zip(prep.recipes, prep.policies)]

    todo = []
    for job, src in prep.work:
        entry = journal.finished(job.relpath, keys[job.recipe], job.input, job.output) if resume else None
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

    if executor is None:
        executor = choose_executor(workers, len(todo))
    policies = [replace(p, threads=executor.threads) for p in prep.policies]
    journal_failed: list[str] = []
    accounted: set[str] = set()

    def finished(job: Job, r: FileResult) -> None:
        if job.input in accounted:      # a Ctrl-C between this and the caller's bookkeeping: once only
            return
        _note_earlier_output(job, r)
        if r.status in DELIVERED and not journal_failed:
            try:
                journal.record(job.relpath, keys[job.recipe], job.input, job.output, r.to_record())
            except OSError as exc:      # the file is delivered; only a later run's resume is affected
                journal_failed.append(f"{journal.path}: {_reason(exc)}")
        results.append(r)
        accounted.add(job.input)
        if progress:
            progress(r)

    # Longest files first, so the pool does not end waiting on one long file.
    todo.sort(key=lambda js: -js[1].frames * js[1].channels)
    # A loudness target linked over a folder or the batch: measure each group whole first (see .groups).
    groups, group_notes = link_groups(prep, todo, policies)
    notes.extend(group_notes)
    tasks = []
    for job, src in todo:
        d = prep.design_for(job, src.rate)
        tasks.append(Task(job, src, d.chain.filters, d.assessment.peak_gain, policies[job.recipe],
                          groups.get(job.input)))
    interrupted = executor.run(tasks, finished)
    notes.extend(executor.notes)
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
            results.append(FileResult(job.input, job.relpath, NOT_RENDERED, INTERRUPTED, source=src))
    order = {job.input: i for i, (job, _) in enumerate(prep.work)}
    results.sort(key=lambda r: (order.get(r.input, -1), r.relpath))
    recipe_of = {job.input: job.recipe for job, _ in prep.work} | {job.input: job.recipe for job, _ in prep.refused}
    return BatchResult(prep.recipe, prep.policy, prep.outdir, prep.designs, results,
                       time.perf_counter() - t0, interrupted, notes, recipes=prep.recipes, policies=prep.policies,
                       recipe_designs=prep.recipe_designs, recipe_of=recipe_of, plan_path=prep.plan_path)


def _note_earlier_output(job: Job, r: FileResult) -> None:
    """Say so when a file rejected or failed in this run has an earlier run's output under its name.

    That file is left as it was (its recipe may no longer exist, so it could not be made again), but
    it is not this run's result, and someone collecting OUTDIR must not take it for one.
    """
    if r.status not in (REJECTED, FAILED) or r.output is not None:
        return
    try:
        if not os.path.isfile(job.output) or os.path.samefile(job.output, job.input):
            return
    except OSError:
        return
    note = "; the file under its output name is an earlier run's, left as it was, not this run's result"
    if not (r.message or "").endswith(note):
        r.message = (r.message or "not delivered") + note


@contextlib.contextmanager
def claimed(recipe: Recipe | None, inputs: list[str], outdir: str, policy: Policy | None, *, plan=None,
            policies: list[Policy] | None = None) -> Iterator[tuple[Prepared, list[str]]]:
    """Prepare the batch, then hold OUTDIR while the body runs: yields the prepared batch and the notes of
    taking OUTDIR (a lock taken over, leftovers removed). The start of every run, with or without reports.
    With ``plan`` (a :class:`chainrun.recipe.plan.BatchPlan`), its rows and ``policies`` (one per recipe)
    take the place of ``recipe``, ``inputs`` and ``policy``.

    Raises
    ------
    BatchError
        From :func:`~.plan.prepare` or :func:`~.outdir.claim_outdir`, before any audio is read.
    """
    prep = prepare(recipe, inputs, outdir, policy) if plan is None else prepare_plan(plan, outdir, policies)
    # A Ctrl-C landing while the lock is taken or given back would leave the lock file behind: there it
    # only sets the stop flag, and is raised once the lock is held, or gone (interrupt.ctrl_c_stops_rendering).
    lock = None
    try:
        with ctrl_c_stops_rendering():
            lock, notes = claim_outdir(outdir)
        yield prep, notes
    finally:
        if lock is not None:
            try:
                with ctrl_c_stops_rendering():
                    lock.release()
            except KeyboardInterrupt:       # landed as the flag was being set up: release, then go on stopping
                lock.release()              # (a second release of a released lock does nothing)
                raise


def run_batch(recipe: Recipe, inputs: list[str], outdir: str, *, workers: int = 1,
              policy: Policy | None = None, progress=None, resume: bool = True) -> BatchResult:
    """Filter ``inputs`` into ``outdir`` with ``recipe``: :func:`claimed`, then :func:`execute`.

    No reports are written and no pictures drawn: :func:`chainrun.app.run` is the whole run.
    """
    with claimed(recipe, inputs, outdir, policy or Policy.from_recipe(recipe)) as (prep, notes):
        result = execute(prep, workers, progress, resume)
    result.notes[:0] = notes
    return result
