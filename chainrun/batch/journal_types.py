"""The types a line of the resume journal must have to be trusted.

A journal line is plain JSON that anyone can edit. A kept file's report entry is rebuilt from it
(:meth:`chainrun.results.FileResult.from_record`), so a value of the wrong type (``"seconds": "fast"``)
would only fail later, while the reports are drawn -- after the batch ran, with last run's reports
still in place. :func:`line_problem` checks every value the rebuild and the reports read, as
:meth:`~chainrun.results.FileResult.to_record` writes it; keys it does not know are left alone (a
newer chainrun may write more), keys a record of an older chainrun lacks may be missing.
"""
from __future__ import annotations

from typing import Any, Callable

from ..results import DELIVERED

__all__ = ["line_problem"]

_Check = Callable[[Any, str], "str | None"]


def _what(v: Any) -> str:
    return "null" if v is None else {bool: "true/false", int: "an integer", float: "a number", str: "text",
                                     list: "a list", dict: "a mapping"}.get(type(v), type(v).__name__)


def _kind(test: Callable[[Any], bool], word: str) -> _Check:
    return lambda v, name: None if test(v) else f"{name} is {_what(v)}, not {word}"


STR = _kind(lambda v: isinstance(v, str), "text")
INT = _kind(lambda v: isinstance(v, int) and not isinstance(v, bool), "an integer")
NUM = _kind(lambda v: isinstance(v, (int, float)) and not isinstance(v, bool), "a number")
BOOL = _kind(lambda v: isinstance(v, bool), "true/false")


def _opt(check: _Check) -> _Check:
    return lambda v, name: None if v is None else check(v, name)


def _list(check: _Check) -> _Check:
    def run(v, name):
        if not isinstance(v, list):
            return f"{name} is {_what(v)}, not a list"
        return next((p for i, item in enumerate(v) if (p := check(item, f"{name}[{i}]"))), None)
    return run


def _record(fields: dict[str, _Check], required: tuple[str, ...] | None = None) -> _Check:
    """A mapping whose known keys have these types; ``required`` (default: all of them) must be there."""
    need = tuple(fields) if required is None else required

    def run(v, name):
        if not isinstance(v, dict):
            return f"{name} is {_what(v)}, not a mapping"
        missing = next((k for k in need if k not in v), None)
        if missing:
            return f"{name} has no '{missing}'"
        return next((p for k, check in fields.items() if k in v and (p := check(v[k], f"{name}.{k}"))), None)
    return run


def _delivered(v, name):
    return None if v in DELIVERED else f"{name} is {v!r}, not one of {', '.join(sorted(DELIVERED))}"


_FINGERPRINT = _record({"size": INT, "mtime_ns": INT, "inode": INT, "ctime_ns": INT, "sample_sha256": STR},
                       required=("size", "mtime_ns", "sample_sha256"))
_CHANNEL = _record({"peak": _opt(NUM), "true_peak": _opt(NUM), "rms": _opt(NUM), "dc_offset": _opt(NUM),
                    "clipped_samples": INT, "clipped_regions": _list(_list(INT)), "clipped_region_count": INT,
                    "nonfinite_samples": INT})
_LOUDNESS = _record({"integrated_lufs": _opt(NUM), "loudness_range_lu": _opt(NUM), "max_momentary_lufs": _opt(NUM),
                     "max_short_term_lufs": _opt(NUM), "channel_weights": _list(NUM), "weights_note": STR,
                     "frames": INT, "nonfinite_samples": INT})
_METERS = _record({"frames": INT, "rate": INT, "true_peak_oversampling": _opt(INT), "channels": _list(_CHANNEL),
                   "loudness": _opt(_LOUDNESS)}, required=("frames", "rate", "true_peak_oversampling", "channels"))
_ITEM = _record({"chunk": STR, "at_byte": _opt(INT), "bytes": _opt(INT), "action": STR, "reason": STR},
                required=())
_METADATA = _record({"container": _opt(STR), "items": _opt(_list(_ITEM)), "notes": _opt(_list(STR)),
                     "changes": _opt(_list(STR))}, required=())
_RESULT = _record({"status": _delivered, "message": STR, "out_format": _opt(STR), "out_subtype": _opt(STR),
                   "dither": BOOL, "over_db": _opt(NUM), "trim_db": _opt(NUM), "gain_db": NUM,
                   "clipped_by_chainrun": INT, "seconds": NUM, "metadata": _opt(_METADATA),
                   "loudness_gain_db": _opt(NUM), "loudness_shortfall_lu": _opt(NUM),
                   "input_meters": _opt(_METERS), "output_meters": _opt(_METERS)}, required=("status",))
_LINE = _record({"relpath": STR, "key": STR, "input": _FINGERPRINT, "output": _FINGERPRINT, "result": _RESULT})


def line_problem(d: Any) -> str | None:
    """Why a decoded journal line cannot be trusted (``result.seconds is text, not a number``), or None."""
    return _LINE(d, "entry")
