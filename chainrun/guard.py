"""The guard: prove a designed chain stable and bound its gain, before any audio.

For a :class:`~chainrun.design.Chain` at one sample rate, :func:`assess` finds

* the largest pole radius (rejected above ``1 - pole_margin``);
* the time the impulse response takes to fall 60 dB below its peak
  (warned above ``max_decay_s``);
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

from .design import Chain
from .recipe import Guard, Location, Recipe
from .section_types import raw_sections

__all__ = ["Problem", "Assessment", "assess", "response_db", "check_raw_sections"]

GRID_POINTS = 4096          # log-spaced frequencies between LOWEST_HZ and Nyquist
LOWEST_HZ = 1.0
FLOOR_DB = -300.0           # gains below this (a notch's exact zero) read as this
IMPULSE_BLOCK = 1 << 16     # impulse response computed in blocks of this many samples
IMPULSE_CAP = 1 << 27       # ... up to this many samples
IMPULSE_WORK = 1 << 29      # ... and this many row-samples (rows x samples); then the tail is bounded
TAIL_REL = 1e-10            # the run stops once the tail's bound is below this fraction of the sum
_EPS = float(np.finfo(np.float64).eps)
_CHUNK = 64                 # decay time resolution, samples


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
        }


def response_db(sos: np.ndarray, freqs: np.ndarray, rate: float) -> np.ndarray:
    """Magnitude of the cascade in dB at ``freqs`` (Hz), floored at FLOOR_DB.

    A pole exactly on the unit circle (a rejected, unstable chain) makes the
    response infinite there; scipy then yields inf or nan, read here as +inf dB,
    without numpy's divide/invalid warnings on stderr.
    """
    from scipy import signal              # imported on first use: see chainrun/__init__.py
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        _, h = signal.freqz_sos(sos, worN=np.asarray(freqs, dtype=float), fs=rate)
        db = 20.0 * np.log10(np.abs(h))
    return np.maximum(np.where(np.isnan(db), np.inf, db), FLOOR_DB)


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
    grid = np.unique(grid)
    db = response_db(sos, grid, rate)

    from scipy import optimize            # imported on first use: see chainrun/__init__.py

    def refine(i: int, sign: float) -> tuple[float, float]:
        lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, len(grid) - 1)]
        best = (float(db[i]), float(grid[i]))
        if hi > lo:
            res = optimize.minimize_scalar(lambda f: -sign * response_db(sos, [f], rate)[0],
                                           bounds=(lo, hi), method="bounded",
                                           options={"xatol": max(lo, 1e-3) * 1e-7})
            val = -sign * float(res.fun)
            if sign * val > sign * best[0]:
                best = (val, float(res.x))
        return best

    hi_db, hi_hz = refine(int(np.argmax(db)), +1.0)
    lo_db, lo_hz = refine(int(np.argmin(db)), -1.0)
    return hi_db, hi_hz, lo_db, lo_hz


def _tail_factors(sos: np.ndarray) -> tuple[np.ndarray, ...]:
    """Per row, what :func:`_zero_input_l1` needs: ``||u||_1``, ``w`` and ``1 - r``.

    ``u`` is the impulse response of ``1 / (1 + a1 z^-1 + a2 z^-2)``, ``u[n] = sum_j p1^j p2^(n-j)``
    over the poles, so ``||u||_1 <= 1 / ((1 - |p1|)(1 - |p2|))``, whatever the poles (equal ones
    too). That product is taken from the coefficients without finding roots: ``(1 - r)**2`` with
    ``1 - r = (1 - a2) / (1 + sqrt(a2))`` for a complex pair, ``D(1) D(-1) / (1 + |p1| + |p2| + |a2|)``
    for real poles (``D`` the denominator), so that a pole near 1 costs no cancellation; each is
    too large for the other kind, so both are taken where rounding could mistake one for the
    other (the smaller is kept). For a
    complex pair ``|u[n]| = r^n |sin((n+1) theta)| / sin(theta)`` also gives ``r / (w (1 - r))``,
    with ``w = r sin(theta) = sqrt(4 a2 - a1**2) / 2`` taken low by its rounding error.
    """
    a1, a2 = sos[:, 4] / sos[:, 3], sos[:, 5] / sos[:, 3]
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        disc = a1 * a1 - 4.0 * a2
        pair = disc < 0.0
        root_a2 = np.sqrt(np.abs(a2))
        one_minus_r = np.where(pair, (1.0 - a2) / (1.0 + root_a2), np.nan)
        moduli = np.where(a2 >= 0.0, np.maximum(np.abs(a1), 2.0 * root_a2), np.sqrt(np.abs(disc)))
        real = ((1.0 + a1) + a2) * ((1.0 - a1) + a2) / (1.0 + moduli + np.abs(a2))
        # a double pole may read as a pair or as real by rounding: then the smaller one is kept
        prod = np.where(a2 >= 0.0, np.fmin(((1.0 - a2) / (1.0 + root_a2)) ** 2, real), real)
        u_l1 = np.where(prod > 0.0, 1.0 / prod, np.inf)
        w = np.sqrt(np.maximum(-disc - 8.0 * _EPS * (a1 * a1 + 4.0 * np.abs(a2)), 0.0)) / 2.0
        usable = pair & (w > 0.0) & (one_minus_r > 0.0)
        u_l1 = np.where(usable, np.minimum(u_l1, root_a2 / (w * one_minus_r)), u_l1)
    return a1, u_l1, np.where(usable, w, 0.0), np.where(usable, one_minus_r, np.nan)


def _zero_input_l1(z: np.ndarray, factors: tuple[np.ndarray, ...]) -> np.ndarray:
    """Per row, an upper bound of ``sum_n |e[n]|`` for the row left to ring from state ``z``.

    In the transposed direct form (scipy.signal.sosfilt's) a row with state ``(z1, z2)`` and no
    input rings ``e[n] = z1 u[n] + z2 u[n-1]``, so ``||e||_1 <= (|z1| + |z2|) ||u||_1``. For a
    complex pair ``e[n] = 2 Re(c p^n)`` also gives ``2|c| / (1 - r)``, with
    ``2|c| = sqrt((z2 - a1 z1 / 2)**2 / w**2 + z1**2)``; the smaller of the two is kept.
    """
    a1, u_l1, w, one_minus_r = factors
    z1, z2 = z[:, 0], z[:, 1]
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        bound = (np.abs(z1) + np.abs(z2)) * u_l1
        modal = np.sqrt(((z2 - 0.5 * a1 * z1) / w) ** 2 + z1 ** 2) / one_minus_r
        bound = np.where(w > 0.0, np.fmin(bound, modal), bound)
    return np.where((z1 == 0.0) & (z2 == 0.0), 0.0, bound)


def _cascade_tail(zi: np.ndarray, factors: tuple[np.ndarray, ...], row_l1: np.ndarray) -> float:
    """Upper bound of ``sum_{n >= N} |h[n]|`` from the cascade's state ``zi`` after ``N`` samples.

    With no input left, row ``k``'s output from ``N`` on is its own ringing ``e_k`` plus its
    response to the row before: ``||out_k||_1 <= ||e_k||_1 + ||h_k||_1 ||out_{k-1}||_1``.
    """
    ring = _zero_input_l1(zi, factors)
    tail = 0.0
    for k in range(len(ring)):
        tail = float(ring[k]) + float(row_l1[k]) * tail
    return tail if math.isfinite(tail) else math.inf


def _impulse(sos: np.ndarray, rate: float, r_max: float) -> tuple[float, bool, float, bool]:
    """L1 norm of the impulse response, bounded from above, and the 60 dB decay time.

    The response is run block by block with carried state (scipy.signal.sosfilt, float64) and
    ``sum |h[n]|`` summed; after each block the rest, ``sum_{n >= N} |h[n]|``, is bounded from the
    state by :func:`_cascade_tail`, without diagonalising anything, so repeated and near-equal
    poles are bounded as safely as any. The run stops when that bound is below ``TAIL_REL`` of the
    sum (the figure is then exact for every purpose: ``exact``) or after ``IMPULSE_CAP`` samples or
    ``IMPULSE_WORK`` row-samples; the bound is added in either case, so the figure is never below
    the L1 norm. A last factor ``1 + kappa`` allows for float64 rounding in the run and the sums,
    ``kappa = S eps (16 + 4 / (1 - r_max))`` for S rows (a first-order allowance, not a proof).
    The figure is ``inf`` only when no finite bound was found.
    """
    from scipy import signal              # imported on first use: see chainrun/__init__.py
    sos = np.asarray(sos, dtype=np.float64)
    factors = _tail_factors(sos)
    after_impulse = np.stack([sos[:, 1] - sos[:, 4] * sos[:, 0], sos[:, 2] - sos[:, 5] * sos[:, 0]], axis=1)
    row_l1 = np.abs(sos[:, 0]) + _zero_input_l1(after_impulse, factors)
    cap = min(IMPULSE_CAP, max(IMPULSE_BLOCK, IMPULSE_WORK // max(len(sos), 1) // IMPULSE_BLOCK * IMPULSE_BLOCK))
    zi = np.zeros((len(sos), 2))
    impulse = np.zeros(IMPULSE_BLOCK)
    impulse[0] = 1.0
    silence = np.zeros(IMPULSE_BLOCK)
    sums: list[float] = []
    peak, n, tail = 0.0, 0, math.inf
    chunk_max: list[np.ndarray] = []
    with np.errstate(over="ignore", invalid="ignore"):
        while True:
            y, zi = signal.sosfilt(sos, impulse if n == 0 else silence, zi=zi)
            ay = np.abs(y)
            sums.append(float(ay.sum()))
            peak = max(peak, float(ay.max()))
            chunk_max.append(ay.reshape(-1, _CHUNK).max(axis=1))
            n += IMPULSE_BLOCK
            total = math.fsum(sums)
            if not math.isfinite(total):
                break
            tail = _cascade_tail(zi, factors, row_l1)
            if tail <= TAIL_REL * total or n >= cap:
                break
    exact = math.isfinite(total) and tail <= TAIL_REL * total
    kappa = len(sos) * _EPS * (16.0 + 4.0 / (1.0 - r_max))
    bound = (total + tail) * (1.0 + kappa)
    if not math.isfinite(bound):
        bound, exact = math.inf, False
    env = np.concatenate(chunk_max)
    above = np.nonzero(env >= peak * 1e-3)[0]
    decay_samples = (above[-1] + 1) * _CHUNK if above.size else 0
    decay = float(decay_samples) / rate
    if not exact and r_max < 1.0:
        decay = max(decay, math.log(1e-3) / math.log(r_max) / rate)
    return bound, exact, decay, exact


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
        ``accepted`` is False when any problem is an error.
    """
    sos, rate = chain.sos, chain.rate
    problems: list[Problem] = check_raw_sections(recipe) if recipe is not None else []
    sections = recipe.sections if recipe is not None else None

    def where_of_row(row: int) -> Location | None:
        return sections[chain.rows[row]].where if sections is not None else None

    radii = pole_radii(sos)
    worst_row = int(np.argmax(radii))
    r_max = float(radii[worst_row])
    limit = 1.0 - guard.pole_margin
    unstable = r_max > limit
    if unstable and not any(p.severity == "error" for p in problems):
        problems.append(Problem(
            "error",
            f"at {rate} Hz {chain.labels[worst_row]} has a pole at radius {r_max:.9g}; allowed: inside "
            f"{limit:.9g} (1 - guard.pole_margin)",
            where_of_row(worst_row)))

    extra = [s.params["freq"] for s in sections if "freq" in s.params] if sections else []
    hi_db, hi_hz, lo_db, lo_hz = _extremes(sos, rate, extra)

    if unstable:
        l1, l1_exact, decay, decay_exact = math.inf, False, math.inf, False
    else:
        l1, l1_exact, decay, decay_exact = _impulse(sos, rate, r_max)

    if not unstable and not math.isfinite(l1):
        problems.append(Problem(
            "error",
            f"at {rate} Hz the chain's worst-case peak gain cannot be bounded: {chain.labels[worst_row]} has a "
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
            culprit = f"; {sections[chain.rows[best_row]].title} contributes {best_db:+.1f} dB there"
        else:
            culprit = ""
        problems.append(Problem(
            "error",
            f"at {rate} Hz the chain's gain reaches {hi_db:+.2f} dB at {hi_hz:.1f} Hz, above "
            f"guard.max_gain_db {guard.max_gain_db:g} dB{culprit}",
            where))
    if not unstable and decay > guard.max_decay_s:
        problems.append(Problem(
            "warning",
            f"at {rate} Hz the impulse response takes {decay:.2f} s to fall 60 dB, longer than "
            f"guard.max_decay_s {guard.max_decay_s:g} s ({chain.labels[worst_row]} rings longest)",
            where_of_row(worst_row)))
    return Assessment(rate=rate, rows=len(sos), max_pole_radius=r_max, decay_s=decay, decay_exact=decay_exact,
                      max_gain_db=hi_db, max_gain_hz=hi_hz, min_gain_db=lo_db, min_gain_hz=lo_hz,
                      peak_gain=l1, peak_gain_exact=l1_exact, problems=tuple(problems))
