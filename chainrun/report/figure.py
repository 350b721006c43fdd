"""The response figure of a designed chain: magnitude and phase, with the guard's figures.

One figure per chain at one sample rate:

* top panel: magnitude of the whole chain (of each channel path, one dash pattern each) in dB over a logarithmic frequency
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
label is escaped so matplotlib never reads it as mathematics, and a character
the figure's fonts have no glyph for (CJK, emoji with the default DejaVu fonts)
is written as its ``\\uXXXX`` escape, readable where matplotlib would draw an
empty box and warn "Glyph ... missing from font(s)".
"""
from __future__ import annotations

import functools
import math
import os
from typing import TYPE_CHECKING

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import FixedLocator, FuncFormatter, NullFormatter

from .response import ACCEPTED_COLOUR as _ACCEPTED_COLOUR, CHAIN_COLOUR as _CHAIN_COLOUR
from .response import FREQ_TICKS as _FREQ_TICKS, GUIDE_COLOUR as _GUIDE_COLOUR, MINOR_TICKS as _MINOR_TICKS
from .response import REJECTED_COLOUR as _REJECTED_COLOUR, SECTION_COLOURS as _SECTION_COLOURS
from .response import SECTION_DASHES as _SECTION_DASHES, label_spot as _label_spot, magnitude_range as _y_range
from .response import (describe_section, freq_grid, guard_lines, hz, literal as _literal, response_at, sections_of,
                       signed, to_db, wrapped, wrapped_phase)

if TYPE_CHECKING:
    from ..design import Chain
    from ..guard import Assessment
    from ..recipe import Recipe

__all__ = ["response_figure"]

PNG_DPI = 100
FIG_WIDTH_IN = 10.0         # the height follows from the number of sections and guard lines

_PATH_DASHES = ("-", (0, (7, 2.5)), (0, (1.5, 1.5)), (0, (7, 2, 1.5, 2)))   # one per channel path

# --------------------------------------------------------------------------- text

@functools.lru_cache(maxsize=None)
def _glyphs() -> frozenset[int]:
    """The code points the fonts matplotlib draws text with can show (its sans-serif and monospace lists)."""
    from matplotlib import font_manager, ft2font, rcParams

    found: set[int] = set()
    for name in list(rcParams["font.sans-serif"]) + list(rcParams["font.monospace"]):
        try:
            path = font_manager.findfont(font_manager.FontProperties(family=name), fallback_to_default=False)
            found.update(ft2font.FT2Font(path).get_charmap())
        except (ValueError, OSError, RuntimeError):       # not installed
            continue
    return frozenset(found)


def literal(text: str) -> str:
    """User text as it is drawn: see the module notes (``$`` escaped; a glyph no font has as ``\\uXXXX``)."""
    glyphs = _glyphs()
    return "".join(c if ord(c) < 0x80 or ord(c) in glyphs else
                   (f"\\u{ord(c):04x}" if ord(c) <= 0xFFFF else f"\\U{ord(c):08x}") for c in _literal(text))


# --------------------------------------------------------------------------- figure

def _on(section) -> str:
    """`` on track 2`` / `` on mid`` for a section with ``channels``, else nothing."""
    c = section.channels
    if c is None:
        return ""
    return f" on {c}" if isinstance(c, str) else f" on track{'s' if len(c) > 1 else ''} {', '.join(map(str, c))}"


def _path_lines(assessment: Assessment) -> list[str]:
    """One line per channel path: its own max gain and worst-case peak gain (none for a chain without paths)."""
    out = []
    for p in assessment.paths:
        out.append(f"path {p.title}: max gain {signed(p.max_gain_db)} dB at {hz(p.max_gain_hz)}; worst-case peak "
                   f"gain {signed(20 * math.log10(p.peak_gain)) if 0 < p.peak_gain < math.inf else 'unbounded'}"
                   f"{' dB' if 0 < p.peak_gain < math.inf else ''}")
    return out


