"""Recipe files: YAML in, a validated, sample-rate-free :class:`Recipe` out.

A recipe (``format: 1``) names an ordered chain of filter sections, an optional
``include:`` whose chain comes first, the ``guard:`` limits, the ``output:`` format
(and ``metadata``: keep or drop) and an optional ``loudness:`` target (:mod:`.loudness`).
Along an include chain the strictest guard limit any file writes applies (a file that
writes a looser one gets a located warning), and an ``output:`` or ``loudness:`` key
written differently by an included file and its parent is an error.

:func:`load` reads a file, :func:`loads` a recipe given as text and :func:`from_dict`
one given as a plain mapping. Section types, their keys and the rule checking their
combination come from the catalogue, :mod:`chainrun.section_types`.
"""
from __future__ import annotations

import numbers
import os
from dataclasses import replace
from types import MappingProxyType
from typing import Any, Mapping, NamedTuple

import yaml

from ..errors import Location, RecipeError
from ..section_types import MAX_ABS_GAIN_DB, MAX_BW_OCTAVES, MAX_ORDER, MIN_FREQ_HZ, SECTION_TYPES, SECTIONS
from .channels import one_kind_of_channels, read_channels
from .includes import include_tree, resolve_include
from .loudness import build_loudness, merge_loudness, read_loudness
from .model import _GUARD_KEYS, Guard, Output, Recipe, Section
from .rates import merge_rates, read_above_nyquist, read_rates
from .yaml import (MAX_FILE_BYTES, MAX_NAME_CHARS, MAX_NESTING, _check_keys, _compose, _describe, _fmt, _integer,
                   _mapping, _Node, _number, _read_text, _text)

__all__ = ["load", "loads", "from_dict"]

MAX_SECTIONS = 64                 # sections in the resolved chain, includes counted
MAX_INCLUDE_DEPTH = 8             # include nesting

_TOP_KEYS = ("format", "name", "notes", "include", "chain", "guard", "output", "loudness", "rates")
ON_OVER = ("reject", "clip", "scale")
OUTPUT_SUBTYPES = ("same", "PCM_16", "PCM_24", "PCM_32", "FLOAT", "DOUBLE")
DITHER = ("auto", "tpdf", "none")
METADATA = ("keep", "drop")


# --------------------------------------------------------------------------- sections

# Parameter readers, one line each: key -> function(node, name) -> value. A key a section type
# takes without a reader here (``order``, ``label``) is read by _section itself.
_PARAM_READERS = {
    "freq": lambda n, name: _frequency(n, name),
    "q": lambda n, name: _number(n, name, lo=0.0, lo_open=True, hi=1000.0),
    "bw": lambda n, name: _number(n, name, lo=0.0, lo_open=True, hi=MAX_BW_OCTAVES, unit="octaves"),
    "gain_db": lambda n, name: _number(n, name, lo=-MAX_ABS_GAIN_DB, hi=MAX_ABS_GAIN_DB, unit="dB"),
    "slope": lambda n, name: _number(n, name, lo=0.0, lo_open=True),
    "b": lambda n, name: _coefficients(n, name),
    "a": lambda n, name: _coefficients(n, name),
}



def _frequency(node: _Node, name: str) -> float:
    v = _number(node, name, lo=0.0, lo_open=True, unit="Hz")
    if v < MIN_FREQ_HZ:
        raise RecipeError.at(node.where, f"{name} {_fmt(v)} Hz is too low to design; "
                                         f"allowed: {_fmt(MIN_FREQ_HZ)} Hz and above")
    return v


def _coefficients(node: _Node, name: str) -> tuple[float, ...]:
    if not isinstance(node.value, list):
        raise RecipeError.at(node.where, f"{name} must be a list of numbers like [1, -0.5]; found {_describe(node.value)}")
    if not 1 <= len(node.value) <= MAX_ORDER + 1:
        raise RecipeError.at(node.where, f"{name} has {len(node.value)} coefficients; allowed: 1 to {MAX_ORDER + 1} "
                                         f"(order up to {MAX_ORDER})")
    return tuple(_number(item, f"{name}[{i}]") for i, item in enumerate(node.value))


