"""The numbers and words of a response picture: frequencies, responses, the guard's figures in words.

Responses come from :func:`scipy.signal.freqz_sos` (:func:`response_at`, scipy imported on first use)
or from numpy alone (:func:`response_np`, for the report's pictures). The colours, ticks and axis range
here are shared by the matplotlib figure (:mod:`chainrun.report.figure`) and the report's hand-made SVG
(:mod:`chainrun.report.svgchart`); nothing here imports matplotlib.
"""
from __future__ import annotations

import math
import re
import warnings
from typing import TYPE_CHECKING

import numpy as np

from ..dsp import unique_sorted
from ..text import fmt_db

if TYPE_CHECKING:
    from ..design import Chain
    from ..guard import Assessment
    from ..recipe import Recipe, Section

__all__ = ["literal", "hz", "signed", "db_text", "describe_section", "freq_grid", "response_at", "response_np",
           "to_db", "sections_of", "wrapped_phase", "pole_line", "guard_lines", "wrapped", "magnitude_range",
           "label_spot", "LOWEST_HZ", "POINTS", "DEEPEST_DB", "SECTION_COLOURS", "SECTION_DASHES", "CHAIN_COLOUR",
           "ACCEPTED_COLOUR", "REJECTED_COLOUR", "GUIDE_COLOUR", "FREQ_TICKS", "MINOR_TICKS"]

LOWEST_HZ = 10.0            # left edge of the frequency axis
POINTS = 1500               # log-spaced frequencies, plus each section's own freq
DEEPEST_DB = -48.0          # the magnitude axis never goes further down than this

# Colour-blind-safe palette (Okabe & Ito, "Color Universal Design", 2008), darker
# members first; each section also gets its own dash pattern and a number, so
# nothing depends on telling colours apart. Dashes are matplotlib's (offset, (on, off, ...))
# in line widths.
SECTION_COLOURS = ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#8C7A00")
SECTION_DASHES = ("-", (0, (5, 2)), (0, (1, 1.5)), (0, (6, 2, 1, 2)), (0, (3, 1, 1, 1, 1, 1)))
CHAIN_COLOUR = "#1b1b1b"
ACCEPTED_COLOUR = "#006e4f"         # bluish green, darkened for text contrast
REJECTED_COLOUR = "#b34700"         # vermillion, darkened for text contrast
GUIDE_COLOUR = "#5a5a5a"
FREQ_TICKS = (10, 20, 50, 100, 200, 500, 1000, 2000, 5000, 10000, 20000, 50000, 100000, 200000)
MINOR_TICKS = tuple(m * 10 ** e for e in range(1, 6) for m in (3, 4, 6, 7, 8, 9))


# --------------------------------------------------------------------------- text helpers

def literal(text: str) -> str:
    """User text made safe for matplotlib: ``$`` escaped (no mathtext), control characters shown."""
    text = re.sub(r"[\x00-\x1f\x7f]", lambda m: repr(m.group())[1:-1], str(text))
    return text.replace("$", r"\$")


def hz(f: float) -> str:
    if not math.isfinite(f):
        return "-"
    if f >= 1000:
        return f"{f / 1000:.3g} kHz"
    return f"{f:.3g} Hz" if f >= 1 else f"{f:.2g} Hz"


def signed(x: float, digits: int = 2) -> str:
    """``+1.25``; never ``-0.00``."""
    if abs(x) < 0.5 * 10 ** -digits:
        x = 0.0
    return f"{x:+.{digits}f}"


def db_text(x: float) -> str:
    """``+1.25 dB`` (never ``-0.00``), ``-inf dB``; an unbounded gain says so."""
    if x == math.inf:
        return "+inf dB (unbounded)"
    return fmt_db(0.0 if abs(x) < 0.005 else x)


def describe_section(section: Section) -> str:
    """A short description of a recipe section (the catalogue's, :func:`chainrun.section_types.describe`)."""
    from ..section_types import describe

    return describe(section)


# --------------------------------------------------------------------------- numbers