def _verdict(assessment: Assessment) -> tuple[str, str]:
    if assessment.accepted:
        return "accepted by the guard", _ACCEPTED_COLOUR
    return "REJECTED by the guard: this chain is not applied to any audio", _REJECTED_COLOUR


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
    freqs = freq_grid(chain, recipe, assessment)
    # one thick curve for the whole chain, or one per channel path (each its own dash pattern)
    curves = [(p.title, response_at(p.sos, freqs, rate)) for p in chain.paths] or \
        [("whole chain", response_at(chain.sos, freqs, rate))]
    chain_db = np.concatenate([to_db(h) for _, h in curves])
    parts = [(i, s, to_db(response_at(rows, freqs, rate))) for i, s, rows in sections_of(recipe, chain)]
    verdict, verdict_colour = _verdict(assessment)
    bottom, top = _y_range(chain_db, parts, recipe, assessment)
    unstable = assessment.max_pole_radius > 1.0 - recipe.guard.pole_margin

    footer = []
    for line in guard_lines(recipe, assessment) + _path_lines(assessment):
        footer.extend(wrapped(line, 118))
    if np.any(chain_db[np.isfinite(chain_db)] < bottom):
        footer.append(f"(the magnitude axis stops at {bottom:g} dB; deeper dips, such as a notch's centre, "
                      "run off its lower edge)")

    n_key = len(parts) + len(curves)
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

    name = literal(recipe.name or os.path.basename(recipe.path))
    fig.text(left, frac(0.3), f"{name} at {rate} Hz", fontsize=13, weight="bold", va="center")
    fig.text(left, frac(0.6), verdict, fontsize=11, weight="bold", color=verdict_colour, va="center")

    # --- sections, faint, beneath the whole chain
    handles = [Line2D([], [], color=_CHAIN_COLOUR, lw=2.4, ls=_PATH_DASHES[k % len(_PATH_DASHES)],
                      label=title if len(curves) == 1 else f"path: {literal(title)}")
               for k, (title, _) in enumerate(curves)]
    for k, (i, section, db) in enumerate(parts):
        colour = _SECTION_COLOURS[k % len(_SECTION_COLOURS)]
        dash = _SECTION_DASHES[(k + k // len(_SECTION_COLOURS)) % len(_SECTION_DASHES)]
        ax.plot(freqs, np.clip(db, bottom - 10, top + 10), color=colour, lw=1.2, alpha=0.65, ls=dash, zorder=2)
        x, y, dy = _label_spot(freqs, db, k, bottom, top, section.params.get("freq"))
        offset = (9, 0) if dy is None else (0, dy)
        ax.annotate(str(i + 1), xy=(x, y), xytext=offset, textcoords="offset points", fontsize=7.5, color=colour,
                    weight="bold", ha="center", va="center", zorder=6,
                    bbox=dict(boxstyle="circle,pad=0.2", fc="white", ec=colour, lw=0.8, alpha=0.92))
        handles.append(Line2D([], [], color=colour, lw=1.4, ls=dash,
                              label=f"{i + 1}  {literal(describe_section(section))}{_on(section)}"))
    for k, (_, h) in enumerate(curves):
        ax.plot(freqs, np.clip(to_db(h), bottom - 10, top + 10), color=_CHAIN_COLOUR, lw=2.4,
                ls=_PATH_DASHES[k % len(_PATH_DASHES)], zorder=5)
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
        ax.text(0.005, l1, f"worst-case peak gain {signed(l1)} dB (L1 norm: bounds sample peaks of any signal)",
                color="#333333", fontsize=8, ha="left", va="bottom", zorder=6, transform=ax.get_yaxis_transform())
    else:
        note = ("worst-case peak gain: unbounded (the chain is unstable)" if not math.isfinite(l1)
                else f"worst-case peak gain {signed(l1)} dB "
                     f"({'above the top' if l1 >= top else 'below the bottom'} of this axis)")
        ax.text(0.01, 0.97, note, transform=ax.transAxes, color="#333333", fontsize=8, ha="left", va="top",
                zorder=6, bbox=dict(boxstyle="round,pad=0.25", fc="white", ec="none", alpha=0.9))
    mg, mf = assessment.max_gain_db, assessment.max_gain_hz
    if math.isfinite(mg):
        fx = min(max(mf, freqs[0]), freqs[-1])
        fy = min(max(mg, bottom), top)
        at = "DC (0 Hz)" if mf <= 0 else hz(mf)
        ax.plot([fx], [fy], marker="D", ms=7, mfc="white", mec=_CHAIN_COLOUR, mew=1.8, zorder=7, ls="none", clip_on=False)
        right = np.log(fx) > 0.5 * (np.log(freqs[0]) + np.log(freqs[-1]))
        room_below = fy > bottom + 0.35 * (top - bottom)      # else the label goes above the marker
        ax.annotate(f"max gain {signed(mg)} dB\nat {at}", xy=(fx, fy),
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
    for k, (_, h) in enumerate(curves):
        axp.plot(freqs, wrapped_phase(h), color=_CHAIN_COLOUR, lw=1.6, ls=_PATH_DASHES[k % len(_PATH_DASHES)])
    axp.set_ylim(-200, 200)
    axp.yaxis.set_major_locator(FixedLocator([-180, -90, 0, 90, 180]))
    axp.set_ylabel("phase (degrees)\n" + ("whole chain" if len(curves) == 1 else "each path") + ", wrapped",
                   fontsize=9)
    axp.set_xlabel(f"frequency (Hz), logarithmic, {hz(freqs[0])} to Nyquist ({hz(nyq)})")
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
        fig.text(left, y, literal(line), fontsize=8, family="monospace", color=colour, va="top")
        y -= 0.165 / height
    return fig
