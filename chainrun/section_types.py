"""The catalogue of section types: one row per type, the only place a type is described.

A row (:class:`SectionType`) says which keys a section of that type takes, the rule that
checks their combination, the designer that turns them into second-order sections, a
one-line description, whether the section is raw coefficients, and how to describe its
parameters in a short text. The recipe loader, the designer, the guard, the plots and the
reports all read this table; none of them names a type.

Adding a section type = one pure designer in :mod:`chainrun.designers` + one row in
``SECTIONS`` (+ a reader in ``chainrun.recipe.loader._PARAM_READERS`` for a new numeric key).

Rule functions take ``(params, name, where)``: the parameters read so far (they may fill in
defaults), the section's name for messages (``chain[2]``) and the location of every key the
section wrote (``where["type"]`` always exists). They raise a located
:class:`~chainrun.errors.RecipeError` for a combination that is not allowed.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Callable, Mapping

import numpy as np

from . import designers
from .errors import Location, RecipeError

__all__ = ["SectionType", "SECTIONS", "SECTION_TYPES", "COMMON_KEYS", "describe", "param_text", "raw_sections",
           "MAX_ORDER", "MAX_TRACK", "CHANNEL_WORDS", "MAX_ABS_GAIN_DB", "MAX_BW_OCTAVES", "MAX_IIR_COEFF", "MIN_FREQ_HZ"]

# Limits of one section's parameters (the recipe loader's readers apply them).
MAX_ORDER = 8                     # Butterworth order and raw iir order
MAX_ABS_GAIN_DB = 120.0           # |gain_db| of a single section
MAX_BW_OCTAVES = 10.0             # bandwidth in octaves
MAX_IIR_COEFF = 1e9               # |b[i] / a[0]| and |a[i] / a[0]| of a raw iir section
MIN_FREQ_HZ = 1e-3                # lowest section frequency; below it the designs underflow to nonsense
MAX_TRACK = 64                    # highest track number a section's ``channels`` may name

# Keys every section type takes, whatever its type: ``channels`` (which channels the section
# filters: a list of 1-based track numbers, or one of CHANNEL_WORDS for a two-channel file) and
# ``above_nyquist`` (``reject`` or ``drop``: at a rate whose Nyquist frequency is at or below the
# section's freq, reject the file or leave the section out; only a section with a freq takes it).
COMMON_KEYS = ("channels", "above_nyquist")
CHANNEL_WORDS = ("mid", "side")

Rule = Callable[[dict, str, Mapping[str, Location]], None]
Designer = Callable[[Mapping[str, Any], float], np.ndarray]


# --------------------------------------------------------------------------- rules

def _one_of(params: dict, keys: tuple[str, str], name: str, where, node_where: Location, required: bool) -> None:
    given = [k for k in keys if k in params]
    if len(given) > 1:
        raise RecipeError.at(where[keys[1]], f"{name} gives both {keys[0]} and {keys[1]}; give one of them")
    if required and not given:
        raise RecipeError.at(node_where, f"{name} needs {keys[0]} or {keys[1]}; give one of them")


def _rule_pass(params, name, where) -> None:
    if "q" in params and params["order"] != 2:
        raise RecipeError.at(where["q"], f"{name}.q is only allowed with order 2 (cookbook form); "
                                         f"Butterworth order {params['order']} takes no q")


def _rule_shelf(params, name, where) -> None:
    if params["order"] == 1:
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
                                 f"{name}.slope {params['slope']:g} is too steep for "
                                 f"{params['gain_db']:g} dB; allowed: up to {offered:.4g} at this gain")


def _rule_band(params, name, where) -> None:
    _one_of(params, ("q", "bw"), name, where, where["type"], required=True)


def _rule_none(params, name, where) -> None:
    return None


def _rule_iir(params, name, where) -> None:
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
            raise RecipeError.at(where[key], f"{name}.{key} has a coefficient {big:g} times a[0]; "
                                             f"allowed: up to {MAX_IIR_COEFF:g} times a[0] (scale b and a alike)")
    if max(abs(x / a[0]) for x in b) <= 1e-14:
        raise RecipeError.at(where["b"], f"{name}.b is effectively zero (every b[i] / a[0] is 1e-14 or less); "
                                         "the section would output silence")
    order = max(len(b), len(a)) - 1
    if order > MAX_ORDER:
        raise RecipeError.at(where["a"], f"{name} has order {order}; allowed: up to {MAX_ORDER}")


# --------------------------------------------------------------------------- short texts

def _hz(f: float) -> str:
    if not math.isfinite(f):
        return "-"
    if f >= 1000:
        return f"{f / 1000:.3g} kHz"
    return f"{f:.3g} Hz" if f >= 1 else f"{f:.2g} Hz"


def _describe_common(p: Mapping[str, Any]) -> list[str]:
    """The parameters most types share: ``1.2 kHz +3 dB Q 0.7`` / ``bw 1 oct``."""
    parts = []
    if "freq" in p:
        parts.append(_hz(float(p["freq"])))
    if "gain_db" in p:
        parts.append(f"{p['gain_db']:+g} dB")
    if "q" in p:
        parts.append(f"Q {p['q']:g}")
    if "bw" in p:
        parts.append(f"bw {p['bw']:g} oct")
    return parts


def _describe_pass(p: Mapping[str, Any]) -> list[str]:
    parts = _describe_common(p)
    if "order" in p and "q" not in p:             # Butterworth: its order; the cookbook form: its Q
        parts.append(f"order {p['order']}")
    return parts


def _describe_shelf(p: Mapping[str, Any]) -> list[str]:
    parts = _describe_common(p)
    if "slope" in p and p.get("order", 2) == 2 and "q" not in p:
        parts.append(f"slope {p['slope']:g}")
    return parts


def _describe_raw(p: Mapping[str, Any]) -> list[str]:
    return _describe_common(p) + [f"order {max(len(p['b']), len(p['a'])) - 1}"]


# --------------------------------------------------------------------------- the table

@dataclass(frozen=True)
class SectionType:
    """One section type.

    Attributes
    ----------
    name : str
        The ``type:`` a recipe writes.
    required, optional : tuple of str
        Keys a section of this type must / may give (besides ``type``, ``label`` and the
        ``COMMON_KEYS`` every type takes).
    rule : callable
        ``rule(params, name, where)`` checks the combination of keys, fills defaults.
    designer : callable
        ``designer(params, rate) -> ndarray (k, 6)``, from :mod:`chainrun.designers`.
    description : str
        One line for documentation and plots.
    order : (int, int) or None
        Allowed range of the whole-number ``order`` key (default 2), or None if the type
        has no order.
    raw : bool
        True if the section *is* its coefficients (``b`` and ``a``): the guard checks the
        roots of its own denominator before any design.
    describer : callable
        ``describer(params) -> list of str``: the short parameter text, part by part.
    """

    name: str
    required: tuple[str, ...]
    optional: tuple[str, ...]
    rule: Rule
    designer: Designer
    description: str
    order: tuple[int, int] | None = None
    raw: bool = False
    describer: Callable[[Mapping[str, Any]], list[str]] = _describe_common

    @property
    def keys(self) -> tuple[str, ...]:
        """Every key a section of this type may write (the keys every type takes last)."""
        return ("type", "label") + self.required + self.optional + COMMON_KEYS

    def describe(self, params: Mapping[str, Any]) -> str:
        """Short parameter text, e.g. ``1.2 kHz +3 dB Q 0.7``."""
        return " ".join(self.describer(params))


_PASS = (1, MAX_ORDER)
_SHELF = (1, 2)
_BAND = ("q", "bw")
_SHELF_KEYS = ("slope", "q", "order")

# Section type -> its row. The order here is the order types are listed in messages.
SECTIONS: dict[str, SectionType] = {s.name: s for s in (
    SectionType("highpass", ("freq",), ("order", "q"), _rule_pass, designers.highpass,
                "high-pass: Butterworth order 1..8, or the cookbook HPF with q", order=_PASS,
                describer=_describe_pass),
    SectionType("lowpass", ("freq",), ("order", "q"), _rule_pass, designers.lowpass,
                "low-pass: Butterworth order 1..8, or the cookbook LPF with q", order=_PASS,
                describer=_describe_pass),
    SectionType("low_shelf", ("freq", "gain_db"), _SHELF_KEYS, _rule_shelf, designers.low_shelf,
                "low shelf: cookbook lowShelf (order 2, slope or q) or first-order bilinear", order=_SHELF,
                describer=_describe_shelf),
    SectionType("high_shelf", ("freq", "gain_db"), _SHELF_KEYS, _rule_shelf, designers.high_shelf,
                "high shelf: cookbook highShelf (order 2, slope or q) or first-order bilinear", order=_SHELF,
                describer=_describe_shelf),
    SectionType("peak", ("freq", "gain_db"), _BAND, _rule_band, designers.peak,
                "peaking EQ: cookbook peakingEQ, width as q or bw in octaves"),
    SectionType("notch", ("freq",), _BAND, _rule_band, designers.notch,
                "notch: cookbook notch, width as q or bw in octaves"),
    SectionType("bandpass", ("freq",), _BAND, _rule_band, designers.bandpass,
                "band-pass: cookbook BPF with constant 0 dB peak gain"),
    SectionType("allpass", ("freq",), _BAND, _rule_band, designers.allpass,
                "all-pass: cookbook APF, phase -180 degrees at freq"),
    SectionType("gain", ("gain_db",), (), _rule_none, designers.gain,
                "flat gain in dB"),
    SectionType("iir", ("b", "a"), (), _rule_iir, designers.iir,
                "raw coefficients b and a (order up to 8), factored into sections", raw=True,
                describer=_describe_raw),
)}
SECTION_TYPES = tuple(SECTIONS)

# Units of parameter keys, for texts that list keys and values.
PARAM_UNITS = {"freq": " Hz", "gain_db": " dB", "bw": " octaves"}


# --------------------------------------------------------------------------- readers of the table

def describe(section) -> str:
    """A short description of a section: type, main parameters and label.

    Parameters
    ----------
    section
        A :class:`~chainrun.recipe.Section` (anything with ``kind``, ``params`` and ``label``).

    Examples
    --------
    >>> from types import SimpleNamespace
    >>> describe(SimpleNamespace(kind="peak", params={"freq": 1200.0, "gain_db": 3.0, "q": 0.7}, label="air"))
    'peak 1.2 kHz +3 dB Q 0.7 (air)'
    """
    text = " ".join([section.kind] + SECTIONS[section.kind].describer(section.params))
    return f"{text} ({section.label})" if section.label else text


def param_text(section: Mapping[str, Any]) -> str:
    """Every parameter of a section as written out by ``Section.to_dict()``: ``freq 80 Hz, order 2``.

    Reads the JSON-safe form only (a report document), so that a page can be built without
    recipe objects. ``type``, ``label`` and ``from`` are left out.
    """
    parts = []
    for key, value in section.items():
        if key in ("type", "label", "from"):
            continue
        if isinstance(value, (list, tuple)):
            value = "[" + ", ".join(f"{v:g}" if isinstance(v, float) else str(v) for v in value) + "]"
        elif isinstance(value, float):
            value = f"{value:g}"
        parts.append(f"{key} {value}{PARAM_UNITS.get(key, '')}")
    return ", ".join(parts)


def raw_sections(recipe) -> list:
    """The sections of ``recipe`` whose type is raw coefficients ``b`` and ``a`` (``raw=True``)."""
    return [s for s in recipe.sections if SECTIONS[s.kind].raw]
