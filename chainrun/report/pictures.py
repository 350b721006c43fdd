"""The batch's response pictures for the HTML report.

Each designed rate gets one picture, an inline SVG drawn from numpy alone
(:func:`chainrun.report.svgchart.response_svg`): it takes milliseconds and imports
neither matplotlib nor scipy, so it is drawn when the report is written and never
holds up the audio.
"""
from __future__ import annotations

__all__ = ["picture_of"]


def picture_of(recipe, d) -> str:
    """The response picture of one designed rate (``d``: its chain and assessment) as inline SVG.

    Raises what drawing raised, for the report to say why there is no picture.
    """
    from .svgchart import response_svg

    return response_svg(recipe, d.chain, d.assessment)
