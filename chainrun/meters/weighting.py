"""BS.1770-4 K-weighting at any sample rate (coefficients and the running filter), and the channel
weights G from a speaker mask.

Used by :class:`~chainrun.meters.loudness.LoudnessMeter`.
"""

from __future__ import annotations

import math

import numpy as np

from ..dsp.flush import flush, stretches
from ..dsp.kernel import lfilter_squares, lfilter_squares_two, sos2tf

__all__ = ["k_weighting_sos", "channel_weights", "KWeighting", "squares_together"]



# ITU-R BS.1770-4 Annex 1, Table 1 (stage 1, shelving filter) and Table 2 (stage 2, high-pass),
# both at 48 kHz: (b0, b1, b2), (1, a1, a2).
_K_TABLE_48K = {
    "shelf": ((1.53512485958697, -2.69169618940638, 1.19839281085285),
              (1.0, -1.69065929318241, 0.73248077421585)),
    "highpass": ((1.0, -2.0, 1.0),
                 (1.0, -1.99004745483398, 0.99007225036621)),
}
_TABLE_RATE = 48000

# WAVE_FORMAT_EXTENSIBLE speaker bit -> (position, BS.1770-4 weight G).
_MASK_WEIGHTS = {
    0x1: ("front left", 1.0), 0x2: ("front right", 1.0), 0x4: ("front centre", 1.0),
    0x8: ("LFE", 0.0),                                     # excluded, BS.1770-4 Annex 1
    0x10: ("back left", 1.41), 0x20: ("back right", 1.41),  # surrounds, BS.1770-4 Table 3
    0x40: ("front left of centre", 1.0), 0x80: ("front right of centre", 1.0),   # frontal
    0x100: ("back centre", 1.0),          # 180 deg: outside 60..120 deg (BS.1770-4 Annex 3, from memory)
    0x200: ("side left", 1.41), 0x400: ("side right", 1.41),                     # surrounds
    0x800: ("top centre", 1.0), 0x1000: ("top front left", 1.0), 0x2000: ("top front centre", 1.0),
    0x4000: ("top front right", 1.0), 0x8000: ("top back left", 1.0),
    0x10000: ("top back centre", 1.0), 0x20000: ("top back right", 1.0),   # elevated: 1.0 (Annex 3)
}
# Channel count -> weights when there is no mask (the common file orders).
_ORDER_WEIGHTS = {
    5: ((1.0, 1.0, 1.0, 1.41, 1.41), "no channel mask; 5 channels read as L, R, C, Ls, Rs"),
    6: ((1.0, 1.0, 1.0, 0.0, 1.41, 1.41), "no channel mask; 6 channels read as L, R, C, LFE, Ls, Rs"),
}


def k_weighting_sos(rate: int) -> np.ndarray:
    """The BS.1770 K-weighting filter for ``rate``, as a (2, 6) SOS array (shelf, then high-pass).

    Each stage of the 48 kHz table is mapped back to its analog prototype by
    inverting the bilinear transform, with the prewarp frequency at the
    stage's pole (natural) frequency -- about 1682 Hz for the shelf and
    38.1 Hz for the high-pass, both read off the table -- and mapped forward
    again by the bilinear transform prewarped at the same frequency for
    ``rate``.  At 48 kHz this returns the table to rounding (~1e-16).

    With ``K = 2*pi*f_w / tan(pi*f_w/fs)``, the biquad ``b, a`` has the
    prototype ``(b0-b1+b2)(s/K)**2 + 2(b0-b2)(s/K) + (b0+b1+b2)`` over the same
    form in ``a``; here ``tan(pi*f_w/48000) = sqrt((1+a1+a2)/(1-a1+a2))``.

    Parameters
    ----------
    rate : int
        Sample rate in Hz (> 0).

    Returns
    -------
    numpy.ndarray
        Shape (2, 6), rows ``[b0, b1, b2, 1, a1, a2]`` (scipy.signal's convention).

    References
    ----------
    .. [1] ITU-R BS.1770-4 (10/2015), Annex 1, Tables 1 and 2 (48 kHz coefficients).
    .. [2] A. V. Oppenheim and R. W. Schafer, "Discrete-Time Signal Processing",
       3rd ed., Prentice Hall, 2010, sec. 7.2.2 (bilinear transformation, prewarping).
    """
    if isinstance(rate, bool) or not isinstance(rate, (int, np.integer)) or rate <= 0:
        raise ValueError(f"rate must be a positive integer number of Hz, got {rate!r}")
    rows = []
    for b, a in _K_TABLE_48K.values():
        pb = (b[0] - b[1] + b[2], 2.0 * (b[0] - b[2]), b[0] + b[1] + b[2])   # (s/K)^2, s/K, 1
        pa = (a[0] - a[1] + a[2], 2.0 * (a[0] - a[2]), a[0] + a[1] + a[2])
        t48 = math.sqrt(pa[2] / pa[0])                       # tan(pi*f_w/48000)
        f_w = _TABLE_RATE / math.pi * math.atan(t48)
        r = 1.0 if rate == _TABLE_RATE else t48 / math.tan(math.pi * f_w / rate)   # K(rate)/K(48k)
        if not math.isfinite(r) or r <= 0.0:
            raise ValueError(f"rate {rate} Hz is too low for K-weighting (stage at {f_w:.1f} Hz)")

        def forward(p):
            r2 = p[0] * r * r
            return (r2 + p[1] * r + p[2], 2.0 * (p[2] - r2), r2 - p[1] * r + p[2])

        nb, na = forward(pb), forward(pa)
        rows.append([nb[0] / na[0], nb[1] / na[0], nb[2] / na[0], 1.0, na[1] / na[0], na[2] / na[0]])
    return np.array(rows)


