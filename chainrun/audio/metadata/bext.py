"""The broadcast audio extension chunk ('bext', EBU Tech 3285 v0, v1 and v2).

The chunk's fixed part is 602 bytes; its coding history follows. Field offsets (EBU Tech 3285
v2, 2011, section 2.3, the ``BROADCAST_EXT`` structure):

=====================  ======  ====  ==========================================
field                  offset  size  chainrun
=====================  ======  ====  ==========================================
Description               0     256  kept byte for byte
Originator              256      32  kept byte for byte
OriginatorReference     288      32  kept byte for byte
OriginationDate         320      10  kept byte for byte
OriginationTime         330       8  kept byte for byte
TimeReferenceLow        338       4  kept (samples since midnight, low word)
TimeReferenceHigh       342       4  kept (high word)
Version                 346       2  raised to 2
UMID                    348      64  kept byte for byte
LoudnessValue           412       2  int16 round(100 x LUFS), 0x7FFF unknown
LoudnessRange           414       2  int16 round(100 x LU)
MaxTruePeakLevel        416       2  int16 round(100 x dBTP)
MaxMomentaryLoudness    418       2  int16 round(100 x LUFS)
MaxShortTermLoudness    420       2  int16 round(100 x LUFS)
Reserved                422     180  kept byte for byte
CodingHistory           602     ...  kept; one row appended (EBU R 98)
=====================  ======  ====  ==========================================

The loudness fields of an input describe the input's audio, which chainrun changes: they are
set from the values the caller measured on the output, or to 0x7FFF (unknown), never copied
and never invented.
"""

from __future__ import annotations

import math
import struct
from dataclasses import dataclass

BEXT_FIXED = 602            # EBU Tech 3285: size of the fixed part
BEXT_ROW_MAX = 256          # bytes chainrun may add to a bext chunk (its coding history row)
UNKNOWN_LOUDNESS = 0x7FFF   # EBU Tech 3285 v2: "not known" / not measured

# The five v2 loudness fields: caller's key -> byte offset in the chunk.
LOUDNESS_FIELDS = {
    "loudness_value": 412,            # LUFS, integrated (EBU R 128)
    "loudness_range": 414,            # LU
    "max_true_peak_level": 416,       # dBTP
    "max_momentary_loudness": 418,    # LUFS
    "max_short_term_loudness": 420,   # LUFS
}

# EBU R 98 "M=" (mode) values for the channel counts it names.
_R98_MODE = {1: "mono", 2: "stereo"}


@dataclass(frozen=True)
class Bext:
    """The fields of a bext chunk, as stored (text fields are raw bytes, NULs included)."""

    description: bytes
    originator: bytes
    originator_reference: bytes
    origination_date: bytes
    origination_time: bytes
    time_reference: int
    version: int
    umid: bytes
    loudness: tuple[int, int, int, int, int]
    coding_history: bytes


def parse_bext(payload: bytes) -> Bext:
    """Read a bext chunk's payload.

    Raises
    ------
    ValueError
        If the payload is shorter than the 602 bytes EBU Tech 3285 requires.
    """
    if len(payload) < BEXT_FIXED:
        raise ValueError(f"has {len(payload)} bytes, fewer than the {BEXT_FIXED} of EBU Tech 3285")
    low, high, version = struct.unpack_from("<IIH", payload, 338)
    return Bext(payload[0:256], payload[256:288], payload[288:320], payload[320:330],
                payload[330:338], low | (high << 32), version, payload[348:412],
                struct.unpack_from("<5h", payload, 412), payload[BEXT_FIXED:])


def _text(field: bytes) -> str:
    return field.split(b"\0", 1)[0].decode("latin-1")


def describe_bext(payload: bytes, rate: int) -> dict:
    """Plain data for ``scan`` and the JSON report (text fields cut at their first NUL)."""
    b = parse_bext(payload)
    out = {"description": _text(b.description), "originator": _text(b.originator),
           "originator_reference": _text(b.originator_reference),
           "origination_date": _text(b.origination_date), "origination_time": _text(b.origination_time),
           "time_reference": b.time_reference,
           "time_reference_hms": format_time_reference(b.time_reference, rate),
           "version": b.version, "coding_history": _text(b.coding_history)}
    if b.version >= 2:
        for (key, _), raw in zip(LOUDNESS_FIELDS.items(), b.loudness):
            out[key] = None if raw == UNKNOWN_LOUDNESS else raw / 100
    return out


