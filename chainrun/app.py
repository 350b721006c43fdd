"""The use cases — check, run, scan, plot — as the command line and the Python API both call them.

Nothing here prints: each function returns plain results, and raises

* :class:`~chainrun.errors.RecipeError` for a recipe that cannot be read (located, one line);
* :class:`~chainrun.errors.BatchError` for a usage problem found before any audio is touched
  (the command line's exit status 2).

A Python caller of :func:`run` gets the same run as ``chainrun run``: the same preparation, the same
OUTDIR lock, journal and resume, the same executors, the same reports.
"""
from __future__ import annotations

import contextlib
import os
from dataclasses import dataclass, field
from typing import Callable

from .audio.metadata import metadata_summary
from .batch.discover import discover
from .batch.cores import cores
from .batch.plan import probe_job, undeclared_rate
from .batch.refuse import RECIPE_SUFFIXES, refuse_audio_recipe, refuse_recipe_inputs
from .batch.run import MAX_WORKERS, BatchResult, claimed, execute
from .errors import BatchError
from .recipe import Recipe, RecipeError, load
from .render import Policy, scan_file
from .gate import DEFAULT_RATES, check, check_recipe, find_recipes
from .guard import design_and_assess
from .results import FileResult

__all__ = ["DEFAULT_RATES", "RECIPE_SUFFIXES", "PLOT_SUFFIXES", "find_recipes", "check_recipe", "check", "cores",
           "RunOutcome", "refuse_audio_recipe", "refuse_recipe_inputs", "run", "scan", "plot"]

PLOT_SUFFIXES = (".png", ".svg")


# --------------------------------------------------------------------------- run

@dataclass
class RunOutcome:
    """What :func:`run` did: the batch, the reports written (``{"json"|"csv"|"html": path}``) and one line
    for each report that could not be written where it belongs."""

    result: BatchResult
    report_paths: dict[str, str] = field(default_factory=dict)
    report_errors: list[str] = field(default_factory=list)


def _check_report_folder(report: str) -> None:
    folder = os.path.dirname(os.path.abspath(report))
    probe_dir = folder
    while not os.path.exists(probe_dir):
        probe_dir = os.path.dirname(probe_dir)
    if not os.path.isdir(probe_dir) or not os.access(probe_dir, os.W_OK):
        raise BatchError(f"{report}: error: the report cannot be written there ({probe_dir} is not a writable "
                         "folder); no audio was touched")


def _write_reports(result: BatchResult, report: str | None, command: list[str] | None,
                   outdir: str) -> tuple[dict[str, str], list[str]]:
    """Write the three reports; returns the paths written and a line for each problem. A Ctrl-C meanwhile
    marks the run as interrupted (the reports are then all three in place, or none was replaced)."""
    from .report.write import ReportError, ReportsInterrupted, write_reports

    errors: list[str] = []
    try:
        paths = write_reports(result, report, command=command)
    except ReportsInterrupted as exc:
        result.interrupted = True
        paths = exc.written             # empty: none was replaced; the closing line of the run says so
    except ReportError as exc:
        paths = exc.written
        errors = exc.problems
    except OSError as exc:
        paths = {}
        errors = [f"{exc.filename or report or outdir}: error: cannot write the report: "
                  f"{(exc.strerror or str(exc)).lower()}"]
    if errors and not result.interrupted:
        errors[-1] += "; the files listed above as ok were delivered"
    return paths, errors


