"""Recipe files: YAML in, a validated, sample-rate-free :class:`Recipe` out.

A recipe (``format: 1``) names an ordered chain of filter sections, an optional
``include:`` whose chain comes first, the ``guard:`` limits and the ``output:``
format. Along an include chain the strictest guard limit any file writes applies
(a file that writes a looser one gets a located warning), and an ``output:`` key
written differently by an included file and its parent is an error.

Every value keeps the file, line and column it came from, so that any later
stage (design at a sample rate, the guard, the runner) can point at the exact
place in the file that caused a problem.

Only safe YAML is read: the document is *composed* into nodes with PyYAML's
safe loader and converted here; no tag ever constructs a Python object.
"""
from __future__ import annotations

import difflib
import hashlib
import json
import math
import os
import re
import stat
from dataclasses import dataclass, field, replace
from types import MappingProxyType
from typing import Any, Mapping, NamedTuple

import yaml

from .errors import Location, RecipeError
from .text import one_line  # noqa: F401 (re-exported)

__all__ = ["Location", "RecipeError", "Section", "Guard", "Output", "Recipe", "load"]

# Resource bounds. A recipe is a small hand-written file; anything far beyond
# these is a mistake or an attack, and gets a clear message instead of a stall.
MAX_FILE_BYTES = 1 << 20          # 1 MiB of YAML
MAX_NODES = 20_000                # YAML nodes after alias expansion
MAX_SECTIONS = 64                 # sections in the resolved chain, includes counted
MAX_INCLUDE_DEPTH = 8             # include nesting
MAX_ORDER = 8                     # Butterworth order and raw iir order
MAX_ABS_GAIN_DB = 120.0           # |gain_db| of a single section
MAX_BW_OCTAVES = 10.0             # bandwidth in octaves
MAX_NESTING = 32                  # YAML collections inside collections (aliases followed)
MAX_IIR_COEFF = 1e9               # |b[i] / a[0]| and |a[i] / a[0]| of a raw iir section
MIN_FREQ_HZ = 1e-3                # lowest section frequency; below it the designs underflow to nonsense

_STR_TAG, _INT_TAG, _FLOAT_TAG = ("tag:yaml.org,2002:str", "tag:yaml.org,2002:int", "tag:yaml.org,2002:float")
_RESOLVER = yaml.resolver.Resolver()         # YAML 1.1's implicit tags, to tell an explicit !!str apart
_NOT_DECIMAL = re.compile(r"^[-+]?(0[0-9_]+|0[xXbBoO]|[^:]*:)")   # octal, hex, binary, base 60
_FLOAT_RE = re.compile(r"^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$")


@dataclass(frozen=True)
class Section:
    """One filter section of a chain, validated but not yet designed.

    ``params`` holds the section's numeric parameters with defaults filled in
    (``order``; ``slope`` for second-order shelves); ``where`` the location of
    the section itself and ``param_where`` the location of each given key.
    ``index`` is the position in the file it was written in.
    """

    kind: str
    params: Mapping[str, Any]
    where: Location
    param_where: Mapping[str, Location]
    index: int
    label: str = ""
    origin: str = ""          # for a section of an included recipe: that file, as the include named it

    def locate(self, key: str | None = None) -> Location:
        """Location of ``key`` if it was written, else of the section."""
        return self.param_where.get(key, self.where) if key else self.where

    @property
    def title(self) -> str:
        """Short human name: ``chain[2] peak 3000 Hz (label)``, plus ``from FILE`` for an included section."""
        base = f"chain[{self.index}] {self.kind}"
        if "freq" in self.params:
            base += f" {_fmt(self.params['freq'])} Hz"
        base = f"{base} ({self.label})" if self.label else base
        return f"{base} from {self.origin}" if self.origin else base

    def to_dict(self) -> dict:
        out: dict[str, Any] = {"type": self.kind}
        out.update({k: (list(v) if isinstance(v, tuple) else v) for k, v in self.params.items()})
        if self.label:
            out["label"] = self.label
        out["from"] = str(self.where)
        return out


