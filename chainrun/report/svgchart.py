"""The report's response picture: a small inline SVG drawn from numpy alone.

One picture per chain at one sample rate, for the HTML report:

* the magnitude of the whole chain in dB (thick dark line) over a logarithmic
  frequency axis from 10 Hz (or a tenth of Nyquist) to Nyquist, each recipe
  section drawn faintly beneath it in its own colour and dash, numbered on its
  curve and named in the key;
* the guard's figures drawn where they belong: the max-gain point, the
  ``guard.max_gain_db`` limit and the worst-case peak gain (L1 norm of the
  impulse response);
* the verdict in words (accepted / REJECTED), and under the axes every line of
  the guard's findings: largest pole radius against ``1 - pole_margin``, max
  gain, worst-case peak gain, decay time and every problem.

The response is evaluated with numpy (:func:`chainrun.report.response.response_np`):
neither matplotlib nor scipy is imported, and a picture takes milliseconds, so the
report draws it when it is written. ``chainrun plot`` draws the fuller matplotlib
figure (:mod:`chainrun.report.figure`), with the same colours, ticks and axis range.

Notes
-----
The SVG is deterministic (the same bytes for the same recipe and chain). All user
text is escaped with :func:`chainrun.report.cells.esc` (control characters shown
as ``\\xNN``). The only id, that of the plot's clip path, carries the rate, so
several pictures can share one page; nothing outside the element is referred to.
"""
from __future__ import annotations

import math
import os
from typing import TYPE_CHECKING

import numpy as np

from .cells import esc
from .response import (ACCEPTED_COLOUR, CHAIN_COLOUR, FREQ_TICKS, GUIDE_COLOUR, MINOR_TICKS, REJECTED_COLOUR,
                       SECTION_COLOURS, SECTION_DASHES, describe_section, freq_grid, guard_lines, hz, label_spot,
                       magnitude_range, response_np, sections_of, signed, to_db, wrapped)

if TYPE_CHECKING:
    from ..design import Chain
    from ..guard import Assessment
    from ..recipe import Recipe

__all__ = ["response_svg"]

WIDTH = 1000                    # viewBox units; the picture scales to its container
LEFT, RIGHT = 64, 980           # the plot box, left to right
TOP, HEIGHT = 74, 360           # the plot box, top and height
POINTS = 800                    # log-spaced frequencies (about one per unit across the plot), plus each freq
SANS = "system-ui, 'DejaVu Sans', 'Noto Sans', sans-serif"
MONO = "ui-monospace, 'DejaVu Sans Mono', monospace"
FOOTER_CHARS = 128              # the guard's lines wrap here (11 px monospace across the plot's width)
KEY_CHARS = 62                  # a key entry longer than this puts the key in one column
SECTION_WIDTH = 1.5
HALO = 'stroke="#fff" stroke-width="3.5" stroke-linejoin="round" paint-order="stroke"'   # text readable over lines
_Y_STEPS = (1, 2, 3, 6, 12, 24, 48, 96, 192)


def _num(x: float, digits: int = 2) -> str:
    s = f"{x:.{digits}f}"
    return "0" if float(s) == 0 else s.rstrip("0").rstrip(".")


