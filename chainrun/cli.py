"""Command line: ``chainrun check | run | scan | plot``. See README.md, 'Commands', for the contract."""
from __future__ import annotations

import argparse
import json
import math
import os
import sys
import traceback

from . import __version__
from .recipe import RecipeError, load
from .interrupt import from_ctrl_c as _from_ctrl_c
from .report import loudest
from .text import fmt_db, shown

DEFAULT_RATES = (44100, 48000, 96000)
_ASSESSMENT_KEYS = ("rate", "accepted", "rows", "max_pole_radius", "decay_60db_s", "decay_exact", "max_gain_db",
                    "max_gain_hz", "min_gain_db", "min_gain_hz", "worst_case_peak_gain", "worst_case_peak_gain_db",
                    "worst_case_exact", "problems", "error")
RECIPE_SUFFIXES = (".yaml", ".yml")

EXIT_OK, EXIT_NOT_OK, EXIT_USAGE = 0, 1, 2


class UsageError(Exception):
    """A command-line mistake: printed as one line, exit status 2."""


def _rate(text: str) -> int:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a sample rate; give Hz, e.g. 48000") from None
    if not value.is_integer() or not 1000 <= value <= 768000:
        raise argparse.ArgumentTypeError(f"{text} Hz is out of range; allowed: whole Hz from 1000 to 768000")
    return int(value)


def _err(line: str) -> None:
    """One line on stderr; undecodable bytes and control characters shown escaped (report.shown)."""
    print(shown(str(line)), file=sys.stderr)


# --------------------------------------------------------------------------- check

def _find_recipes(paths: list[str]) -> list[str]:
    found = []
    for p in paths:
        if os.path.isdir(p):
            for root, dirs, files in os.walk(p):
                dirs[:] = sorted(d for d in dirs if not d.startswith("."))
                found.extend(os.path.join(root, f) for f in sorted(files)
                             if f.endswith(RECIPE_SUFFIXES) and not f.startswith("."))
        elif os.path.exists(p):
            found.append(p)
        else:
            raise UsageError(f"{p}: error: no such file or folder; give recipe files or folders of them")
    if not found:
        raise UsageError(f"{', '.join(paths)}: error: no recipes (*.yaml, *.yml) found")
    return found


def check_recipe(path: str, rates: tuple[int, ...]) -> dict:
    """Load, design and assess one recipe at each rate; a JSON-safe summary."""
    entry: dict = {"path": path, "accepted": False, "errors": [], "warnings": [], "rates": []}
    try:
        recipe = load(path)
    except RecipeError as exc:
        entry["errors"].append(str(exc))
        return entry
    entry.update(name=recipe.name, digest=recipe.digest, sections=len(recipe.sections))
    entry["warnings"].extend(recipe.warnings)          # e.g. a file loosening a limit it includes
    accepted = True
    from .batch import design_and_assess

    for rate in rates:
        try:
            _, a = design_and_assess(recipe, rate)
        except RecipeError as exc:
            entry["errors"].append(str(exc))
            entry["rates"].append(dict.fromkeys(_ASSESSMENT_KEYS) | {"rate": rate, "accepted": False,
                                                                     "error": str(exc)})
            accepted = False
            continue
        entry["rates"].append(a.to_dict() | {"error": next((str(p) for p in a.problems
                                                            if p.severity == "error"), None)})
        for p in a.problems:
            (entry["errors"] if p.severity == "error" else entry["warnings"]).append(str(p))
        accepted &= a.accepted
    entry["errors"] = list(dict.fromkeys(entry["errors"]))       # same problem at several rates: once
    entry["warnings"] = list(dict.fromkeys(entry["warnings"]))
    entry["accepted"] = accepted
    return entry


def _print_check(entry: dict) -> None:
    title = f"{entry['path']}"
    if "name" in entry:
        title += f"  \"{entry['name']}\"  {entry['sections']} section(s)"
    print(title)
    if entry["rates"]:
        print(f"  {'rate':>9}  {'biquads':>7}  {'max pole radius':>15}  {'60 dB decay':>11}  "
              f"{'max gain':>22}  {'worst-case peak':>15}  verdict")
        for r in entry["rates"]:
            verdict = "accepted" if r["accepted"] else "REJECTED"
            if r.get("rows") is None:
                print(f"  {r['rate']:>6} Hz  {'-':>7}  {'-':>15}  {'-':>11}  {'-':>22}  {'-':>15}  {verdict}")
                continue
            radius = f"{r['max_pole_radius']:.9f}" if r["max_pole_radius"] is not None else "-"
            decay = "-" if r["decay_60db_s"] is None else (
                f"{'' if r['decay_exact'] else '>'}{r['decay_60db_s']:.3f} s")
            gain = "-" if r["max_gain_db"] is None else f"{r['max_gain_db']:+.2f} dB @ {r['max_gain_hz']:.0f} Hz"
            peak = fmt_db(r["worst_case_peak_gain_db"] if r["worst_case_peak_gain_db"] is not None else math.inf)
            print(f"  {r['rate']:>6} Hz  {r['rows']:>7}  {radius:>15}  {decay:>11}  {gain:>22}  {peak:>15}  {verdict}")
    for line in entry["errors"] + entry["warnings"]:
        _err(line)