def freq_grid(chain: Chain, recipe: Recipe, assessment: Assessment, points: int = POINTS) -> np.ndarray:
    """``points`` log-spaced frequencies from 10 Hz (or a tenth of Nyquist) to Nyquist, with each
    section's own ``freq`` and the guard's max-gain frequency added, sorted."""
    nyq = chain.rate / 2.0
    lo = min(LOWEST_HZ, nyq / 10.0)
    extra = [float(s.params["freq"]) for s in recipe.sections if "freq" in s.params]
    extra.append(float(assessment.max_gain_hz))
    f = np.concatenate([np.geomspace(lo, nyq, points), [x for x in extra if lo < x < nyq]])
    return unique_sorted(f)


def response_at(sos: np.ndarray, freqs: np.ndarray, rate: int) -> np.ndarray:
    """Complex response of a cascade at ``freqs`` Hz (scipy.signal.freqz_sos)."""
    from scipy import signal

    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        _, h = signal.freqz_sos(sos, worN=freqs, fs=rate)
    return h


def response_np(sos: np.ndarray, freqs: np.ndarray, rate: int) -> np.ndarray:
    """Complex response of a cascade at ``freqs`` Hz, from numpy alone.

    Each row's ``H(z) = (b0 + b1 z^-1 + b2 z^-2) / (a0 + a1 z^-1 + a2 z^-2)`` is evaluated
    on the unit circle, ``z^-1 = exp(-j 2 pi f / rate)``, and the rows are multiplied.
    A pole on the unit circle gives ``inf`` or ``nan`` there, without a warning.
    """
    sos = np.atleast_2d(np.asarray(sos, dtype=float))
    zi = np.exp(-2j * np.pi * np.asarray(freqs, dtype=float) / rate)
    zi2 = zi * zi
    h = np.ones(zi.shape, dtype=complex)
    with np.errstate(all="ignore"):
        for b0, b1, b2, a0, a1, a2 in sos:
            h *= (b0 + b1 * zi + b2 * zi2) / (a0 + a1 * zi + a2 * zi2)
    return h


def to_db(h: np.ndarray) -> np.ndarray:
    with np.errstate(all="ignore"):
        db = 20.0 * np.log10(np.abs(h))
    return np.where(np.isnan(db), np.inf, db)


def sections_of(recipe: Recipe, chain: Chain) -> list[tuple[int, Section, np.ndarray]]:
    """(position in the resolved chain, section, its SOS rows) for each recipe section."""
    rows = np.asarray(chain.rows)
    out = []
    for i, section in enumerate(recipe.sections):
        mine = np.nonzero(rows == i)[0]
        if mine.size:
            out.append((i, section, chain.sos[mine]))
    return out


def magnitude_range(chain_db: np.ndarray, parts, recipe: Recipe, assessment: Assessment) -> tuple[float, float]:
    """(bottom, top) of the magnitude axis in dB for the chain and its sections' ``(i, section, dB)``."""
    finite = np.concatenate([d[np.isfinite(d)] for d in [chain_db] + [p[2] for p in parts]])
    data_top = float(finite.max()) if finite.size else 0.0
    data_bottom = float(finite.min()) if finite.size else 0.0
    top = max(data_top, 0.0)
    for mark in (recipe.guard.max_gain_db, assessment.peak_gain_db):
        if math.isfinite(mark) and mark <= top + 18.0:
            top = max(top, mark)
    top = 3.0 * math.ceil((top + 2.5) / 3.0)
    # Deep dips (a notch's centre) run off the bottom, but never the chain as a whole: the axis
    # reaches at least 30 dB below the chain's highest point (a chain that only attenuates a lot).
    lowest = min(DEEPEST_DB, 6.0 * math.floor((data_top - 30.0) / 6.0))
    bottom = max(lowest, 6.0 * math.floor((min(data_bottom, -6.0) - 2.0) / 6.0))
    return min(bottom, top - 12.0), top