def _dash(k: int) -> str:
    """The SVG dash array of section ``k``: the figure's pattern (in line widths) in units."""
    pattern = SECTION_DASHES[(k + k // len(SECTION_COLOURS)) % len(SECTION_DASHES)]
    if isinstance(pattern, str):
        return ""
    return ' stroke-dasharray="' + " ".join(_num(v * SECTION_WIDTH, 1) for v in pattern[1]) + '"'


def _y_ticks(bottom: float, top: float) -> list[float]:
    step = next((s for s in _Y_STEPS if (top - bottom) / s <= 8), _Y_STEPS[-1])
    return [float(v) for v in np.arange(math.ceil(bottom / step) * step, top + 1e-9, step)]


def _tick_text(v: float) -> str:
    return "0" if v == 0 else f"{v:+g}".replace("-", "\u2212")


def _freq_text(v: float) -> str:
    return f"{v / 1000:g}k" if v >= 1000 else f"{v:g}"


def _text(x: float, y: float, body: str, extra: str = "") -> str:
    return f'<text x="{_num(x)}" y="{_num(y)}"{extra}>{body}</text>'


class _Axes:
    """The map from (Hz, dB) to picture units."""

    def __init__(self, lo: float, hi: float, bottom: float, top: float):
        self.lo, self.hi, self.bottom, self.top = math.log(lo), math.log(hi), bottom, top

    def x(self, f):
        return LEFT + (np.log(f) - self.lo) / (self.hi - self.lo) * (RIGHT - LEFT)

    def y(self, db):
        return TOP + (self.top - np.asarray(db, dtype=float)) / (self.top - self.bottom) * HEIGHT

    def path(self, freqs: np.ndarray, db: np.ndarray, digits: int) -> str:
        """Path data of a curve; values far off the axis are held just beyond it (the clip path hides them)."""
        xs = self.x(freqs)
        ys = self.y(np.clip(db, self.bottom - 10.0, self.top + 10.0))
        pts = " ".join(f"{x:.{digits}f},{y:.{digits}f}" for x, y in zip(xs, ys))
        return "M" + pts.replace(" ", "L", 1)


def _grid(ax: _Axes, lo: float, nyq: float) -> list[str]:
    bottom_y = TOP + HEIGHT
    out = ['<g stroke="#f0f0f0" stroke-width="0.8">']
    out += [f'<line x1="{_num(ax.x(t))}" y1="{TOP}" x2="{_num(ax.x(t))}" y2="{bottom_y}"/>'
            for t in MINOR_TICKS if lo <= t <= nyq]
    out.append('</g><g stroke="#dcdcdc" stroke-width="0.9">')
    major = [t for t in FREQ_TICKS if lo <= t <= nyq]
    out += [f'<line x1="{_num(ax.x(t))}" y1="{TOP}" x2="{_num(ax.x(t))}" y2="{bottom_y}"/>' for t in major]
    ticks = _y_ticks(ax.bottom, ax.top)
    out += [f'<line x1="{LEFT}" y1="{_num(ax.y(v))}" x2="{RIGHT}" y2="{_num(ax.y(v))}"/>' for v in ticks if v != 0]
    out.append("</g>")
    out.append('<g font-size="12" fill="#333" text-anchor="middle">')
    out += [_text(ax.x(t), bottom_y + 17, _freq_text(t), ' class="x-tick"') for t in major]
    out.append('</g><g font-size="12" fill="#333" text-anchor="end" dominant-baseline="central">')
    out += [_text(LEFT - 7, ax.y(v), _tick_text(v), ' class="y-tick"') for v in ticks]
    out.append("</g>")
    out.append(_text(18, TOP + HEIGHT / 2, "magnitude (dB)",
                     f' font-size="12.5" fill="#222" text-anchor="middle" transform="rotate(-90 18 {TOP + HEIGHT / 2:g})"'))
    out.append(_text((LEFT + RIGHT) / 2, bottom_y + 38,
                     esc(f"frequency (Hz), logarithmic, {hz(lo)} to Nyquist ({hz(nyq)})"),
                     ' font-size="12.5" fill="#222" text-anchor="middle"'))
    return out


def _guard_marks(ax: _Axes, recipe: Recipe, assessment: Assessment, freqs: np.ndarray) -> list[str]:
    out = [f'<line x1="{LEFT}" y1="{_num(ax.y(0.0))}" x2="{RIGHT}" y2="{_num(ax.y(0.0))}" '
           f'stroke="{GUIDE_COLOUR}" stroke-width="1"/>']
    g_max = recipe.guard.max_gain_db
    if ax.bottom < g_max < ax.top:
        y = _num(ax.y(g_max))
        out.append(f'<line class="guard-limit" x1="{LEFT}" y1="{y}" x2="{RIGHT}" y2="{y}" stroke="{REJECTED_COLOUR}" '
                   'stroke-width="1.2" stroke-dasharray="9 4"/>')
        out.append(_text(RIGHT - 4, float(y) - 5, esc(f"guard limit (max_gain_db) {g_max:+g} dB"),
                         f' font-size="12" fill="{REJECTED_COLOUR}" text-anchor="end" {HALO}'))
    l1 = assessment.peak_gain_db
    if math.isfinite(l1) and ax.bottom < l1 < ax.top:
        y = _num(ax.y(l1))
        out.append(f'<line class="worst-case" x1="{LEFT}" y1="{y}" x2="{RIGHT}" y2="{y}" stroke="{GUIDE_COLOUR}" '
                   'stroke-width="1.2" stroke-dasharray="2.5 2.5"/>')
        note, y_note = (f"worst-case peak gain {signed(l1)} dB (L1 norm: bounds the sample peaks of any signal)",
                        float(y) - 5)
    else:
        note = ("worst-case peak gain: unbounded (the chain is unstable)" if not math.isfinite(l1)
                else f"worst-case peak gain {signed(l1)} dB "
                     f"({'above the top' if l1 >= ax.top else 'below the bottom'} of this axis)")
        y_note = TOP + 20
        out.append(f'<rect x="{LEFT + 2}" y="{y_note - 13}" width="{len(note) * 6.9 + 8:.0f}" height="18" fill="#fff"/>')
    out.append(_text(LEFT + 6, y_note, esc(note), f' font-size="12" fill="#333" {HALO}'))
    return out


def _max_gain(ax: _Axes, assessment: Assessment, freqs: np.ndarray) -> list[str]:
    mg, mf = assessment.max_gain_db, assessment.max_gain_hz
    if not math.isfinite(mg):
        return []
    fx = min(max(mf, freqs[0]), freqs[-1])
    x, y = float(ax.x(fx)), float(ax.y(min(max(mg, ax.bottom), ax.top)))
    at = "DC (0 Hz)" if mf <= 0 else hz(mf)
    out = [f'<path class="max-gain" transform="translate({x:.2f},{y:.2f})" d="M0,-6.5L6.5,0L0,6.5L-6.5,0Z" '
           f'fill="#fff" stroke="{CHAIN_COLOUR}" stroke-width="2"/>']
    right = x > (LEFT + RIGHT) / 2
    below = y < TOP + 0.65 * HEIGHT
    anchor = "end" if right else "start"
    tx, ty = x + (-14 if right else 14), y + (34 if below else -26)
    out.append(f'<line x1="{x:.2f}" y1="{y:.2f}" x2="{tx:.2f}" y2="{ty + (-13 if below else 4):.2f}" '
               f'stroke="{CHAIN_COLOUR}" stroke-width="0.8"/>')
    out.append(_text(tx, ty, esc(f"max gain {signed(mg)} dB at {at}"),
                     f' font-size="12.5" font-weight="bold" fill="{CHAIN_COLOUR}" text-anchor="{anchor}" {HALO}'))
    return out


def _badge(ax: _Axes, freqs: np.ndarray, db: np.ndarray, k: int, i: int, colour: str, freq=None) -> str:
    f, v, dy = label_spot(freqs, db, k, ax.bottom, ax.top, freq)
    x, y = float(ax.x(f)), float(ax.y(v))
    if dy is None:
        x += 13
    else:
        y -= dy * 1.3                       # the figure's offset in points, upwards
    return (f'<circle cx="{x:.1f}" cy="{y:.1f}" r="8.5" fill="#fff" stroke="{colour}" stroke-width="1.2"/>'
            + _text(x, y, str(i + 1), f' font-size="11" font-weight="bold" fill="{colour}" text-anchor="middle" '
                    'dominant-baseline="central"'))


def _key(parts, y: float) -> tuple[list[str], float]:
    entries = [("whole chain", CHAIN_COLOUR, "", 2.6)]
    entries += [(f"{i + 1}  {describe_section(s)}", SECTION_COLOURS[k % len(SECTION_COLOURS)], _dash(k), SECTION_WIDTH)
                for k, (i, s, _) in enumerate(parts)]
    cols = 1 if any(len(e[0]) > KEY_CHARS for e in entries) else 2
    rows = math.ceil(len(entries) / cols)
    out = [_text(LEFT, y, "sections, numbered in chain order (the numbers sit on the faint curves)",
                 ' font-size="12" fill="#333"')]
    y += 20
    for n, (label, colour, dash, width) in enumerate(entries):
        x = LEFT + (n // rows) * (RIGHT - LEFT) / 2             # down the first column, then the second
        row_y = y + (n % rows) * 19
        out.append(f'<line x1="{_num(x)}" y1="{_num(row_y - 4)}" x2="{_num(x + 34)}" y2="{_num(row_y - 4)}" '
                   f'stroke="{colour}" stroke-width="{width:g}"{dash}/>')
        out.append(_text(x + 42, row_y, esc(label), ' font-size="12" fill="#222"'))
    return out, y + rows * 19


def response_svg(recipe: Recipe, chain: Chain, assessment: Assessment) -> str:
    """The response of ``chain`` with the guard's findings, as an inline ``<svg>`` element.

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
    str
        One ``<svg>`` element with a ``viewBox``, ``role="img"``, an ``aria-label`` and a
        ``<title>``; no namespace declaration (HTML needs none) and no reference outside itself.
    """
    rate = chain.rate
    nyq = rate / 2.0
    freqs = freq_grid(chain, recipe, assessment, POINTS)
    chain_db = to_db(response_np(chain.sos, freqs, rate))
    parts = [(i, s, to_db(response_np(rows, freqs, rate))) for i, s, rows in sections_of(recipe, chain)]
    bottom, top = magnitude_range(chain_db, parts, recipe, assessment)
    ax = _Axes(freqs[0], nyq, bottom, top)
    accepted = assessment.accepted
    unstable = assessment.max_pole_radius > 1.0 - recipe.guard.pole_margin
    name = recipe.name or os.path.basename(recipe.path)
    verdict = "accepted" if accepted else "REJECTED"
    title = esc(f"Response of {recipe.name or recipe.path} at {rate} Hz ({verdict} by the guard)")
    clip = f"chainrun-plot-{rate}"

    body = [f'<rect width="{WIDTH}" height="100%" fill="#fff"/>',
            f'<defs><clipPath id="{clip}"><rect x="{LEFT}" y="{TOP}" width="{RIGHT - LEFT}" height="{HEIGHT}"/>'
            "</clipPath></defs>",
            _text(LEFT, 28, esc(f"{name} at {rate} Hz"), ' font-size="17" font-weight="bold" fill="#111"'),
            _text(LEFT, 52, "accepted by the guard" if accepted else
                  "REJECTED by the guard: this chain is not applied to any audio",
                  f' class="verdict" font-size="14" font-weight="bold" '
                  f'fill="{ACCEPTED_COLOUR if accepted else REJECTED_COLOUR}"')]
    body += _grid(ax, float(freqs[0]), nyq)
    body += _guard_marks(ax, recipe, assessment, freqs)
    body.append(f'<g clip-path="url(#{clip})" fill="none" stroke-linejoin="round">')
    for k, (i, _, db) in enumerate(parts):
        body.append(f'<path class="section" d="{ax.path(freqs, db, 1)}" stroke="{SECTION_COLOURS[k % len(SECTION_COLOURS)]}" '
                    f'stroke-width="{SECTION_WIDTH:g}" stroke-opacity="0.7"{_dash(k)}/>')
    body.append(f'<path class="chain" d="{ax.path(freqs, chain_db, 2)}" stroke="{CHAIN_COLOUR}" stroke-width="2.6"/>')
    body.append("</g>")
    body += _max_gain(ax, assessment, freqs)
    body += [_badge(ax, freqs, db, k, i, SECTION_COLOURS[k % len(SECTION_COLOURS)], section.params.get("freq"))
             for k, (i, section, db) in enumerate(parts)]
    if not accepted:
        cx, cy = (LEFT + RIGHT) / 2, TOP + 0.45 * HEIGHT
        body.append(_text(cx, cy, "REJECTED", f' font-size="64" font-weight="bold" fill="{REJECTED_COLOUR}" '
                          f'fill-opacity="0.2" text-anchor="middle" transform="rotate(-10 {cx:g} {cy:g})"'))
    if unstable:
        body.append(_text(RIGHT - 6, TOP + HEIGHT - 10, "unstable: played, this chain would grow without limit; "
                          "it never settles into this curve",
                          f' font-size="12.5" fill="{REJECTED_COLOUR}" text-anchor="end" {HALO}'))
    body.append(f'<path d="M{LEFT},{TOP}V{TOP + HEIGHT}H{RIGHT}" fill="none" stroke="#555" stroke-width="1"/>')

    key, y = _key(parts, TOP + HEIGHT + 72)
    body += key
    lines = guard_lines(recipe, assessment)
    if np.any(chain_db[np.isfinite(chain_db)] < bottom):
        lines.append(f"(the magnitude axis stops at {bottom:g} dB; deeper dips, such as a notch's centre, "
                     "run off its lower edge)")
    y += 14
    body.append(f'<g class="guard" font-family="{MONO}" font-size="11" fill="#222" xml:space="preserve">')
    for line in lines:
        colour = f' fill="{REJECTED_COLOUR}"' if line.startswith(("error:", "warning:")) else ""
        for part in wrapped(line, FOOTER_CHARS):
            body.append(_text(LEFT, y, esc(part), colour))
            y += 16
    body.append("</g>")
    height = math.ceil(y + 4)
    return "\n".join([f'<svg class="response" viewBox="0 0 {WIDTH} {height}" role="img" aria-label="{title}" '
                      f'font-family="{SANS}"><title>{title}</title>', *body, "</svg>"])