def run(recipe: Recipe | str | None, inputs: list[str], outdir: str, *, workers: int | None = None,
        block_size: int | None = None, on_over: str | None = None, report: str | None = None,
        true_peak: bool = True, redo: bool = False, progress=None, command: list[str] | None = None,
        plan=None, cluster: str | None = None, loudness: bool = True,
        allow_outside_includes: bool = False) -> RunOutcome:
    """Filter ``inputs`` (files and folders) into ``outdir`` with ``recipe``, and write the reports.

    Parameters
    ----------
    recipe
        A loaded :class:`~chainrun.recipe.Recipe`, or the path of a recipe file; None with ``plan``.
    plan
        A batch plan (:class:`chainrun.recipe.plan.BatchPlan`, or the path of a plan file) instead of
        ``recipe`` and ``inputs`` (which must then be None and empty): each file is rendered by the
        recipe of the first row matching it, each recipe with its own guard and output policy
        (``block_size``, ``on_over``, ``true_peak`` and ``loudness`` apply to all of them).
    workers
        Cores to keep busy (default: all this process may use, at most 64).
    block_size, on_over, true_peak, loudness
        As ``chainrun run``'s ``--block-size``, ``--on-over``, ``--no-true-peak`` and ``--no-loudness``
        (without loudness metering, a recipe's loudness target still meters the outputs it needs).
    report
        The JSON report's path (default ``OUTDIR/chainrun-report.json``); CSV and HTML go beside it.
    redo
        Render every file again, even those an earlier run delivered unchanged.
    progress
        Called with each finished :class:`~chainrun.results.FileResult`. If it also has
        ``start(total_files)`` and ``close()``, they are called before the first file and after the last.
    command
        The command line recorded in the report.
    cluster
        Render each file on a Dask cluster instead (:mod:`chainrun.batch.cluster`): a scheduler's address
        (``tcp://host:port``), or ``local:N`` for N worker processes started here; ``workers`` is then unused.
    allow_outside_includes
        Follow includes out of the recipe's folder tree, as ``--allow-outside-includes`` (:func:`chainrun.load`).

    Raises
    ------
    RecipeError
        If ``recipe`` is a path and the recipe cannot be loaded.
    BatchError
        For a usage problem, before any audio is touched (the output folder held by another run, a
        recipe rejected at every rate in the batch, an input inside OUTDIR...).
    """
    if plan is not None:
        if recipe is not None or inputs:
            raise BatchError("--plan names the recipes and the inputs; give either a plan, or a recipe and "
                             "inputs, not both; no audio was touched")
        if isinstance(plan, (str, os.PathLike)):
            from .recipe.plan import load_plan

            plan = load_plan(plan, allow_outside_includes=allow_outside_includes)
    else:
        if isinstance(recipe, (str, os.PathLike)):
            refuse_audio_recipe(recipe)
        refuse_recipe_inputs(inputs)
    if isinstance(recipe, (str, os.PathLike)):
        recipe = load(os.fspath(recipe), allow_outside_includes=allow_outside_includes)
    if workers is None:
        workers = min(cores(), MAX_WORKERS)
    if not 1 <= workers <= MAX_WORKERS:
        raise BatchError(f"--workers {workers} is out of range; allowed: 1 to {MAX_WORKERS}; no audio was touched")
    if report:
        _check_report_folder(report)
    executor = None
    if cluster is not None:
        from .batch.cluster import ClusterExecutor, dask_missing

        executor = ClusterExecutor(cluster)      # a malformed address is refused here, before OUTDIR is taken
        if dask_missing():
            raise BatchError(dask_missing())
    recipes = [recipe] if plan is None else list(plan.recipes)
    policies = [Policy.from_recipe(r, on_over=on_over, block_size=block_size, true_peak=true_peak, loudness=loudness)
                for r in recipes]
    with claimed(recipe, inputs, outdir, policies[0], plan=plan, policies=policies) as (prep, notes), \
            contextlib.ExitStack() as stack:
        if executor is not None:
            stack.enter_context(executor.open(prep.outdir, prep.work[0][0].input if prep.work else None))
        if progress is not None and hasattr(progress, "start"):
            progress.start(len(prep.work))
        try:
            result = execute(prep, workers=workers, progress=progress, resume=not redo, executor=executor)
        finally:
            if progress is not None and hasattr(progress, "close"):
                progress.close()
        result.notes[:0] = notes              # the response pictures are drawn with the report (SVG, milliseconds)
        paths, errors = _write_reports(result, report, command, outdir)
    return RunOutcome(result, paths, errors)


