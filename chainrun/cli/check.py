"""``chainrun check``: print what :func:`chainrun.app.check` found, as a table or as JSON."""
from __future__ import annotations

import argparse
import json
import math
import sys

from ..version import __version__
from ..gate import DEFAULT_RATES, check
from ..errors import problem_line
from ..text import fmt_db, shown
from .common import EXIT_NOT_OK, EXIT_OK, _err


# One rate's row, at most 78 columns: rate, biquads, pole radius, 60 dB decay, max gain, worst-case
# peak gain, verdict. The units are in the cells, so the header stays short.
_HEADER = f"  {'rate':>9} {'bq':>3} {'pole radius':>11} {'60 dB':>9} {'max gain':>20} {'worst peak':>10} verdict"
_WIDTH = 80


def _cells(r: dict) -> str:
    """The figure columns of one rate's (or one channel path's) row."""
    radius = f"{r['max_pole_radius']:.9f}" if r["max_pole_radius"] is not None else "-"
    decay = "-" if r["decay_60db_s"] is None else (
        f"{'' if r['decay_exact'] else '>'}{r['decay_60db_s']:.2f} s")
    gain = "-" if r["max_gain_db"] is None else f"{r['max_gain_db']:+.2f} dB@{r['max_gain_hz']:.0f} Hz"
    peak = fmt_db(r["worst_case_peak_gain_db"] if r["worst_case_peak_gain_db"] is not None else math.inf)
    return f"{r['rows']:>3} {radius:>11} {decay:>9} {gain:>20} {peak:>10}"


def _print_check(entry: dict) -> None:
    title = f"{shown(entry['path'])}"
    if "name" in entry:
        title += f"  \"{shown(entry['name'])}\"  {entry['sections']} section(s)"
    if entry.get("plan") and entry["plan"] != entry["path"]:
        title += f"  (named by the plan {shown(entry['plan'])})"
    print(title)
    if not entry["rates"]:                      # the recipe (or plan) did not load: a verdict row all the same
        print(f"  {'-':>9} {'it does not load (the error is on stderr)':<56} REJECTED")
    else:
        print(_HEADER)
        for r in entry["rates"]:
            verdict = "accepted" if r["accepted"] else "REJECTED"
            if r.get("rows") is None:
                print(f"  {r['rate']:>6} Hz {'-':>3} {'-':>11} {'-':>9} {'-':>20} {'-':>10} {verdict}")
                continue
            print(f"  {r['rate']:>6} Hz {_cells(r)} {verdict}")
            for p in r.get("paths") or ():          # a chain with channel paths: one row per path, then its name
                row = f"  {'':>9} {_cells(p)}  "
                print(row + shown(p["title"])[:max(_WIDTH - len(row), 8)])
    for note in entry.get("notes") or ():          # sections marked above_nyquist: drop, left out at a rate
        print(f"  note: {shown(note)}")
    for line in problem_lines(entry):
        _err(line)


def problem_lines(entry: dict) -> list[str]:
    """An entry's problems as lines for stderr: errors first, then warnings, each said once (not once a rate)."""
    ordered = sorted(entry["problems"], key=lambda p: p["severity"] != "error")
    return list(dict.fromkeys(problem_line(p) for p in ordered))


def _own_rates(entries: list[dict]) -> str:
    """Which rates were checked without --rate: the rates each recipe declares, or the common ones."""
    common = f"the common rates ({', '.join(f'{r / 1000:g}' for r in DEFAULT_RATES)} kHz)"
    if any(e.get("declared_rates") for e in entries):
        return f"the rates each recipe declares, else {common}"
    return common


def main(args: argparse.Namespace) -> int:
    rates = tuple(dict.fromkeys(args.rate)) if args.rate else None      # None: each recipe's rates:, or the common
    entries = check(args.recipes, rates, allow_outside_includes=args.allow_outside_includes)
    rejected = [e for e in entries if not e["accepted"]
                or (args.strict and any(p["severity"] == "warning" for p in e["problems"]))]
    if args.json:
        json.dump({"version": __version__, "rates": list(rates) if rates else None, "accepted": not rejected,
                   "recipes": entries}, sys.stdout, indent=2)
        print()
        for e in entries:
            for line in problem_lines(e):
                _err(line)
    else:
        for e in entries:
            _print_check(e)
        at = ", ".join(map(str, rates)) + " Hz" if rates else _own_rates(entries)
        print(f"{len(entries)} recipe(s) checked at {at}: "
              f"{len(entries) - len(rejected)} accepted, {len(rejected)} rejected"
              + (" (--strict: warnings reject)" if args.strict else ""))
    return EXIT_NOT_OK if rejected else EXIT_OK
