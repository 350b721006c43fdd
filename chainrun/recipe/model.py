"""The loaded recipe: :class:`Section`, :class:`Guard`, :class:`Output` and :class:`Recipe`.

Plain frozen data, sample-rate-free and validated by :mod:`chainrun.recipe.loader`. Every
value keeps the file, line and column it came from, so that any later stage (design at a
sample rate, the guard, the runner) can point at the exact place in the file that caused a
problem.
"""
from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field
from typing import Any, Mapping

from ..errors import Location
from .yaml import _fmt

__all__ = ["Section", "Guard", "Output", "Loudness", "Recipe"]

_GUARD_KEYS = ("max_gain_db", "pole_margin", "max_decay_s", "ceiling_dbfs", "true_peak_ceiling_dbtp", "on_over")

@dataclass(frozen=True)
class Section:
    """One filter section of a chain, validated but not yet designed.

    ``params`` holds the section's numeric parameters with defaults filled in
    (``order``; ``slope`` for second-order shelves); ``where`` the location of
    the section itself and ``param_where`` the location of each given key.
    ``index`` is the position in the file it was written in. ``above_nyquist`` is what
    happens at a rate whose Nyquist frequency is at or below the section's ``freq``: ``reject``
    (the file is rejected) or ``drop`` (the section is left out at that rate). ``channels`` is the
    channels the section filters: None (every channel), a sorted tuple of distinct
    1-based track numbers, or ``"mid"`` / ``"side"`` (a two-channel file's
    mid = (L + R) / 2 or side = (L - R) / 2).
    """

    kind: str
    params: Mapping[str, Any]
    where: Location
    param_where: Mapping[str, Location]
    index: int
    label: str = ""
    origin: str = ""          # for a section of an included recipe: that file, as the include named it
    channels: tuple[int, ...] | str | None = None
    above_nyquist: str = "reject"   # at a rate whose Nyquist is at or below freq: reject, or "drop" the section

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
        if self.channels is not None:       # only then: a recipe without channels keeps its digest
            out["channels"] = list(self.channels) if isinstance(self.channels, tuple) else self.channels
        if self.above_nyquist != "reject":  # only then: a recipe that does not write it keeps its digest
            out["above_nyquist"] = self.above_nyquist
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
    """Output format: ``subtype`` (same or a libsndfile subtype), ``dither``, and ``metadata`` (keep or drop)."""

    subtype: str = "same"
    dither: str = "auto"
    metadata: str = "keep"
    where: Mapping[str, Location] = field(default_factory=dict, compare=False)

    def to_dict(self) -> dict:
        out = {"subtype": self.subtype, "dither": self.dither}
        if self.metadata != "keep":     # only then: a recipe that does not write it keeps its digest
            out["metadata"] = self.metadata
        return out


@dataclass(frozen=True)
class Loudness:
    """The recipe's ``loudness:`` block: render to ``target_lufs`` with one gain, measured over ``link``.

    ``link`` is ``file`` (each file its own gain), ``folder`` or ``batch`` (one gain for the
    files of a folder, or of the whole batch, from their combined gated loudness).
    """

    target_lufs: float
    link: str = "file"
    where: Mapping[str, Location] = field(default_factory=dict, compare=False)

    def to_dict(self) -> dict:
        return {"target_lufs": self.target_lufs, "link": self.link}


@dataclass(frozen=True)
class Recipe:
    """A loaded recipe: the resolved chain (includes first), guard, output and loudness target (or None).

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
    loudness: Loudness | None = None
    rates: tuple[int, ...] | None = None      # the sample rates (Hz) it declares it is meant for, or None

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
        } | ({"loudness": self.loudness.to_dict()} if self.loudness is not None else {}) \
          | ({"rates": list(self.rates)} if self.rates is not None else {})

    @property
    def digest(self) -> str:
        """SHA-256 of the resolved recipe (chain, guard values, output, loudness), location-free.

        Two recipes that filter audio identically share a digest even if they are
        laid out differently or include each other from other folders.
        """
        d = self.to_dict()
        for s in d["chain"]:
            s.pop("from", None)
            s.pop("label", None)
        payload = {"chain": d["chain"], "guard": d["guard"], "output": d["output"]}
        if "loudness" in d:             # only then: a recipe without a loudness block keeps its digest
            payload["loudness"] = d["loudness"]
        return hashlib.sha256(json.dumps(payload, sort_keys=True).encode()).hexdigest()

