"""The recipe's ``rates:`` key: the sample rates (Hz) a recipe is meant for, read and merged along includes;
and a section's ``above_nyquist:`` key, what happens at a rate too low for its frequency.

A recipe that declares ``rates:`` is checked at exactly those rates, and a run rejects a file at any
other rate. Along an include chain the including file's ``rates:`` applies; without one, its
includes' (files included side by side must then agree). A layer is ``{"rates": (rates, where)}``.
"""
from __future__ import annotations

from ..errors import RecipeError
from .yaml import _Node, _describe, _fmt, _number, _text

__all__ = ["MAX_DECLARED_RATE", "ABOVE_NYQUIST", "read_rates", "merge_rates", "read_above_nyquist"]

MAX_DECLARED_RATE = 1_000_000     # as the audio reader's highest sample rate

ABOVE_NYQUIST = ("reject", "drop")   # a section with freq at or above a rate's Nyquist: reject the file, or drop out

_Layer = dict


def read_above_nyquist(node: _Node, name: str, params: dict) -> str:
    """A section's ``above_nyquist`` (``reject`` or ``drop``); only a section with a ``freq`` takes it."""
    value = _text(node, f"{name}.above_nyquist", ABOVE_NYQUIST)
    if "freq" not in params:
        raise RecipeError.at(node.where, f"{name}.above_nyquist applies only to a section with a freq; "
                                         "this section has none: remove the key")
    return value


def read_rates(node: _Node | None) -> _Layer:
    """The ``rates:`` a file writes, validated: a non-empty list of distinct positive whole numbers (Hz)."""
    if node is None:
        return {}
    if not isinstance(node.value, list):
        raise RecipeError.at(node.where, f"rates must be a list of sample rates in Hz like [44100, 48000]; "
                                         f"found {_describe(node.value)}")
    if not node.value:
        raise RecipeError.at(node.where, "rates is an empty list; give the sample rates in Hz the recipe is "
                                         "meant for, like [44100, 48000], or leave the key out")
    seen: dict[int, object] = {}
    for i, item in enumerate(node.value):
        v = _number(item, f"rates[{i}]", unit="Hz")
        if v <= 0:
            raise RecipeError.at(item.where, f"rates[{i}] {_fmt(v)} Hz is not a sample rate; "
                                             f"allowed: 1 to {MAX_DECLARED_RATE} Hz")
        if not v.is_integer() or v > MAX_DECLARED_RATE:
            raise RecipeError.at(item.where, f"rates[{i}] {_fmt(v)} Hz is not a sample rate; allowed: whole "
                                             f"numbers of Hz from 1 to {MAX_DECLARED_RATE}")
        if int(v) in seen:
            raise RecipeError.at(item.where, f"rates[{i}] {int(v)} Hz is already listed at {seen[int(v)]}; "
                                             "give each rate once")
        seen[int(v)] = item.where
    return {"rates": (tuple(seen), node.where)}


def merge_rates(base: _Layer, own: _Layer, side_by_side: bool = False) -> _Layer:
    """``own`` over ``base``: the including file's ``rates:`` applies over its includes'.

    With ``side_by_side`` (two files included by the same parent), different rates are an error
    at ``own``'s: the parent cannot tell which applies unless it writes its own ``rates:``.
    """
    if not own:
        return dict(base)
    if side_by_side and base and set(base["rates"][0]) != set(own["rates"][0]):
        raise RecipeError.at(own["rates"][1], f"rates {list(own['rates'][0])} conflicts with "
                                              f"{list(base['rates'][0])} set in {base['rates'][1]}; files "
                                              "included side by side must agree, or the including file "
                                              "writes its own rates")
    return dict(own)