def label_spot(freqs: np.ndarray, db: np.ndarray, k: int, bottom: float, top: float, freq: float | None = None):
    """Where to number a section's curve: (frequency, dB, vertical offset in points or None).

    At the section's own frequency ``freq`` (its ``freq``, which :func:`freq_grid` puts on the grid), on its
    curve: above it where the curve is at or above 0 dB, below it where it is under. A section without a
    frequency on the axis (a gain, a raw ``iir``) is numbered at its largest boost if it boosts by 1 dB or
    more (or more than it cuts), else at its deepest cut; a flat one at a staggered place along the axis.
    None means the curve runs off the bottom there (a notch's centre): number it beside the dip.
    """
    pad = 0.05 * (top - bottom)
    if freq is not None and freqs[0] <= freq <= freqs[-1]:
        j = int(np.argmin(np.abs(freqs - freq)))
        if np.isfinite(db[j]):
            v = float(np.clip(db[j], bottom + pad, top - pad))
            return float(freqs[j]), v, (None if db[j] <= bottom + pad else 10 if db[j] >= 0 else -10)
    logf = np.log(freqs)
    lo, hi = logf[0], logf[-1]
    inside = (logf > lo + 0.03 * (hi - lo)) & (logf < hi - 0.03 * (hi - lo)) & np.isfinite(db)
    if not inside.any():
        return float(freqs[len(freqs) // 2]), 0.0, 0
    vals = np.where(inside, np.clip(db, bottom + pad, top - pad), np.nan)
    if float(np.nanmax(vals) - np.nanmin(vals)) < 0.5:
        x = math.exp(lo + (0.1 + 0.1 * (k % 9)) * (hi - lo))
        j = int(np.argmin(np.abs(freqs - x)))
        return float(freqs[j]), float(vals[j]), 9 if vals[j] >= 0 else -9
    if float(np.nanmax(vals)) >= min(1.0, -float(np.nanmin(vals))):
        j = int(np.nanargmax(vals))
        return float(freqs[j]), float(vals[j]), 10
    j = int(np.nanargmin(vals))
    return float(freqs[j]), float(vals[j]), None if vals[j] <= bottom + pad else -10


def wrapped_phase(h: np.ndarray) -> np.ndarray:
    """Phase in degrees, -180..180, with NaN where it wraps (no vertical strokes) and where
    the magnitude is zero (a notch's centre, a low-pass at Nyquist), where phase has no meaning."""
    deg = np.degrees(np.angle(h)).astype(float)
    mag = np.abs(h)
    finite = np.isfinite(mag)
    top = float(mag[finite].max()) if finite.any() else 0.0
    deg[~finite | (mag <= 1e-9 * top)] = np.nan
    jumps = np.abs(np.diff(deg)) > 180.0
    deg[1:][jumps] = np.nan
    return deg


def pole_line(recipe: Recipe, assessment: Assessment) -> str:
    margin = recipe.guard.pole_margin
    limit = 1.0 - margin
    r = assessment.max_pole_radius
    where = "inside the limit" if r <= limit else "OUTSIDE the limit: unstable"
    return f"largest pole radius {r:.9f}; limit {limit:.9f} (1 - pole_margin {margin:g}); {where}"


def guard_lines(recipe: Recipe, assessment: Assessment) -> list[str]:
    g = recipe.guard
    lines = [pole_line(recipe, assessment)]
    lines.append(f"max gain {db_text(assessment.max_gain_db)} at {hz(assessment.max_gain_hz)}; "
                 f"limit guard.max_gain_db {g.max_gain_db:+g} dB")
    exact = "" if assessment.peak_gain_exact or not math.isfinite(assessment.peak_gain_db) else \
        " (its long tail estimated)"
    lines.append(f"worst-case peak gain {db_text(assessment.peak_gain_db)}{exact}; the L1 norm of the impulse "
                 "response: no signal's sample peak grows by more")
    if math.isfinite(assessment.decay_s):
        decay = (f"{assessment.decay_s * 1000:.1f} ms" if assessment.decay_s < 1 else f"{assessment.decay_s:.2f} s")
        lines.append(f"60 dB decay {'' if assessment.decay_exact else 'over '}{decay}; "
                     f"warning above guard.max_decay_s {g.max_decay_s:g} s")
    else:
        lines.append("60 dB decay never: the impulse response does not die away")
    for p in assessment.problems:
        lines.append(f"{p.severity}: {p.message}")
    return lines


def wrapped(text: str, width: int) -> list[str]:
    import textwrap

    return textwrap.wrap(text, width, subsequent_indent="    ", break_long_words=True) or [""]
