"""Float samples -> the codes of the output's subtype: scale, TPDF dither, round, hard clip.

Notes
-----
Integer output is quantised here, not by libsndfile: ``round(x * 2**(bits-1)
+ dither)`` then hard-clipped to the code range, so writing +2.0 to PCM_16 gives
32767 and can never wrap around. Reading PCM with soundfile divides by
``2**(bits-1)``, so a file filtered by a 0 dB chain without dither comes back
bit-identical.
"""
from __future__ import annotations

import hashlib
import math

import numpy as np

from ..dsp import compiled as _compiled
from .formats import SUBTYPES

__all__ = ["Quantiser", "wants_dither", "seed_for"]


def _bits_of(subtype: str) -> float:
    bits = SUBTYPES.get(subtype, (None,))[0]
    return float(bits) if bits else math.inf


def wants_dither(policy_dither: str, in_subtype: str, out_subtype: str) -> bool:
    """TPDF dither: always for ``tpdf``; for ``auto`` when integer output has fewer bits than the input."""
    out_bits = SUBTYPES[out_subtype][0]
    if out_bits is None or policy_dither == "none":
        return False
    if policy_dither == "tpdf":
        return True
    return _bits_of(in_subtype) > out_bits


def seed_for(key: str) -> int:
    """Dither seed from a file's relative path, so reruns are bit-identical."""
    return int.from_bytes(hashlib.sha256(key.encode("utf-8", "surrogateescape")).digest()[:8], "little")


