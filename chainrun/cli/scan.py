"""``chainrun scan``: print what :func:`chainrun.app.scan` metered, as a table or as JSON."""
from __future__ import annotations

import argparse
import json
import sys

from ..version import __version__
from ..app import scan
from ..report.document import file_dict, loudest
from ..report.table import loudness_text
from ..results import CLIPPED, FAILED, STATUSES
from ..text import fmt_db, shown
from .common import EXIT_NOT_OK, EXIT_OK, _err


_LAYOUT_CHUNKS = {"fmt ", "data", "fact", "ds64", "JUNK", "PAD ", "FLLR", "COMM", "SSND", "FVER",
                  "STREAMINFO", "SEEKTABLE", "PADDING"}     # describe the audio or fill space: not shown


def _metadata_line(meta: dict | None) -> str:
    """One line of a file's metadata for the scan table: what a recordist looks for first."""
    if not meta:
        return ""
    parts = []
    if meta.get("description"):
        parts.append(f"description '{meta['description']}'")
    if meta.get("time_reference_hms"):
        parts.append(f"time reference {meta['time_reference_hms']}")
    for key in ("scene", "take"):
        if meta.get(key):
            parts.append(f"{key} {meta[key]}")
    chunks = [c["id"].strip() or repr(c["id"]) for c in meta.get("chunks") or [] if c["id"] not in _LAYOUT_CHUNKS]
    if chunks:
        parts.append("carries " + ", ".join(chunks))
    parts += [f"note: {n}" for n in meta.get("notes") or []]
    return shown("; ".join(parts)) if parts else ""


def main(args: argparse.Namespace) -> int:
    results = scan(args.inputs, true_peak=not args.no_true_peak, loudness=not args.no_loudness)
    if args.json:
        json.dump({"version": __version__, "files": [file_dict(r) for r in results]}, sys.stdout, indent=2,
                  allow_nan=False)
        print()
    else:
        print(f"{'status':<8} {'peak':>11} {'true peak':>11} {'RMS':>11} {'clipped':>8} {'loudness':>11}  file")
        for r in results:
            m = r.input_meters
            if m is None:
                print(f"{r.status:<8} {'-':>11} {'-':>11} {'-':>11} {'-':>8} {'-':>11}  {shown(r.relpath)}"
                      + (f"  ({shown(r.message)})" if r.message else ""))
                continue
            clipped = sum(c.clipped_samples for c in m.channels)
            print(f"{r.status:<8} {fmt_db(loudest(m, 'peak_dbfs'), 'dBFS'):>11} "
                  f"{fmt_db(loudest(m, 'true_peak_dbtp'), 'dBTP'):>11} "
                  f"{fmt_db(loudest(m, 'rms_dbfs'), 'dBFS'):>11} {clipped:>8} "
                  f"{loudness_text(m.to_dict()):>11}  {shown(r.relpath)}")
            if r.message and r.status not in (FAILED, CLIPPED):     # float overs: said here, not an error
                print(f"{'':<8} {shown(r.message)}")
            line = _metadata_line(r.extra.get("metadata"))
            if line:
                print(f"{'':<8} {line}")
    bad = [r for r in results if r.status in (FAILED, CLIPPED)]
    for r in bad:
        _err(f"{shown(r.input)}: {STATUSES[r.status].error_word}: {shown(r.message)}")
    return EXIT_NOT_OK if bad else EXIT_OK
