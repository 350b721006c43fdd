"""CPU cost of the filter call: the compiled cascade (chainrun.dsp.compiled) against scipy's sosfilt.

Part 1, in process: generates stereo 48 kHz noise (about -20 dBFS RMS) in blocks of 65536 frames,
designs the benchmark's six biquads (benchmarks/run.py's RECIPE), and filters all of it with the
state carried, once with each function, interleaved round by round; prints the median CPU time
(time.process_time) per second of audio of each and their ratio, and whether the bytes matched.

Part 2 (``--whole``): ``chainrun run`` (one worker, every meter on) as whole processes on a
stereo PCM_24 file and on a 1-second one, with and without ``CHAINRUN_NO_KERNEL=1``, interleaved;
prints the median CPU time of each and the CPU per extra second of audio.

    PYTHONPATH=$PWD python benchmarks/kernel_cost.py [--seconds 60] [--repeats 5] [--whole [--whole-seconds 300]]
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time

import numpy as np
from scipy.signal import sosfilt

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)
from run import RECIPE, make_noise_file  # noqa: E402  (benchmarks/run.py: the same chain and files)

import chainrun  # noqa: E402
from chainrun.dsp import compiled as kernel  # noqa: E402

RATE, CHANNELS, BLOCK = 48000, 2, 65536


def filter_all(fn, sos, blocks):
    zi = np.zeros((len(sos), CHANNELS, 2))
    out = []
    t0 = time.process_time()
    for b in blocks:
        y, zi = fn(sos, b, axis=-1, zi=zi)
        out.append(y)
    return time.process_time() - t0, out


def in_process(seconds: float, repeats: int) -> None:
    sos = chainrun.design(chainrun.loads(RECIPE), RATE).sos
    frames = int(seconds * RATE)
    rng = np.random.default_rng(17)
    blocks = [0.1 * rng.standard_normal((CHANNELS, min(BLOCK, frames - i))) for i in range(0, frames, BLOCK)]
    runs = {"kernel": [], "sosfilt": []}
    same = True
    for _ in range(repeats):                      # interleaved: the machine's load falls on both
        tk, yk = filter_all(kernel.cascade, sos, blocks)
        ts, ys = filter_all(sosfilt, sos, blocks)
        runs["kernel"].append(tk)
        runs["sosfilt"].append(ts)
        same = same and all(a.tobytes() == b.tobytes() for a, b in zip(yk, ys))
    med = {k: 1000.0 * statistics.median(v) / seconds for k, v in runs.items()}
    print(f"{len(sos)} biquads, {seconds:g} s stereo {RATE} Hz in blocks of {BLOCK}, median of {repeats}:")
    for k, v in runs.items():
        print(f"  {k:8s} {med[k]:.3f} ms CPU per second of audio "
              f"(runs: {', '.join(f'{1000 * r / seconds:.3f}' for r in v)})")
    ratios = [k / s for k, s in zip(runs["kernel"], runs["sosfilt"])]
    print(f"  kernel / sosfilt = {med['kernel'] / med['sosfilt']:.2f} (ratio of medians), "
          f"{statistics.median(ratios):.2f} (median of the rounds' ratios); identical bytes: {same}")


def cpu_of(cmd: list[str], env: dict) -> float:
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    subprocess.run(cmd, env=env, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def whole(seconds: float, repeats: int) -> None:
    with tempfile.TemporaryDirectory(prefix="kernel-cost-") as work:
        recipe = os.path.join(work, "chain.yaml")
        with open(recipe, "w", encoding="utf-8") as fh:
            fh.write(RECIPE)
        files = {"long": os.path.join(work, "long.wav"), "short": os.path.join(work, "short.wav")}
        make_noise_file(files["long"], seconds)
        make_noise_file(files["short"], 1.0)
        on = dict(os.environ)
        on.pop(kernel.ENV_OFF, None)
        off = dict(on, **{kernel.ENV_OFF: "1"})
        cpu = {(k, f): [] for k in ("kernel", "sosfilt") for f in files}
        for _ in range(repeats):
            for f, path in files.items():
                for k, env in (("kernel", on), ("sosfilt", off)):
                    cmd = [sys.executable, "-m", "chainrun", "run", recipe, path,
                           "-o", os.path.join(work, f"out-{k}-{f}"), "--redo", "--workers", "1"]
                    cpu[(k, f)].append(cpu_of(cmd, env))
        med = {key: statistics.median(v) for key, v in cpu.items()}
        print(f"chainrun run, one worker, {seconds:g} s and 1 s stereo PCM_24, median CPU of {repeats}:")
        per_s = {}
        for k in ("kernel", "sosfilt"):
            per_s[k] = 1000.0 * (med[(k, "long")] - med[(k, "short")]) / (seconds - 1.0)
            print(f"  {k:8s} {med[(k, 'long')]:.3f} s ({seconds:g} s file), {med[(k, 'short')]:.3f} s (1 s file): "
                  f"{per_s[k]:.2f} ms CPU per extra second of audio")
        print(f"  per second: kernel / sosfilt = {per_s['kernel'] / per_s['sosfilt']:.2f}; "
              f"whole {seconds:g} s run: {med[('kernel', 'long')] / med[('sosfilt', 'long')]:.2f}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=60.0)
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--whole", action="store_true", help="also time whole `chainrun run` processes")
    ap.add_argument("--whole-seconds", type=float, default=300.0, help="length of the long file for --whole")
    args = ap.parse_args()
    if kernel.cascade is None:
        sys.exit(f"the compiled cascade is not in use: {kernel.REASON}")
    in_process(args.seconds, args.repeats)
    if args.whole:
        whole(args.whole_seconds, args.repeats)


if __name__ == "__main__":
    main()
