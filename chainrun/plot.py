"""Pictures of a designed chain: magnitude and phase, with the guard's figures.

One figure per chain at one sample rate:

* top panel: magnitude of the whole chain in dB over a logarithmic frequency
  axis from 10 Hz to Nyquist (thick dark line), each recipe section drawn
  faintly beneath it (the rows of a section, grouped by ``Chain.rows``,
  multiplied together), numbered on the curve and named in the key; the
  guard's max-gain point, its ``max_gain_db`` limit and the worst-case peak
  gain (L1 norm of the impulse response) marked and written out;
* lower panel: phase of the whole chain in degrees, wrapped to -180..+180
  (phase rather than group delay: it stays bounded and readable through the
  notches, whose group delay is singular at their centre);
* a footer stating the verdict in words (accepted / REJECTED), the largest
  pole radius against ``1 - pole_margin``, the 60 dB decay time and every
  problem the guard found.

Responses come from :func:`scipy.signal.freqz_sos`. Each figure is drawn on its
own Agg canvas (matplotlib's object-oriented API; pyplot and its global state
are never imported, and the process-wide backend is left alone), so nothing
needs a display.

Notes
-----
User text (recipe names, section labels) is drawn literally: a ``$`` in a
label is escaped so matplotlib never reads it as mathematics.
"""
from __future__ import annotations

import io
import math
import os
import re
import secrets
import warnings
from html import escape

import numpy as np
from matplotlib import rc_context
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import FixedLocator, FuncFormatter, NullFormatter
from scipy import signal

from .design import Chain
from .guard import Assessment
from .recipe import Recipe, Section

__all__ = ["response_figure", "save_response", "response_svg"]

LOWEST_HZ = 10.0            # left edge of the frequency axis
POINTS = 1500               # log-spaced frequencies, plus each section's own freq
DEEPEST_DB = -48.0          # the magnitude axis never goes further down than this
PNG_DPI = 100
FIG_WIDTH_IN = 10.0         # the height follows from the number of sections and guard lines

# Colour-blind-safe palette (Okabe & Ito, "Color Universal Design", 2008), darker
# members first; each section also gets its own dash pattern and a number, so
# nothing depends on telling colours apart.
_SECTION_COLOURS = ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#8C7A00")
_SECTION_DASHES = ("-", (0, (5, 2)), (0, (1, 1.5)), (0, (6, 2, 1, 2)), (0, (3, 1, 1, 1, 1, 1)))
_CHAIN_COLOUR = "#1b1b1b"
_ACCEPTED_COLOUR = "#006e4f"        # bluish green, darkened for text contrast
_REJECTED_COLOUR = "#b34700"        # vermillion, darkened for text contrast
_GUIDE_COLOUR = "#5a5a5a"
_FREQ_TICKS = (10, 20, 50, 100, 200, 500, 1000, 2000, 5000, 10000, 20000, 50000, 100000, 200000)
_MINOR_TICKS = tuple(m * 10 ** e for e in range(1, 6) for m in (3, 4, 6, 7, 8, 9))


# --------------------------------------------------------------------------- text helpers

def _literal(text: str) -> str:
    """User text made safe for matplotlib: ``$`` escaped (no mathtext), control characters shown."""
    text = re.sub(r"[\x00-\x1f\x7f]", lambda m: repr(m.group())[1:-1], str(text))
    return text.replace("$", r"\$")


def _hz(f: float) -> str:
    if not math.isfinite(f):
        return "-"
    if f >= 1000:
        return f"{f / 1000:.3g} kHz"
    return f"{f:.3g} Hz" if f >= 1 else f"{f:.2g} Hz"


def _signed(x: float, digits: int = 2) -> str:
    """``+1.25``; never ``-0.00``."""
    if abs(x) < 0.5 * 10 ** -digits:
        x = 0.0
    return f"{x:+.{digits}f}"


def _db(x: float) -> str:
    if math.isnan(x):
        return "-"
    if math.isinf(x):
        return "+inf dB (unbounded)" if x > 0 else "-inf dB"
    return f"{_signed(x)} dB"


def describe_section(section: Section) -> str:
    """A short description of a recipe section: type and its main parameters."""
    p = section.params
    parts = [section.kind]
    if "freq" in p:
        parts.append(_hz(float(p["freq"])))
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