def filter_file(recipe: Recipe | str, input: str, output: str, *, on_over: str | None = None,
                block_size: int | None = None, true_peak: bool = True) -> FileResult:
    """Filter one file into ``output`` (written atomically), as ``chainrun run`` would render it.

    The recipe is checked and designed at the file's own rate first; a file the recipe cannot be
    used on comes back ``rejected`` with the reason, and nothing is written. The dither is seeded
    from the input's name, as for a file named on the command line, so the bytes equal those of
    ``chainrun run RECIPE INPUT -o FOLDER``. No lock, journal or report: that is :func:`run`.

    Raises
    ------
    RecipeError
        If ``recipe`` is a path and cannot be loaded.
    BatchError
        If the recipe holds an unstable raw section (no audio is touched).
    """
    from .batch.discover import Job
    from .guard import check_raw_sections
    from .recipe.channels import channels_misfit
    from .render import render_file
    from .results import REJECTED

    if isinstance(recipe, (str, os.PathLike)):
        recipe = load(os.fspath(recipe))
    raw = check_raw_sections(recipe)
    if raw:
        raise BatchError(f"{raw[0]}; no audio was touched")
    name = os.path.basename(input)
    src = probe_job(Job(input, name, output))
    if isinstance(src, FileResult):
        return src
    if undeclared_rate(recipe, src.rate):
        return FileResult(input, name, REJECTED, f"the recipe is not meant for this file: "
                                                 f"{undeclared_rate(recipe, src.rate)}", source=src)
    try:
        chain, assessment = design_and_assess(recipe, src.rate)
    except RecipeError as exc:          # e.g. a section at or above this rate's Nyquist frequency
        return FileResult(input, name, REJECTED, f"the recipe cannot be used at {src.rate} Hz: {exc}", source=src)
    refused = next((str(p) for p in assessment.problems if p.severity == "error"), None)
    refused = refused or channels_misfit(recipe, src.channels)
    if refused:
        return FileResult(input, name, REJECTED, f"the recipe cannot be used on this file: {refused}", source=src)
    policy = Policy.from_recipe(recipe, on_over=on_over, block_size=block_size, true_peak=true_peak)
    return render_file(src, output, chain.filters, assessment.peak_gain, policy, seed_key=name, relpath=name)


# --------------------------------------------------------------------------- scan

def scan(inputs: list[str], true_peak: bool = True, loudness: bool = True) -> list[FileResult]:
    """Meter existing files (found as a batch finds them) and summarise their metadata; writes nothing.

    Each readable file's ``extra["metadata"]`` holds
    :func:`~chainrun.audio.metadata.metadata_summary` (description, time reference, iXML scene
    and take, the chunk list, notes on malformed metadata). ``true_peak`` and ``loudness``: as
    ``chainrun scan``'s ``--no-true-peak`` and ``--no-loudness``.

    Raises
    ------
    BatchError
        If an input does not exist.
    """
    plan = discover(inputs, None)
    results = []
    for job in plan.jobs:
        src = probe_job(job)
        if isinstance(src, FileResult):
            results.append(src)
            continue
        r = scan_file(src, true_peak=true_peak, relpath=job.relpath, loudness=loudness)
        r.extra["metadata"] = metadata_summary(src)
        results.append(r)
    results.extend(plan.skipped)
    return results


# --------------------------------------------------------------------------- plot

def plot(recipe: Recipe | str, rate: int, output: str, *, warn: Callable[[str], None] | None = None,
         allow_outside_includes: bool = False):
    """Draw the chain's response at ``rate`` to ``output`` (.png or .svg); returns the guard's Assessment.

    ``warn`` is called with each of the assessment's problems (and a ``note:`` for each section left out
    at ``rate``, ``above_nyquist: drop``) before the picture is drawn;
    ``allow_outside_includes``: as for :func:`chainrun.load`.

    Raises
    ------
    BatchError
        If ``output`` is not a .png or .svg name, or cannot be written.
    RecipeError
        If the recipe cannot be loaded, or designed at ``rate``.
    """
    if os.path.splitext(output)[1].lower() not in PLOT_SUFFIXES:
        raise BatchError(f"{output}: error: the picture must be a .png or .svg file")
    if isinstance(recipe, (str, os.PathLike)):
        recipe = load(os.fspath(recipe), allow_outside_includes=allow_outside_includes)
    chain, assessment = design_and_assess(recipe, rate)
    from .report.plot import save_response

    for line in [str(p) for p in assessment.problems] + [f"note: {n}" for n in chain.dropped]:
        if warn is not None:
            warn(line)
    try:
        save_response(recipe, chain, assessment, output)
    except OSError as exc:
        raise BatchError(f"{output}: error: cannot write the picture: {(exc.strerror or str(exc)).lower()}") \
            from None
    return assessment

