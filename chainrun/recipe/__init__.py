"""Recipes: YAML in, a validated, sample-rate-free :class:`Recipe` out.

* :mod:`.yaml` — located safe YAML: every value remembers its file, line and column;
* :mod:`.model` — :class:`Section`, :class:`Guard`, :class:`Output`, :class:`Loudness`, :class:`Recipe`;
* :mod:`.loader` — :func:`load` (a file), :func:`loads` (text), :func:`from_dict` (a mapping),
  includes and the merge of guard and output along them;
* :mod:`.loudness` — the ``loudness:`` block (target and link) and its merge along includes;
* :mod:`.channels` — a section's ``channels:`` (track numbers, or mid / side).

Section types come from the catalogue, :mod:`chainrun.section_types`.
"""
from ..errors import Location, RecipeError
from .loader import MAX_INCLUDE_DEPTH, MAX_SECTIONS, from_dict, load, loads
from .model import Guard, Loudness, Output, Recipe, Section

__all__ = ["load", "loads", "from_dict", "Recipe", "Section", "Guard", "Output", "Loudness", "RecipeError", "Location",
           "MAX_INCLUDE_DEPTH", "MAX_SECTIONS"]
