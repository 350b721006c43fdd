"""Filtering one file's blocks: sosfilt with the state carried, and the runtime guard."""
from __future__ import annotations

import math

import numpy as np

from ..errors import AudioError

__all__ = ["_Filter"]


class _Filter:
    """sosfilt over channel-major blocks with the state carried, plus the runtime guard.

    Denormals: after loud content, a decaying filter state sinks towards the
    subnormal range, where arithmetic is many times slower, and can stay there.
    Every FLUSH_PERIOD frames, counted from the start of the file (so the result
    does not depend on the block size), state values below DENORMAL_FLOOR are set
    to exactly zero; they would contribute less than 1e-200 to any output sample.
    """

    FLUSH_PERIOD = 65536
    DENORMAL_FLOOR = 1e-200

    def __init__(self, sos: np.ndarray, channels: int, bound: float):
        from scipy.signal import sosfilt      # imported on first use: see chainrun/__init__.py
        self._sosfilt = sosfilt
        self.sos = np.array(sos, dtype=np.float64)
        self.zi = np.zeros((len(self.sos), channels, 2))
        self.bound = bound
        self.in_peak = 0.0
        self.out_peak = 0.0
        self.block_peak = 0.0

    def _filter(self, x: np.ndarray, frame0: int) -> np.ndarray:
        n, period = x.shape[-1], self.FLUSH_PERIOD
        end = frame0 + n
        boundary = (frame0 // period + 1) * period        # first flush point after frame0
        if boundary >= end:                               # none inside the block (the usual case)
            y, self.zi = self._sosfilt(self.sos, x, axis=-1, zi=self.zi)
            if boundary == end:
                self._flush()
            return y
        y = np.empty_like(x)
        start = 0
        for stop in list(range(boundary - frame0, n, period)) + [n]:
            y[:, start:stop], self.zi = self._sosfilt(self.sos, x[:, start:stop], axis=-1, zi=self.zi)
            if (frame0 + stop) % period == 0:
                self._flush()
            start = stop
        return y

    def _flush(self) -> None:
        self.zi[np.abs(self.zi) < self.DENORMAL_FLOOR] = 0.0

    def __call__(self, x: np.ndarray, frame0: int, x_peak: float) -> np.ndarray:
        """Filter one block; ``x_peak`` is max |x| of the block (the reader has it already)."""
        y = self._filter(x, frame0)
        self.block_peak = 0.0
        self.extremes = None
        if x.size:
            self.in_peak = max(self.in_peak, x_peak)
            his, los = y.max(axis=1), y.min(axis=1)
            self.extremes = (his, los)         # per channel, for the output meter
            hi, lo = float(his.max()), float(los.min())
            if not (math.isfinite(hi) and math.isfinite(lo)):
                raise AudioError(f"the filter output became non-finite near sample {frame0}; "
                                 "nothing was delivered")
            peak = max(hi, -lo)
            # Guard promise: |y| <= L1 * max|x| for every input; allow rounding.
            if peak > self.bound * self.in_peak * (1 + 1e-9) + 1e-12:
                raise AudioError(f"the filter output ({20 * math.log10(peak):+.2f} dBFS) passed the guard's "
                                 f"worst-case bound near sample {frame0}; nothing was delivered")
            self.block_peak = peak
            self.out_peak = max(self.out_peak, peak)
        return y
