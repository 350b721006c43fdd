"""Design: a :class:`~chainrun.recipe.Recipe` at one sample rate -> a :class:`Chain`.

Each section is designed by its type's designer, found in the catalogue
(:mod:`chainrun.section_types`; the designers themselves are in :mod:`chainrun.designers`).
The rows of a chain are second-order sections ``[b0, b1, b2, 1, a1, a2]`` in the
convention of scipy.signal and the Audio EQ Cookbook::

    H(z) = (b0 + b1 z^-1 + b2 z^-2) / (1 + a1 z^-1 + a2 z^-2)

Here the frequencies are checked against Nyquist at the rate used, and a design that
over- or underflows becomes a located :class:`~chainrun.recipe.RecipeError`.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import RecipeError
from .recipe import Recipe, Section
from .section_types import SECTIONS

__all__ = ["Chain", "design", "design_section"]


@dataclass(frozen=True, eq=False)
class Chain:
    """A designed chain at one sample rate.

    Attributes
    ----------
    rate : int
        Sample rate in Hz.
    sos : ndarray, shape (S, 6), float64
        Second-order sections, ``a0 == 1`` in every row. Treat as read-only
        (scipy.signal.sosfilt refuses read-only buffers, so it is not locked).
    labels : tuple of str
        One label per row, naming the recipe section it came from.
    rows : tuple of int
        For each row, the index of its section in ``Recipe.sections``.
    """

    rate: int
    sos: np.ndarray
    labels: tuple[str, ...]
    rows: tuple[int, ...]

    def to_dict(self) -> dict:
        return {"rate": self.rate, "labels": list(self.labels),
                "sos": [[float(v) for v in row] for row in self.sos]}


def design_section(section: Section, rate: float) -> np.ndarray:
    """Second-order sections for one recipe section at ``rate``.

    Raises
    ------
    RecipeError
        If the section's frequency is at or above Nyquist for ``rate``.
    """
    freq = section.params.get("freq")
    if freq is not None and freq >= rate / 2.0:
        raise RecipeError.at(section.locate("freq"),
                             f"chain[{section.index}].freq {freq:g} Hz is at or above Nyquist "
                             f"({rate / 2:g} Hz) for {rate:g} Hz files")
    try:
        with np.errstate(over="raise", invalid="raise", divide="raise"):
            sos = np.asarray(SECTIONS[section.kind].designer(section.params, float(rate)), dtype=np.float64)
    except (OverflowError, FloatingPointError, ZeroDivisionError, ValueError) as exc:
        key = "bw" if "bw" in section.params else ("freq" if freq is not None else None)
        raise RecipeError.at(section.locate(key),
                             f"chain[{section.index}] {section.kind} cannot be designed at {rate:g} Hz "
                             f"({exc}); move freq further below Nyquist ({rate / 2:g} Hz) or narrow the band"
                             ) from None
    if not np.all(np.isfinite(sos)):
        raise RecipeError.at(section.where, f"chain[{section.index}] {section.kind} has non-finite coefficients "
                                            f"at {rate:g} Hz; its values are too extreme to design")
    return np.atleast_2d(sos)


def design(recipe: Recipe, rate: int) -> Chain:
    """Design every section of ``recipe`` at ``rate`` Hz.

    Parameters
    ----------
    recipe
        A loaded recipe.
    rate
        Sample rate in Hz, positive.

    Returns
    -------
    Chain
        ``sos`` of shape (S, 6) with ``a0 == 1`` and one label per row.

    Raises
    ------
    ValueError
        If ``rate`` is not positive.
    RecipeError
        If a section's frequency is at or above Nyquist at ``rate`` (located at that
        section's ``freq``).
    """
    if not rate > 0:
        raise ValueError(f"sample rate must be positive; got {rate}")
    blocks, labels, rows = [], [], []
    for i, section in enumerate(recipe.sections):
        sos = design_section(section, rate)
        blocks.append(sos)
        n = len(sos)
        labels.extend(section.title if n == 1 else f"{section.title} [{k + 1}/{n}]" for k in range(n))
        rows.extend([i] * n)
    sos = np.ascontiguousarray(np.vstack(blocks), dtype=np.float64)
    return Chain(int(rate), sos, tuple(labels), tuple(rows))
