"""Batch plans: which recipe renders which inputs, in one YAML file read like a recipe.

A plan is located safe YAML (:mod:`.yaml`), so its errors are one-line, located
:class:`~chainrun.errors.RecipeError` s (``plan.yaml:4:14: error: ...``)::

    format: 1
    batch:
      - {inputs: "boathouse/host*.wav", recipe: recipes/host.yaml}
      - {inputs: ["marsh/**", "extra/*.flac"], recipe: recipes/marsh-cleanup.yaml}

Every path is relative to the plan file's folder, the plan's *root*: the inputs are
found under it and the output tree mirrors their paths relative to it. ``*``, ``?`` and
``[...]`` match within one folder level, ``**`` any number of levels; a pattern naming a
folder means everything under it. The first row whose pattern matches a file renders it.
Loading a plan loads every recipe it names (each file once); nothing here reads audio or
lists folders (that is :func:`chainrun.batch.discover.discover_plan`'s).
"""
from __future__ import annotations

import fnmatch
import os
from dataclasses import dataclass

from ..errors import Location, RecipeError
from .loader import load
from .model import Recipe
from .yaml import _check_keys, _compose, _describe, _mapping, _read_text, _text

__all__ = ["PlanRow", "BatchPlan", "load_plan", "is_plan", "match", "MAX_ROWS"]

MAX_ROWS = 1000
_TOP_KEYS = ("format", "batch")
_ROW_KEYS = ("inputs", "recipe")


@dataclass(frozen=True)
class PlanRow:
    """One row of a plan: its patterns (as written, ``/``-separated) and the index of its recipe."""

    index: int
    patterns: tuple[str, ...]
    recipe: int
    where: Location

    @property
    def title(self) -> str:
        return f"batch[{self.index}]"


@dataclass(frozen=True)
class BatchPlan:
    """A loaded plan: its rows in order and each distinct recipe they name, loaded, in first-named order."""

    path: str
    root: str
    rows: tuple[PlanRow, ...]
    recipes: tuple[Recipe, ...]


def _pattern(node, name: str) -> str:
    text = _text(node, name)
    parts = text.replace(os.sep, "/").split("/")
    if not text.strip() or os.path.isabs(text) or ".." in parts:
        raise RecipeError.at(node.where, f"{name} '{text}' leaves the plan's folder; give a pattern relative to "
                                         "the plan's folder, without '..'")
    return "/".join(p for p in parts if p not in ("", "."))


def load_plan(path: str | os.PathLike, *, allow_outside_includes: bool = False) -> BatchPlan:
    """Load a batch plan and every recipe it names (``allow_outside_includes``: as :func:`.load`).

    Raises
    ------
    RecipeError
        For every problem in the plan (file, line and column in the plan) or in a recipe it
        names (located in that recipe).
    """
    path = os.fspath(path)
    root = _compose(_read_text(path, None), path)
    if root is None:
        raise RecipeError(path, 1, 1, "the plan is empty; it needs 'format: 1' and a 'batch' list")
    entries = _mapping(root, "a plan")
    _check_keys(entries, _TOP_KEYS, "the plan")
    if "format" not in entries:
        raise RecipeError.at(root.where, "the plan has no 'format'; write 'format: 1' at the top")
    fnode = entries["format"][1]
    if isinstance(fnode.value, bool) or fnode.value not in (1, 1.0):
        raise RecipeError.at(fnode.where, f"format {_describe(fnode.value)} is not supported; allowed: 1")
    if "batch" not in entries:
        raise RecipeError.at(root.where, "the plan has no 'batch'; give a list of rows {inputs: ..., recipe: ...}")
    bnode = entries["batch"][1]
    if not isinstance(bnode.value, list) or not bnode.value:
        raise RecipeError.at(bnode.where, f"batch must be a list of rows {{inputs: ..., recipe: ...}}; "
                                          f"found {_describe(bnode.value)}")
    if len(bnode.value) > MAX_ROWS:
        raise RecipeError.at(bnode.where, f"batch has {len(bnode.value)} rows; allowed: up to {MAX_ROWS}")
    folder = os.path.dirname(path) or "."
    rows: list[PlanRow] = []
    recipes: list[Recipe] = []
    by_file: dict[str, int] = {}
    for i, rnode in enumerate(bnode.value):
        name = f"batch[{i}]"
        row = _mapping(rnode, name)
        _check_keys(row, _ROW_KEYS, name)
        for key in _ROW_KEYS:
            if key not in row:
                raise RecipeError.at(rnode.where, f"{name} has no '{key}'; each row needs inputs and a recipe")
        inode = row["inputs"][1]
        items = inode.value if isinstance(inode.value, list) else [inode]
        if not items:
            raise RecipeError.at(inode.where, f"{name}.inputs is an empty list; give a pattern or a list of them")
        patterns = tuple(_pattern(item, f"{name}.inputs") for item in items)
        rnode_recipe = row["recipe"][1]
        rel = _text(rnode_recipe, f"{name}.recipe")
        if not rel.strip() or os.path.isabs(rel):
            raise RecipeError.at(rnode_recipe.where, f"{name}.recipe '{rel}' is not a relative path; give a path "
                                                     "relative to the plan's folder")
        target = os.path.normpath(os.path.join(folder, rel))
        if not os.path.exists(target):
            raise RecipeError.at(rnode_recipe.where, f"recipe '{rel}' does not exist (looked for {target}); paths "
                                                     "are relative to the plan's folder")
        real = os.path.realpath(target)
        if real == os.path.realpath(path):
            raise RecipeError.at(rnode_recipe.where, f"{name}.recipe names the plan itself; name a recipe")
        if real not in by_file:
            by_file[real] = len(recipes)
            recipes.append(load(target, allow_outside_includes=allow_outside_includes))
        rows.append(PlanRow(i, patterns, by_file[real], rnode.where))
    return BatchPlan(path, folder, tuple(rows), tuple(recipes))


def is_plan(path: str | os.PathLike) -> bool:
    """True if ``path`` reads as a plan: a YAML mapping with a top-level ``batch`` key (recipes have none)."""
    try:
        root = _compose(_read_text(os.fspath(path), None), os.fspath(path))
    except (RecipeError, OSError):
        return False
    return root is not None and isinstance(root.value, dict) and "batch" in root.value


def match(pattern: str, relpath: str) -> bool:
    """Whether ``relpath`` (``/``-separated, relative to the plan's folder) matches a plan pattern.

    ``*``, ``?`` and ``[...]`` match within one folder level (case-sensitive); ``**`` matches any
    number of levels, none included.
    """
    return _match(pattern.split("/"), relpath.replace(os.sep, "/").split("/"))


def _match(pat: list[str], parts: list[str]) -> bool:
    if not pat:
        return not parts
    if pat[0] == "**":
        return any(_match(pat[1:], parts[i:]) for i in range(len(parts) + 1))
    return bool(parts) and fnmatch.fnmatchcase(parts[0], pat[0]) and _match(pat[1:], parts[1:])