def cmd_check(args: argparse.Namespace) -> int:
    rates = tuple(dict.fromkeys(args.rate)) if args.rate else DEFAULT_RATES
    entries = [check_recipe(p, rates) for p in _find_recipes(args.recipes)]
    rejected = [e for e in entries if not e["accepted"]]
    if args.json:
        json.dump({"version": __version__, "rates": list(rates), "accepted": not rejected,
                   "recipes": entries}, sys.stdout, indent=2)
        print()
        for e in entries:
            for line in e["errors"] + e["warnings"]:
                _err(line)
    else:
        for e in entries:
            _print_check(e)
        print(f"{len(entries)} recipe(s) checked at {', '.join(map(str, rates))} Hz: "
              f"{len(entries) - len(rejected)} accepted, {len(rejected)} rejected")
    return EXIT_NOT_OK if rejected else EXIT_OK


# --------------------------------------------------------------------------- run

def _cores() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not Linux
        return max(1, os.cpu_count() or 1)


def _positive(name: str):
    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{name} must be a whole number; got '{text}'") from None
        if value < 1:
            raise argparse.ArgumentTypeError(f"{name} must be at least 1; got {value}")
        return value
    return parse


class _Progress:
    """A tqdm bar on stderr (files, and hours of audio done), only when stderr is a terminal."""

    def __init__(self, total_files: int, enabled: bool):
        self.bar = None
        self.hours = 0.0
        if enabled and total_files:
            from tqdm import tqdm
            tqdm.monitor_interval = 0       # no monitor thread: worker processes are forked
            self.bar = tqdm(total=total_files, unit="file", file=sys.stderr, dynamic_ncols=True,
                            desc="filtering")

    def __call__(self, result) -> None:
        if self.bar is None:
            return
        if result.source is not None:
            self.hours += result.source.duration_s / 3600.0
        self.bar.update(1)
        self.bar.set_postfix_str(f"{self.hours:.2f} h audio")

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()


def cmd_run(args: argparse.Namespace) -> int:
    from .batch import INTERRUPTED, MAX_WORKERS, BatchError, claim_outdir, execute, make_policy, prepare
    from .report import ReportError, console_summary, error_lines, write_reports

    if args.workers is not None and args.workers > MAX_WORKERS:
        _err(f"--workers {args.workers} is out of range; allowed: 1 to {MAX_WORKERS}; no audio was touched")
        return EXIT_USAGE
    workers = args.workers or min(_cores(), MAX_WORKERS)
    try:
        recipe = load(args.recipe)
    except RecipeError as exc:
        _err(f"{exc}; no audio was touched")
        return EXIT_USAGE
    for line in recipe.warnings:
        _err(line)
    if args.report:
        folder = os.path.dirname(os.path.abspath(args.report))
        probe_dir = folder
        while not os.path.exists(probe_dir):
            probe_dir = os.path.dirname(probe_dir)
        if not os.path.isdir(probe_dir) or not os.access(probe_dir, os.W_OK):
            _err(f"{args.report}: error: the report cannot be written there ({probe_dir} is not a writable "
                 "folder); no audio was touched")
            return EXIT_USAGE
    try:
        policy = make_policy(recipe, on_over=args.on_over, block_size=args.block_size,
                             true_peak=not args.no_true_peak)
        prep = prepare(recipe, args.inputs, args.outdir, policy)
    except BatchError as exc:
        _err(str(exc))
        return EXIT_USAGE
    try:
        lock, notes = claim_outdir(args.outdir)
    except BatchError as exc:
        _err(str(exc))
        return EXIT_USAGE
    try:
        from .report.pictures import draw_pictures_aside

        pictures: dict = {}
        progress = _Progress(len(prep.work), sys.stderr.isatty())
        try:
            # The report's pictures (matplotlib) are drawn by a forked child process, so that neither
            # matplotlib's memory nor its use of the GIL is ever the renderer's. With one worker (one
            # core) the child runs after the audio; with more, while the audio renders: it is started
            # before the pipeline threads or the worker processes exist.
            if workers > 1:
                pictures.update(draw_pictures_aside(recipe, prep.designs))
            result = execute(prep, workers=workers, progress=progress, resume=not args.redo)
        finally:
            progress.close()
        if workers == 1:
            pictures.update(draw_pictures_aside(recipe, prep.designs))
        result.notes[:0] = notes
        result.pictures = pictures
        report_errors: list[str] = []
        try:
            paths = write_reports(result, args.report, command=["chainrun"] + args.argv)
        except ReportError as exc:
            paths = exc.written
            report_errors = exc.problems
        except OSError as exc:
            paths = {}
            report_errors = [f"{exc.filename or args.report or args.outdir}: error: cannot write the report: "
                             f"{(exc.strerror or str(exc)).lower()}"]
        if report_errors:
            report_errors[-1] += "; the files listed above as ok were delivered"
    finally:
        lock.release()
    for note in result.notes:
        _err(f"chainrun: note: {note}")
    print(console_summary(result, paths))
    for line in error_lines(result):
        _err(line)
    for line in report_errors:
        _err(line)
    if result.interrupted:
        left = sum(r.status == "failed" and r.message == INTERRUPTED for r in result.results)
        if left:
            _err(f"chainrun: interrupted; {left} file(s) not rendered (listed in the report as failed); "
                 "no partial file was left, and the next run resumes")
        else:
            _err("chainrun: interrupted after the last file was rendered; every file is in the report")
    return EXIT_OK if result.all_ok and not report_errors else EXIT_NOT_OK


