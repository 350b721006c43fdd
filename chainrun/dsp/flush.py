"""Subnormal filter state, set to zero at fixed points of a stream.

After loud content, silence leaves a recursive filter's state decaying into the subnormal range,
where IEEE 754 arithmetic is many times slower on common processors, and it can stay there. The
renderer's filter (chainrun.render.filter), the loudness meter's K-weighting
(chainrun.meters.weighting) and the guard's impulse run (chainrun.impulse) therefore set state
values below DENORMAL_FLOOR to zero; such a value adds less than 1e-200 to any sample. The
renderer and the meter do it every FLUSH_PERIOD frames counted from the start of the stream, so
the result does not depend on how the stream is cut into blocks (:func:`stretches`).
"""
from __future__ import annotations

import numpy as np

__all__ = ["FLUSH_PERIOD", "DENORMAL_FLOOR", "stretches", "flush"]

FLUSH_PERIOD = 65536
DENORMAL_FLOOR = 1e-200


def stretches(frame0: int, n: int, period: int = FLUSH_PERIOD) -> list[tuple[int, int, bool]]:
    """The block of ``n`` frames from frame ``frame0`` cut at the flush points (multiples of ``period``
    from the start of the stream): ``(start, stop, flush_after)`` per stretch, block-relative.
    Usually one stretch, the whole block."""
    boundary = (frame0 // period + 1) * period          # first flush point after frame0
    if boundary >= frame0 + n:                          # none inside the block, at most one at its end
        return [(0, n, boundary == frame0 + n)]
    out, start = [], 0
    for stop in list(range(boundary - frame0, n, period)) + [n]:
        out.append((start, stop, (frame0 + stop) % period == 0))
        start = stop
    return out


def flush(z: np.ndarray) -> None:
    """Set the values of ``z`` below DENORMAL_FLOOR in magnitude to zero, in place."""
    z[np.abs(z) < DENORMAL_FLOOR] = 0.0
