"""The benchmark harness runs end to end in its smoke mode, so it cannot rot.

Nothing about speed is asserted here (speed is measured by benchmarks/run.py, not tested); this
only checks that every step ran and produced its line of results.
"""
import os
import subprocess
import sys

import pytest
from support import REPO

ROOT = str(REPO)


@pytest.mark.slow
def test_benchmark_smoke_mode_runs(tmp_path):
    out = tmp_path / "results.md"
    proc = subprocess.run([sys.executable, os.path.join(ROOT, "benchmarks", "run.py"), "--smoke",
                           "--work", str(tmp_path / "work"), "--out", str(out)],
                          capture_output=True, text=True, timeout=600, cwd=ROOT)
    assert proc.returncode == 0, proc.stderr[-2000:]
    text = out.read_text()
    for line in ("A chainrun", "B plain script", "C I/O floor", "A/B =", "A/C =", "true-peak metering adds",
                 "digital silence after loud content", "peak RSS,", "speed-up", "D filter floor",
                 "I import floor", "the floors: D/C =", "if start-up were only the import floor",
                 "start-up: `chainrun run`", "`chainrun check` of the benchmark recipe", "truepeak meter alone",
                 "loudness meter alone", "## Targets (SMOKE"):
        assert line in text, f"missing from the benchmark results: {line}"
    # The Targets table: one row per target of issue 17, each with its figure and met or missed.
    table = text.split("## Targets", 1)[1]
    rows = [ln for ln in table.splitlines() if ln.startswith("| ") and "---" not in ln][1:]
    for target in ("`chainrun run` on a 1 s file", "`chainrun check`", "A/C <= 1.5", "A/B <= 0.8",
                   "peak RSS <= 150 MB", "peak RSS <= 1.15", "two workers >= 1.8x", "each true-peak meter",
                   "loudness meter"):
        row = [r for r in rows if target in r]
        assert len(row) == 1, f"no single Targets row for {target}"
        assert row[0].rstrip().endswith(("| met (smoke) |", "| missed (smoke) |")), row[0]
