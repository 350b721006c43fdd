"""The guard: prove a designed chain stable and bound its gain, before any audio.

For a :class:`~chainrun.design.Chain` at one sample rate, :func:`assess` finds

* the largest pole radius (rejected above ``1 - pole_margin``);
* the time the slowest pole's envelope takes to fall 60 dB, from its radius
  (:func:`decay_60db`, analytic, the same at every rate within rounding; warned
  above ``max_decay_s``);
* the largest and smallest gain of the whole chain and where they are, on a
  dense logarithmic grid refined locally (rejected above ``max_gain_db``);
* the worst-case peak gain: the L1 norm of the impulse response,
  ``sum |h[n]|``. For every input, ``max |y| <= sum |h[n]| * max |x|``, and the
  bound is reached by some input, so it is the tight bound on sample peaks. The
  steady-state gain ``max |H|`` bounds only steady tones and is never larger.
  The figure is the sum run over the first samples plus a bound on the rest
  from the state left (see :func:`_impulse`): never below the L1 norm, and
  finite for every accepted chain (a chain it cannot bound is rejected).

Raw ``iir`` sections are checked first, on the roots of their own denominator,
so an unstable hand-typed filter is named as such.

References
----------
.. [1] A. V. Oppenheim, R. W. Schafer, "Discrete-Time Signal Processing",
   BIBO stability: a causal LTI system is stable iff sum |h[n]| is finite; for a
   rational H(z), iff all poles lie inside the unit circle.
"""
from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

from .design import MIDSIDE, Chain, design
from .dsp import freqz_sos, minimize_bounded, point_response, unique_sorted
from .impulse import _impulse, _midside_l1
from .recipe import Guard, Location, Recipe, RecipeError
from .section_types import raw_sections
from .text import fault

__all__ = ["Problem", "Assessment", "PathAssessment", "assess", "response_db", "check_raw_sections", "decay_60db",
           "design_fault", "design_and_assess"]

GRID_POINTS = 4096          # log-spaced frequencies between LOWEST_HZ and Nyquist
LOWEST_HZ = 1.0
FLOOR_DB = -300.0           # gains below this (a notch's exact zero) read as this


@dataclass(frozen=True)
class Problem:
    """A guard finding: ``severity`` is ``"error"`` (rejects) or ``"warning"``."""

    severity: str
    message: str
    where: Location | None = None

    def __str__(self) -> str:
        loc = f"{self.where}: " if self.where else ""
        return f"{loc}{self.severity}: {self.message}"

    def to_dict(self) -> dict:
        return {"severity": self.severity, "message": self.message,
                "where": str(self.where) if self.where else None}


@dataclass(frozen=True)
class Assessment:
    """What the guard found for one chain at one rate. Gains in dB, times in s."""

    rate: int
    rows: int
    max_pole_radius: float
    decay_s: float
    decay_exact: bool
    max_gain_db: float
    max_gain_hz: float
    min_gain_db: float
    min_gain_hz: float
    peak_gain: float
    peak_gain_exact: bool
    problems: tuple[Problem, ...]
    paths: tuple = ()             # PathAssessment per channel path; empty for a chain without channels

    @property
    def accepted(self) -> bool:
        return not any(p.severity == "error" for p in self.problems)

    @property
    def peak_gain_db(self) -> float:
        return 20.0 * math.log10(self.peak_gain) if self.peak_gain > 0 else -math.inf

    def to_dict(self) -> dict:
        def num(x):
            return None if x is None or not math.isfinite(x) else float(x)
        return {
            "rate": self.rate, "accepted": self.accepted, "rows": self.rows,
            "max_pole_radius": num(self.max_pole_radius),
            "decay_60db_s": num(self.decay_s), "decay_exact": self.decay_exact,
            "max_gain_db": num(self.max_gain_db), "max_gain_hz": num(self.max_gain_hz),
            "min_gain_db": num(self.min_gain_db), "min_gain_hz": num(self.min_gain_hz),
            "worst_case_peak_gain": num(self.peak_gain), "worst_case_peak_gain_db": num(self.peak_gain_db),
            "worst_case_exact": self.peak_gain_exact,
            "problems": [p.to_dict() for p in self.problems],
        } | ({"paths": [p.to_dict() for p in self.paths]} if self.paths else {})


