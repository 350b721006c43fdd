"""``chainrun run``: a run through :func:`chainrun.app.run`, with a progress bar, its summary and its errors."""
from __future__ import annotations

import argparse
import sys

from ..app import refuse_audio_recipe, refuse_recipe_inputs, run
from ..batch.run import MAX_WORKERS
from ..recipe import RecipeError, load
from ..results import SKIPPED
from ..text import shown
from .common import EXIT_NOT_OK, EXIT_OK, EXIT_USAGE, _err


class _Progress:
    """Progress on stderr: a tqdm bar on a terminal, else one plain line per finished file, or nothing.

    ``mode`` is ``"bar"`` (files, and hours of audio done), ``"lines"`` (``chainrun: [3/40] ok
    take.wav (2.1 s)``, flushed at once, for cron and CI logs) or ``"off"`` (``--quiet``).
    """

    def __init__(self, mode: str):
        self.mode = mode
        self.bar = None
        self.hours = 0.0
        self.total = 0
        self.done = 0

    @classmethod
    def for_stream(cls, stream, quiet: bool) -> "_Progress":
        """The progress a run shows on ``stream``: none when quiet, a bar on a terminal, else lines."""
        if quiet:
            return cls("off")
        try:
            tty = stream.isatty()
        except (AttributeError, ValueError):
            tty = False
        return cls("bar" if tty else "lines")

    def start(self, total_files: int) -> None:
        self.total = total_files
        if self.mode == "bar" and total_files:
            from tqdm import tqdm
            tqdm.monitor_interval = 0       # no monitor thread: worker processes are forked
            self.bar = tqdm(total=total_files, unit="file", file=sys.stderr, dynamic_ncols=True,
                            desc="filtering")

    def __call__(self, result) -> None:
        self.done += 1
        if self.mode == "lines":
            from ..text import shown

            total = max(self.total, self.done)
            print(f"chainrun: [{self.done}/{total}] {result.status} {shown(result.relpath)} "
                  f"({result.seconds:.1f} s)", file=sys.stderr, flush=True)
            return
        if self.bar is None:
            return
        if result.source is not None:
            self.hours += result.source.duration_s / 3600.0
        self.bar.update(1)
        self.bar.set_postfix_str(f"{self.hours:.2f} h audio")

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()


def main(args: argparse.Namespace) -> int:
    from ..report.document import files_document
    from ..report.table import console_summary, error_lines, interrupted_line

    if args.workers is not None and args.workers > MAX_WORKERS:
        _err(f"--workers {args.workers} is out of range; allowed: 1 to {MAX_WORKERS}; no audio was touched")
        return EXIT_USAGE
    plan = recipe = None
    if args.plan is not None:
        if args.recipe is not None:
            _err("chainrun run: error: --plan names the recipes and the inputs; give either --plan PLAN or "
                 "RECIPE INPUT..., not both; see 'chainrun run --help'")
            return EXIT_USAGE
    elif args.recipe is None or not args.inputs:
        _err("chainrun run: error: the following arguments are required: RECIPE, INPUT (or --plan PLAN); "
             "see 'chainrun run --help'")
        return EXIT_USAGE
    else:
        refuse_audio_recipe(args.recipe)
        refuse_recipe_inputs(args.inputs)
    try:
        if args.plan is not None:
            from ..recipe.plan import load_plan

            plan = load_plan(args.plan, allow_outside_includes=args.allow_outside_includes)
            warnings = [w for r in plan.recipes for w in r.warnings]
        else:
            recipe = load(args.recipe, allow_outside_includes=args.allow_outside_includes)
            warnings = list(recipe.warnings)
    except RecipeError as exc:
        _err(f"{exc}; no audio was touched")
        return EXIT_USAGE
    for line in dict.fromkeys(warnings):
        _err(line)
    outcome = run(recipe, args.inputs, args.outdir, plan=plan, workers=args.workers, block_size=args.block_size,
                  on_over=args.on_over, report=args.report, true_peak=not args.no_true_peak, redo=args.redo,
                  loudness=not args.no_loudness,
                  progress=_Progress.for_stream(sys.stderr, args.quiet), command=["chainrun"] + args.argv,
                  cluster=args.cluster)
    result = outcome.result
    for note in result.notes:
        _err(note if ": warning: " in note else f"chainrun: note: {note}")    # a plan's located warnings as they are
    document = files_document(result)
    print(console_summary(document, outcome.report_paths))
    for line in error_lines(document):
        _err(line)
    for line in outcome.report_errors:
        _err(line)
    if result.interrupted:
        _err(interrupted_line(document, outcome.report_paths))
    if not result.interrupted and all(r.status == SKIPPED for r in result.results):
        # an empty or wrong input folder is not a successful run: say what was searched
        searched = args.inputs or [getattr(args, "plan", None) or "the plan"]
        _err(f"chainrun: error: no audio found in {', '.join(shown(str(p)) for p in searched)} "
             f"({len(result.results)} file(s) looked at, none of them audio); nothing was rendered")
        return EXIT_NOT_OK
    return EXIT_OK if result.all_ok and not outcome.report_errors else EXIT_NOT_OK