# --------------------------------------------------------------------------- scan

def cmd_scan(args: argparse.Namespace) -> int:
    from .batch import BatchError, discover, probe_job
    from .render import FileResult, scan_file
    from .report import file_dict

    try:
        plan = discover(args.inputs, None)
    except BatchError as exc:
        _err(str(exc))
        return EXIT_USAGE
    results = []
    for job in plan.jobs:
        src = probe_job(job)
        if isinstance(src, FileResult):
            results.append(src)
            continue
        results.append(scan_file(src, true_peak=not args.no_true_peak, relpath=job.relpath))
    results.extend(plan.skipped)
    if args.json:
        json.dump({"version": __version__, "files": [file_dict(r) for r in results]}, sys.stdout, indent=2,
                  allow_nan=False)
        print()
    else:
        print(f"{'status':<8} {'peak':>11} {'true peak':>11} {'RMS':>11} {'clipped':>8}  file")
        for r in results:
            m = r.input_meters
            if m is None:
                print(f"{r.status:<8} {'-':>11} {'-':>11} {'-':>11} {'-':>8}  {shown(r.relpath)}"
                      + (f"  ({shown(r.message)})" if r.message else ""))
                continue
            clipped = sum(c.clipped_samples for c in m.channels)
            print(f"{r.status:<8} {fmt_db(loudest(m, 'peak_dbfs'), 'dBFS'):>11} "
                  f"{fmt_db(loudest(m, 'true_peak_dbtp'), 'dBTP'):>11} "
                  f"{fmt_db(loudest(m, 'rms_dbfs'), 'dBFS'):>11} {clipped:>8}  {shown(r.relpath)}")
    bad = [r for r in results if r.status in ("failed", "clipped")]
    for r in bad:
        _err(f"{shown(r.input)}: {'error' if r.status == 'failed' else 'clipped'}: {shown(r.message)}")
    return EXIT_NOT_OK if bad else EXIT_OK


# --------------------------------------------------------------------------- plot

PLOT_SUFFIXES = (".png", ".svg")


def cmd_plot(args: argparse.Namespace) -> int:
    if os.path.splitext(args.output)[1].lower() not in PLOT_SUFFIXES:
        raise UsageError(f"{args.output}: error: the picture must be a .png or .svg file")
    from .batch import design_and_assess

    try:
        recipe = load(args.recipe)
        chain, assessment = design_and_assess(recipe, args.rate)
    except RecipeError as exc:
        _err(str(exc))
        return EXIT_USAGE
    from .report.plot import save_response

    for p in assessment.problems:
        _err(str(p))
    try:
        save_response(recipe, chain, assessment, args.output)
    except OSError as exc:
        raise UsageError(f"{args.output}: error: cannot write the picture: {(exc.strerror or str(exc)).lower()}")
    print(args.output)
    return EXIT_OK


# --------------------------------------------------------------------------- main