def response_db(sos: np.ndarray, freqs: np.ndarray, rate: float) -> np.ndarray:
    """Magnitude of the cascade in dB at ``freqs`` (Hz), floored at FLOOR_DB.

    The response is scipy.signal.freqz_sos's, computed the same way with numpy alone
    (:func:`chainrun.dsp.freqz_sos`). A pole exactly on the unit circle (a rejected,
    unstable chain) makes the response infinite there, inf or nan, read here as +inf
    dB, without numpy's divide/invalid warnings on stderr.
    """
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        return _db(freqz_sos(sos, np.asarray(freqs, dtype=float), rate))


def _db(h: np.ndarray) -> np.ndarray:
    """|h| in dB, nan read as +inf, floored at FLOOR_DB (within the caller's errstate)."""
    db = 20.0 * np.log10(np.abs(h))
    return np.maximum(np.where(np.isnan(db), np.inf, db), FLOOR_DB)


def decay_60db(r_max: float, rate: float) -> float:
    """Seconds for the envelope ``r**n`` of a pole at radius ``r_max`` to fall 60 dB at ``rate``.

    ``t = ln(1000) / (-ln(r) * rate)`` (about ``6.91 / (-ln r * fs)``): exact for the pole's
    envelope, so ``Assessment.decay_exact`` is true for it. A pole at a given frequency and
    bandwidth sits at ``r = exp(-pi * bandwidth / fs)`` whatever the rate, so the figure is the
    same at every rate within the bilinear transform's warping. ``0`` for a chain without
    feedback; ``inf`` for a pole on or outside the unit circle. A repeated pole rings longer
    than its envelope (``n**k r**n``): the L1 bound allows for that, this figure does not.
    """
    if r_max <= 0.0:
        return 0.0
    if r_max >= 1.0:
        return math.inf
    return math.log(1000.0) / (-math.log(r_max) * rate)


def _row_poles(row: np.ndarray) -> np.ndarray:
    """Poles of one SOS row (none for a row without feedback)."""
    return np.roots(row[3:6] / row[3]) if np.any(row[4:6]) else np.zeros(0)


def pole_radii(sos: np.ndarray) -> np.ndarray:
    """Largest pole radius of each row (0 for a row without feedback)."""
    return np.array([float(np.max(np.abs(p))) if p.size else 0.0 for p in map(_row_poles, sos)])


@functools.lru_cache(maxsize=256)
def _largest_root(a: tuple[float, ...]) -> float:
    """Largest root radius of a raw section's denominator (computed once per distinct denominator:
    a batch checks a recipe before any audio and again at each rate it assesses)."""
    return float(np.max(np.abs(np.roots(np.asarray(a) / a[0]))))


def check_raw_sections(recipe: Recipe) -> list[Problem]:
    """Stability of each raw section (a catalogue row with ``raw=True``) from the roots of its own
    denominator."""
    limit = 1.0 - recipe.guard.pole_margin
    problems = []
    for s in raw_sections(recipe):
        if len(s.params["a"]) < 2:
            continue
        radius = _largest_root(tuple(float(v) for v in s.params["a"]))
        if radius > limit:
            problems.append(Problem(
                "error",
                f"chain[{s.index}] {s.kind} is unstable: its denominator has a root at radius {radius:.6g} "
                f"(feedback that never dies away); allowed: every root inside radius {limit:.9g} "
                "(1 - guard.pole_margin)",
                s.locate("a")))
    return problems


def _pole_hz(sos: np.ndarray, rate: float) -> list[float]:
    """Frequencies of the poles' angles: where a narrow resonance peaks, whatever section made it.

    A raw iir section has no ``freq`` to look at, and a resonance narrower than the grid's
    spacing could fall between its points; its poles say where it is.
    """
    return [float(np.angle(p)) * rate / (2.0 * np.pi)
            for row in sos for p in _row_poles(row) if abs(p) > 0.5 and 0.0 < np.angle(p) < np.pi]


def _extremes(sos: np.ndarray, rate: float, extra_hz: list[float]) -> tuple[float, float, float, float]:
    nyq = rate / 2.0
    grid = np.concatenate([[0.0], np.geomspace(min(LOWEST_HZ, nyq / 2), nyq, GRID_POINTS),
                           [f for f in list(extra_hz) + _pole_hz(sos, rate) if 0 < f < nyq]])
    grid = unique_sorted(grid)
    db = response_db(sos, grid, rate)

    at = point_response(sos)          # response_db at one frequency, the same number, faster

    def db_at(f: float) -> float:
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            return _db(np.atleast_1d(at(f, rate)))[0]

    def refine(i: int, sign: float) -> tuple[float, float]:
        lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, len(grid) - 1)]
        best = (float(db[i]), float(grid[i]))
        if hi > lo:
            # scipy.optimize.minimize_scalar(method="bounded"), step for step (chainrun.dsp)
            x, fun = minimize_bounded(lambda f: -sign * db_at(f), lo, hi, xatol=max(lo, 1e-3) * 1e-7)
            val = -sign * float(fun)
            if sign * val > sign * best[0]:
                best = (val, float(x))
        return best

    hi_db, hi_hz = refine(int(np.argmax(db)), +1.0)
    lo_db, lo_hz = refine(int(np.argmin(db)), -1.0)
    return hi_db, hi_hz, lo_db, lo_hz


