"""Design: a :class:`~chainrun.recipe.Recipe` at one sample rate -> a :class:`Chain`.

Each section is designed by its type's designer, found in the catalogue
(:mod:`chainrun.section_types`; the designers themselves are in :mod:`chainrun.designers`).
The rows of a chain are second-order sections ``[b0, b1, b2, 1, a1, a2]`` in the
convention of scipy.signal and the Audio EQ Cookbook::

    H(z) = (b0 + b1 z^-1 + b2 z^-2) / (1 + a1 z^-1 + a2 z^-2)

Here the frequencies are checked against Nyquist at the rate used, and a design that
over- or underflows becomes a located :class:`~chainrun.recipe.RecipeError`. A section marked
``above_nyquist: drop`` whose frequency is at or above the rate's Nyquist frequency is left out
of the chain at that rate, with a note (``Chain.dropped``) naming it and the rate.

A recipe whose sections name ``channels`` is designed as one cascade per channel path
(:class:`Path`): the sections a path runs are, top to bottom, every section without
``channels`` and every section naming that path's tracks (or mid, or side). A recipe
without ``channels`` has one path, the whole chain, and filters every channel with it.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import RecipeError
from .recipe import Recipe, Section
from .section_types import SECTIONS

__all__ = ["Chain", "Path", "design", "design_section", "MIDSIDE", "TRACKS", "EVERY"]

EVERY, TRACKS, MIDSIDE = "every", "tracks", "midside"       # how a chain routes channels
_IDENTITY = np.array([[1.0, 0.0, 0.0, 1.0, 0.0, 0.0]])       # a path no section touches: passes unchanged


@dataclass(frozen=True, eq=False)
class Path:
    """One channel path of a chain: the cascade some channels (or mid, or side) run through.

    Attributes
    ----------
    key : str
        ``"all"`` (a chain without channels), ``"mid"``, ``"side"``, the tracks it filters
        (``"2"``, ``"1,3"``) or ``"other"`` (the tracks no section names).
    title : str
        For people: ``every channel``, ``track 2``, ``tracks 1, 3``, ``other tracks``, ``mid``, ``side``.
    tracks : tuple of int
        The 1-based tracks it filters (empty for ``all``, ``other``, ``mid`` and ``side``).
    sos, labels, rows
        As in :class:`Chain`, for this path's sections only. A path no section touches is
        one identity row (``rows == (-1,)``): it passes its channels unchanged, exactly.
    """

    key: str
    title: str
    tracks: tuple[int, ...]
    sos: np.ndarray
    labels: tuple[str, ...]
    rows: tuple[int, ...]

    def to_dict(self) -> dict:
        return {"key": self.key, "title": self.title, "labels": list(self.labels),
                "sos": [[float(v) for v in row] for row in self.sos]}


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
    routing : str
        ``EVERY``: one cascade, ``sos``, for every channel (a recipe without ``channels``);
        ``TRACKS``: one path per group of tracks; ``MIDSIDE``: a two-channel file encoded to
        mid and side, each filtered by its path, and decoded back.
    paths : tuple of Path
        The distinct paths, empty when ``routing`` is ``EVERY``. Then ``sos`` holds every
        section's rows in recipe order, which is no single filter: ``paths`` are.
    dropped : tuple of str
        One note for each section marked ``above_nyquist: drop`` left out at this rate.
    """

    rate: int
    sos: np.ndarray
    labels: tuple[str, ...]
    rows: tuple[int, ...]
    routing: str = EVERY
    paths: tuple[Path, ...] = ()
    dropped: tuple[str, ...] = ()

    @property
    def cascades(self) -> tuple[Path, ...]:
        """Every distinct path; for a chain without channels, the whole chain as the one path ``all``."""
        return self.paths or (Path("all", "every channel", (), self.sos, self.labels, self.rows),)

    @property
    def filters(self):
        """What the renderer applies: ``sos`` for a chain without channels, else the chain itself."""
        return self.sos if self.routing == EVERY else self

    def path_of_track(self, track: int) -> Path:
        """The path that filters 1-based ``track`` (``TRACKS`` routing)."""
        return next((p for p in self.paths if track in p.tracks),
                    next(p for p in self.paths if p.key == "other"))

    def to_dict(self) -> dict:
        out = {"rate": self.rate, "labels": list(self.labels),
               "sos": [[float(v) for v in row] for row in self.sos]}
        if self.paths:
            out.update(routing=self.routing, paths=[p.to_dict() for p in self.paths])
        if self.dropped:
            out["dropped"] = list(self.dropped)
        return out


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
        section's ``freq``), unless it is marked ``above_nyquist: drop``; or if every
        section drops out at ``rate``.
    """
    if not rate > 0:
        raise ValueError(f"sample rate must be positive; got {rate}")
    blocks, labels, rows, dropped = [], [], [], []
    for i, section in enumerate(recipe.sections):
        freq = section.params.get("freq")
        if section.above_nyquist == "drop" and freq is not None and freq >= rate / 2.0:
            dropped.append(f"{section.title} drops out at {rate:g} Hz: its {freq:g} Hz is at or above "
                           f"Nyquist ({rate / 2:g} Hz), and it is marked above_nyquist: drop")
            continue
        sos = design_section(section, rate)
        blocks.append(sos)
        n = len(sos)
        labels.extend(section.title if n == 1 else f"{section.title} [{k + 1}/{n}]" for k in range(n))
        rows.extend([i] * n)
    if not blocks:
        first = recipe.sections[0]
        raise RecipeError.at(first.locate("above_nyquist"), f"every section of the chain drops out at {rate:g} Hz "
                                                             f"(at or above Nyquist, {rate / 2:g} Hz); nothing is left "
                                                             "to filter: the recipe cannot be used at this rate")
    sos = np.ascontiguousarray(np.vstack(blocks), dtype=np.float64)
    routing, paths = _paths(recipe, sos, labels, rows)
    return Chain(int(rate), sos, tuple(labels), tuple(rows), routing, paths, tuple(dropped))


def _path(key: str, title: str, tracks: tuple[int, ...], chosen: list[int], sos: np.ndarray,
          labels: list[str], rows: list[int]) -> Path:
    """The path through the sections ``chosen`` (indices into the recipe, in order)."""
    mine = [r for r, i in enumerate(rows) if i in set(chosen)]
    if not mine:
        return Path(key, title, tracks, _IDENTITY.copy(), ("no section: passes unchanged",), (-1,))
    return Path(key, title, tracks, np.ascontiguousarray(sos[mine]), tuple(labels[r] for r in mine),
                tuple(rows[r] for r in mine))


def _paths(recipe: Recipe, sos: np.ndarray, labels: list[str], rows: list[int]) -> tuple[str, tuple[Path, ...]]:
    """How the recipe routes channels, and its distinct paths (none for a recipe without ``channels``)."""
    chans = [s.channels for s in recipe.sections]
    if all(c is None for c in chans):
        return EVERY, ()
    if any(isinstance(c, str) for c in chans):
        return MIDSIDE, tuple(_path(word, word, (), [i for i, c in enumerate(chans) if c in (None, word)],
                                    sos, labels, rows) for word in ("mid", "side"))
    named = sorted({t for c in chans if c is not None for t in c})
    groups: dict[tuple[int, ...], list[int]] = {}        # sections run -> the tracks that run them
    for t in named:
        groups.setdefault(tuple(i for i, c in enumerate(chans) if c is None or t in c), []).append(t)
    paths = [_path(",".join(map(str, ts)), ("track " if len(ts) == 1 else "tracks ") + ", ".join(map(str, ts)),
                   tuple(ts), list(chosen), sos, labels, rows) for chosen, ts in groups.items()]
    paths.append(_path("other", "other tracks", (), [i for i, c in enumerate(chans) if c is None],
                       sos, labels, rows))
    return TRACKS, tuple(paths)