def loudness_code(value: float | None) -> int:
    """A v2 loudness field: int16 of round(100 x value); 0x7FFF when unknown or out of range."""
    if value is None or not math.isfinite(value):
        return UNKNOWN_LOUDNESS
    code = round(100 * value)
    return code if -32768 <= code < UNKNOWN_LOUDNESS else UNKNOWN_LOUDNESS


def update_bext(payload: bytes, row: str | None, loudness: dict | None = None) -> bytes:
    """The output's bext: the input's, version 2, fresh loudness fields, ``row`` appended.

    Everything else (text fields, time reference, UMID, reserved bytes, the old coding
    history) is kept byte for byte; only NULs padding the end of the history are removed,
    and a CR LF is added after it if its last row lacks one, so that the new row starts a
    line of its own.

    Parameters
    ----------
    payload : bytes
        The input's bext payload (602 bytes or more).
    row : str or None
        One EBU R 98 row (see :func:`coding_history_row`), CR LF included; None adds none.
    loudness : dict, optional
        Values measured on the output, keyed as :data:`LOUDNESS_FIELDS`; missing keys are
        written as 0x7FFF (unknown).
    """
    parse_bext(payload)     # checks the length
    loudness = loudness or {}
    unknown = set(loudness) - set(LOUDNESS_FIELDS)
    if unknown:
        raise ValueError(f"unknown loudness field(s) {sorted(unknown)}; allowed: {list(LOUDNESS_FIELDS)}")
    head = bytearray(payload[:BEXT_FIXED])
    struct.pack_into("<H", head, 346, 2)
    for key, at in LOUDNESS_FIELDS.items():
        struct.pack_into("<h", head, at, loudness_code(loudness.get(key)))
    history = payload[BEXT_FIXED:].rstrip(b"\0")
    if row:
        encoded = row.encode("ascii")
        if len(encoded) > BEXT_ROW_MAX - 2:
            raise ValueError(f"the coding history row has {len(encoded)} bytes; at most {BEXT_ROW_MAX - 2}")
        if history and not history.endswith(b"\r\n"):
            history += b"\r\n"
        history += encoded
    return bytes(head) + history


def coding_history_row(rate: int, channels: int, bits: int, text: str, sample_format: str = "PCM") -> str:
    """One coding-history row in the form of EBU R 98, ending in CR LF.

    ``A=<algorithm>,F=<rate>,W=<word length>,M=<mode>,T=<free text>``: R 98 names the modes
    mono, stereo, dual-mono and joint-stereo; for more than two channels ``M=`` is left out and
    the channel count goes into the text. Non-ASCII characters of ``text`` become '?', commas
    become ';' (a comma separates the variables), and the row is cut to fit
    :data:`BEXT_ROW_MAX`.
    """
    mode = _R98_MODE.get(channels)
    parts = [f"A={sample_format}", f"F={int(rate)}", f"W={int(bits)}"]
    if mode:
        parts.append(f"M={mode}")
    else:
        text = f"{channels} channels; {text}"
    clean = "".join(c if " " <= c <= "~" else "?" for c in text).replace(",", ";")
    row = ",".join(parts + ["T=" + clean])
    return row[:BEXT_ROW_MAX - 2] + "\r\n"


def format_time_reference(samples: int, rate: int) -> str:
    """A bext time reference (samples since midnight) as ``hh:mm:ss:samples`` at ``rate``."""
    if rate <= 0:
        raise ValueError(f"sample rate {rate} must be positive")
    seconds, rest = divmod(int(samples), int(rate))
    hours, seconds = divmod(seconds, 3600)
    minutes, seconds = divmod(seconds, 60)
    width = len(str(int(rate) - 1))
    return f"{hours:02d}:{minutes:02d}:{seconds:02d}:{rest:0{width}d}"
