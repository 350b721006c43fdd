"""Filtering one file's blocks: sosfilt with the state carried, and the runtime guard.

The filter is scipy.signal.sosfilt's compiled kernel, reached through :func:`chainrun.dsp.sosfilt`
(the one adapter; scipy.signal.sosfilt itself when the kernel cannot be loaded): the same bytes
without scipy.signal's import.

A chain without channel paths filters every channel with its one cascade. A chain with paths
(:class:`chainrun.design.Chain`, ``routing`` TRACKS) filters each group of tracks with its own
cascade and state; a MIDSIDE chain encodes the two channels to ``M = (L + R) / 2`` and
``S = (L - R) / 2`` in float64, filters each, and decodes ``L = M + S``, ``R = M - S``.
"""
from __future__ import annotations

import math

import numpy as np

from ..design import EVERY, MIDSIDE
from ..dsp import compiled, sosfilt
from ..dsp.flush import flush, stretches
from ..dsp.sums import row_extremes
from ..errors import AudioError

__all__ = ["_Filter"]


class _Filter:
    """sosfilt over channel-major blocks with the state carried, plus the runtime guard.

    Denormals: after loud content, a decaying filter state sinks towards the
    subnormal range, where arithmetic is many times slower, and can stay there.
    Every 65536 frames, counted from the start of the file (so the result does
    not depend on the block size), state values below 1e-200 are set to exactly
    zero; they would contribute less than 1e-200 to any output sample
    (chainrun/dsp/flush.py).
    """

    def __init__(self, sos, channels: int, bound: float):
        """``sos``: one cascade (S x 6) for every channel, or a Chain with channel paths
        (``Chain.filters``); ``bound``: the guard's worst-case peak gain of any output channel."""
        # The optional compiled cascade (dsp/compiled.py) when it is built: the same bytes as sosfilt,
        # in about half its time; else scipy's sosfilt kernel through the dsp adapter (module-level
        # ``sosfilt``, looked up here so that a test can stand in for it).
        self._sosfilt = compiled.cascade or sosfilt
        self.routing = getattr(sos, "routing", EVERY)
        self.bound = bound
        self.in_peak = 0.0
        self.out_peak = 0.0
        self.block_peak = 0.0
        if self.routing == EVERY:
            self.sos = np.array(getattr(sos, "sos", sos), dtype=np.float64)
            self.zi = np.zeros((len(self.sos), channels, 2))
            return
        chain = sos
        if self.routing == MIDSIDE:
            if channels != 2:
                raise AudioError(f"the recipe's mid/side sections need a two-channel file; this one has {channels}")
            groups = [(p, [k]) for k, p in enumerate(chain.paths)]     # mid, side: rows 0 and 1 of the M/S pair
        else:
            if channels < max(t for p in chain.paths for t in p.tracks):
                raise AudioError(f"the recipe names track {max(t for p in chain.paths for t in p.tracks)}; "
                                 f"this file has {channels} channel(s)")
            keys = [chain.path_of_track(c + 1).key for c in range(channels)]
            groups = [(p, [c for c in range(channels) if keys[c] == p.key]) for p in chain.paths]
        # per path: its cascade, its rows of the block, its carried state
        self._paths = [(np.array(p.sos, dtype=np.float64), np.array(rows), np.zeros((len(p.sos), len(rows), 2)))
                       for p, rows in groups if rows]

    def _filter(self, x: np.ndarray, frame0: int) -> np.ndarray:
        parts = stretches(frame0, x.shape[-1])
        if len(parts) == 1:                               # no flush point inside the block (the usual case)
            y = self._apply(x)
            if parts[0][2]:
                self._flush()
            return y
        y = np.empty_like(x)
        for start, stop, at_flush in parts:
            y[:, start:stop] = self._apply(x[:, start:stop])
            if at_flush:
                self._flush()
        return y

    def _apply(self, x: np.ndarray) -> np.ndarray:
        """One stretch of frames through the cascade(s), the state carried."""
        if self.routing == EVERY:
            y, self.zi = self._sosfilt(self.sos, x, zi=self.zi)
            return y
        if self.routing == MIDSIDE:
            x = np.stack([(x[0] + x[1]) * 0.5, (x[0] - x[1]) * 0.5])     # M, S
        y = np.empty_like(x)
        for k, (sos, rows, zi) in enumerate(self._paths):
            y[rows], zi_new = self._sosfilt(sos, x[rows], zi=zi)
            self._paths[k] = (sos, rows, zi_new)
        if self.routing == MIDSIDE:
            y = np.stack([y[0] + y[1], y[0] - y[1]])                     # L = M + S, R = M - S
        return y

    def _flush(self) -> None:
        if self.routing == EVERY:
            flush(self.zi)
            return
        for _, _, zi in self._paths:
            flush(zi)

    def __call__(self, x: np.ndarray, frame0: int, x_peak: float) -> np.ndarray:
        """Filter one block; ``x_peak`` is max |x| of the block (the reader has it already)."""
        y = self._filter(x, frame0)
        self.block_peak = 0.0
        self.extremes = None
        if x.size:
            self.in_peak = max(self.in_peak, x_peak)
            his, los = row_extremes(y)
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
