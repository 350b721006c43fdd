"""Per-file overhead of the cluster executor (Dask, ``--cluster local:N``) against the process pool.

    PYTHONPATH=$PWD python benchmarks/cluster_overhead.py [--workers 2] [--rounds 3]

Makes stereo 48 kHz PCM_24 noise files of 1 s and 60 s in benchmarks/work/cluster/, renders each set
with :class:`PoolExecutor` and with :class:`ClusterExecutor` (a LocalCluster of the same number of
worker processes, started once, outside the timing), interleaved round by round, and prints the
medians: wall time per file (wall x workers / files), the difference (the cluster's overhead per file),
the cluster's start and close, and the scheduler's round trip for an empty task. Needs the cluster extra.
"""
from __future__ import annotations

import argparse
import os
import shutil
import statistics
import sys
import time

import numpy as np
import soundfile as sf

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.dirname(HERE))

from chainrun.batch.cluster import ClusterExecutor  # noqa: E402
from chainrun.batch.executors import PoolExecutor  # noqa: E402
from chainrun.batch.run import claimed, execute  # noqa: E402
from chainrun.recipe import loads  # noqa: E402
from chainrun.render import Policy  # noqa: E402

RECIPE = """\
format: 1
name: Saltings Hour overhead check
chain:
  - {type: highpass, freq: 60, order: 4}
  - {type: peak, freq: 2500, gain_db: 1.5, q: 1}
  - {type: gain, gain_db: -6}
"""
SETS = {"1s": (1, 40), "60s": (60, 6)}      # name: (seconds of audio per file, files)


def make(folder: str, seconds: int, files: int) -> None:
    if os.path.isdir(folder) and len(os.listdir(folder)) == files:
        return
    os.makedirs(folder, exist_ok=True)
    rng = np.random.default_rng(seconds)
    for i in range(files):
        sf.write(os.path.join(folder, f"take{i:03d}.wav"), 0.25 * rng.standard_normal((48000 * seconds, 2)),
                 48000, subtype="PCM_24")


def one(recipe, inputs: str, outdir: str, executor) -> tuple[float, int]:
    shutil.rmtree(outdir, ignore_errors=True)
    with claimed(recipe, [inputs], outdir, Policy.from_recipe(recipe)) as (prep, _):
        t0 = time.perf_counter()
        result = execute(prep, resume=False, executor=executor)
        wall = time.perf_counter() - t0
    assert all(r.status == "ok" for r in result.results), [r.message for r in result.results]
    return wall, len(result.results)


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--rounds", type=int, default=3)
    args = ap.parse_args()
    work = os.path.join(HERE, "work", "cluster")
    recipe = loads(RECIPE)
    for name, (seconds, files) in SETS.items():
        make(os.path.join(work, name), seconds, files)

    t0 = time.perf_counter()
    cluster = ClusterExecutor(f"local:{args.workers}")
    os.makedirs(os.path.join(work, "probe"), exist_ok=True)
    cluster.open(os.path.join(work, "probe"))
    started = time.perf_counter() - t0
    from distributed import wait

    client = cluster.client
    trips = []
    for _ in range(3):
        t = time.perf_counter()
        futs = [client.submit(int, i, pure=False) for i in range(200)]
        wait(futs)
        trips.append((time.perf_counter() - t) / 200)
        client.cancel(futs)

    times: dict[tuple[str, str], list[float]] = {}
    for _ in range(args.rounds):
        for name in SETS:
            for kind in ("pool", "cluster"):
                ex = PoolExecutor(args.workers) if kind == "pool" else cluster
                wall, n = one(recipe, os.path.join(work, name), os.path.join(work, f"out-{kind}"), ex)
                times.setdefault((name, kind), []).append(wall * args.workers / n)
    t0 = time.perf_counter()
    cluster.close()
    closed = time.perf_counter() - t0

    print(f"workers: {args.workers}; rounds: {args.rounds}; cores here: {os.cpu_count()}")
    print(f"LocalCluster start + worker check: {started:.2f} s; close: {closed:.2f} s")
    print(f"scheduler throughput, empty tasks: {statistics.median(trips) * 1e3:.2f} ms per task")
    for name, (seconds, files) in SETS.items():
        pool = statistics.median(times[(name, "pool")])
        clus = statistics.median(times[(name, "cluster")])
        size = os.path.getsize(os.path.join(work, name, "take000.wav"))
        print(f"{name} files ({files}): pool {pool:.3f} s/file, cluster {clus:.3f} s/file, "
              f"overhead {clus - pool:+.3f} s/file ({(clus - pool) / pool * 100:+.1f} %); "
              f"{2 * size / 1e6 / clus:.1f} MB/s read+written per worker")
    return 0


if __name__ == "__main__":
    sys.exit(main())