def _grid(chain: Chain, recipe: Recipe, assessment: Assessment) -> np.ndarray:
    nyq = chain.rate / 2.0
    lo = min(LOWEST_HZ, nyq / 10.0)
    extra = [float(s.params["freq"]) for s in recipe.sections if "freq" in s.params]
    extra.append(float(assessment.max_gain_hz))
    f = np.concatenate([np.geomspace(lo, nyq, POINTS), [x for x in extra if lo < x < nyq]])
    return np.unique(f)


def _response(sos: np.ndarray, freqs: np.ndarray, rate: int) -> np.ndarray:
    """Complex response of a cascade at ``freqs`` Hz (scipy.signal.freqz_sos)."""
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        _, h = signal.freqz_sos(sos, worN=freqs, fs=rate)
    return h


def _to_db(h: np.ndarray) -> np.ndarray:
    with np.errstate(all="ignore"):
        db = 20.0 * np.log10(np.abs(h))
    return np.where(np.isnan(db), np.inf, db)


def _sections(recipe: Recipe, chain: Chain) -> list[tuple[int, Section, np.ndarray]]:
    """(position in the resolved chain, section, its SOS rows) for each recipe section."""
    rows = np.asarray(chain.rows)
    out = []
    for i, section in enumerate(recipe.sections):
        mine = np.nonzero(rows == i)[0]
        if mine.size:
            out.append((i, section, chain.sos[mine]))
    return out


def _wrapped_phase(h: np.ndarray) -> np.ndarray:
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


# --------------------------------------------------------------------------- figure

def _verdict(assessment: Assessment) -> tuple[str, str]:
    if assessment.accepted:
        return "accepted by the guard", _ACCEPTED_COLOUR
    return "REJECTED by the guard: this chain is not applied to any audio", _REJECTED_COLOUR


def _pole_line(recipe: Recipe, assessment: Assessment) -> str:
    margin = recipe.guard.pole_margin
    limit = 1.0 - margin
    r = assessment.max_pole_radius
    where = "inside the limit" if r <= limit else "OUTSIDE the limit: unstable"
    return f"largest pole radius {r:.9f}; limit {limit:.9f} (1 - pole_margin {margin:g}); {where}"