@dataclass(frozen=True)
class Guard:
    """Safety limits, see README.md "What the guard promises" (keys: README.md "Recipes").

    ``where`` holds the location of each value some file of the include chain wrote (the
    strictest one); a key missing from it has its default.
    """

    max_gain_db: float = 24.0
    pole_margin: float = 1e-6
    max_decay_s: float = 5.0
    ceiling_dbfs: float = 0.0
    true_peak_ceiling_dbtp: float | None = None
    on_over: str = "reject"
    where: Mapping[str, Location] = field(default_factory=dict, compare=False)

    def to_dict(self) -> dict:
        return {k: getattr(self, k) for k in _GUARD_KEYS}

    def sources(self) -> dict:
        """Where each value came from: key -> ``path:line:col``, or ``default``."""
        return {k: str(self.where[k]) if k in self.where else "default" for k in _GUARD_KEYS}


@dataclass(frozen=True)
class Output:
    """Output format: ``subtype`` (same or a libsndfile subtype) and ``dither``."""

    subtype: str = "same"
    dither: str = "auto"
    where: Mapping[str, Location] = field(default_factory=dict, compare=False)

    def to_dict(self) -> dict:
        return {"subtype": self.subtype, "dither": self.dither}


@dataclass(frozen=True)
class Recipe:
    """A loaded recipe: the resolved chain (includes first), guard and output.

    ``warnings`` are located one-line warnings (``path:line:col: warning: ...``) found
    while loading, e.g. a file that writes a looser guard limit than a file it includes.
    """

    path: str
    name: str
    sections: tuple[Section, ...]
    guard: Guard
    output: Output
    includes: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        """The recipe as resolved, as plain JSON-safe data (``guard_from``: where each guard value was set)."""
        return {
            "format": 1,
            "name": self.name,
            "path": self.path,
            "includes": list(self.includes),
            "chain": [s.to_dict() for s in self.sections],
            "guard": self.guard.to_dict(),
            "guard_from": self.guard.sources(),
            "output": self.output.to_dict(),
            "warnings": list(self.warnings),
        }

    @property
    def digest(self) -> str:
        """SHA-256 of the resolved recipe (chain, guard values, output), location-free.

        Two recipes that filter audio identically share a digest even if they are
        laid out differently or include each other from other folders.
        """
        d = self.to_dict()
        for s in d["chain"]:
            s.pop("from", None)
            s.pop("label", None)
        payload = {"chain": d["chain"], "guard": d["guard"], "output": d["output"]}
        return hashlib.sha256(json.dumps(payload, sort_keys=True).encode()).hexdigest()


# --------------------------------------------------------------------------- YAML

class _Node:
    """A YAML value with its location: mapping -> dict of str to (key loc, _Node)."""

    __slots__ = ("value", "where", "raw")

    def __init__(self, value: Any, where: Location, raw: str | None = None):
        self.value, self.where, self.raw = value, where, raw


def _loc(path: str, mark) -> Location:
    return Location(path, mark.line + 1, mark.column + 1)


def _yaml_problem(exc: yaml.YAMLError) -> str:
    """The library's one-line reason, without its multi-line "in <unicode string>" excerpt."""
    if isinstance(exc, yaml.MarkedYAMLError):
        what = exc.problem or exc.context
        if exc.problem and exc.context:      # "expected a single document in the stream, but found another document"
            what = f"{exc.context}{',' if exc.problem.startswith('but') else ':'} {exc.problem}"
    elif isinstance(exc, yaml.reader.ReaderError) and isinstance(exc.character, str):
        what = f"unacceptable character #x{ord(exc.character):04x}: {exc.reason}"
    else:
        what = str(exc).splitlines()[0] if str(exc) else None
    return " ".join((what or "cannot be parsed").split())