class _Parser(argparse.ArgumentParser):
    """argparse, with a usage error as one line (argparse would print the whole usage block first)."""

    def error(self, message: str):
        _err(f"{self.prog}: error: {message}; see '{self.prog} --help'")
        self.exit(EXIT_USAGE)


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="chainrun",
        description="Guarded IIR equaliser chains for folders of audio files.",
        epilog="Exit status: 0 all fine, 1 something rejected or not ok, 2 usage error.")
    parser.add_argument("--version", action="version", version=f"chainrun {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    p = sub.add_parser("check", help="design and assess recipes at each sample rate; writes nothing",
                       description="Design every recipe at each rate, prove it stable and bound its gain.")
    p.add_argument("recipes", nargs="+", metavar="RECIPE_OR_DIR", help="recipe files or folders searched for *.yaml")
    p.add_argument("--rate", type=_rate, action="append", metavar="HZ",
                   help="sample rate to check; repeat for several (default: 44100, 48000, 96000)")
    p.add_argument("--json", action="store_true", help="print results as JSON on stdout")
    p.set_defaults(func=cmd_check)

    p = sub.add_parser("run", help="filter files and folders into OUTDIR, with reports",
                       description="Filter audio files with a recipe, block by block, into OUTDIR "
                                   "(the input tree mirrored); write JSON, CSV and HTML reports.")
    p.add_argument("recipe", metavar="RECIPE")
    p.add_argument("inputs", nargs="+", metavar="INPUT", help="audio files or folders (searched recursively)")
    p.add_argument("-o", "--outdir", required=True, metavar="OUTDIR", help="output folder (created if needed)")
    p.add_argument("--workers", type=_positive("--workers"), metavar="N",
                   help=f"cores to keep busy (default: all, here {_cores()}): N files at once in separate "
                        "processes; a file rendered alone overlaps its reading, filtering and writing; "
                        "1 renders everything in one thread")
    p.add_argument("--block-size", type=_positive("--block-size"), metavar="N",
                   help="frames per block (default 65536); never changes the output")
    p.add_argument("--on-over", choices=("reject", "clip", "scale"),
                   help="what to do when an output would pass the ceiling (default: the recipe's guard.on_over)")
    p.add_argument("--report", metavar="PATH", help="JSON report path (default OUTDIR/chainrun-report.json); "
                                                     "the CSV and HTML reports go beside it. A name without "
                                                     ".json is the base of all three; a folder holds them")
    p.add_argument("--no-true-peak", action="store_true",
                   help="skip true-peak metering (faster); outputs are still metered against a recipe's "
                        "true_peak_ceiling_dbtp")
    p.add_argument("--redo", action="store_true",
                   help="render every file again, even those an earlier run already delivered unchanged")
    p.set_defaults(func=cmd_run)

    p = sub.add_parser("scan", help="meter existing files; writes nothing",
                       description="Sample peak, true peak, RMS, DC offset and clipping of existing files.")
    p.add_argument("inputs", nargs="+", metavar="INPUT", help="audio files or folders (searched recursively)")
    p.add_argument("--json", action="store_true", help="print results as JSON on stdout")
    p.add_argument("--no-true-peak", action="store_true", help="skip true-peak metering (faster)")
    p.set_defaults(func=cmd_scan)

    p = sub.add_parser("plot", help="draw the chain's response to a PNG or SVG file",
                       description="Magnitude and phase of the whole chain at one sample rate, "
                                   "each section drawn faintly beneath, with the guard's figures.")
    p.add_argument("recipe", metavar="RECIPE")
    p.add_argument("--rate", type=_rate, default=48000, metavar="HZ", help="sample rate (default 48000)")
    p.add_argument("-o", "--output", required=True, metavar="FILE", help="picture to write, .png or .svg")
    p.set_defaults(func=cmd_plot)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``chainrun`` console script; returns the exit status."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:      # usage error (2) or --help/--version (0)
        return exc.code if isinstance(exc.code, int) else EXIT_USAGE
    args.argv = list(argv) if argv is not None else sys.argv[1:]
    try:
        return args.func(args)
    except UsageError as exc:
        _err(str(exc))
        return EXIT_USAGE
    except RecipeError as exc:
        _err(str(exc))
        return EXIT_USAGE
    except KeyboardInterrupt:      # before any file was rendered, or while the reports were written
        _err("chainrun: interrupted; no partial file was left")
        return EXIT_NOT_OK
    except BrokenPipeError:
        return EXIT_NOT_OK
    except Exception as exc:  # a bug, not bad input: say so in one line
        if _from_ctrl_c(exc):
            _err("chainrun: interrupted; no partial file was left")
            return EXIT_NOT_OK
        _err(f"chainrun: internal error: {type(exc).__name__}: {exc} "
             "(set CHAINRUN_DEBUG=1 for the traceback and please report it)")
        if os.environ.get("CHAINRUN_DEBUG"):
            traceback.print_exc()
        return EXIT_NOT_OK


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
