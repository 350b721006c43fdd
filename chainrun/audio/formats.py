"""Containers and subtypes: one row each, with what chainrun does differently for it.

Everything that depends on a container or a subtype is read from the two tables here
(:data:`CONTAINERS`, :data:`SUBTYPES`) and the small tables derived from them; no other
module keeps its own list of subtype widths or container quirks.
"""
from __future__ import annotations

from typing import Any, NamedTuple

import numpy as np
import soundfile as sf

from ..errors import AudioError
from .source import Source

__all__ = ["Subtype", "Container", "SUBTYPES", "CONTAINERS", "RF64_THRESHOLD", "writable", "sample_bytes",
           "full_scale", "is_float", "clip_level", "over_level", "output_format"]

RF64_THRESHOLD = 0xFFFFFFFF - (1 << 20)   # bytes; a RIFF size field cannot say more than 4 GiB


class Subtype(NamedTuple):
    """One sample encoding."""

    bits: int | None    # integer word length; None for float and for companded codes
    width: int          # bytes per sample in the file
    dtype: Any          # numpy dtype handed to libsndfile when writing; None: chainrun does not write it
    shift: int          # left shift of the codes into that dtype (libsndfile takes its top bits)


# Subtype -> its row. libsndfile takes the top bits of int16/int32 data, so 24-bit codes are shifted up by 8.
# The companded laws count as having no word length: an integer output never has more bits than they hold.
SUBTYPES: dict[str, Subtype] = {
    "PCM_U8": Subtype(8, 1, np.int16, 8),       # 8-bit WAV
    "PCM_S8": Subtype(8, 1, np.int16, 8),       # 8-bit AIFF
    "PCM_16": Subtype(16, 2, np.int16, 0),
    "PCM_24": Subtype(24, 3, np.int32, 8),
    "PCM_32": Subtype(32, 4, np.int32, 0),
    "FLOAT": Subtype(None, 4, np.float32, 0),
    "DOUBLE": Subtype(None, 8, np.float64, 0),
    "ULAW": Subtype(None, 1, None, 0),          # G.711 u-law: read only
    "ALAW": Subtype(None, 1, None, 0),          # G.711 A-law: read only
}


class Container(NamedTuple):
    """One container's quirks."""

    size32: bool                 # its size fields are 32-bit: it cannot describe more than 4 GiB
    large: str | None            # the 64-bit sibling an output past 4 GiB becomes (None: refused)
    packed24: bool | None        # PCM_24 packed by chainrun and written raw: big-endian? (None: libsndfile's)
    raw24_magic: bytes | None    # its first four bytes when chainrun reads its PCM_24 raw (little-endian)


# Containers chainrun treats specially; any other container libsndfile writes is handled by libsndfile alone.
CONTAINERS: dict[str, Container] = {
    "WAV": Container(True, "RF64", False, b"RIFF"),      # RIFF: little-endian; RIFX also says WAV
    "WAVEX": Container(True, "RF64", False, b"RIFF"),    # WAVE_FORMAT_EXTENSIBLE
    "RF64": Container(False, None, False, b"RF64"),
    "W64": Container(False, None, False, b"riff"),       # the first bytes of Wave64's 'riff' GUID
    "AIFF": Container(True, None, True, None),           # big-endian; there is no 64-bit AIFF
}
# Containers whose PCM_24 samples chainrun packs itself and hands to libsndfile as raw bytes
# (sf_write_raw; libsndfile still writes and finishes the header): format -> big-endian?
_PACKED_24 = {name: c.packed24 for name, c in CONTAINERS.items() if c.packed24 is not None}
# Containers whose PCM_24 samples chainrun reads raw (sf_read_raw) and unpacks itself, with the
# four bytes their files start with. All are little-endian; a big-endian RIFX file also reports
# itself as WAV, and the first bytes tell it apart.
_UNPACKED_24 = {name: c.raw24_magic for name, c in CONTAINERS.items() if c.raw24_magic is not None}

# The largest magnitude the G.711 companding laws can code, as libsndfile decodes it to 16 bits
# (u-law 8031 in 14-bit steps, A-law 4032 in 13-bit steps; ITU-T G.711, values from memory,
# checked against libsndfile's decoding of +1.0): a sample there is at full scale.
_COMPANDED_FULL_SCALE = {"ULAW": 32124 / 32768, "ALAW": 32256 / 32768}


# The subtypes a recipe's output.subtype may name, in the order a message lists them.
_CHOSEN = ("PCM_16", "PCM_24", "PCM_32", "FLOAT", "DOUBLE")