def _compose(text: str, path: str) -> _Node | None:
    try:
        # Nesting depth first, from the event stream (iterative): PyYAML's composer
        # is recursive and would die with RecursionError on "[[[[...". Aliases are
        # followed later, by _convert, which counts depth and nodes itself.
        depth = 0
        for event in yaml.parse(text, Loader=yaml.SafeLoader):
            if isinstance(event, yaml.CollectionStartEvent):
                depth += 1
                if depth > MAX_NESTING:
                    where = _loc(path, event.start_mark)
                    raise RecipeError.at(where, f"lists and mappings are nested more than {MAX_NESTING} "
                                                "deep; a recipe is a small, flat file")
            elif isinstance(event, yaml.CollectionEndEvent):
                depth -= 1
        root = yaml.compose(text, Loader=yaml.SafeLoader)
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        line, col = (mark.line + 1, mark.column + 1) if mark else (1, 1)
        raise RecipeError(path, line, col, f"invalid YAML: {_yaml_problem(exc)}; a recipe is a YAML mapping") from None
    except yaml.reader.ReaderError as exc:
        before = text[: exc.position]
        line, col = before.count("\n") + 1, exc.position - (before.rfind("\n") + 1) + 1
        raise RecipeError(path, line, col, f"invalid YAML: {_yaml_problem(exc)}; "
                                           "a recipe is printable UTF-8 text") from None
    except yaml.YAMLError as exc:
        raise RecipeError(path, 1, 1, f"invalid YAML: {_yaml_problem(exc)}; a recipe is a YAML mapping") from None
    if root is None:
        return None
    constructor = yaml.SafeLoader("")
    budget = [MAX_NODES]
    return _convert(root, path, constructor, budget)


_PLAIN_COLLECTIONS = ("tag:yaml.org,2002:map", "tag:yaml.org,2002:seq")


def _convert(node, path: str, constructor, budget: list, depth: int = 0) -> _Node:
    budget[0] -= 1
    where = _loc(path, node.start_mark)
    if budget[0] < 0:
        raise RecipeError.at(where, f"the document expands to more than {MAX_NODES} YAML nodes "
                                    "(aliases counted); a recipe is a small file")
    if depth > MAX_NESTING:   # only reachable through aliases, e.g. one that contains itself: &a [*a]
        raise RecipeError.at(where, f"aliases nest lists and mappings more than {MAX_NESTING} deep "
                                    "(an alias may refer to itself); a recipe is a small, flat file")
    if isinstance(node, (yaml.MappingNode, yaml.SequenceNode)) and node.tag not in _PLAIN_COLLECTIONS:
        # A tag such as !!python/object on a list or mapping would otherwise be dropped silently
        # (nothing is ever constructed from it); say that it is not allowed.
        tag = node.tag.replace("tag:yaml.org,2002:", "!!")
        raise RecipeError.at(where, f"could not determine a constructor for the tag '{tag}': tags are not "
                                    "allowed; write a plain list or mapping")
    if isinstance(node, yaml.MappingNode):
        out: dict[str, tuple[Location, _Node]] = {}
        for knode, vnode in node.value:
            kwhere = _loc(path, knode.start_mark)
            if knode.tag == "tag:yaml.org,2002:merge":
                raise RecipeError.at(kwhere, "YAML merge keys (<<) are not supported; write the keys out")
            if not isinstance(knode, yaml.ScalarNode) or knode.tag != "tag:yaml.org,2002:str":
                raise RecipeError.at(kwhere, "keys must be plain words; found a non-text key")
            key = knode.value
            if key in out:
                first = out[key][0]
                raise RecipeError.at(kwhere, f"duplicate key '{key}' (first given at line {first.line}); "
                                             "each key may appear once")
            out[key] = (kwhere, _convert(vnode, path, constructor, budget, depth + 1))
        return _Node(out, where)
    if isinstance(node, yaml.SequenceNode):
        return _Node([_convert(v, path, constructor, budget, depth + 1) for v in node.value], where)
    # Scalar. Plain scalars like 1e-6 are strings under YAML 1.1; read them as numbers, unless the
    # recipe tagged them as text itself (!!str -1 stays text, as "-1" does).
    if node.tag == _STR_TAG and node.style is None and _FLOAT_RE.match(node.value) \
            and _RESOLVER.resolve(yaml.ScalarNode, node.value, (True, False)) == _STR_TAG:
        return _Node(float(node.value), where, node.value)
    # YAML 1.1 reads 050 as octal (40), 1:30 as base 60 (90), 0x32 as hex: a hum notch typed 050
    # would cut 40 Hz. Numbers in a recipe are written in decimal.
    if node.style is None and node.tag in (_INT_TAG, _FLOAT_TAG) and _NOT_DECIMAL.match(node.value):
        raise RecipeError.at(where, f"'{node.value}' is not a decimal number (YAML would read it in another "
                                    "base); write it in decimal, without leading zeros or colons")
    try:
        value = constructor.construct_object(node, deep=True)
    except (yaml.YAMLError, ValueError, OverflowError) as exc:
        why = _yaml_problem(exc) if isinstance(exc, yaml.YAMLError) else " ".join(str(exc).split())
        raise RecipeError.at(where, f"cannot read value '{node.value}': {why}; "
                                    "write a plain number or text") from None
    return _Node(value, where, node.value)