def _section(node: _Node, index: int, path: str) -> Section:
    name = f"chain[{index}]"
    entries = _mapping(node, name)
    if "type" not in entries:
        raise RecipeError.at(node.where, f"{name} has no 'type'; allowed types: {', '.join(SECTION_TYPES)}")
    kind = _text(entries["type"][1], f"{name}.type", SECTION_TYPES)
    row = SECTIONS[kind]
    _check_keys(entries, row.keys, f"{name} ({kind})")
    for key in row.required:
        if key not in entries:
            raise RecipeError.at(node.where, f"{name} ({kind}) needs '{key}'; required keys: {', '.join(row.required)}")
    label = _text(entries["label"][1], f"{name}.label", longest=MAX_NAME_CHARS) if "label" in entries else ""
    params: dict[str, Any] = {}
    where = {k: v[1].where for k, v in entries.items()}
    for key, (_, vnode) in entries.items():
        if key in _PARAM_READERS:
            params[key] = _PARAM_READERS[key](vnode, f"{name}.{key}")
    if row.order is not None:
        params["order"] = _integer(entries["order"][1], f"{name}.order", *row.order) if "order" in entries else 2
    row.rule(params, name, where)
    channels = read_channels(entries["channels"][1], f"{name}.channels") if "channels" in entries else None
    above = read_above_nyquist(entries["above_nyquist"][1], name, params) if "above_nyquist" in entries else "reject"
    return Section(kind, MappingProxyType(params), node.where, MappingProxyType(where), index, label,
                   channels=channels, above_nyquist=above)


# Section types whose frequency is almost never below the audio band: below this, a value
# there is probably kilohertz typed as hertz (``freq: 3.2`` meant 3.2 kHz).
_AUDIO_BAND_KINDS = ("peak", "low_shelf", "high_shelf", "notch")
LOW_FREQ_WARN_HZ = 20.0


def _low_frequency_warnings(sections: list[Section]) -> list[str]:
    """A located warning for each peak, shelf or notch of this file tuned below 20 Hz."""
    out = []
    for s in sections:
        f = s.params.get("freq")
        if s.kind in _AUDIO_BAND_KINDS and f is not None and f < LOW_FREQ_WARN_HZ:
            out.append(f"{s.locate('freq')}: warning: chain[{s.index}].freq {_fmt(f)} Hz is below "
                       f"{_fmt(LOW_FREQ_WARN_HZ)} Hz for a {s.kind.replace('_', ' ')}; frequencies are in hertz: "
                       f"for {_fmt(f)} kHz write {_fmt(f * 1000.0)}")
    return out


# --------------------------------------------------------------------------- recipe

# A layer: the keys one file (with its includes merged) writes -> (value, where it was written).
_Layer = dict

# Guard key -> is value ``new`` stricter than ``old``? Along an include chain the strictest wins.
_ON_OVER_STRICTNESS = {"clip": 0, "scale": 1, "reject": 2}      # reject delivers nothing over the ceiling
_STRICTER = {
    "max_gain_db": lambda new, old: new < old,
    "pole_margin": lambda new, old: new > old,
    "max_decay_s": lambda new, old: new < old,
    "ceiling_dbfs": lambda new, old: new < old,
    "true_peak_ceiling_dbtp": lambda new, old: new < old,
    "on_over": lambda new, old: _ON_OVER_STRICTNESS[new] > _ON_OVER_STRICTNESS[old],
}


def _guard(node: _Node | None) -> _Layer:
    """The guard keys a file writes, validated (a null true_peak_ceiling_dbtp is not a value)."""
    if node is None:
        return {}
    entries = _mapping(node, "guard")
    _check_keys(entries, _GUARD_KEYS, "guard")
    values: dict[str, Any] = {}
    readers = {
        "max_gain_db": lambda n: _number(n, "guard.max_gain_db", lo=-120.0, hi=120.0, unit="dB"),
        "pole_margin": lambda n: _number(n, "guard.pole_margin", lo=1e-12, hi=0.5),
        "max_decay_s": lambda n: _number(n, "guard.max_decay_s", lo=0.0, lo_open=True, hi=3600.0, unit="s"),
        "ceiling_dbfs": lambda n: _number(n, "guard.ceiling_dbfs", lo=-60.0, hi=0.0, unit="dBFS"),
        "true_peak_ceiling_dbtp": lambda n: _number(n, "guard.true_peak_ceiling_dbtp", lo=-60.0, hi=6.0,
                                                    unit="dBTP"),
        "on_over": lambda n: _text(n, "guard.on_over", ON_OVER),
    }
    for key, (_, vnode) in entries.items():
        if key == "true_peak_ceiling_dbtp" and vnode.value is None:
            continue
        values[key] = (readers[key](vnode), vnode.where)
    return values


