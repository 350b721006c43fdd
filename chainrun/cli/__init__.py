"""Command line: ``chainrun check | run | scan | plot``. See README.md, 'Commands', for the contract.

The parser is built from :data:`COMMANDS`, one row per command; a command's module (``chainrun.cli.<name>``,
whose ``main(args)`` parses nothing and prints everything) is imported only when that command runs, so
``chainrun --help`` and a usage error answer at once. The work itself is :mod:`chainrun.app`'s.
"""
from __future__ import annotations

import argparse
import importlib
import os
import sys
import traceback

from ..version import __version__
from ..batch.cores import cores
from ..errors import BatchError
import signal

from ..interrupt import (from_ctrl_c as _from_ctrl_c, hold_stop_signals, release_stop_signals,
                         stop_signals_like_ctrl_c, stopped_by)
from ..recipe import RecipeError
from .common import EXIT_NOT_OK, EXIT_USAGE, UsageError, _err, _positive, _rate

def _includes_argument(p: argparse.ArgumentParser) -> None:
    p.add_argument("--allow-outside-includes", action="store_true",
                   help="follow a recipe's include: to a file outside the recipe's own folder tree (refused "
                        "by default)")


def _check_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("recipes", nargs="+", metavar="RECIPE_OR_DIR",
                   help="recipe files or folders searched for *.yaml; a batch plan stands for every recipe it names")
    p.add_argument("--rate", type=_rate, action="append", metavar="HZ",
                   help="sample rate to check; repeat for several (default: the rates the recipe declares, "
                        "else the common rates 8000 to 192000)")
    p.add_argument("--json", action="store_true", help="print results as JSON on stdout")
    p.add_argument("--strict", action="store_true", help="a recipe with warnings fails the check too (exit 1)")
    _includes_argument(p)