# --------------------------------------------------------------------------- values

def _fmt(x: float) -> str:
    return f"{x:g}" if isinstance(x, float) else str(x)


def _describe(value: Any) -> str:
    if isinstance(value, dict):
        return "a mapping"
    if isinstance(value, list):
        return "a list"
    if value is None:
        return "nothing (null)"
    if isinstance(value, bool):
        return f"'{str(value).lower()}'"
    if isinstance(value, str):
        return f"text '{value}'" if len(value) < 40 else "text"
    return f"'{value}'"


def _number(node: _Node, name: str, *, lo: float | None = None, hi: float | None = None,
            lo_open: bool = False, hi_open: bool = False, unit: str = "") -> float:
    v = node.value
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise RecipeError.at(node.where, f"{name} must be a number; found {_describe(v)}")
    try:
        v = float(v)
    except OverflowError:
        v = math.inf
    if not math.isfinite(v):
        raise RecipeError.at(node.where, f"{name} must be a finite number; found {node.raw or v}")
    u = f" {unit}" if unit else ""
    if lo is not None and (v < lo or (lo_open and v == lo)):
        rel = "above" if lo_open else "at least"
        raise RecipeError.at(node.where, f"{name} {_fmt(v)}{u} is out of range; it must be {rel} {_fmt(lo)}{u}")
    if hi is not None and (v > hi or (hi_open and v == hi)):
        rel = "below" if hi_open else "at most"
        raise RecipeError.at(node.where, f"{name} {_fmt(v)}{u} is out of range; it must be {rel} {_fmt(hi)}{u}")
    return v


def _integer(node: _Node, name: str, lo: int, hi: int) -> int:
    v = node.value
    if isinstance(v, float) and v.is_integer():
        v = int(v)
    if isinstance(v, bool) or not isinstance(v, int):
        raise RecipeError.at(node.where, f"{name} must be a whole number from {lo} to {hi}; found {_describe(v)}")
    if not lo <= v <= hi:
        raise RecipeError.at(node.where, f"{name} {v} is out of range; allowed: {lo} to {hi}")
    return v


def _text(node: _Node, name: str, choices: tuple[str, ...] | None = None) -> str:
    v = node.value
    if not isinstance(v, str):
        allowed = f"one of {', '.join(choices)}" if choices else "text"
        raise RecipeError.at(node.where, f"{name} must be {allowed}; found {_describe(v)}")
    if choices is not None and v not in choices:
        near = difflib.get_close_matches(v, choices, n=1)
        hint = f" (did you mean '{near[0]}'?)" if near else ""
        raise RecipeError.at(node.where, f"{name} '{v}' is not known{hint}; allowed: {', '.join(choices)}")
    return v


def _mapping(node: _Node, name: str) -> dict[str, tuple[Location, _Node]]:
    if not isinstance(node.value, dict):
        raise RecipeError.at(node.where, f"{name} must be a mapping of keys to values; found {_describe(node.value)}")
    return node.value


def _check_keys(entries: Mapping[str, tuple[Location, _Node]], allowed: tuple[str, ...], name: str) -> None:
    for key, (kwhere, _) in entries.items():
        if key not in allowed:
            near = difflib.get_close_matches(key, allowed, n=1)
            hint = f" (did you mean '{near[0]}'?)" if near else ""
            raise RecipeError.at(kwhere, f"unknown key '{key}' in {name}{hint}; allowed: {', '.join(allowed)}")