def _output(node: _Node | None) -> _Layer:
    """The output keys a file writes, validated."""
    if node is None:
        return {}
    entries = _mapping(node, "output")
    _check_keys(entries, ("subtype", "dither", "metadata"), "output")
    values = {}
    for key, choices in (("subtype", OUTPUT_SUBTYPES), ("dither", DITHER), ("metadata", METADATA)):
        if key in entries:
            vnode = entries[key][1]
            values[key] = (_text(vnode, f"output.{key}", choices), vnode.where)
    return values


def _merge_guard(base: _Layer, own: _Layer, warnings: list[str] | None) -> _Layer:
    """``own`` over ``base``, keeping the stricter value of each key (on a tie, ``base``'s).

    ``warnings`` collects a located warning for each value of ``own`` looser than ``base``'s,
    i.e. a file that tries to loosen a limit of a file it includes; ``None`` merges silently
    (two files included side by side, neither of which includes the other).
    """
    out = dict(base)
    for key, (value, where) in own.items():
        if key not in out or _STRICTER[key](value, out[key][0]):
            out[key] = (value, where)
        elif value != out[key][0] and warnings is not None:
            warnings.append(f"{where}: warning: guard.{key} {_fmt(value)} is looser than {_fmt(out[key][0])} "
                            f"set in {out[key][1]}; the stricter value applies")
    return out


def _merge_output(base: _Layer, own: _Layer) -> _Layer:
    """``own`` over ``base``; a key written with two different values is an error at ``own``'s value."""
    out = dict(base)
    for key, (value, where) in own.items():
        if key in out and out[key][0] != value:
            raise RecipeError.at(where, f"output.{key} {value} conflicts with {out[key][0]} set in {out[key][1]}; "
                                        "an included recipe and its parent must agree: write the same value "
                                        "or leave it out of one file")
        out.setdefault(key, (value, where))
    return out


def _build(cls, layer: _Layer):
    """A :class:`Guard` or :class:`Output` from a merged layer; defaults for keys nobody wrote."""
    return cls(**{k: v for k, (v, _) in layer.items()},
               where=MappingProxyType({k: where for k, (_, where) in layer.items()}))



class _Loaded(NamedTuple):
    """One file read, its includes resolved."""

    entries: dict                 # its top-level entries
    sections: list[Section]       # the resolved chain, includes first
    included: list[str]           # paths of every file included, directly or not
    guard: _Layer                 # the strictest guard value of each key written along the chain
    output: _Layer                # the output keys written along the chain
    warnings: list[str]           # located warnings, includes first
    loudness: _Layer = {}         # the loudness keys written along the chain
    rates: _Layer = {}            # the rates: that apply (the nearest file along the chain that writes them)


