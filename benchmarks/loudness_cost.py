"""CPU cost of chainrun's loudness meter: milliseconds of CPU per second of stereo 48 kHz audio.

Generates 600 s of stereo white noise (about -20 dBFS RMS) in blocks of 65536 frames once, then
times LoudnessMeter.update() over all of it with time.process_time, five times, and prints the
median.  The target (issue 14) is at most 0.3 ms per second of audio.  A second line times the
same length of digital silence after 1 s of the noise (the filter state left by loud content decays
towards the subnormal range, where arithmetic is many times slower unless it is flushed), and its
ratio to the noise: about 1 when the flush works.

``--filter-floor`` also times what bounds the meter from below: the K-weighting filter alone
through ``scipy.signal.lfilter`` (the meter itself runs chainrun's optional compiled loop, which
squares as it filters, or scipy's loop without it), and, when a C compiler (``cc``) is at hand, a
probe built in a temporary folder: the same 4th-order recurrence in lfilter's operation order
(no FMA contraction) with the two channels interleaved in one loop, so that their chains of
dependent operations overlap.  The probe is checked bit for bit against lfilter and is not part of
chainrun; it is what the compiled loop in chainrun/dsp/_cascade.c grew from.

    PYTHONPATH=$PWD python benchmarks/loudness_cost.py [--seconds 600] [--repeats 5] [--filter-floor]
"""

from __future__ import annotations

import argparse
import ctypes
import os
import shutil
import statistics
import subprocess
import tempfile
import time

import numpy as np

from chainrun.meters.loudness import LoudnessMeter

RATE, CHANNELS, BLOCK = 48000, 2, 65536


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=600.0)
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--filter-floor", action="store_true", help="also time the K-weighting filter alone")
    args = ap.parse_args()
    frames = int(args.seconds * RATE)
    rng = np.random.default_rng(14)
    blocks = [0.1 * rng.standard_normal((CHANNELS, min(BLOCK, frames - i))) for i in range(0, frames, BLOCK)]
    noise = median_ms(blocks, args.seconds, args.repeats)
    print(f"loudness meter, {args.seconds:g} s stereo {RATE} Hz in blocks of {BLOCK}: "
          f"median {statistics.median(noise):.3f} ms CPU per second of audio "
          f"(runs: {', '.join(f'{v:.3f}' for v in noise)}; target 0.3)")
    quiet = [np.zeros_like(b) for b in blocks]
    loud = RATE // BLOCK + 1                                 # about 1 s of the noise first
    quiet[:loud] = blocks[:loud]
    silence = median_ms(quiet, args.seconds, args.repeats)
    print(f"digital silence after {loud * BLOCK / RATE:.1f} s of the noise, same length: median "
          f"{statistics.median(silence):.3f} ms (runs: {', '.join(f'{v:.3f}' for v in silence)}); "
          f"silence / noise {statistics.median(silence) / statistics.median(noise):.2f}")
    if args.filter_floor:
        filter_floor(blocks, args.seconds, args.repeats)


_PROBE_C = r"""
#include <stddef.h>
void kfilt2(const double *b, const double *a, const double *x0, const double *x1,
            double *y0, double *y1, double *z0, double *z1, size_t n)
{
    double p0 = z0[0], p1 = z0[1], p2 = z0[2], p3 = z0[3];
    double q0 = z1[0], q1 = z1[1], q2 = z1[2], q3 = z1[3];
    for (size_t k = 0; k < n; k++) {
        double u = x0[k], v = x1[k];
        double yu = p0 + b[0] * u, yv = q0 + b[0] * v;
        p0 = p1 + u * b[1] - yu * a[1];  q0 = q1 + v * b[1] - yv * a[1];
        p1 = p2 + u * b[2] - yu * a[2];  q1 = q2 + v * b[2] - yv * a[2];
        p2 = p3 + u * b[3] - yu * a[3];  q2 = q3 + v * b[3] - yv * a[3];
        p3 = u * b[4] - yu * a[4];       q3 = v * b[4] - yv * a[4];
        y0[k] = yu; y1[k] = yv;
    }
    z0[0] = p0; z0[1] = p1; z0[2] = p2; z0[3] = p3;
    z1[0] = q0; z1[1] = q1; z1[2] = q2; z1[3] = q3;
}
"""