# --------------------------------------------------------------------------- sections

# Parameter readers, one line each: key -> function(node, name) -> value.
_PARAM_READERS = {
    "freq": lambda n, name: _frequency(n, name),
    "q": lambda n, name: _number(n, name, lo=0.0, lo_open=True, hi=1000.0),
    "bw": lambda n, name: _number(n, name, lo=0.0, lo_open=True, hi=MAX_BW_OCTAVES, unit="octaves"),
    "gain_db": lambda n, name: _number(n, name, lo=-MAX_ABS_GAIN_DB, hi=MAX_ABS_GAIN_DB, unit="dB"),
    "slope": lambda n, name: _number(n, name, lo=0.0, lo_open=True),
    "b": lambda n, name: _coefficients(n, name),
    "a": lambda n, name: _coefficients(n, name),
}

# Section type -> (required keys, optional keys). The designers live in design.py.
_SECTION_KEYS = {
    "highpass": (("freq",), ("order", "q")),
    "lowpass": (("freq",), ("order", "q")),
    "low_shelf": (("freq", "gain_db"), ("slope", "q", "order")),
    "high_shelf": (("freq", "gain_db"), ("slope", "q", "order")),
    "peak": (("freq", "gain_db"), ("q", "bw")),
    "notch": (("freq",), ("q", "bw")),
    "bandpass": (("freq",), ("q", "bw")),
    "allpass": (("freq",), ("q", "bw")),
    "gain": (("gain_db",), ()),
    "iir": (("b", "a"), ()),
}
SECTION_TYPES = tuple(_SECTION_KEYS)

_TOP_KEYS = ("format", "name", "notes", "include", "chain", "guard", "output")
_GUARD_KEYS = ("max_gain_db", "pole_margin", "max_decay_s", "ceiling_dbfs", "true_peak_ceiling_dbtp", "on_over")
ON_OVER = ("reject", "clip", "scale")
OUTPUT_SUBTYPES = ("same", "PCM_16", "PCM_24", "PCM_32", "FLOAT", "DOUBLE")
DITHER = ("auto", "tpdf", "none")


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
    required, optional = _SECTION_KEYS[kind]
    _check_keys(entries, ("type", "label") + required + optional, f"{name} ({kind})")
    for key in required:
        if key not in entries:
            raise RecipeError.at(node.where, f"{name} ({kind}) needs '{key}'; required keys: {', '.join(required)}")
    label = _text(entries["label"][1], f"{name}.label") if "label" in entries else ""
    params: dict[str, Any] = {}
    where = {k: v[1].where for k, v in entries.items()}
    for key, (_, vnode) in entries.items():
        if key in _PARAM_READERS:
            params[key] = _PARAM_READERS[key](vnode, f"{name}.{key}")
    _SECTION_RULES[kind](params, entries, name, where)
    return Section(kind, MappingProxyType(params), node.where, MappingProxyType(where), index, label)


def _one_of(params: dict, keys: tuple[str, str], name: str, where, node_where: Location, required: bool) -> None:
    given = [k for k in keys if k in params]
    if len(given) > 1:
        raise RecipeError.at(where[keys[1]], f"{name} gives both {keys[0]} and {keys[1]}; give one of them")
    if required and not given:
        raise RecipeError.at(node_where, f"{name} needs {keys[0]} or {keys[1]}; give one of them")


def _rule_pass(params, entries, name, where) -> None:
    order = _integer(entries["order"][1], f"{name}.order", 1, MAX_ORDER) if "order" in entries else 2
    params["order"] = order
    if "q" in params and order != 2:
        raise RecipeError.at(where["q"], f"{name}.q is only allowed with order 2 (cookbook form); "
                                         f"Butterworth order {order} takes no q")


