"""The numbers and words of a response picture: frequencies, responses, the guard's figures in words.

Responses come from :func:`scipy.signal.freqz_sos` (scipy is imported on first use).
"""
from __future__ import annotations

import math
import re
import warnings
from typing import TYPE_CHECKING

import numpy as np

from ..text import fmt_db

if TYPE_CHECKING:
    from ..design import Chain
    from ..guard import Assessment
    from ..recipe import Recipe, Section

__all__ = ["literal", "hz", "signed", "db_text", "describe_section", "freq_grid", "response_at", "to_db",
           "sections_of", "wrapped_phase", "pole_line", "guard_lines", "wrapped", "LOWEST_HZ", "POINTS"]

LOWEST_HZ = 10.0            # left edge of the frequency axis
POINTS = 1500               # log-spaced frequencies, plus each section's own freq


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
    """A short description of a recipe section: type and its main parameters."""
    p = section.params
    parts = [section.kind]
    if "freq" in p:
        parts.append(hz(float(p["freq"])))
    if "gain_db" in p:
        parts.append(f"{p['gain_db']:+g} dB")
    if "q" in p:
        parts.append(f"Q {p['q']:g}")
    if "bw" in p:
        parts.append(f"bw {p['bw']:g} oct")
    if "slope" in p and section.kind.endswith("shelf") and p.get("order", 2) == 2 and "q" not in p:
        parts.append(f"slope {p['slope']:g}")
    if "order" in p and section.kind in ("highpass", "lowpass") and "q" not in p:
        parts.append(f"order {p['order']}")
    if section.kind == "iir":
        parts.append(f"order {max(len(p['b']), len(p['a'])) - 1}")
    text = " ".join(parts)
    return f"{text} ({section.label})" if section.label else text


# --------------------------------------------------------------------------- numbers

def freq_grid(chain: Chain, recipe: Recipe, assessment: Assessment) -> np.ndarray:
    nyq = chain.rate / 2.0
    lo = min(LOWEST_HZ, nyq / 10.0)
    extra = [float(s.params["freq"]) for s in recipe.sections if "freq" in s.params]
    extra.append(float(assessment.max_gain_hz))
    f = np.concatenate([np.geomspace(lo, nyq, POINTS), [x for x in extra if lo < x < nyq]])
    return np.unique(f)


def response_at(sos: np.ndarray, freqs: np.ndarray, rate: int) -> np.ndarray:
    """Complex response of a cascade at ``freqs`` Hz (scipy.signal.freqz_sos)."""
    from scipy import signal

    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        _, h = signal.freqz_sos(sos, worN=freqs, fs=rate)
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