def _guard_lines(recipe: Recipe, assessment: Assessment) -> list[str]:
    g = recipe.guard
    lines = [_pole_line(recipe, assessment)]
    lines.append(f"max gain {_db(assessment.max_gain_db)} at {_hz(assessment.max_gain_hz)}; "
                 f"limit guard.max_gain_db {g.max_gain_db:+g} dB")
    exact = "" if assessment.peak_gain_exact or not math.isfinite(assessment.peak_gain_db) else \
        " (its long tail estimated)"
    lines.append(f"worst-case peak gain {_db(assessment.peak_gain_db)}{exact}; the L1 norm of the impulse "
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


def _wrap(text: str, width: int) -> list[str]:
    import textwrap

    return textwrap.wrap(text, width, subsequent_indent="    ", break_long_words=True) or [""]


def _y_range(chain_db: np.ndarray, parts, recipe: Recipe, assessment: Assessment) -> tuple[float, float]:
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


def _label_spot(freqs: np.ndarray, db: np.ndarray, k: int, bottom: float, top: float):
    """Where to number a section's curve: (frequency, dB, vertical offset in points or None).

    At its largest boost if it boosts by 1 dB or more (or more than it cuts), else at its deepest cut;
    a flat section (a gain) is numbered at a staggered place along the axis.
    None means the cut runs off the bottom: number it beside the dip.
    """
    logf = np.log(freqs)
    lo, hi = logf[0], logf[-1]
    inside = (logf > lo + 0.03 * (hi - lo)) & (logf < hi - 0.03 * (hi - lo)) & np.isfinite(db)
    if not inside.any():
        return float(freqs[len(freqs) // 2]), 0.0, 0
    pad = 0.05 * (top - bottom)
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


def response_figure(recipe: Recipe, chain: Chain, assessment: Assessment) -> Figure:
    """Draw the response of ``chain`` with the guard's findings.

    Parameters
    ----------
    recipe
        The recipe the chain was designed from (section names, guard limits).
    chain
        From :func:`chainrun.design.design`.
    assessment
        From :func:`chainrun.guard.assess` for this chain.

    Returns
    -------
    matplotlib.figure.Figure
        Attached to an Agg canvas; nothing is shown. Save it with
        ``fig.savefig(path)`` or use :func:`save_response`.

    Notes
    -----
    The magnitude of a rejected, unstable chain is that of its coefficients
    evaluated on the unit circle; played, such a chain would never settle into
    it. The figure says so in words.
    """
    rate = chain.rate
    nyq = rate / 2.0
    freqs = _grid(chain, recipe, assessment)
    h = _response(chain.sos, freqs, rate)
    chain_db = _to_db(h)
    parts = [(i, s, _to_db(_response(rows, freqs, rate))) for i, s, rows in _sections(recipe, chain)]
    verdict, verdict_colour = _verdict(assessment)
    bottom, top = _y_range(chain_db, parts, recipe, assessment)
    unstable = assessment.max_pole_radius > 1.0 - recipe.guard.pole_margin

    footer = []
    for line in _guard_lines(recipe, assessment):
        footer.extend(_wrap(line, 118))
    if np.any(chain_db[np.isfinite(chain_db)] < bottom):
        footer.append(f"(the magnitude axis stops at {bottom:g} dB; deeper dips, such as a notch's centre, "
                      "run off its lower edge)")

    n_key = len(parts) + 1
    key_rows = math.ceil(n_key / 2)
    # Layout in inches, top to bottom: header, magnitude, phase, axis label, key, guard figures.
    header_in, mag_in, gap_in, phase_in, xlabel_in = 0.85, 3.7, 0.15, 1.45, 0.62
    key_in = 0.32 + 0.2 * key_rows
    footer_in = 0.2 + 0.165 * len(footer)
    height = header_in + mag_in + gap_in + phase_in + xlabel_in + key_in + footer_in
    fig = Figure(figsize=(FIG_WIDTH_IN, height), dpi=PNG_DPI, facecolor="white")
    FigureCanvasAgg(fig)
    left, right = 0.085, 0.975

    def frac(inches_from_top: float) -> float:
        return 1.0 - inches_from_top / height

    ax = fig.add_axes((left, frac(header_in + mag_in), right - left, mag_in / height))
    axp = fig.add_axes((left, frac(header_in + mag_in + gap_in + phase_in), right - left, phase_in / height),
                       sharex=ax)
    key_top = frac(header_in + mag_in + gap_in + phase_in + xlabel_in)
    footer_top = frac(header_in + mag_in + gap_in + phase_in + xlabel_in + key_in)

    name = _literal(recipe.name or os.path.basename(recipe.path))
    fig.text(left, frac(0.3), f"{name} at {rate} Hz", fontsize=13, weight="bold", va="center")
    fig.text(left, frac(0.6), verdict, fontsize=11, weight="bold", color=verdict_colour, va="center")

    # --- sections, faint, beneath the whole chain
    handles = [Line2D([], [], color=_CHAIN_COLOUR, lw=2.4, label="whole chain")]
    for k, (i, section, db) in enumerate(parts):
        colour = _SECTION_COLOURS[k % len(_SECTION_COLOURS)]
        dash = _SECTION_DASHES[(k + k // len(_SECTION_COLOURS)) % len(_SECTION_DASHES)]
        ax.plot(freqs, np.clip(db, bottom - 10, top + 10), color=colour, lw=1.2, alpha=0.65, ls=dash, zorder=2)
        x, y, dy = _label_spot(freqs, db, k, bottom, top)
        offset = (9, 0) if dy is None else (0, dy)
        ax.annotate(str(i + 1), xy=(x, y), xytext=offset, textcoords="offset points", fontsize=7.5, color=colour,
                    weight="bold", ha="center", va="center", zorder=6,
                    bbox=dict(boxstyle="circle,pad=0.2", fc="white", ec=colour, lw=0.8, alpha=0.92))
        handles.append(Line2D([], [], color=colour, lw=1.4, ls=dash,
                              label=f"{i + 1}  {_literal(describe_section(section))}"))
    ax.plot(freqs, np.clip(chain_db, bottom - 10, top + 10), color=_CHAIN_COLOUR, lw=2.4, zorder=5)
    ax.axhline(0.0, color=_GUIDE_COLOUR, lw=0.8, zorder=1)

    # --- guard limit, worst-case peak gain, max-gain point
    g_max = recipe.guard.max_gain_db
    if bottom < g_max < top:
        ax.axhline(g_max, color=_REJECTED_COLOUR, lw=1.0, ls=(0, (8, 3)), zorder=3)
        ax.text(0.995, g_max, f"guard limit (max_gain_db) {g_max:+g} dB", color=_REJECTED_COLOUR, fontsize=8,
                ha="right", va="bottom", zorder=6, transform=ax.get_yaxis_transform())
    l1 = assessment.peak_gain_db
    if math.isfinite(l1) and bottom < l1 < top:
        ax.axhline(l1, color=_GUIDE_COLOUR, lw=1.0, ls=(0, (2, 2)), zorder=3)
        ax.text(0.005, l1, f"worst-case peak gain {_signed(l1)} dB (L1 norm: bounds sample peaks of any signal)",
                color="#333333", fontsize=8, ha="left", va="bottom", zorder=6, transform=ax.get_yaxis_transform())
    else:
        note = ("worst-case peak gain: unbounded (the chain is unstable)" if not math.isfinite(l1)
                else f"worst-case peak gain {_signed(l1)} dB "
                     f"({'above the top' if l1 >= top else 'below the bottom'} of this axis)")
        ax.text(0.01, 0.97, note, transform=ax.transAxes, color="#333333", fontsize=8, ha="left", va="top",
                zorder=6, bbox=dict(boxstyle="round,pad=0.25", fc="white", ec="none", alpha=0.9))
    mg, mf = assessment.max_gain_db, assessment.max_gain_hz
    if math.isfinite(mg):
        fx = min(max(mf, freqs[0]), freqs[-1])
        fy = min(max(mg, bottom), top)
        at = "DC (0 Hz)" if mf <= 0 else _hz(mf)
        ax.plot([fx], [fy], marker="D", ms=7, mfc="white", mec=_CHAIN_COLOUR, mew=1.8, zorder=7, ls="none", clip_on=False)
        right = np.log(fx) > 0.5 * (np.log(freqs[0]) + np.log(freqs[-1]))
        room_below = fy > bottom + 0.35 * (top - bottom)      # else the label goes above the marker
        ax.annotate(f"max gain {_signed(mg)} dB\nat {at}", xy=(fx, fy),
                    xytext=(-16 if right else 16, -30 if room_below else 30), textcoords="offset points",
                    ha="right" if right else "left", va="top" if room_below else "bottom", fontsize=8.5,
                    arrowprops=dict(arrowstyle="-", color=_CHAIN_COLOUR, lw=0.8), zorder=8,
                    bbox=dict(boxstyle="round,pad=0.3", fc="white", ec="#9e9e9e", lw=0.6))
    if not assessment.accepted:
        ax.text(0.5, 0.45, "REJECTED", transform=ax.transAxes, fontsize=44, weight="bold", color=_REJECTED_COLOUR,
                alpha=0.2, ha="center", va="center", rotation=10, zorder=9)
    if unstable:
        ax.text(0.99, 0.03, "unstable: played, this chain would grow without limit; it never settles into this curve",
                transform=ax.transAxes, color=_REJECTED_COLOUR, fontsize=8.5, ha="right", va="bottom", zorder=9,
                bbox=dict(boxstyle="round,pad=0.25", fc="white", ec="none", alpha=0.9))

    ax.set_ylim(bottom, top)
    ax.set_ylabel("magnitude (dB)")
    ax.tick_params(labelbottom=False)

    # --- phase
    axp.plot(freqs, _wrapped_phase(h), color=_CHAIN_COLOUR, lw=1.6)
    axp.set_ylim(-200, 200)
    axp.yaxis.set_major_locator(FixedLocator([-180, -90, 0, 90, 180]))
    axp.set_ylabel("phase (degrees)\nwhole chain, wrapped", fontsize=9)
    axp.set_xlabel(f"frequency (Hz), logarithmic, {_hz(freqs[0])} to Nyquist ({_hz(nyq)})")
    for a in (ax, axp):
        a.grid(True, which="major", color="#e0e0e0", lw=0.7)
        a.grid(True, which="minor", axis="x", color="#f0f0f0", lw=0.5)
        a.set_axisbelow(True)
        for side in ("top", "right"):
            a.spines[side].set_visible(False)
    axp.set_xscale("log")
    axp.set_xlim(freqs[0], nyq)
    axp.xaxis.set_major_locator(FixedLocator([t for t in _FREQ_TICKS if freqs[0] <= t <= nyq]))
    axp.xaxis.set_minor_locator(FixedLocator([t for t in _MINOR_TICKS if freqs[0] <= t <= nyq]))
    axp.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v / 1000:g}k" if v >= 1000 else f"{v:g}"))
    axp.xaxis.set_minor_formatter(NullFormatter())

    # --- key and the guard's figures, in words
    fig.legend(handles=handles, loc="upper left", bbox_to_anchor=(left - 0.01, key_top), ncols=2, fontsize=8,
               frameon=False, title="sections, numbered in chain order (the numbers sit on the faint curves)",
               title_fontsize=8.5, alignment="left", handlelength=3.0, columnspacing=2.0)
    y = footer_top
    for line in footer:
        colour = _REJECTED_COLOUR if line.startswith(("error:", "warning:")) else "#222222"
        fig.text(left, y, _literal(line), fontsize=8, family="monospace", color=colour, va="top")
        y -= 0.165 / height
    return fig


# --------------------------------------------------------------------------- output

_SVG_RC = {"svg.fonttype": "none", "svg.hashsalt": "chainrun"}


def save_response(recipe: Recipe, chain: Chain, assessment: Assessment, path: str) -> None:
    """Draw the response and write it to ``path``, PNG or SVG by its extension.

    The file is written to a temporary name beside it and then renamed, so
    ``path`` never holds a half-written picture.

    Raises
    ------
    ValueError
        If the extension is neither ``.png`` nor ``.svg``.
    OSError
        If the file cannot be written.
    """
    ext = os.path.splitext(path)[1].lower()
    if ext not in (".png", ".svg"):
        raise ValueError(f"{path}: a picture must be a .png or .svg file")
    fig = response_figure(recipe, chain, assessment)
    folder, base = os.path.split(os.path.abspath(path))
    tmp = os.path.join(folder, f".{base}.{secrets.token_hex(4)}.part")
    try:
        with open(tmp, "xb") as fh:          # mode 0o666 less the umask, like any new file
            if ext == ".png":
                _write_png(fig, fh)
            else:
                with rc_context({"svg.fonttype": "path", "svg.hashsalt": "chainrun"}):
                    fig.savefig(fh, format="svg", metadata={"Date": None})
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def _write_png(fig: Figure, fh) -> None:
    """Opaque RGB PNG (the page is white: no alpha channel), losslessly compressed with Pillow."""
    from PIL import Image          # a dependency of matplotlib

    canvas = fig.canvas
    canvas.draw()
    rgba = np.asarray(canvas.buffer_rgba())
    Image.fromarray(np.ascontiguousarray(rgba[..., :3])).save(fh, format="PNG", optimize=True)


def response_svg(recipe: Recipe, chain: Chain, assessment: Assessment) -> str:
    """The response as an inline ``<svg>`` element for an HTML page.

    The XML prolog, doctype, comments and metadata are removed, as are the
    namespace declarations (HTML parses inline SVG without them), so the
    string refers to nothing outside itself. Text stays text (not paths), in
    the page's fonts; element ids carry the rate, so several pictures can share
    one page. The element scales to its container's width.
    """
    fig = response_figure(recipe, chain, assessment)
    buf = io.StringIO()
    with rc_context(dict(_SVG_RC, **{"svg.hashsalt": f"chainrun-{chain.rate}"})):
        fig.savefig(buf, format="svg", metadata={"Date": None})
    svg = buf.getvalue()
    svg = svg[svg.index("<svg"):]
    svg = re.sub(r"<!--.*?-->", "", svg, flags=re.S)
    svg = re.sub(r"<metadata>.*?</metadata>", "", svg, flags=re.S)
    verdict = "accepted" if assessment.accepted else "REJECTED"
    title = f"Response of {recipe.name or recipe.path} at {chain.rate} Hz ({verdict} by the guard)"
    title = escape(title.encode("utf-8", "backslashreplace").decode("utf-8"), quote=True)

    def opening(m: re.Match) -> str:
        tag = m.group(0)
        tag = re.sub(r'\s(?:xmlns(?::\w+)?|width|height|version)="[^"]*"', "", tag)
        return tag[:-1].rstrip() + f' role="img" aria-label="{title}" class="response">'

    svg = re.sub(r"<svg\b[^>]*>", opening, svg, count=1)
    # Keep only the ids something refers to (clip paths, markers: hashed with the rate's salt);
    # matplotlib's structural ids (figure_1, axes_1, ...) would repeat between pictures on one page.
    used = set(re.findall(r'url\(#([^)]+)\)', svg)) | set(re.findall(r'href="#([^"]+)"', svg))
    svg = re.sub(r'\sid="([^"]*)"', lambda m: m.group(0) if m.group(1) in used else "", svg)
    svg = svg.replace("<style type=\"text/css\">*{", "<style type=\"text/css\">svg.response *{", 1)
    return svg.replace('class="response">', f'class="response"><title>{title}</title>', 1).strip()
