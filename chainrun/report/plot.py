"""Pictures of a designed chain for ``chainrun plot`` and for the HTML report: PNG, SVG, inline SVG.

The figure itself is drawn by :func:`chainrun.report.figure.response_figure`; this module
writes it out. Nothing here imports pyplot: each figure has its own Agg canvas.
"""
from __future__ import annotations

import io
import os
import re
import secrets
from html import escape
from typing import TYPE_CHECKING

import numpy as np
from matplotlib import rc_context
from matplotlib.figure import Figure

from .figure import response_figure

if TYPE_CHECKING:
    from ..design import Chain
    from ..guard import Assessment
    from ..recipe import Recipe

__all__ = ["response_figure", "save_response", "response_svg"]

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
