"""CPU cost of chainrun's loudness meter: milliseconds of CPU per second of stereo 48 kHz audio.

Generates 600 s of stereo white noise (about -20 dBFS RMS) in blocks of 65536 frames once, then
times LoudnessMeter.update() over all of it with time.process_time, five times, and prints the
median.  The target (issue 14) is at most 0.3 ms per second of audio.  A second line times the
same length of digital silence after 1 s of the noise (the filter state left by loud content decays
towards the subnormal range, where arithmetic is many times slower unless it is flushed), and its
ratio to the noise: about 1 when the flush works.

    PYTHONPATH=$PWD python benchmarks/loudness_cost.py [--seconds 600] [--repeats 5]
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np

from chainrun.meters.loudness import LoudnessMeter

RATE, CHANNELS, BLOCK = 48000, 2, 65536


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=600.0)
    ap.add_argument("--repeats", type=int, default=5)
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
