"""The recipe's ``loudness:`` block: ``target_lufs`` and ``link``, read, merged along includes, built.

A layer is the keys one file (with its includes merged) writes -> (value, where it was written). An
included file and its parent that write a key with different values are an error at the parent's
value, as for ``output:``.
"""
from __future__ import annotations

from types import MappingProxyType

from ..errors import Location, RecipeError
from .model import Loudness
from .yaml import _Node, _check_keys, _fmt, _mapping, _number, _text

__all__ = ["LOUDNESS_LINKS", "MIN_TARGET_LUFS", "MAX_TARGET_LUFS", "read_loudness", "merge_loudness",
           "build_loudness"]

LOUDNESS_LINKS = ("file", "folder", "batch")
MIN_TARGET_LUFS, MAX_TARGET_LUFS = -70.0, 0.0    # ITU-R BS.1770-4's absolute gate is -70 LUFS

_Layer = dict


def read_loudness(node: _Node | None) -> _Layer:
    """The loudness keys a file writes, validated (``target_lufs``, ``link``)."""
    if node is None:
        return {}
    entries = _mapping(node, "loudness")
    _check_keys(entries, ("target_lufs", "link"), "loudness")
    values = {}
    if "target_lufs" in entries:
        vnode = entries["target_lufs"][1]
        values["target_lufs"] = (_number(vnode, "loudness.target_lufs", lo=MIN_TARGET_LUFS, hi=MAX_TARGET_LUFS,
                                         unit="LUFS"), vnode.where)
    if "link" in entries:
        vnode = entries["link"][1]
        values["link"] = (_text(vnode, "loudness.link", LOUDNESS_LINKS), vnode.where)
    return values


def merge_loudness(base: _Layer, own: _Layer) -> _Layer:
    """As the loader's output rule: a loudness key written differently by an include and its parent is an error."""
    out = dict(base)
    for key, (value, where) in own.items():
        if key in out and out[key][0] != value:
            said = _fmt if isinstance(value, float) else str
            raise RecipeError.at(where, f"loudness.{key} {said(value)} conflicts with {said(out[key][0])} set in "
                                        f"{out[key][1]}; an included recipe and its parent must agree: "
                                        "write the same value or leave it out of one file")
        out.setdefault(key, (value, where))
    return out


def build_loudness(layer: _Layer, where: Location) -> Loudness | None:
    """The resolved :class:`Loudness`, or None when no file writes a loudness block.

    A block that some file writes without any file giving ``target_lufs`` is an error at ``where``
    (the block's, or its ``link``'s, location).
    """
    if not layer:
        return None
    if "target_lufs" not in layer:
        at = layer["link"][1] if "link" in layer else where
        raise RecipeError.at(at, "the loudness block has no 'target_lufs'; give a target such as "
                                 f"'target_lufs: -23' ({_fmt(MIN_TARGET_LUFS)} to {_fmt(MAX_TARGET_LUFS)} LUFS)")
    return Loudness(**{k: v for k, (v, _) in layer.items()},
                    where=MappingProxyType({k: at for k, (_, at) in layer.items()}))