def _load_file(path: str, stack: tuple[str, ...], where: Location | None, text: str | None = None,
               tree: str | None = None) -> _Loaded:
    """Read one file (or take its ``text``) and, recursively, the files it includes (inside ``tree``)."""
    real = os.path.realpath(path)
    if real in stack:
        chain = " -> ".join(os.path.basename(p) for p in stack + (real,))
        raise RecipeError.at(where, f"include cycle: {chain}; a recipe may not include itself")
    if len(stack) > MAX_INCLUDE_DEPTH:
        raise RecipeError.at(where, f"includes nested deeper than {MAX_INCLUDE_DEPTH} levels; "
                                    f"allowed: up to {MAX_INCLUDE_DEPTH}")
    if text is None:
        text = _read_text(path, where)
    root = _compose(text, path)
    if root is None:
        raise RecipeError(path, 1, 1, "the recipe is empty; it needs at least 'format: 1' and a 'chain'")
    entries = _mapping(root, "a recipe")
    _check_keys(entries, _TOP_KEYS, "the recipe")
    if "format" not in entries:
        raise RecipeError.at(root.where, "the recipe has no 'format'; write 'format: 1' at the top")
    fnode = entries["format"][1]
    if isinstance(fnode.value, bool) or fnode.value not in (1, 1.0):
        raise RecipeError.at(fnode.where, f"format {_describe(fnode.value)} is not supported; allowed: 1")

    sections: list[Section] = []
    included: list[str] = []
    inc_guard: _Layer = {}
    inc_output: _Layer = {}
    inc_loudness: _Layer = {}
    inc_rates: _Layer = {}
    warnings: list[str] = []
    if "include" in entries:
        inode = entries["include"][1]
        items = inode.value if isinstance(inode.value, list) else [inode]
        for item in items:
            rel = _text(item, "include")
            target = resolve_include(rel, item.where, path, tree)
            inc = _load_file(target, stack + (real,), item.where, tree=tree)
            sections.extend(sec if sec.origin else replace(sec, origin=rel) for sec in inc.sections)
            included.extend([target] + inc.included)
            warnings.extend(inc.warnings)
            inc_guard = _merge_guard(inc_guard, inc.guard, None)
            inc_output = _merge_output(inc_output, inc.output)
            inc_loudness = merge_loudness(inc_loudness, inc.loudness)
            inc_rates = merge_rates(inc_rates, inc.rates, side_by_side=True)
            if len(sections) > MAX_SECTIONS:
                raise RecipeError.at(item.where, f"the chain has more than {MAX_SECTIONS} sections "
                                                 f"(includes counted); split the recipe")

    if "chain" in entries:
        cnode = entries["chain"][1]
        if cnode.value is None:
            cnode.value = []
        if not isinstance(cnode.value, list):
            raise RecipeError.at(cnode.where, f"chain must be a list of sections; found {_describe(cnode.value)}")
        for i, snode in enumerate(cnode.value):
            sections.append(_section(snode, i, path))
            if len(sections) > MAX_SECTIONS:
                raise RecipeError.at(snode.where, f"the chain has more than {MAX_SECTIONS} sections "
                                                  f"(includes counted); split the recipe")
        warnings.extend(_low_frequency_warnings(sections[len(sections) - len(cnode.value):]))
    if not sections:
        at = entries["chain"][1].where if "chain" in entries else root.where
        raise RecipeError.at(at, "the chain is empty; give at least one section "
                                 f"(types: {', '.join(SECTION_TYPES)})")
    # The strictest limit of the include chain applies: a file cannot loosen a limit it includes.
    guard = _merge_guard(inc_guard, _guard(entries["guard"][1] if "guard" in entries else None), warnings)
    output = _merge_output(inc_output, _output(entries["output"][1] if "output" in entries else None))
    loudness = merge_loudness(inc_loudness, read_loudness(entries["loudness"][1] if "loudness" in entries else None))
    rates = merge_rates(inc_rates, read_rates(entries["rates"][1] if "rates" in entries else None))
    return _Loaded(entries, sections, included, guard, output, list(dict.fromkeys(warnings)), loudness, rates)


def _recipe(path: str, text: str | None = None, allow_outside: bool = False) -> Recipe:
    """The recipe at ``path`` (whose text is ``text`` if given), includes resolved."""
    top = _load_file(path, (), None, text, tree=include_tree(path, allow_outside))
    one_kind_of_channels(top.sections)
    entries = top.entries
    name = _text(entries["name"][1], "name", longest=MAX_NAME_CHARS) if "name" in entries \
        else os.path.splitext(os.path.basename(path))[0]
    if "notes" in entries:
        _text(entries["notes"][1], "notes")
    block = entries["loudness"][1].where if "loudness" in entries else Location(path, 1, 1)
    return Recipe(path, name, tuple(top.sections), _build(Guard, top.guard), _build(Output, top.output),
                  tuple(top.included), tuple(top.warnings), loudness=build_loudness(top.loudness, block),
                  rates=top.rates["rates"][0] if top.rates else None)


def load(path: str | os.PathLike, *, allow_outside_includes: bool = False) -> Recipe:
    """Load and validate a recipe file.

    Parameters
    ----------
    path
        A ``format: 1`` YAML recipe.
    allow_outside_includes
        Follow an ``include:`` to a file outside this recipe's folder tree (refused by default).

    Returns
    -------
    Recipe
        Sample-rate-free and validated; frequencies are checked against Nyquist
        later, by :func:`chainrun.design.design`, for each rate actually used.

    Raises
    ------
    RecipeError
        For every problem, with file, line and column.

    Examples
    --------
    >>> from chainrun.recipe import load
    >>> recipe = load("recipes/marsh-cleanup.yaml")     # doctest: +SKIP
    >>> [s.kind for s in recipe.sections]                 # doctest: +SKIP
    ['highpass', 'notch', 'notch', 'notch', 'notch']
    """
    return _recipe(os.fspath(path), allow_outside=allow_outside_includes)