def _rule_shelf(params, entries, name, where) -> None:
    order = _integer(entries["order"][1], f"{name}.order", 1, 2) if "order" in entries else 2
    params["order"] = order
    if order == 1:
        for key in ("slope", "q"):
            if key in params:
                raise RecipeError.at(where[key], f"{name}.{key} is not used by a first-order shelf; "
                                                 "remove it or use order 2")
        return
    _one_of(params, ("slope", "q"), name, where, where["type"], required=False)
    if "q" not in params:
        params.setdefault("slope", 1.0)
        # W3C Audio EQ Cookbook: alpha = sin(w0)/2 * sqrt((A + 1/A)(1/S - 1) + 2) must be real.
        a = 10.0 ** (params["gain_db"] / 40.0)
        # For a gain so small that A + 1/A rounds to 2, any slope is allowed (and 1/0 would be raised).
        excess = 1.0 - 2.0 / (a + 1.0 / a)
        s_max = 1.0 / excess if excess > 0 else math.inf
        if params["slope"] > s_max:
            # said rounded down, so that the value offered is one that is accepted
            digits = 3 - math.floor(math.log10(s_max))
            offered = math.floor(s_max * 10.0 ** digits) / 10.0 ** digits
            raise RecipeError.at(where.get("slope", where["type"]),
                                 f"{name}.slope {_fmt(params['slope'])} is too steep for "
                                 f"{_fmt(params['gain_db'])} dB; allowed: up to {offered:.4g} at this gain")


def _rule_band(params, entries, name, where) -> None:
    _one_of(params, ("q", "bw"), name, where, where["type"], required=True)


def _rule_none(params, entries, name, where) -> None:
    return None


def _rule_iir(params, entries, name, where) -> None:
    b, a = params["b"], params["a"]
    if a[0] == 0.0:
        raise RecipeError.at(where["a"], f"{name}.a[0] is 0; the leading denominator coefficient must be non-zero")
    if all(x == 0.0 for x in b):
        raise RecipeError.at(where["b"], f"{name}.b is all zeros; the section would output silence")
    # Beyond these ratios the design and the guard over- or underflow (a stable order-8 denominator has
    # |a[i] / a[0]| <= 70, and a numerator within the 120 dB gain limit stays far below 1e9).
    for key, coeffs in (("a", a), ("b", b)):
        big = max(abs(x / a[0]) if math.isfinite(x / a[0]) else math.inf for x in coeffs)
        if big > MAX_IIR_COEFF:
            raise RecipeError.at(where[key], f"{name}.{key} has a coefficient {_fmt(big)} times a[0]; "
                                             f"allowed: up to {MAX_IIR_COEFF:g} times a[0] (scale b and a alike)")
    if max(abs(x / a[0]) for x in b) <= 1e-14:
        raise RecipeError.at(where["b"], f"{name}.b is effectively zero (every b[i] / a[0] is 1e-14 or less); "
                                         "the section would output silence")
    order = max(len(b), len(a)) - 1
    if order > MAX_ORDER:
        raise RecipeError.at(where["a"], f"{name} has order {order}; allowed: up to {MAX_ORDER}")


# Section type -> validation of its parameter combination.
_SECTION_RULES = {
    "highpass": _rule_pass, "lowpass": _rule_pass,
    "low_shelf": _rule_shelf, "high_shelf": _rule_shelf,
    "peak": _rule_band, "notch": _rule_band, "bandpass": _rule_band, "allpass": _rule_band,
    "gain": _rule_none, "iir": _rule_iir,
}


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
    _check_keys(entries, ("subtype", "dither"), "output")
    values = {}
    for key, choices in (("subtype", OUTPUT_SUBTYPES), ("dither", DITHER)):
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


