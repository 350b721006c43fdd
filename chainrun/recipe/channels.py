"""A section's ``channels:`` key: which channels of a file the section filters.

``channels`` is a list of distinct 1-based track numbers (``[2]``, ``[1, 3]``) or, for a
two-channel file, ``mid`` or ``side`` (mid = (L + R) / 2, side = (L - R) / 2). A chain uses
track numbers or mid/side, never both (includes counted).
"""
from __future__ import annotations

from ..errors import RecipeError
from ..section_types import CHANNEL_WORDS, MAX_TRACK
from .model import Section
from .yaml import _describe, _Node

__all__ = ["read_channels", "one_kind_of_channels", "channels_text", "channels_misfit"]


def read_channels(node: _Node, name: str) -> tuple[int, ...] | str:
    """A section's ``channels``: distinct track numbers (returned sorted) or one of CHANNEL_WORDS."""
    allowed = (f"allowed: a list of distinct track numbers from 1 to {MAX_TRACK} like [2] or [1, 3], "
               f"or {' or '.join(CHANNEL_WORDS)} for a two-channel file")
    if isinstance(node.value, str):
        if node.value not in CHANNEL_WORDS:
            raise RecipeError.at(node.where, f"{name} '{node.value}' is not known; {allowed}")
        return node.value
    if not isinstance(node.value, list) or not node.value:
        found = "an empty list" if node.value == [] else _describe(node.value)
        raise RecipeError.at(node.where, f"{name} must name channels; found {found}; {allowed}")
    tracks: list[int] = []
    for i, item in enumerate(node.value):
        v = item.value
        if isinstance(v, bool) or not isinstance(v, int):
            raise RecipeError.at(item.where, f"{name}[{i}] must be a track number; found {_describe(v)}; {allowed}")
        if not 1 <= v <= MAX_TRACK:
            raise RecipeError.at(item.where, f"{name}[{i}] track {v} is out of range; {allowed}")
        if v in tracks:
            raise RecipeError.at(item.where, f"{name}[{i}] names track {v} twice; {allowed}")
        tracks.append(v)
    return tuple(sorted(tracks))


def one_kind_of_channels(sections: list[Section]) -> None:
    """Track numbers and mid/side cannot meet in one chain (includes counted): refuse the first that mixes."""
    first = None
    for s in sections:
        if s.channels is None:
            continue
        if first is None:
            first = s
        elif isinstance(s.channels, str) != isinstance(first.channels, str):
            raise RecipeError.at(s.locate("channels"),
                                 f"chain[{s.index}].channels {channels_text(s.channels)} mixes with "
                                 f"{channels_text(first.channels)} set in {first.locate('channels')}; a chain "
                                 "uses either track numbers or mid/side, not both")


def channels_text(channels: tuple[int, ...] | str) -> str:
    return channels if isinstance(channels, str) else "[" + ", ".join(map(str, channels)) + "]"


def channels_misfit(recipe, channels: int) -> str | None:
    """Why the recipe's ``channels:`` cannot be applied to a file of ``channels`` channels (one
    located line), or None if they can (always, for a recipe without ``channels``)."""
    for s in recipe.sections:
        if s.channels is None:
            continue
        if isinstance(s.channels, str):
            if channels != 2:
                return (f"{s.locate('channels')}: error: chain[{s.index}].channels {s.channels} needs a "
                        f"two-channel file; this one has {channels} channel(s)")
        elif max(s.channels) > channels:
            return (f"{s.locate('channels')}: error: chain[{s.index}].channels names track {max(s.channels)}; "
                    f"this file has {channels} channel(s); allowed: tracks 1 to {channels}")
    return None