def loads(text: str, name: str = "<text>", *, allow_outside_includes: bool = False) -> Recipe:
    """Load and validate a recipe given as YAML text, exactly as :func:`load` reads a file.

    Parameters
    ----------
    text
        The recipe's YAML.
    name
        Stands for the file's path in locations (``<text>:3:7: error: ...``), in
        ``Recipe.path`` and, without ``name:`` in the text, in ``Recipe.name``.

    Returns
    -------
    Recipe

    Raises
    ------
    RecipeError
        For every problem, located at ``name:line:col``.

    Notes
    -----
    ``include:`` paths in the text are resolved relative to the current working folder
    (the folder of ``name`` if it names one), since the text has no folder of its own, and must
    stay inside that folder unless ``allow_outside_includes`` (as for :func:`load`).

    Examples
    --------
    >>> from chainrun.recipe import loads
    >>> loads("format: 1\\nchain:\\n  - {type: gain, gain_db: -3}\\n").sections[0].params["gain_db"]
    -3.0
    """
    if not isinstance(text, str):
        raise TypeError(f"recipe text must be str; got {type(text).__name__}")
    size = len(text.encode("utf-8", "surrogatepass"))
    if size > MAX_FILE_BYTES:
        raise RecipeError(name, 1, 1, f"recipe is {size} bytes; allowed: up to {MAX_FILE_BYTES} bytes")
    return _recipe(name, text[1:] if text.startswith("\ufeff") else text, allow_outside_includes)


def _plain(value: Any, name: str, depth: int = 0) -> Any:
    """``value`` as data yaml.safe_dump writes: dict, list, str, int, float, bool or None."""
    if depth > MAX_NESTING:
        raise RecipeError(name, 1, 1, f"lists and mappings are nested more than {MAX_NESTING} deep; "
                                      "a recipe is a small, flat file")
    if value is None or isinstance(value, (str, bool)):
        return value
    if isinstance(value, Mapping):
        bad = [k for k in value if not (k is None or isinstance(k, (str, int, float)))]
        if bad:
            raise RecipeError(name, 1, 1, f"keys must be plain words; found a key of type {type(bad[0]).__name__}")
        return {k: _plain(v, name, depth + 1) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v, name, depth + 1) for v in value]
    if isinstance(value, numbers.Integral):      # numpy integers too
        return int(value)
    if isinstance(value, numbers.Real):          # numpy floats too
        return float(value)
    raise RecipeError(name, 1, 1, f"a value of type {type(value).__name__} cannot be written in a recipe; "
                                  "use numbers, text, lists and mappings")


def from_dict(mapping: Mapping[str, Any], name: str = "<dict>", *, allow_outside_includes: bool = False) -> Recipe:
    """Load and validate a recipe given as a plain mapping (what the YAML would read as).

    The mapping is written out as YAML (``yaml.safe_dump``, keys in the order given) and
    read by :func:`loads`, so that it is checked by exactly the same rules as a file.

    Parameters
    ----------
    mapping
        E.g. ``{"format": 1, "chain": [{"type": "peak", "freq": 2000, "gain_db": 3, "q": 1}]}``.
        Numbers may be numpy scalars; tuples count as lists.
    name
        Stands for the file's path in locations, ``Recipe.path`` and the default ``Recipe.name``.

    Returns
    -------
    Recipe

    Raises
    ------
    RecipeError
        For every problem. Its line and column point into the mapping as YAML would write
        it, one key a line; the message names the key (``chain[0].freq``).

    Notes
    -----
    ``include:`` paths are resolved relative to the current working folder, and stay inside it
    unless ``allow_outside_includes``.
    """
    text = yaml.safe_dump(_plain(mapping, name), sort_keys=False, default_flow_style=False,
                          allow_unicode=True, width=1 << 16)
    return loads(text, name, allow_outside_includes=allow_outside_includes)
