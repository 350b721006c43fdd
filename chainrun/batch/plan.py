"""Planning: probe every input, design and assess the recipe at each rate, before any audio is read.

:func:`prepare` turns a recipe, the inputs and OUTDIR into a :class:`Prepared` batch: the files to
render (each with a usable design at its rate) and the results already decided (skipped, unreadable,
rejected at their rate).
"""
from __future__ import annotations

from dataclasses import dataclass, field

from ..audio.source import Source
from ..design import Chain
from ..errors import AudioError, BatchError
from ..guard import Assessment, check_raw_sections, design_and_assess, design_fault
from ..recipe import Recipe, RecipeError
from ..recipe.channels import channels_misfit
from ..audio.reader import NoAudioFrames, cut_short, probe
from ..render import Policy
from ..render.policy import float_clip_warning
from ..results import FAILED, REJECTED, SKIPPED, FileResult
from ..text import reason as _reason
from .discover import Job, discover, discover_plan

__all__ = ["RateDesign", "Prepared", "prepare", "probe_job", "design_fault", "design_and_assess", "design_rates",
           "prepare_plan", "undeclared_rate"]


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


def probe_job(job: Job) -> Source | FileResult:
    """The header of one discovered input, or a failed result saying in one line why it cannot be read.

    A file that holds no audio frames and declares none (a recorder's false start) is skipped with that
    reason, not failed: there is nothing to render and nothing wrong with it.
    """
    try:
        with open(job.input, "rb"):     # a plain open first: its error names the cause (permission denied)
            pass
    except OSError as exc:
        return FileResult(job.input, job.relpath, FAILED, f"cannot read: {_reason(exc)}")
    try:
        src = probe(job.input)
    except NoAudioFrames as exc:
        return FileResult(job.input, job.relpath, SKIPPED, str(exc))
    except AudioError as exc:
        return FileResult(job.input, job.relpath, FAILED, str(exc))
    short = cut_short(src)
    if short:
        return FileResult(job.input, job.relpath, FAILED, short, source=src)
    return src


def undeclared_rate(recipe: Recipe, rate: int) -> str | None:
    """Why ``recipe`` refuses a file at ``rate``: not among the rates it declares (``rates:``); else None."""
    if recipe.rates is None or rate in recipe.rates:
        return None
    return (f"this file's rate, {rate} Hz, is not among the rates the recipe declares "
            f"({', '.join(map(str, recipe.rates))} Hz)")


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


@dataclass
class Prepared:
    """A batch ready to render: what to do with each file, decided before any audio is read.

    ``recipes``, ``policies`` and ``recipe_designs`` (rate -> design) hold one entry per recipe of the
    batch, indexed by ``Job.recipe``; ``recipe``, ``policy`` and ``designs`` are the first (the only one
    outside a plan).
    """

    recipe: Recipe
    policy: Policy
    outdir: str
    designs: dict[int, RateDesign]
    work: list[tuple[Job, Source]]
    results: list[FileResult]       # already decided: skipped, unreadable, rejected at their rate
    refused: list[tuple[Job, FileResult]] = field(default_factory=list)   # those rejected at their rate
    recipes: list[Recipe] = field(default_factory=list)
    policies: list[Policy] = field(default_factory=list)
    recipe_designs: list[dict[int, RateDesign]] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    plan_path: str | None = None

    def __post_init__(self):
        self.recipes = self.recipes or [self.recipe]
        self.policies = self.policies or [self.policy]
        self.recipe_designs = self.recipe_designs or [self.designs]

    def design_for(self, job: Job, rate: int) -> RateDesign:
        """The design that renders ``job`` (its recipe's, at ``rate``)."""
        return self.recipe_designs[job.recipe][rate]


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
    return _prepare([recipe], [policy], discover(inputs, outdir), outdir)


def prepare_plan(plan, outdir: str, policies: list[Policy]) -> Prepared:
    """:func:`prepare` for a batch plan (:class:`chainrun.recipe.plan.BatchPlan`), one policy per recipe.

    Every recipe is checked and designed at every rate in the batch before any audio is read.
    """
    for recipe in plan.recipes:
        raw = check_raw_sections(recipe)
        if raw:
            raise BatchError(f"{raw[0]}; no audio was touched")
    found = discover_plan(plan, outdir)
    prep = _prepare(list(plan.recipes), list(policies), found, outdir)
    prep.warnings, prep.plan_path = list(found.warnings) + prep.warnings, plan.path
    return prep


def _prepare(recipes: list[Recipe], policies: list[Policy], plan, outdir: str) -> Prepared:
    results = list(plan.skipped)
    probed: list[tuple[Job, Source]] = []
    for job in plan.jobs:
        src = probe_job(job)
        if isinstance(src, FileResult):
            results.append(src)
            continue
        probed.append((job, src))
    rates = {src.rate for _, src in probed}
    # each recipe designed at the batch's rates it declares (at every rate of the batch without rates:)
    designs = [design_rates(recipe, {r for r in rates if not undeclared_rate(recipe, r)}) for recipe in recipes]
    work, refused, undeclared = [], [], []
    for job, src in probed:
        which = "the recipe" if len(recipes) == 1 else f"the recipe {recipes[job.recipe].path}"
        off = undeclared_rate(recipes[job.recipe], src.rate)
        d = designs[job.recipe][src.rate] if not off else None
        misfit = channels_misfit(recipes[job.recipe], src.channels) if d and d.usable else None
        if d and d.usable and not misfit:
            work.append((job, src))
            continue
        why = (f"{which} is not meant for this file: {off}" if off else
               f"{which} cannot be used at {src.rate} Hz: {d.error}" if not d.usable else
               f"{which} cannot be used on this file's {src.channels} channel(s): {misfit}")
        r = FileResult(job.input, job.relpath, REJECTED, why, source=src)
        (undeclared if off else refused).append((job, r))
        results.append(r)
    if probed and not work and not refused:
        first_job, first = undeclared[0]
        raise BatchError(f"{first_job.input}: {first.message}; no file in the batch is at a rate the recipe "
                         "declares; no audio was touched")
    refused = refused + undeclared
    if probed and not work and all(d.usable for ds in designs for d in ds.values()):
        first_job, first = refused[0]
        raise BatchError(f"{first_job.input}: {first.message}; the recipe's channels fit no file in the batch; "
                         "no audio was touched")
    if probed and not work:
        first = next(d for ds in designs for d in ds.values() if not d.usable)
        raise BatchError(f"{first.error}; the recipe is rejected at every sample rate in the batch "
                         f"({', '.join(map(str, sorted(rates)))} Hz); no audio was touched")
    # a note for each section left out at a rate some file is rendered at (above_nyquist: drop)
    used = {(job.recipe, src.rate) for job, src in work}
    dropped = [note if len(recipes) == 1 else f"{recipes[i].path}: {note}"
               for i, ds in enumerate(designs) for rate, d in sorted(ds.items()) if (i, rate) in used
               for note in (d.chain.dropped if d.chain is not None else ())]
    # once per recipe (and once for --on-over clip), however many float files it renders
    clip_warnings = [float_clip_warning(r, p, [src.subtype for job, src in work if job.recipe == i])
                     for i, (r, p) in enumerate(zip(recipes, policies))]
    return Prepared(recipes[0], policies[0], outdir, designs[0], work, results, refused,
                    recipes, policies, designs, dropped + list(dict.fromkeys(w for w in clip_warnings if w)))