def channel_weights(channels: int, channel_mask: int | None = None) -> tuple[tuple[float, ...], str]:
    """BS.1770-4 channel weights G and a note of how they were chosen.

    With a WAVE_FORMAT_EXTENSIBLE ``channel_mask`` the channels take the set
    bits in order: front L/R/C (0x1, 0x2, 0x4) and front-of-centre 1.0, LFE
    (0x8) 0.0 (left out), back L/R (0x10, 0x20) and side L/R (0x200, 0x400)
    1.41; back centre and the elevated positions 1.0 (BS.1770-4 Annex 3 gives
    1.41 only to positions 60..120 degrees off the front at low elevation).
    Channels beyond the mask's set bits get 1.0.  Without a mask: 5 channels
    are L, R, C, Ls, Rs; 6 channels are L, R, C, LFE, Ls, Rs (the order of
    WAVE_FORMAT_EXTENSIBLE's 5.1); every other count gets 1.0 on each channel.
    """
    if channel_mask is None:
        if channels in _ORDER_WEIGHTS:
            return _ORDER_WEIGHTS[channels]
        return (1.0,) * channels, f"no channel mask; all {channels} channels weighted 1.0"
    if isinstance(channel_mask, bool) or not isinstance(channel_mask, (int, np.integer)) or channel_mask < 0:
        raise ValueError(f"channel_mask must be an integer >= 0, got {channel_mask!r}")
    weights, names = [], []
    bit = 1
    while len(weights) < channels and bit <= int(channel_mask):
        if int(channel_mask) & bit:
            name, g = _MASK_WEIGHTS.get(bit, (f"speaker bit 0x{bit:x}", 1.0))
            weights.append(g)
            names.append(name)
        bit <<= 1
    extra = channels - len(weights)
    weights += [1.0] * extra
    note = f"channel mask 0x{int(channel_mask):x}: " + ", ".join(
        f"{n} {g:g}" for n, g in zip(names, weights))
    if extra:
        note += f"; {extra} channel(s) beyond the mask 1.0"
    return tuple(weights), note


class KWeighting:
    """The K-weighting of a meter's channels, run block by block with its state: the squares of its output.

    Both stages as one 4th-order filter: one pass over the samples instead of two (the readings
    move by less than 1e-9 LU from the cascade's, at 192 kHz; 1e-12 LU at 48 kHz). The loop is
    the compiled lfilter loop (chainrun.dsp), lfilter's operations; without it, scipy's.
    """

    def __init__(self, rate: int, rows: int) -> None:
        self.b, self.a = sos2tf(k_weighting_sos(rate))
        self.zi = np.zeros((rows, len(self.a) - 1))

    def squares(self, x: np.ndarray, frame0: int) -> np.ndarray:
        """The squares of the K-weighted block ``x`` (rows x frames) whose first frame is ``frame0``."""
        (y,), (self.zi,) = _squares(self.b, self.a, [x], [self.zi], frame0)
        return y


def _filter(b, a, xs, zis):
    """lfilter_squares of one block, or of two of the same frames in one pass."""
    if len(xs) == 1:
        y, z = lfilter_squares(b, a, xs[0], zis[0])
        return [y], [z]
    y1, z1, y2, z2 = lfilter_squares_two(b, a, xs[0], zis[0], xs[1], zis[1])
    return [y1, y2], [z1, z2]


def _squares(b: np.ndarray, a: np.ndarray, xs: list, zis: list, frame0: int) -> tuple[list, list]:
    """The squares of the K-weighted blocks ``xs`` (one, or two of the same frames) and the states
    after them; at the flush points of chainrun/dsp/flush.py (every 65536 frames from the start,
    the same points whatever the blocks) state values below 1e-200 become zero (measured: a file
    of digital silence took 4.8 times as long as noise without it).
    """
    parts = stretches(frame0, xs[0].shape[1])
    if len(parts) == 1:                     # no flush point inside the block (the usual case)
        ys, zis = _filter(b, a, xs, zis)
        if parts[0][2]:                     # blocks of the period's size end on a flush point: no copy
            for z in zis:
                flush(z)
        return ys, zis
    ys = [np.empty_like(x) for x in xs]
    for start, stop, at_flush in parts:
        part, zis = _filter(b, a, [x[:, start:stop] for x in xs], zis)
        for y, p in zip(ys, part):
            y[:, start:stop] = p
        if at_flush:
            for z in zis:
                flush(z)
    return ys, zis


def squares_together(first: KWeighting, x1: np.ndarray, second: KWeighting, x2: np.ndarray,
                     frame0: int) -> tuple[np.ndarray, np.ndarray]:
    """``first.squares(x1, frame0)`` and ``second.squares(x2, frame0)`` in one pass: the compiled
    loop runs the rows of both side by side, four in the time of two. Every row is filtered on
    its own, so the squares and states are the same bits as apart. The two must have the same
    filter (the same rate) and blocks of the same frames."""
    (y1, y2), (first.zi, second.zi) = _squares(first.b, first.a, [x1, x2], [first.zi, second.zi], frame0)
    return y1, y2