@dataclass(frozen=True)
class PathAssessment:
    """The guard's figures for one channel path of a chain (see :class:`chainrun.design.Path`)."""

    key: str
    title: str
    rows: int
    max_pole_radius: float
    decay_s: float
    decay_exact: bool
    max_gain_db: float
    max_gain_hz: float
    min_gain_db: float
    min_gain_hz: float
    peak_gain: float
    peak_gain_exact: bool

    def to_dict(self) -> dict:
        def num(x):
            return None if x is None or not math.isfinite(x) else float(x)
        return {"key": self.key, "title": self.title, "rows": self.rows,
                "max_pole_radius": num(self.max_pole_radius),
                "decay_60db_s": num(self.decay_s), "decay_exact": self.decay_exact,
                "max_gain_db": num(self.max_gain_db), "max_gain_hz": num(self.max_gain_hz),
                "min_gain_db": num(self.min_gain_db), "min_gain_hz": num(self.min_gain_hz),
                "worst_case_peak_gain": num(self.peak_gain),
                "worst_case_peak_gain_db": num(20.0 * math.log10(self.peak_gain) if self.peak_gain > 0 else -math.inf),
                "worst_case_exact": self.peak_gain_exact}


def assess(chain: Chain, guard: Guard, recipe: Recipe | None = None) -> Assessment:
    """Run the guard over a designed chain.

    Parameters
    ----------
    chain
        From :func:`chainrun.design.design`.
    guard
        The recipe's limits.
    recipe
        The recipe the chain was designed from; used to check raw ``iir``
        sections first and to point problems at the section that causes them.

    Returns
    -------
    Assessment
        ``accepted`` is False when any problem is an error. For a chain with channel
        paths, every path is assessed (``paths``) and each figure is the worst over the
        paths; ``peak_gain`` is the largest worst-case peak gain of any output channel
        (for mid/side, :func:`_midside_l1`).
    """
    problems: list[Problem] = check_raw_sections(recipe) if recipe is not None else []
    if not chain.paths:
        p = _assess_path(chain.sos, chain.labels, chain.rows, chain.rate, guard, recipe, problems, "")
        return Assessment(rate=chain.rate, rows=len(chain.sos), max_pole_radius=p.max_pole_radius,
                          decay_s=p.decay_s, decay_exact=p.decay_exact, max_gain_db=p.max_gain_db,
                          max_gain_hz=p.max_gain_hz, min_gain_db=p.min_gain_db, min_gain_hz=p.min_gain_hz,
                          peak_gain=p.peak_gain, peak_gain_exact=p.peak_gain_exact, problems=tuple(problems))
    paths = [_assess_path(p.sos, p.labels, p.rows, chain.rate, guard, recipe, problems, p.title, p.key)
             for p in chain.paths]
    peak, peak_exact = max(p.peak_gain for p in paths), all(p.peak_gain_exact for p in paths)
    if chain.routing == MIDSIDE and math.isfinite(peak):
        r_max = max(p.max_pole_radius for p in paths)
        peak, peak_exact = _midside_l1(chain.paths[0].sos, chain.paths[1].sos, r_max)
    hi = max(paths, key=lambda p: p.max_gain_db)
    lo = min(paths, key=lambda p: p.min_gain_db)
    slow = max(paths, key=lambda p: p.decay_s)
    return Assessment(rate=chain.rate, rows=len(chain.sos), max_pole_radius=max(p.max_pole_radius for p in paths),
                      decay_s=slow.decay_s, decay_exact=slow.decay_exact, max_gain_db=hi.max_gain_db,
                      max_gain_hz=hi.max_gain_hz, min_gain_db=lo.min_gain_db, min_gain_hz=lo.min_gain_hz,
                      peak_gain=peak, peak_gain_exact=peak_exact, problems=tuple(problems), paths=tuple(paths))