def filter_floor(blocks: list, seconds: float, repeats: int) -> None:
    """Print the cost of the K-weighting filter alone: lfilter, and the compiled probe if it builds."""
    from scipy import signal
    meter = LoudnessMeter(RATE, CHANNELS)
    b, a = meter._kw.b, meter._kw.a                          # the meter's own 4th-order filter

    def timed(run) -> float:
        runs = []
        for _ in range(repeats):
            zi = np.zeros((CHANNELS, 4))
            t0 = time.process_time()
            for blk in blocks:
                zi = run(blk, zi)
            runs.append(1000.0 * (time.process_time() - t0) / seconds)
        return statistics.median(runs)

    ref = timed(lambda blk, zi: signal.lfilter(b, a, blk, axis=1, zi=zi)[1])
    print(f"K-weighting filter alone (scipy.signal.lfilter, both channels): median {ref:.3f} ms")
    cc = shutil.which("cc")
    if cc is None:
        print("compiled probe: no C compiler found")
        return
    with tempfile.TemporaryDirectory() as tmp:
        src, lib_path = os.path.join(tmp, "k.c"), os.path.join(tmp, "k.so")
        with open(src, "w") as fh:
            fh.write(_PROBE_C)
        build = subprocess.run([cc, "-O2", "-ffp-contract=off", "-fPIC", "-shared", "-o", lib_path, src],
                               capture_output=True, text=True)
        if build.returncode != 0:
            print(f"compiled probe: build failed: {build.stderr.strip().splitlines()[-1:]}")
            return
        lib = ctypes.CDLL(lib_path)
        ptr = ctypes.POINTER(ctypes.c_double)
        lib.kfilt2.argtypes = [ptr] * 8 + [ctypes.c_size_t]
        bb, aa = np.ascontiguousarray(b, dtype=np.float64), np.ascontiguousarray(a, dtype=np.float64)

        def probe(blk, zi, out=None):
            x = np.ascontiguousarray(blk)
            y = np.empty_like(x) if out is None else out
            p = [v.ctypes.data_as(ptr) for v in (bb, aa, x[0], x[1], y[0], y[1], zi[0], zi[1])]
            lib.kfilt2(*p, x.shape[1])
            return zi

        zi_ref, zi_probe, same = np.zeros((CHANNELS, 4)), np.zeros((CHANNELS, 4)), True
        for blk in blocks[:8]:
            y_ref, zi_ref = signal.lfilter(b, a, blk, axis=1, zi=zi_ref)
            y = np.empty_like(blk)
            zi_probe = probe(blk, zi_probe, y)
            same = same and np.array_equal(y, y_ref) and np.array_equal(zi_probe, zi_ref)
        cost = timed(probe)
        print(f"compiled probe (two channels in one loop; {'bit-identical to' if same else 'DIFFERS from'} "
              f"lfilter): median {cost:.3f} ms, {cost / ref:.2f} of lfilter")


def median_ms(blocks: list, seconds: float, repeats: int) -> list[float]:
    """CPU ms per second of audio of a fresh meter's update() over ``blocks``, one value per repeat."""
    extremes = [(b.max(axis=1), b.min(axis=1)) for b in blocks]   # as the reader hands them over
    runs = []
    for _ in range(repeats):
        meter = LoudnessMeter(RATE, CHANNELS)
        t0 = time.process_time()
        for b, ex in zip(blocks, extremes):
            meter.update(b, ex)
        meter.reading()
        runs.append(time.process_time() - t0)
    return [1000.0 * r / seconds for r in runs]


if __name__ == "__main__":
    main()
