"""The batch's response pictures for the HTML report.

Each designed rate gets one picture, an inline SVG drawn from numpy alone
(:func:`chainrun.report.svgchart.response_svg`): it takes milliseconds and imports
neither matplotlib nor scipy, so it is drawn in this process, when asked for, and
never holds up the audio. :func:`draw_pictures` and :func:`draw_pictures_aside`
keep the shape their callers expect (``{rate: picture}``, each with a Future's
``result()``), but the pictures they return are already finished;
:func:`picture_of` gives the report each picture, drawing it if there is none.
"""
from __future__ import annotations

__all__ = ["draw_pictures", "draw_pictures_aside", "picture_of"]


def picture_of(batch, rate: int, d) -> str:
    """The response picture of ``rate`` as inline SVG: the one drawn for the batch
    (``batch.pictures``), or drawn here if there is none.

    Raises what drawing raised, for the report to say why there is no picture.
    """
    ready = getattr(batch, "pictures", {}).get(rate)
    if ready is not None:
        svg = ready.result()
        if svg is not None:
            return svg
    from .svgchart import response_svg

    return response_svg(batch.recipe, d.chain, d.assessment)


class _Drawn:
    """A finished picture, or what stopped it, behind a Future's ``result()``."""

    def __init__(self, recipe, d):
        from .svgchart import response_svg

        self._svg, self._error = None, None
        try:
            self._svg = response_svg(recipe, d.chain, d.assessment)
        except Exception as exc:       # noqa: BLE001 - handed to the report, which says why there is no picture
            self._error = exc

    def result(self) -> str:
        if self._error is not None:
            raise self._error
        return self._svg


def draw_pictures(recipe, designs: dict) -> dict:
    """Draw the response picture of every designed rate, here and now.

    Returns ``{rate: picture}`` for each rate whose design has a chain and an
    assessment, to be set as ``BatchResult.pictures``; ``picture.result()`` is
    the SVG, or raises what stopped it being drawn.
    """
    return {rate: _Drawn(recipe, d) for rate, d in sorted(designs.items())
            if d.chain is not None and d.assessment is not None}


def draw_pictures_aside(recipe, designs: dict) -> dict:
    """:func:`draw_pictures`: the pictures once needed a process of their own; now they take milliseconds."""
    return draw_pictures(recipe, designs)