def _assess_path(sos: np.ndarray, labels, rows, rate: int, guard: Guard, recipe: Recipe | None,
                 problems: list[Problem], title: str, key: str = "all") -> PathAssessment:
    """Assess one cascade; its problems are added to ``problems`` (``title`` names the path in them)."""
    sections = recipe.sections if recipe is not None else None
    at = f"at {rate} Hz on {title}" if title else f"at {rate} Hz"

    def where_of_row(row: int) -> Location | None:
        if sections is None or rows[row] < 0:
            return None
        return sections[rows[row]].where

    radii = pole_radii(sos)
    worst_row = int(np.argmax(radii))
    r_max = float(radii[worst_row])
    limit = 1.0 - guard.pole_margin
    unstable = r_max > limit
    if unstable and not any(p.severity == "error" for p in problems):
        problems.append(Problem(
            "error",
            f"{at} {labels[worst_row]} has a pole at radius {r_max:.9g}; allowed: inside "
            f"{limit:.9g} (1 - guard.pole_margin)",
            where_of_row(worst_row)))

    extra = [sections[i].params["freq"] for i in sorted(set(rows)) if i >= 0 and "freq" in sections[i].params] \
        if sections else []
    hi_db, hi_hz, lo_db, lo_hz = _extremes(sos, rate, extra)

    if unstable:
        l1, l1_exact, decay, decay_exact = math.inf, False, math.inf, False
    else:
        l1, l1_exact = _impulse(sos, rate, r_max)
        decay, decay_exact = decay_60db(r_max, rate), True     # analytic from the pole radius

    if not unstable and not math.isfinite(l1):
        problems.append(Problem(
            "error",
            f"{at} the chain's worst-case peak gain cannot be bounded: {labels[worst_row]} has a "
            f"pole at radius {r_max:.9g} and no finite bound on sum |h[n]| was found (the response rings too "
            "long or overflows float64); allowed: a chain whose worst-case peak gain has a finite bound "
            "(poles further inside the unit circle, gains within float64's range)",
            where_of_row(worst_row)))
        l1, l1_exact = math.inf, False
    if hi_db > guard.max_gain_db:
        where = None
        if sections is not None:
            contrib = [(response_db(sos[[r]], [hi_hz], rate)[0], r) for r in range(len(sos))]
            best_db, best_row = max(contrib)
            where = where_of_row(best_row)
            culprit = (f"; {sections[rows[best_row]].title} contributes {best_db:+.1f} dB there"
                       if rows[best_row] >= 0 else "")
        else:
            culprit = ""
        problems.append(Problem(
            "error",
            f"{at} the chain's gain reaches {hi_db:+.2f} dB at {hi_hz:.1f} Hz, above "
            f"guard.max_gain_db {guard.max_gain_db:g} dB{culprit}",
            where))
    if not unstable and decay > guard.max_decay_s:
        problems.append(Problem(
            "warning",
            f"{at} the slowest pole's envelope takes {decay:.2f} s to fall 60 dB, longer than "
            f"guard.max_decay_s {guard.max_decay_s:g} s ({labels[worst_row]} rings longest)",
            where_of_row(worst_row)))
    return PathAssessment(key, title, len(sos), r_max, decay, decay_exact, hi_db, hi_hz, lo_db, lo_hz, l1, l1_exact)


def design_fault(recipe: Recipe, rate: int, exc: BaseException) -> RecipeError:
    """A located, one-line RecipeError for a fault (not a RecipeError) raised designing or assessing at ``rate``.

    The section that cannot be designed on its own is named; if each can, the recipe itself.
    """
    from .design import design_section

    why = fault(exc)
    for section in recipe.sections:
        try:
            design_section(section, rate)
        except RecipeError:
            continue
        except Exception:
            return RecipeError.at(section.locate("freq"), f"{section.title} cannot be designed at {rate} Hz "
                                                          f"({why}); change its parameters, and please report it")
    return RecipeError(recipe.path, 1, 1, f"the chain cannot be designed or assessed at {rate} Hz ({why}); "
                                          "please report it")


def design_and_assess(recipe: Recipe, rate: int) -> tuple[Chain, Assessment]:
    """The recipe designed and assessed at ``rate`` (what ``check``, ``plot`` and a batch all need).

    Raises
    ------
    RecipeError
        For a recipe that cannot be used at ``rate``, and also, located by
        :func:`design_fault`, for a fault (any other exception) in design or guard.
    """
    try:
        chain = design(recipe, rate)
        return chain, assess(chain, recipe.guard, recipe)
    except RecipeError:
        raise
    except Exception as exc:        # a fault, not a recipe error: still one located line
        raise design_fault(recipe, rate, exc) from None