class Quantiser:
    """Float (channels, frames) -> the array handed to libsndfile, with optional TPDF dither.

    TPDF dither is the difference of two independent uniform values of one LSB,
    triangular on (-1, +1) LSB; draws are made frame by frame, channel by channel,
    so the sequence does not depend on the block size.
    """

    def __init__(self, subtype: str, dither: bool, seed: int):
        self.bits, _, self.dtype, self.shift = SUBTYPES[subtype]
        self.rng = np.random.Generator(np.random.PCG64(seed)) if dither and self.bits else None
        if self.bits:
            self.scale = float(2 ** (self.bits - 1))
            self.lo, self.hi = -self.scale, self.scale - 1.0
            # Largest |y| written without a clip: the top code, less the 1 LSB a dither draw may add.
            self.limit = (self.hi - (1.0 if self.rng is not None else 0.0)) / self.scale
        else:
            self.limit = math.inf
        self.clipped = 0        # samples hard-clipped at full scale by all calls so far

    def codes(self, y: np.ndarray, counted: np.ndarray | None = None,
              peak: float | None = None) -> tuple[np.ndarray, int]:
        """(frames x channels integer codes, or float samples for float output; samples clipped).

        Integer codes are the plain two's-complement values (-2**(bits-1) .. 2**(bits-1) - 1),
        not yet shifted into the top bits of the word libsndfile takes. ``counted``
        (channels x frames, bool) marks samples already counted as clipped (by the clip
        policy); they are not counted again here. The count is also added to ``clipped``.
        ``peak``, max |y| when the caller knows it, lets the search for codes out of
        range be skipped when none can be: a dither draw moves a value by less than
        1 LSB and rounding keeps a value below the top code at or below it.
        """
        if self.bits is None:
            return np.ascontiguousarray(y.T, dtype=self.dtype), 0
        v = np.empty(y.shape[::-1])            # (frames, channels), C-contiguous: the interleaved layout
        np.multiply(y.T, self.scale, out=v)
        r = self.rng.random((v.shape[0], v.shape[1], 2)) if self.rng is not None else None
        clipped = self._round(v, r, None if counted is None else counted.T, self._safe(peak))
        self.clipped += clipped
        return v.astype(np.int32 if self.dtype == np.int32 else np.int16), clipped

    def _safe(self, peak: float | None) -> bool:
        """True when ``peak`` (max |y|, if known) shows that no code can leave the range."""
        return peak is not None and peak * self.scale + (1.0 if self.rng is not None else 0.0) <= self.hi

    def _round(self, v: np.ndarray, r: np.ndarray | None, counted: np.ndarray | None, safe: bool) -> int:
        """Dither (``r[..., 0] - r[..., 1]``), round and hard-clip scaled samples ``v`` in place.

        Returns how many samples were out of range, leaving out those ``counted``
        marks (same shape as ``v``); with ``safe`` the search is skipped.
        """
        if r is not None:
            v += r[..., 0]
            v -= r[..., 1]
        np.rint(v, out=v)
        if not v.size or safe or (v.max() <= self.hi and v.min() >= self.lo):
            return 0
        out_of_range = (v > self.hi) | (v < self.lo)
        if counted is not None:
            out_of_range &= ~counted
        np.clip(v, self.lo, self.hi, out=v)
        return int(np.count_nonzero(out_of_range))

    def packed24(self, y: np.ndarray, counted: np.ndarray | None = None, peak: float | None = None,
                 big_endian: bool = False, out: np.ndarray | None = None) -> np.ndarray:
        """PCM_24 only: the packed 3-byte samples of ``y`` (channels x frames), interleaved.

        The codes are those of :meth:`codes`: the same dither draws, rounding,
        clipping and count, in the same order. Each channel is quantised as one
        contiguous row, and its codes are stored three bytes apart with a stride of
        three bytes per channel (low byte first, or high byte first for AIFF), so no
        interleaved int32 array is formed. The bytes go into ``out`` (uint8) when it
        is large enough, else into a new array; the array is returned and its first
        ``3 * y.size`` bytes are the samples. Each row goes through the compiled loop
        (``chainrun.dsp.compiled.pack24_row``, the same bytes and count) when it is built.
        """
        if self.bits != 24:
            raise ValueError("packed24 is for PCM_24")
        channels, frames = y.shape
        nbytes = 3 * channels * frames
        if out is None or out.size < nbytes:
            out = np.empty(nbytes, dtype=np.uint8)
        r = self.rng.random((frames, channels, 2)) if self.rng is not None else None
        safe = self._safe(peak)
        pack = _compiled.pack24_row
        if (pack is None or y.dtype != np.float64 or out.dtype != np.uint8 or out.ndim != 1
                or not out.flags.c_contiguous or (counted is not None and counted.dtype != np.bool_)):
            pack = None
        scratch = None
        clipped = 0
        for c in range(channels):
            row, marks = y[c], None if counted is None else counted[c]
            if pack is not None:
                # the compiled loop: the same operations in the same order (_cascade.c); -1 for a row
                # holding NaN or infinity, which the numpy form below then does as it always has
                n = pack(np.ascontiguousarray(row), self.scale, r, c,
                         None if marks is None else np.ascontiguousarray(marks), safe,
                         self.lo, self.hi, out, 3 * c, 3 * channels, big_endian)
                if n >= 0:
                    clipped += n
                    continue
            if scratch is None:
                scratch = np.empty(frames), np.empty(frames, dtype=np.int32), np.empty(frames, dtype=np.int32)
            clipped += self._pack_row(row, None if r is None else r[:, c], marks, safe, out, c, channels,
                                      big_endian, scratch)
        self.clipped += clipped
        return out

    def _pack_row(self, row: np.ndarray, r: np.ndarray | None, counted: np.ndarray | None, safe: bool,
                  out: np.ndarray, c: int, channels: int, big_endian: bool, scratch) -> int:
        """numpy's form of one channel of :meth:`packed24`: scale, :meth:`_round`, store the three bytes."""
        v, code, part = scratch
        nbytes = 3 * channels * len(row)
        places = (2, 1, 0) if big_endian else (0, 1, 2)      # where bytes 0 (lowest), 1, 2 of a code go
        np.multiply(row, self.scale, out=v)
        clipped = self._round(v, r, counted, safe)
        np.copyto(code, v, casting="unsafe")                # whole numbers in range: exact
        for k, place in enumerate(places):
            byte = code if k == 0 else np.right_shift(code, 8 * k, out=part)
            # int32 -> uint8 keeps the low eight bits (two's complement), the byte wanted
            np.copyto(out[3 * c + place:nbytes:3 * channels], byte, casting="unsafe")
        return clipped

    def __call__(self, y: np.ndarray, counted: np.ndarray | None = None,
                 peak: float | None = None) -> tuple[np.ndarray, int]:
        """Returns (frames x channels array to hand to libsndfile, number of samples clipped at full scale).

        As :meth:`codes`, with 24-bit codes shifted into the top bits of an int32
        (libsndfile takes the top 24 bits of int32 data for PCM_24).
        """
        data, clipped = self.codes(y, counted, peak)
        if self.shift:
            data <<= self.shift
        return data, clipped
