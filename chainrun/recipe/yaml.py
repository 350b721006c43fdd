"""Located safe YAML: a recipe file -> text -> nodes that remember their file, line and column.

Only safe YAML is read: the document is *composed* into nodes with PyYAML's safe loader
and converted here; no tag ever constructs a Python object. Numbers are written in decimal
(YAML 1.1 would read ``050`` as octal 40 and ``1:30`` as base 60), and the size of the
document is bounded (nesting depth, node count after aliases).

The readers at the end (``_number``, ``_integer``, ``_text``, ``_mapping``, ``_check_keys``)
turn one located node into one checked value or a located :class:`RecipeError`.
"""
from __future__ import annotations

import difflib
import math
import os
import re
import stat
from typing import Any, Mapping

import yaml

from ..errors import Location, RecipeError

# Resource bounds. A recipe is a small hand-written file; anything far beyond
# these is a mistake or an attack, and gets a clear message instead of a stall.
MAX_FILE_BYTES = 1 << 20          # 1 MiB of YAML
MAX_NODES = 20_000                # YAML nodes after alias expansion
MAX_NESTING = 32                  # YAML collections inside collections (aliases followed)
MAX_NAME_CHARS = 200              # a recipe's name, a section's label: drawn in titles, legends and tables

_STR_TAG, _INT_TAG, _FLOAT_TAG = ("tag:yaml.org,2002:str", "tag:yaml.org,2002:int", "tag:yaml.org,2002:float")
_RESOLVER = yaml.resolver.Resolver()         # YAML 1.1's implicit tags, to tell an explicit !!str apart
_NOT_DECIMAL = re.compile(r"^[-+]?(0[0-9_]+|0[xXbBoO]|[^:]*:)")   # octal, hex, binary, base 60
_FLOAT_RE = re.compile(r"^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$")


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
    except (yaml.YAMLError, ValueError, OverflowError, IndexError) as exc:
        # IndexError: PyYAML's int and float constructors index an explicitly tagged empty scalar (!!int)
        why = (_yaml_problem(exc) if isinstance(exc, yaml.YAMLError) else
               "the tag names a type but the value is empty" if isinstance(exc, IndexError) else
               " ".join(str(exc).split()))
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


# A unit written after a number -> (the unit the key is read in, factor to it).
_UNIT_FACTORS = {
    "hz": ("Hz", 1.0), "khz": ("Hz", 1000.0), "k": ("Hz", 1000.0),
    "db": ("dB", 1.0), "s": ("s", 1.0), "ms": ("s", 0.001),
}
_WITH_UNIT = re.compile(r"\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([A-Za-z]+)\s*")


def _number_hint(value: Any, unit: str) -> str:
    """For text that is a number in disguise (``"1000"``, ``3kHz``): the number to type, else ``""``."""
    if not isinstance(value, str):
        return ""
    try:
        x = float(value.strip())
    except ValueError:
        m = _WITH_UNIT.fullmatch(value)
        if not m or m.group(2).lower() not in _UNIT_FACTORS:
            return ""
        to, factor = _UNIT_FACTORS[m.group(2).lower()]
        if to != unit:
            return ""
        x = float(m.group(1)) * factor
        return f"; write the plain number {_fmt(x)} (the value is in {unit}, without a unit)"
    if not math.isfinite(x):
        return ""
    return f"; write the plain number {_fmt(x)}, without quotes"


def _number(node: _Node, name: str, *, lo: float | None = None, hi: float | None = None,
            lo_open: bool = False, hi_open: bool = False, unit: str = "") -> float:
    v = node.value
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise RecipeError.at(node.where, f"{name} must be a number; found {_describe(v)}{_number_hint(v, unit)}")
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


def _text(node: _Node, name: str, choices: tuple[str, ...] | None = None, longest: int | None = None) -> str:
    v = node.value
    if not isinstance(v, str):
        allowed = f"one of {', '.join(choices)}" if choices else "text"
        raise RecipeError.at(node.where, f"{name} must be {allowed}; found {_describe(v)}")
    if longest is not None and len(v) > longest:
        raise RecipeError.at(node.where, f"{name} is {len(v)} characters long; allowed: up to {longest} "
                                         "(it is shown in titles, legends and report tables)")
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