def _run_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("recipe", nargs="?", metavar="RECIPE", help="the recipe (not with --plan)")
    p.add_argument("inputs", nargs="*", metavar="INPUT", help="audio files or folders (searched recursively)")
    p.add_argument("--plan", metavar="PLAN", help="a batch plan (YAML) naming inputs and the recipe of each, "
                                                  "instead of RECIPE and INPUT")
    p.add_argument("-o", "--outdir", required=True, metavar="OUTDIR", help="output folder (created if needed)")
    p.add_argument("--workers", type=_positive("--workers"), metavar="N",
                   help=f"cores to keep busy (default: all, here {cores()}): N files at once in separate "
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
    p.add_argument("--no-loudness", action="store_true",
                   help="skip loudness metering (faster); a recipe's loudness target still measures what it needs")
    p.add_argument("--redo", action="store_true",
                   help="render every file again, even those an earlier run already delivered unchanged")
    p.add_argument("--cluster", metavar="ADDRESS",
                   help="render each file on a Dask cluster: tcp://HOST:PORT (a running scheduler) or local:N "
                        "(N worker processes here); inputs and OUTDIR must be on storage every worker sees. "
                        "Needs pip install 'chainrun[cluster]'")
    p.add_argument("-q", "--quiet", action="store_true",
                   help="no progress: neither the bar (on a terminal) nor one line per finished file (otherwise)")
    _includes_argument(p)


def _scan_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("inputs", nargs="+", metavar="INPUT", help="audio files or folders (searched recursively)")
    p.add_argument("--json", action="store_true", help="print results as JSON on stdout")
    p.add_argument("--no-true-peak", action="store_true", help="skip true-peak metering (faster)")
    p.add_argument("--no-loudness", action="store_true", help="skip loudness metering (faster)")


def _plot_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("recipe", metavar="RECIPE")
    p.add_argument("--rate", type=_rate, default=48000, metavar="HZ", help="sample rate (default 48000)")
    p.add_argument("-o", "--output", required=True, metavar="FILE", help="picture to write, .png or .svg")
    _includes_argument(p)


# One row per command: name -> (help, description, arguments). Its module is chainrun.cli.<name>.
COMMANDS = {
    "check": ("design and assess recipes at each sample rate; writes nothing",
              "Design every recipe at each rate, prove it stable and bound its gain.", _check_arguments),
    "run": ("filter files and folders into OUTDIR, with reports",
            "Filter audio files with a recipe, block by block, into OUTDIR (the input tree mirrored); "
            "write JSON, CSV and HTML reports.", _run_arguments),
    "scan": ("meter existing files; writes nothing",
             "Sample peak, true peak, RMS, DC offset, clipping and loudness of existing files.", _scan_arguments),
    "plot": ("draw the chain's response to a PNG or SVG file",
             "Magnitude and phase of the whole chain at one sample rate, each section drawn faintly beneath, "
             "with the guard's figures.", _plot_arguments),
}


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
    for name, (help_, description, arguments) in COMMANDS.items():
        p = sub.add_parser(name, help=help_, description=description)
        arguments(p)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``chainrun`` console script; returns the exit status."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:      # usage error (2) or --help/--version (0)
        return exc.code if isinstance(exc.code, int) else EXIT_USAGE
    args.argv = list(argv) if argv is not None else sys.argv[1:]
    short = _memory_limit_problem(args)
    if short:
        _err(short)
        return EXIT_USAGE
    held: dict = {}
    with stop_signals_like_ctrl_c():        # SIGTERM, SIGHUP, SIGQUIT: stopped as by Ctrl-C
        try:
            status = _command(args)
            held = hold_stop_signals()      # the work is done: a signal now has nothing left to stop
            signum = stopped_by()
        except KeyboardInterrupt:           # it came as the command returned, before the hold
            held = held or hold_stop_signals()
            _err("chainrun: interrupted as the command finished; everything it wrote is complete")
            status, signum = EXIT_NOT_OK, stopped_by()
    if argv is not None:        # called in-process with its arguments (tests, a library): give the handlers back
        release_stop_signals(held)
    # else this is the process's entry point (the console script, ``python -m chainrun``): the signals
    # stay ignored through the interpreter's exit, which would otherwise set SIGINT to its default
    # action, and a late Ctrl-C killed the finished process (exit -2 instead of its status)
    if signum is None:
        return status
    # Stopped by a signal other than Ctrl-C: say which, and exit as the shell reports a death by it.
    _err(f"chainrun: stopped by {signal.Signals(signum).name}, as by Ctrl-C; exit status {128 + signum}")
    return 128 + signum


_HEADROOM_MIB = 200


def _memory_limit_problem(args=None) -> str | None:
    """Under an address-space limit (``ulimit -v``): a line saying that it is too small, else None.

    OpenBLAS starts one thread per core when scipy's linear algebra is first loaded, each with its own
    buffers and malloc arena; under a limit of a few hundred MB its start-up retries its allocations for
    ever. So under a limit BLAS is kept to one thread (before scipy is imported), and what the command
    loads is tried once here: a limit too small for it is one line and exit 2 before anything is
    touched, not a hang, a traceback, or a valid recipe rejected. Every command designs, assesses and
    filters with :mod:`chainrun.dsp` (numpy and scipy's compiled sosfilt kernel, not scipy.signal);
    ``run`` and ``scan`` also build the meters they will use (which import what they need), ``plot``
    imports scipy.signal. Raw ``iir`` sections import scipy.signal later; the headroom allows for it.
    """
    try:
        import resource

        limit = resource.getrlimit(resource.RLIMIT_AS)[0]
    except (ImportError, OSError, ValueError):
        return None
    if limit == resource.RLIM_INFINITY:
        return None
    for name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(name, "1")
    message = (f"chainrun: error: the memory limit (ulimit -v, {limit >> 20} MiB of address space) is too small "
               "for chainrun to start; raise it (500 MiB is ample for one worker)")
    # OpenBLAS retries a failed allocation for ever while scipy's libraries are loaded, so that cannot
    # be tried: scipy.signal and one design take about 150 MiB more address space (measured with one
    # BLAS thread); with a block in flight, 200 MiB beyond what this process holds now.
    try:
        with open("/proc/self/status") as fh:
            held = next(int(ln.split()[1]) << 10 for ln in fh if ln.startswith("VmSize:"))
    except (OSError, StopIteration, ValueError, IndexError):
        held = 0
    if held and limit < held + (_HEADROOM_MIB << 20):
        return message
    command = getattr(args, "command", None)
    try:
        import numpy as np

        from ..dsp import butter_sos, freqz_sos, sosfilt

        sos = butter_sos(4, 240.0, 48000, "lowpass")
        sosfilt(sos, np.zeros((2, 65536)), np.zeros((len(sos), 2, 2)))
        freqz_sos(sos, np.geomspace(1.0, 24000.0, 8192), 48000)
        if command in ("run", "scan"):
            from ..meters.loudness import LoudnessMeter
            from ..meters.truepeak import TruePeakMeter

            if not getattr(args, "no_true_peak", False):
                TruePeakMeter(48000, 2)
            if not getattr(args, "no_loudness", False):
                LoudnessMeter(48000, 2)
        elif command == "plot":
            importlib.import_module("scipy.signal")
    except (MemoryError, ImportError, OSError):     # a library that cannot be mapped: "failed to map segment"
        return message
    return None


def _command(args) -> int:
    try:
        return importlib.import_module(f"{__name__}.{args.command}").main(args)
    except (UsageError, BatchError, RecipeError) as exc:
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