def _held(fmt: str) -> list[str]:
    """The subtypes of :data:`_CHOSEN` a ``fmt`` file can hold (none for Ogg and MP3: lossy codecs only)."""
    return [s for s in _CHOSEN if sf.check_format(fmt, s)]


def writable(subtype: str) -> bool:
    """True if chainrun can write ``subtype``."""
    row = SUBTYPES.get(subtype)
    return row is not None and row.dtype is not None


def sample_bytes(subtype: str) -> int:
    """Bytes one sample of ``subtype`` takes in a file (1 for a subtype not in the table)."""
    row = SUBTYPES.get(subtype)
    return row.width if row is not None else 1


def full_scale(subtype: str) -> float:
    """The largest magnitude ``subtype`` can code (1.0 = 0 dBFS); in an integer subtype a sample there is clipped.

    For b-bit PCM it is the largest code, ``(2**(b-1) - 1) / 2**(b-1)``; 1.0 for a float subtype,
    which also holds samples past it (:func:`clip_level`).
    """
    if subtype in _COMPANDED_FULL_SCALE:
        return _COMPANDED_FULL_SCALE[subtype]
    bits = SUBTYPES.get(subtype, (None,))[0]
    return (2 ** (bits - 1) - 1) / 2 ** (bits - 1) if bits else 1.0


def is_float(subtype: str) -> bool:
    """True for the floating-point subtypes (FLOAT, DOUBLE): they hold samples past full scale as they are."""
    row = SUBTYPES.get(subtype)
    return row is not None and row.dtype is not None and np.dtype(row.dtype).kind == "f"


def clip_level(subtype: str) -> float:
    """Where a sample of ``subtype`` counts as clipped: :func:`full_scale`, or infinity for a float subtype.

    A float sample past 1.0 is not clipped: it is kept, and can be brought back under full scale
    by a gain (it is "over full scale", which the meters count apart: :func:`over_level`).
    """
    return float("inf") if is_float(subtype) else full_scale(subtype)


# Float subtype -> the largest float64 magnitude it stores at or under 1.0: FLOAT rounds to nearest,
# ties to even, so values up to 1 + 2**-24 (halfway to the next float32 above 1.0) are stored as 1.0.
_OVER_LEVEL = {"FLOAT": 1.0 + 2.0 ** -24, "DOUBLE": 1.0}


def over_level(subtype: str) -> float:
    """Past what magnitude a (float64) sample is stored over full scale by ``subtype``; infinity if never.

    Only a float subtype keeps samples over full scale: a FLOAT file holds past 1.0 whatever does not
    round to 1.0 in single precision, a DOUBLE file anything past 1.0. An integer subtype clips there
    (:func:`clip_level`). A sample of exactly +-1.0 is at full scale, not over it.
    """
    return _OVER_LEVEL.get(subtype, float("inf"))


def output_format(src: Source, subtype: str, extra: int = 0) -> tuple[str, str]:
    """Container and subtype of the output for ``src`` (``subtype`` may be ``same``).

    WAV outputs that would pass 4 GiB (their samples and ``extra`` bytes of metadata) become RF64; an AIFF output cannot (its size fields are
    32-bit too, and there is no 64-bit AIFF), so it is refused before anything is written.

    Raises
    ------
    AudioError
        If the subtype cannot be written, or the container cannot hold it.
    """
    out_subtype = src.subtype if subtype == "same" else subtype
    held = _held(src.format)
    if not held:        # an output keeps its input's container: no output.subtype helps
        raise AudioError(f"chainrun cannot write {src.format} files ({src.subtype}): an output keeps its input's "
                         f"container, and {src.format} holds none of the PCM or float encodings chainrun writes; "
                         "convert the recording to WAV (e.g. PCM_24) or FLAC first, and run that file")
    if not writable(out_subtype):
        raise AudioError(f"its encoding {src.subtype} cannot be written back as it is; "
                         f"set output.subtype to one of {', '.join(held)}")
    fmt = src.format
    nbytes = src.frames * src.channels * SUBTYPES[out_subtype].width + extra
    row = CONTAINERS.get(fmt)
    if row is not None and row.size32 and nbytes > RF64_THRESHOLD:
        if row.large is None:
            raise AudioError(f"as {out_subtype} its output would pass the 4 GiB an {fmt} file can describe; "
                             "choose a smaller output.subtype, or split the recording")
        fmt = row.large
    if not sf.check_format(fmt, out_subtype):
        raise AudioError(f"a {fmt} file cannot hold {out_subtype}; set output.subtype to one of "
                         f"{', '.join(_held(fmt)) or 'none (write another container)'}")
    return fmt, out_subtype