def _read_text(path: str, where: Location | None) -> str:
    def fail(msg: str):
        if where is None:
            return RecipeError(path, 1, 1, msg)
        return RecipeError.at(where, msg)

    try:
        if os.path.isdir(path):
            raise fail(f"'{path}' is a folder; a recipe is a .yaml file")
        if not stat.S_ISREG(os.stat(path).st_mode):     # a pipe or a device: reading it could wait for ever
            raise fail(f"'{path}' is not a regular file (a pipe, socket or device); a recipe is a .yaml file")
        size = os.path.getsize(path)
        if size > MAX_FILE_BYTES:
            raise fail(f"recipe is {size} bytes; allowed: up to {MAX_FILE_BYTES} bytes")
        with open(path, "rb") as fh:
            data = fh.read(MAX_FILE_BYTES + 1)
    except FileNotFoundError:
        raise fail(f"recipe file '{path}' does not exist; give the path of a .yaml recipe") from None
    except OSError as exc:
        raise fail(f"cannot read recipe file '{path}': {exc.strerror or exc}; "
                   "a recipe must be a readable file") from None
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        before = data[: exc.start]
        line = before.count(b"\n") + 1
        col = exc.start - (before.rfind(b"\n") + 1) + 1
        raise RecipeError(path, line, col, f"byte 0x{data[exc.start]:02x} is not UTF-8; "
                                           "save the recipe as UTF-8 text") from None


class _Loaded(NamedTuple):
    """One file read, its includes resolved."""

    entries: dict                 # its top-level entries
    sections: list[Section]       # the resolved chain, includes first
    included: list[str]           # paths of every file included, directly or not
    guard: _Layer                 # the strictest guard value of each key written along the chain
    output: _Layer                # the output keys written along the chain
    warnings: list[str]           # located warnings, includes first


def _load_file(path: str, stack: tuple[str, ...], where: Location | None) -> _Loaded:
    """Read one file and, recursively, the files it includes."""
    real = os.path.realpath(path)
    if real in stack:
        chain = " -> ".join(os.path.basename(p) for p in stack + (real,))
        raise RecipeError.at(where, f"include cycle: {chain}; a recipe may not include itself")
    if len(stack) > MAX_INCLUDE_DEPTH:
        raise RecipeError.at(where, f"includes nested deeper than {MAX_INCLUDE_DEPTH} levels; "
                                    f"allowed: up to {MAX_INCLUDE_DEPTH}")
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
    warnings: list[str] = []
    if "include" in entries:
        inode = entries["include"][1]
        items = inode.value if isinstance(inode.value, list) else [inode]
        for item in items:
            rel = _text(item, "include")
            if not rel.strip() or os.path.isabs(rel):
                raise RecipeError.at(item.where, f"include '{rel}' is not a relative path; "
                                                 "give a path relative to this recipe's folder")
            target = os.path.normpath(os.path.join(os.path.dirname(path), rel))
            if not os.path.exists(target):
                raise RecipeError.at(item.where, f"included recipe '{rel}' does not exist "
                                                 f"(looked for {target}); paths are relative to this recipe's folder")
            inc = _load_file(target, stack + (real,), item.where)
            sections.extend(sec if sec.origin else replace(sec, origin=rel) for sec in inc.sections)
            included.extend([target] + inc.included)
            warnings.extend(inc.warnings)
            inc_guard = _merge_guard(inc_guard, inc.guard, None)
            inc_output = _merge_output(inc_output, inc.output)
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
    if not sections:
        at = entries["chain"][1].where if "chain" in entries else root.where
        raise RecipeError.at(at, "the chain is empty; give at least one section "
                                 f"(types: {', '.join(SECTION_TYPES)})")
    # The strictest limit of the include chain applies: a file cannot loosen a limit it includes.
    guard = _merge_guard(inc_guard, _guard(entries["guard"][1] if "guard" in entries else None), warnings)
    output = _merge_output(inc_output, _output(entries["output"][1] if "output" in entries else None))
    return _Loaded(entries, sections, included, guard, output, list(dict.fromkeys(warnings)))


def load(path: str | os.PathLike) -> Recipe:
    """Load and validate a recipe file.

    Parameters
    ----------
    path
        A ``format: 1`` YAML recipe.

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
    path = os.fspath(path)
    top = _load_file(path, (), None)
    entries = top.entries
    name = _text(entries["name"][1], "name") if "name" in entries else os.path.splitext(os.path.basename(path))[0]
    if "notes" in entries:
        _text(entries["notes"][1], "notes")
    return Recipe(path, name, tuple(top.sections), _build(Guard, top.guard), _build(Output, top.output),
                  tuple(top.included), tuple(top.warnings))
