"""CPU cost of PCM_24 packing and unpacking: the compiled loops (chainrun.dsp.compiled) against numpy's.

Generates stereo 48 kHz noise (about -20 dBFS RMS, with a few samples beyond full scale so the
clip count is exercised) in blocks of 65536 frames; packs every block with
``Quantiser.packed24`` (with TPDF dither, as a 32-bit float input written as PCM_24 would be,
and without) and unpacks the bytes with ``reader.unpack24``, once with the compiled loops and
once with the numpy forms (the compiled names set to None), interleaved round by round. Prints
the median CPU time (time.process_time) per second of audio of each, their ratio, and whether the
bytes, counts and values matched. ``--pool N`` cycles N distinct blocks (1: a block still in the
cache, as one just written by the filter; default: every block distinct, read from memory).

    PYTHONPATH=$PWD python benchmarks/pack24_cost.py [--seconds 60] [--repeats 5] [--pool N]
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np

from chainrun.audio import quantise, reader
from chainrun.dsp import compiled

RATE, CHANNELS, BLOCK = 48000, 2, 65536


def pack_all(blocks, dither):
    q = quantise.Quantiser("PCM_24", dither, seed=7)
    out, packed = None, []
    t0 = time.process_time()
    for y in blocks:
        out = q.packed24(y, out=out)
        packed.append(out[:3 * y.size].copy() if len(packed) < 2 else None)
    return time.process_time() - t0, packed, q.clipped


def unpack_all(raws):
    out = np.empty((CHANNELS, BLOCK))
    scratch = np.empty(BLOCK, dtype=np.int32)
    t0 = time.process_time()
    for raw in raws:
        reader.unpack24(raw, BLOCK, CHANNELS, out, scratch)
    return time.process_time() - t0, out.copy()


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=60.0)
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--pool", type=int, default=0, help="distinct blocks cycled (0: all distinct)")
    args = ap.parse_args()
    if compiled.pack24_row is None:
        raise SystemExit(f"the compiled loops are not in use: {compiled.REASON}")
    rng = np.random.default_rng(1)
    n_blocks = max(1, int(args.seconds * RATE) // BLOCK)
    pool = args.pool if 0 < args.pool < n_blocks else n_blocks
    blocks = [rng.normal(0, 0.1, (CHANNELS, BLOCK)) for _ in range(pool)]
    blocks[0][0, :5] = [1.5, -1.5, 1.0, -1.0, 0.9999999]
    raws = [np.frombuffer(rng.bytes(3 * CHANNELS * BLOCK + 1), dtype=np.uint8) for _ in range(pool)]
    blocks = [blocks[i % pool] for i in range(n_blocks)]
    raws = [raws[i % pool] for i in range(n_blocks)]
    seconds = n_blocks * BLOCK / RATE
    loops = {"compiled": (compiled.pack24_row, compiled.unpack24_rows), "numpy": (None, None)}
    times = {(job, name): [] for job in ("pack", "pack+dither", "unpack") for name in loops}
    results = {}
    for _ in range(args.repeats):
        for name, (pack, unpack) in loops.items():
            compiled.pack24_row, compiled.unpack24_rows = pack, unpack
            for job, dither in (("pack", False), ("pack+dither", True)):
                t, packed, clipped = pack_all(blocks, dither)
                times[job, name].append(t)
                results[job, name] = ([p.tobytes() for p in packed if p is not None], clipped)
            t, values = unpack_all(raws)
            times["unpack", name].append(t)
            results["unpack", name] = values.tobytes()
    compiled.pack24_row, compiled.unpack24_rows = loops["compiled"]
    print(f"{seconds:.1f} s of stereo {RATE} Hz audio in blocks of {BLOCK} ({pool} distinct); "
          f"median of {args.repeats} (process_time)")
    for job in ("pack", "pack+dither", "unpack"):
        c, n = (statistics.median(times[job, k]) / seconds * 1e3 for k in ("compiled", "numpy"))
        same = results[job, "compiled"] == results[job, "numpy"]
        print(f"  {job:12s} numpy {n:.4f} ms/s   compiled {c:.4f} ms/s   ratio {n / c:.1f}x   identical: {same}")


if __name__ == "__main__":
    main()
