"""The gate: ``chainrun check`` as a use case. Recipes (and the recipes a batch plan names) are loaded,
designed and assessed at each rate they are meant for; nothing is written and no audio is read.

Apart from :mod:`chainrun.app` so that a check loads only what it uses (the recipe, design and guard
floors), not the audio, meter, render, batch-run and report floors a run needs (issue 17, start-up).
"""
from __future__ import annotations

import os

from .batch.refuse import RECIPE_SUFFIXES
from .errors import BatchError, problem
from .guard import design_and_assess
from .recipe import RecipeError, load

__all__ = ["DEFAULT_RATES", "find_recipes", "check_recipe", "check"]

DEFAULT_RATES = (8000, 16000, 22050, 32000, 44100, 48000, 88200, 96000, 176400, 192000)   # the common rates
_ASSESSMENT_KEYS = ("rate", "accepted", "rows", "max_pole_radius", "decay_60db_s", "decay_exact", "max_gain_db",
                    "max_gain_hz", "min_gain_db", "min_gain_hz", "worst_case_peak_gain", "worst_case_peak_gain_db",
                    "worst_case_exact", "problems", "error")


# --------------------------------------------------------------------------- check

def find_recipes(paths: list[str]) -> list[str]:
    """The recipe files named, and those (``*.yaml``, ``*.yml``) in the folders named, in order.

    Raises
    ------
    BatchError
        If a path does not exist, or no recipe is found.
    """
    found = []
    for p in paths:
        if os.path.isdir(p):
            for root, dirs, files in os.walk(p):
                dirs[:] = sorted(d for d in dirs if not d.startswith("."))
                found.extend(os.path.join(root, f) for f in sorted(files)
                             if f.endswith(RECIPE_SUFFIXES) and not f.startswith("."))
        elif os.path.exists(p):
            found.append(p)
        else:
            raise BatchError(f"{p}: error: no such file or folder; give recipe files or folders of them")
    if not found:
        raise BatchError(f"{', '.join(paths)}: error: no recipes (*.yaml, *.yml) found")
    return found


def check_recipe(path: str, rates: tuple[int, ...] | None = None, allow_outside_includes: bool = False) -> dict:
    """Load, design and assess one recipe at each rate; a JSON-safe summary.

    ``rates`` None: the rates the recipe declares (``rates:``), else :data:`DEFAULT_RATES`. ``problems``
    holds each error and warning as an object (:func:`chainrun.errors.problem`), once for each rate it
    is found at (``rate`` None for one found loading the recipe); ``notes`` a line for each section left
    out at a rate (``above_nyquist: drop``), as does each rate's entry."""
    entry: dict = {"path": path, "accepted": False, "problems": [], "notes": [], "rates": []}
    try:
        recipe = load(path, allow_outside_includes=allow_outside_includes)
    except RecipeError as exc:
        entry["problems"].append(problem(str(exc)))
        return entry
    entry.update(name=recipe.name, digest=recipe.digest, sections=len(recipe.sections))
    entry["problems"].extend(problem(w) for w in recipe.warnings)   # e.g. a file loosening a limit it includes
    rates = rates or recipe.rates or DEFAULT_RATES
    entry["declared_rates"] = list(recipe.rates) if recipe.rates is not None else None
    accepted = True
    for rate in rates:
        try:
            chain, a = design_and_assess(recipe, rate)
        except RecipeError as exc:
            found = [problem(str(exc), rate)]
            entry["rates"].append(dict.fromkeys(_ASSESSMENT_KEYS) | {"rate": rate, "accepted": False,
                                                                     "error": str(exc), "problems": found, "notes": []})
            entry["problems"].extend(found)
            accepted = False
            continue
        found = [problem(str(p), rate) for p in a.problems]
        entry["rates"].append(a.to_dict() | {"problems": found, "error": next(
            (str(p) for p in a.problems if p.severity == "error"), None), "notes": list(chain.dropped)})
        entry["problems"].extend(found)
        entry["notes"].extend(chain.dropped)       # sections marked above_nyquist: drop, left out at this rate
        accepted &= a.accepted
    entry["accepted"] = accepted
    return entry


def check(paths: list[str], rates: tuple[int, ...] | None = None, *,
          allow_outside_includes: bool = False) -> list[dict]:
    """Check every recipe named or found in the folders named (see :func:`check_recipe`); writes nothing.

    ``rates`` None: each recipe at the rates it declares (``rates:``), else at :data:`DEFAULT_RATES`.

    ``allow_outside_includes``: follow includes out of each recipe's folder tree (see :func:`chainrun.load`).

    A batch plan among them (a YAML file whose top level has ``batch:``) stands for every recipe it
    names: each is checked once, its entry carrying ``"plan"``. A plan that cannot be loaded is an
    entry of its own, rejected, with the located error.

    Raises
    ------
    BatchError
        If a path does not exist, or no recipe is found.
    """
    from .recipe.plan import is_plan, load_plan

    entries: list[dict] = []
    done: set[str] = set()

    def add(path: str, plan: str | None = None) -> None:
        real = os.path.realpath(path)
        if real in done:
            return
        done.add(real)
        entry = check_recipe(path, rates, allow_outside_includes)
        if plan is not None:
            entry["plan"] = plan
        entries.append(entry)

    for p in find_recipes(paths):
        if not is_plan(p):
            add(p)
            continue
        try:
            plan = load_plan(p, allow_outside_includes=allow_outside_includes)
        except RecipeError as exc:
            entries.append({"path": p, "plan": p, "accepted": False, "problems": [problem(str(exc))], "notes": [],
                            "rates": []})
            continue
        for recipe in plan.recipes:
            add(recipe.path, p)
    return entries
