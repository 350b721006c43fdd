"""Render one file: blocks in -> filter (state carried) -> meters -> policy -> quantise -> temp -> rename.

Memory does not depend on the file's length: every buffer is one block long.
The output is written to a temporary name in the destination folder, flushed
and fsynced, and only then renamed to its final name, so a final name never
holds an incomplete file. The input is opened read-only and never written.

Notes
-----
Integer output is quantised here, not by libsndfile: ``round(x * 2**(bits-1)
+ dither)`` then hard-clipped to the code range, so writing +2.0 to PCM_16 gives
32767 and can never wrap around. Reading PCM with soundfile divides by
``2**(bits-1)``, so a file filtered by a 0 dB chain without dither comes back
bit-identical.
"""
from __future__ import annotations

import errno
import hashlib
import math
import os
import queue
import sys
import threading
import time
from dataclasses import dataclass
from typing import Any

import numpy as np
import soundfile as sf

from .errors import AudioError
from .audio.source import Source
from .fsutil import TEMP_TAG, fsync_path as _fsync_path, remove_quietly as _remove_quietly, temp_path_for  # noqa: F401
from .interrupt import allow_rendering, rendering_stopped, stop_point as _stop_point, stop_rendering  # noqa: F401
from .meters import Meter, MeterReading
from .results import FileResult
from .text import db as _db

__all__ = ["Policy", "Source", "FileResult", "AudioError", "probe", "render_file", "scan_file", "output_format"]

DEFAULT_BLOCK = 65536
MAX_BLOCK = 1 << 22
RF64_THRESHOLD = 0xFFFFFFFF - (1 << 20)   # bytes; a RIFF size field cannot say more than 4 GiB
_SFC_SET_ADD_PEAK_CHUNK = 0x1050          # libsndfile sf_command: the PEAK chunk holds a time stamp

# Output subtype -> (bits or None for float, numpy dtype handed to libsndfile, left shift into it).
# libsndfile takes the top bits of int16/int32 data, so 24-bit codes are shifted up by 8.
SUBTYPES: dict[str, tuple[int | None, Any, int]] = {
    "PCM_U8": (8, np.int16, 8),      # 8-bit WAV
    "PCM_S8": (8, np.int16, 8),      # 8-bit AIFF
    "PCM_16": (16, np.int16, 0),
    "PCM_24": (24, np.int32, 8),
    "PCM_32": (32, np.int32, 0),
    "FLOAT": (None, np.float32, 0),
    "DOUBLE": (None, np.float64, 0),
}
# Formats whose size field is 32 bits and which have a 64-bit sibling.
_LARGE_FORMAT = {"WAV": "RF64", "WAVEX": "RF64"}


@dataclass(frozen=True)
class Policy:
    """How to render: headroom policy, ceiling, output format, block size.

    ``threads`` is how many cores the file may keep busy. With 1 (the
    default) every step runs in the calling thread, one after the other; with 2
    or more, decoding (with the input meters), filtering, and the output meters
    with encoding run in three threads that overlap. The batch gives a file more
    than one only when it renders that file alone. It never changes the output.
    """

    on_over: str = "reject"
    ceiling_dbfs: float = 0.0
    true_peak_ceiling_dbtp: float | None = None
    subtype: str = "same"
    dither: str = "auto"
    block_size: int = DEFAULT_BLOCK
    true_peak: bool = True
    max_regions: int = 20
    threads: int = 1

    @property
    def ceiling(self) -> float:
        return 10.0 ** (self.ceiling_dbfs / 20.0)


# The largest magnitude the G.711 companding laws can code, as libsndfile decodes it to 16 bits
# (u-law 8031 in 14-bit steps, A-law 4032 in 13-bit steps; ITU-T G.711, values from memory,
# checked against libsndfile's decoding of +1.0): a sample there is at full scale.
_COMPANDED_FULL_SCALE = {"ULAW": 32124 / 32768, "ALAW": 32256 / 32768}


def _full_scale(subtype: str) -> float:
    if subtype in _COMPANDED_FULL_SCALE:
        return _COMPANDED_FULL_SCALE[subtype]
    bits = SUBTYPES.get(subtype, (None,))[0]
    return (2 ** (bits - 1) - 1) / 2 ** (bits - 1) if bits else 1.0


def probe(path: str) -> Source:
    """Read an input's header.

    Raises
    ------
    AudioError
        If the file cannot be opened as audio, holds no frames or has no channels.
    """
    try:
        st = os.stat(path)
        info = sf.info(_sf_path(path))
    except (sf.LibsndfileError, RuntimeError, OSError, ValueError) as exc:
        raise AudioError(_why(exc)) from None
    if info.frames <= 0:
        raise AudioError("holds no audio frames; nothing to filter")
    if info.channels <= 0 or info.samplerate <= 0:
        raise AudioError("declares no channels or no sample rate; the header is damaged")
    return Source(path, int(info.samplerate), int(info.channels), int(info.frames),
                  info.format, info.subtype, st.st_size, st.st_mtime_ns)


def _sf_path(path: str) -> str | bytes:
    """``path`` as soundfile can open it.

    soundfile encodes a str path strictly (UTF-8 here), so a name holding bytes that
    are not UTF-8 (kept by Python as surrogate escapes) would fail to open; such a
    path is handed over as the file system's bytes instead.
    """
    try:
        path.encode(sys.getfilesystemencoding())
        return path
    except UnicodeEncodeError:
        return os.fsencode(path)


def _why(exc: BaseException) -> str:
    if isinstance(exc, OSError) and exc.strerror:
        return f"cannot read: {exc.strerror.lower()}"
    text = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    if "Error opening" in text and ":" in text:
        text = text.rsplit(":", 1)[-1].strip()
    return f"not readable as audio: {text.rstrip('.')}"


def output_format(src: Source, subtype: str) -> tuple[str, str]:
    """Container and subtype of the output for ``src`` (``subtype`` may be ``same``).

    WAV outputs that would pass 4 GiB become RF64; an AIFF output cannot (its size fields are
    32-bit too, and there is no 64-bit AIFF), so it is refused before anything is written.

    Raises
    ------
    AudioError
        If the subtype cannot be written, or the container cannot hold it.
    """
    out_subtype = src.subtype if subtype == "same" else subtype
    if out_subtype not in SUBTYPES:
        raise AudioError(f"its encoding {src.subtype} cannot be written back as it is; "
                         "set output.subtype to one of PCM_16, PCM_24, PCM_32, FLOAT, DOUBLE")
    fmt = src.format
    bits = SUBTYPES[out_subtype][0]
    nbytes = src.frames * src.channels * ((bits or (32 if out_subtype == "FLOAT" else 64)) // 8)
    if fmt in _LARGE_FORMAT and nbytes > RF64_THRESHOLD:
        fmt = _LARGE_FORMAT[fmt]
    elif fmt == "AIFF" and nbytes > RF64_THRESHOLD:
        raise AudioError(f"as {out_subtype} its output would pass the 4 GiB an AIFF file can describe; "
                         "choose a smaller output.subtype, or split the recording")
    if not sf.check_format(fmt, out_subtype):
        raise AudioError(f"a {fmt} file cannot hold {out_subtype}; choose another output.subtype")
    return fmt, out_subtype


def _bits_of(subtype: str) -> float:
    bits = SUBTYPES.get(subtype, (None,))[0]
    return float(bits) if bits else math.inf


def wants_dither(policy_dither: str, in_subtype: str, out_subtype: str) -> bool:
    """TPDF dither: always for ``tpdf``; for ``auto`` when integer output has fewer bits than the input."""
    out_bits = SUBTYPES[out_subtype][0]
    if out_bits is None or policy_dither == "none":
        return False
    if policy_dither == "tpdf":
        return True
    return _bits_of(in_subtype) > out_bits


def seed_for(key: str) -> int:
    """Dither seed from a file's relative path, so reruns are bit-identical."""
    return int.from_bytes(hashlib.sha256(key.encode("utf-8", "surrogateescape")).digest()[:8], "little")


class Quantiser:
    """Float (channels, frames) -> the array handed to libsndfile, with optional TPDF dither.

    TPDF dither is the difference of two independent uniform values of one LSB,
    triangular on (-1, +1) LSB; draws are made frame by frame, channel by channel,
    so the sequence does not depend on the block size.
    """

    def __init__(self, subtype: str, dither: bool, seed: int):
        self.bits, self.dtype, self.shift = SUBTYPES[subtype]
        self.rng = np.random.Generator(np.random.PCG64(seed)) if dither and self.bits else None
        if self.bits:
            self.scale = float(2 ** (self.bits - 1))
            self.lo, self.hi = -self.scale, self.scale - 1.0
            # Largest |y| written without a clip: the top code, less the 1 LSB a dither draw may add.
            self.limit = (self.hi - (1.0 if self.rng is not None else 0.0)) / self.scale
        else:
            self.limit = math.inf
        self.clipped = 0        # samples hard-clipped at full scale by all calls so far

    def codes(self, y: np.ndarray, counted: np.ndarray | None = None,
              peak: float | None = None) -> tuple[np.ndarray, int]:
        """(frames x channels integer codes, or float samples for float output; samples clipped).

        Integer codes are the plain two's-complement values (-2**(bits-1) .. 2**(bits-1) - 1),
        not yet shifted into the top bits of the word libsndfile takes. ``counted``
        (channels x frames, bool) marks samples already counted as clipped (by the clip
        policy); they are not counted again here. The count is also added to ``clipped``.
        ``peak``, max |y| when the caller knows it, lets the search for codes out of
        range be skipped when none can be: a dither draw moves a value by less than
        1 LSB and rounding keeps a value below the top code at or below it.
        """
        if self.bits is None:
            return np.ascontiguousarray(y.T, dtype=self.dtype), 0
        v = np.empty(y.shape[::-1])            # (frames, channels), C-contiguous: the interleaved layout
        np.multiply(y.T, self.scale, out=v)
        r = self.rng.random((v.shape[0], v.shape[1], 2)) if self.rng is not None else None
        clipped = self._round(v, r, None if counted is None else counted.T, self._safe(peak))
        self.clipped += clipped
        return v.astype(np.int32 if self.dtype == np.int32 else np.int16), clipped

    def _safe(self, peak: float | None) -> bool:
        """True when ``peak`` (max |y|, if known) shows that no code can leave the range."""
        return peak is not None and peak * self.scale + (1.0 if self.rng is not None else 0.0) <= self.hi

    def _round(self, v: np.ndarray, r: np.ndarray | None, counted: np.ndarray | None, safe: bool) -> int:
        """Dither (``r[..., 0] - r[..., 1]``), round and hard-clip scaled samples ``v`` in place.

        Returns how many samples were out of range, leaving out those ``counted``
        marks (same shape as ``v``); with ``safe`` the search is skipped.
        """
        if r is not None:
            v += r[..., 0]
            v -= r[..., 1]
        np.rint(v, out=v)
        if not v.size or safe or (v.max() <= self.hi and v.min() >= self.lo):
            return 0
        out_of_range = (v > self.hi) | (v < self.lo)
        if counted is not None:
            out_of_range &= ~counted
        np.clip(v, self.lo, self.hi, out=v)
        return int(np.count_nonzero(out_of_range))

    def packed24(self, y: np.ndarray, counted: np.ndarray | None = None, peak: float | None = None,
                 big_endian: bool = False, out: np.ndarray | None = None) -> np.ndarray:
        """PCM_24 only: the packed 3-byte samples of ``y`` (channels x frames), interleaved.

        The codes are those of :meth:`codes`: the same dither draws, rounding,
        clipping and count, in the same order. Each channel is quantised as one
        contiguous row, and its codes are stored three bytes apart with a stride of
        three bytes per channel (low byte first, or high byte first for AIFF), so no
        interleaved int32 array is formed. The bytes go into ``out`` (uint8) when it
        is large enough, else into a new array; the array is returned and its first
        ``3 * y.size`` bytes are the samples.
        """
        if self.bits != 24:
            raise ValueError("packed24 is for PCM_24")
        channels, frames = y.shape
        nbytes = 3 * channels * frames
        if out is None or out.size < nbytes:
            out = np.empty(nbytes, dtype=np.uint8)
        r = self.rng.random((frames, channels, 2)) if self.rng is not None else None
        safe = self._safe(peak)
        v = np.empty(frames)
        code = np.empty(frames, dtype=np.int32)
        part = np.empty(frames, dtype=np.int32)
        places = (2, 1, 0) if big_endian else (0, 1, 2)      # where bytes 0 (lowest), 1, 2 of a code go
        clipped = 0
        for c in range(channels):
            np.multiply(y[c], self.scale, out=v)
            clipped += self._round(v, None if r is None else r[:, c], None if counted is None else counted[c], safe)
            np.copyto(code, v, casting="unsafe")            # whole numbers in range: exact
            for k, place in enumerate(places):
                byte = code if k == 0 else np.right_shift(code, 8 * k, out=part)
                # int32 -> uint8 keeps the low eight bits (two's complement), the byte wanted
                np.copyto(out[3 * c + place:nbytes:3 * channels], byte, casting="unsafe")
        self.clipped += clipped
        return out

    def __call__(self, y: np.ndarray, counted: np.ndarray | None = None,
                 peak: float | None = None) -> tuple[np.ndarray, int]:
        """Returns (frames x channels array to hand to libsndfile, number of samples clipped at full scale).

        As :meth:`codes`, with 24-bit codes shifted into the top bits of an int32
        (libsndfile takes the top 24 bits of int32 data for PCM_24).
        """
        data, clipped = self.codes(y, counted, peak)
        if self.shift:
            data <<= self.shift
        return data, clipped


def unpack24(raw: np.ndarray, frames: int, channels: int, out: np.ndarray,
             scratch: np.ndarray | None = None) -> np.ndarray:
    """Packed little-endian 3-byte samples -> channel-major float64, the values libsndfile reads.

    The inverse of :meth:`Quantiser.packed24`. ``raw`` (uint8, contiguous) holds the bytes of
    ``frames * channels`` interleaved samples and at least one byte more, of any
    value. Each sample is read as a little-endian int32 starting at its first byte
    (a strided view, three bytes per step, so its top byte belongs to the next
    sample) and shifted left by 8, which drops that byte and leaves ``code << 8``;
    times 2**-31 that is exactly ``code / 2**23``, libsndfile's normalised reading.
    The result is written into ``out[:, :frames]`` (shape channels x at least
    frames) and returned; ``scratch`` (int32, at least ``frames`` long) saves an
    allocation.
    """
    if raw.size < frames * channels * 3 + 1:
        raise ValueError("unpack24: the buffer must hold one byte past the last sample")
    if scratch is None or scratch.size < frames:
        scratch = np.empty(frames, dtype=np.int32)
    shifted = scratch[:frames]
    for c in range(channels):
        samples = np.ndarray((frames,), dtype="<i4", buffer=raw, offset=3 * c, strides=(3 * channels,))
        np.left_shift(samples, 8, out=shifted)
        np.multiply(shifted, 2.0 ** -31, out=out[c, :frames])
    return out[:, :frames]


# Containers whose PCM_24 samples chainrun packs itself and hands to libsndfile as raw bytes
# (sf_write_raw; libsndfile still writes and finishes the header): format -> big-endian?
_PACKED_24 = {
    "WAV": False,      # RIFF: little-endian
    "WAVEX": False,    # WAVE_FORMAT_EXTENSIBLE: little-endian
    "RF64": False,     # little-endian
    "W64": False,      # Sony Wave64: little-endian
    "AIFF": True,      # big-endian
}


def _write_raw(f: sf.SoundFile, words: np.ndarray, nbytes: int) -> int:
    """Hand ``nbytes`` bytes of already-encoded samples to libsndfile; returns the bytes it took."""
    return int(sf._snd.sf_write_raw(f._file, sf._ffi.from_buffer(words), nbytes))


class _Output:
    """The temporary output file; libsndfile's errors become one line naming their cause.

    PCM_24 in the containers of ``_PACKED_24`` is packed here (:meth:`Quantiser.packed24`) and
    written raw; every other subtype goes through libsndfile's own conversion.
    Both give the same bytes (tests/test_render.py checks it for each container).
    """

    def __init__(self, path: str, src: Source, fmt: str, subtype: str):
        self.path, self.fmt, self.subtype = path, fmt, subtype
        try:
            self.f = sf.SoundFile(_sf_path(path), "w", src.rate, src.channels, subtype, format=fmt)
        except (sf.LibsndfileError, RuntimeError) as exc:
            raise AudioError(f"cannot create the output: {_sf_reason(None, exc)}; nothing was delivered") from None
        # The PEAK chunk of float WAV/AIFF carries a time stamp; without it reruns are bit-identical.
        sf._snd.sf_command(self.f._file, _SFC_SET_ADD_PEAK_CHUNK, sf._ffi.NULL, 0)
        self.packed = (subtype == "PCM_24" and fmt in _PACKED_24 and sys.byteorder == "little")
        self.big_endian = _PACKED_24.get(fmt, False)
        self._bytes: np.ndarray | None = None

    def write(self, data: np.ndarray) -> None:
        """Write what :class:`Quantiser` returns (frames x channels, libsndfile's layout)."""
        try:
            self.f.write(data)
        except (sf.LibsndfileError, RuntimeError) as exc:
            raise AudioError(f"cannot write the output: {_sf_reason(self.f, exc)}; nothing was delivered") from None

    def put(self, quantise: "Quantiser", y: np.ndarray, counted: np.ndarray | None = None,
            peak: float | None = None) -> None:
        """Quantise ``y`` (channels x frames) and write it, packed here where that is faster.

        ``peak`` is max |y| if the caller knows it (see :meth:`Quantiser.codes`).
        """
        if not self.packed:
            self.write(quantise(y, counted, peak)[0])
            return
        self._bytes = quantise.packed24(y, counted, peak, self.big_endian, self._bytes)
        nbytes = 3 * y.size
        if _write_raw(self.f, self._bytes, nbytes) != nbytes:
            raise AudioError(f"cannot write the output: {_sf_reason(self.f, OSError('short write'))}; "
                             "nothing was delivered")

    @property
    def closed(self) -> bool:
        return self.f.closed

    def close(self) -> None:
        if self.f.closed:
            return
        try:
            self.f.close()
        except (sf.LibsndfileError, RuntimeError) as exc:
            raise AudioError(f"cannot finish the output: {_sf_reason(None, exc)}; nothing was delivered") from None
        if self.fmt == "RF64" and self.subtype in ("FLOAT", "DOUBLE"):
            _clear_rf64_peak_time(self.path)

    def __enter__(self) -> "_Output":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def _clear_rf64_peak_time(path: str) -> None:
    """Zero the time stamp in a float RF64 file's PEAK chunk, so that reruns are bit-identical.

    libsndfile writes RF64's header, PEAK chunk included, when the file is opened, before
    SFC_SET_ADD_PEAK_CHUNK can turn the chunk off (it does for WAV and AIFF). The chunk is
    "PEAK", its size, a version and then the time stamp (4 bytes each, little-endian); the
    peaks that follow are left as they are. Chunks are walked from the header, not searched for.
    """
    with open(path, "r+b") as fh:
        head = fh.read(1 << 16)
        if head[:4] != b"RF64" or head[8:12] != b"WAVE":
            return
        at = 12
        while at + 8 <= len(head):
            cid, size = head[at:at + 4], int.from_bytes(head[at + 4:at + 8], "little")
            if cid == b"PEAK":
                if size >= 8:
                    fh.seek(at + 12)
                    fh.write(b"\0\0\0\0")
                return
            if cid == b"data":
                return
            at += 8 + size + (size & 1)


def _sf_reason(f: sf.SoundFile | None, exc: BaseException) -> str:
    """libsndfile's own description of the last error (it keeps the system's reason for I/O errors)."""
    try:
        ptr = sf._snd.sf_strerror(f._file if f is not None and not f.closed else sf._ffi.NULL)
        text = sf._ffi.string(ptr).decode("utf-8", "replace").strip().rstrip(".")
    except Exception:
        text = ""
    if not text or text.lower() in ("no error", "system error"):
        text = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    return text.replace("System error : ", "").lower()


# Containers whose PCM_24 samples chainrun reads raw (sf_read_raw) and unpacks itself, with the
# four bytes their files start with. All are little-endian; a big-endian RIFX file also reports
# itself as WAV, and the first bytes tell it apart.
_UNPACKED_24 = {
    "WAV": b"RIFF",
    "WAVEX": b"RIFF",
    "RF64": b"RF64",
    "W64": b"riff",    # the first bytes of Wave64's 'riff' GUID
}


def _reads_raw(src: Source) -> bool:
    """True if ``src`` holds little-endian packed PCM_24 that :func:`unpack24` can read."""
    magic = _UNPACKED_24.get(src.format)
    if src.subtype != "PCM_24" or magic is None or sys.byteorder != "little":
        return False
    try:
        with open(src.path, "rb") as fh:
            return fh.read(4) == magic
    except OSError:
        return False            # libsndfile's own reading will say what is wrong


class _Blocks:
    """Reads an input in blocks as channel-major float64 and checks it for length and NaN.

    Yields ``(frame0, x, peak)``: the index of the block's first frame, a new array of
    shape (channels, frames) and its largest magnitude. With a meter, every block is metered as it is read.

    Little-endian PCM_24 (the containers of ``_UNPACKED_24``) is read as raw bytes and
    unpacked here (:func:`unpack24`); every other input goes through libsndfile's own
    conversion. Both give the same numbers (tests/test_formats.py checks it for each
    container), and the raw path costs about a third as much (see benchmarks/RESULTS.md).
    """

    def __init__(self, src: Source, block: int, meter: Meter | None = None):
        self.src, self.block, self.meter = src, block, meter
        self.raw = _reads_raw(src)
        self.f = sf.SoundFile(_sf_path(src.path), "r")
        if self.raw:
            self.frame_bytes = 3 * src.channels
            self.bytes = np.zeros(block * self.frame_bytes + 1, dtype=np.uint8)   # + 1: see unpack24
            self.scratch = np.empty(block, dtype=np.int32)
            self.ptr = sf._ffi.from_buffer(self.bytes)
        else:
            self.buf = np.empty((block, src.channels), dtype=np.float64)
        self.done = 0

    def __iter__(self):
        return self

    def _read(self) -> np.ndarray:
        """The next block, channel-major; empty at the end of the data."""
        if not self.raw:
            got = self.f.read(self.block, dtype="float64", always_2d=True, out=self.buf)
            return got.T.copy()       # a new channel-major array: the buffer is reused for the next read
        # libsndfile stops at the last frame of the data chunk and keeps the position.
        got = int(sf._snd.sf_read_raw(self.f._file, self.ptr, self.block * self.frame_bytes))
        n = max(got, 0) // self.frame_bytes
        x = np.empty((self.src.channels, n), dtype=np.float64)
        return unpack24(self.bytes, n, self.src.channels, x, self.scratch) if n else x

    def __next__(self) -> tuple[int, np.ndarray, float]:
        _stop_point()
        x = self._read()
        n = x.shape[1]
        if n == 0:
            if self.done < self.src.frames:
                raise AudioError(f"ended early: {self.done} of {self.src.frames} frames could be read "
                                 "(cut short, or changed while being read)")
            raise StopIteration
        his, los = x.max(axis=1), x.min(axis=1)
        hi, lo = float(his.max()), float(los.min())
        if not (math.isfinite(hi) and math.isfinite(lo)):
            ch, at = np.argwhere(~np.isfinite(x))[0]
            raise AudioError(f"sample {self.done + at} of channel {ch + 1} is {x[ch, at]}; "
                             "chainrun does not pass NaN or Inf on (repair or re-export the file)")
        if self.meter is not None:
            self.meter.update(x, (his, los))
        frame0 = self.done
        self.done += n
        return frame0, x, max(hi, -lo)

    def close(self) -> None:
        self.f.close()


class _Scratch:
    """The float64 scratch file of the scale policy: written in pass 1, read back scaled in pass 2."""

    def __init__(self, path: str, channels: int):
        self.path, self.channels = path, channels

    def writer(self):
        fh = open(self.path, "wb")
        return fh, lambda y: fh.write(np.ascontiguousarray(y.T).tobytes())

    def blocks(self, block: int, gain: float):
        with open(self.path, "rb") as fh:
            while True:
                _stop_point()
                raw = fh.read(block * self.channels * 8)
                if not raw:
                    return
                y = np.frombuffer(raw, dtype=np.float64).reshape(-1, self.channels).T * gain
                yield np.ascontiguousarray(y)


_END = object()


def _pipeline(items, transform, consume, overlap: bool = True, depth: int = 8) -> None:
    """Run ``items`` (an iterator) in a reader thread, ``transform`` here, ``consume`` in a writer thread.

    Without ``overlap``, the same three steps run one after the other in this thread.

    Decoding, filtering and encoding overlap: libsndfile (through cffi), sosfilt
    and numpy's large array operations release the GIL. Items stay in order;
    ``transform`` may return None to send nothing on. Queues hold ``depth``
    items, so memory stays a few blocks whatever the file's length (about 16 MB
    for stereo at the default block size). Eight rather than two let the three
    stages ride out each other's uneven blocks: 8 % less wall time measured on
    two cores. The first error in any stage stops all three and is raised here;
    so is Ctrl-C.
    """
    if not overlap:
        for item in items:
            out = transform(item)
            if out is not None:
                consume(out)
        return
    q_in: queue.Queue = queue.Queue(depth)
    q_out: queue.Queue = queue.Queue(depth)
    stop = threading.Event()
    errors: list[BaseException] = []

    def put(q: queue.Queue, item) -> bool:
        while not stop.is_set():
            try:
                q.put(item, timeout=0.05)
                return True
            except queue.Full:
                continue
        return False

    def get(q: queue.Queue):
        while not stop.is_set():
            try:
                return q.get(timeout=0.05)
            except queue.Empty:
                continue
        return _END

    def fail(exc: BaseException) -> None:
        errors.append(exc)
        stop.set()

    def read() -> None:
        try:
            for item in items:
                if not put(q_in, item):
                    return
            put(q_in, _END)
        except BaseException as exc:
            fail(exc)

    def write() -> None:
        try:
            while (item := get(q_out)) is not _END:
                consume(item)
        except BaseException as exc:
            fail(exc)

    threads = [threading.Thread(target=read, name="chainrun-read", daemon=True),
               threading.Thread(target=write, name="chainrun-write", daemon=True)]
    for t in threads:
        t.start()
    try:
        while (item := get(q_in)) is not _END:
            out = transform(item)
            if out is not None and not put(q_out, out):
                break
        if not stop.is_set():
            put(q_out, _END)
            threads[1].join()
    except BaseException as exc:
        fail(exc)
    finally:
        stop.set()
        for t in threads:
            t.join()
    if errors:
        raise errors[0]


class _Filter:
    """sosfilt over channel-major blocks with the state carried, plus the runtime guard.

    Denormals: after loud content, a decaying filter state sinks towards the
    subnormal range, where arithmetic is many times slower, and can stay there.
    Every FLUSH_PERIOD frames, counted from the start of the file (so the result
    does not depend on the block size), state values below DENORMAL_FLOOR are set
    to exactly zero; they would contribute less than 1e-200 to any output sample.
    """

    FLUSH_PERIOD = 65536
    DENORMAL_FLOOR = 1e-200

    def __init__(self, sos: np.ndarray, channels: int, bound: float):
        from scipy.signal import sosfilt      # imported on first use: see chainrun/__init__.py
        self._sosfilt = sosfilt
        self.sos = np.array(sos, dtype=np.float64)
        self.zi = np.zeros((len(self.sos), channels, 2))
        self.bound = bound
        self.in_peak = 0.0
        self.out_peak = 0.0
        self.block_peak = 0.0

    def _filter(self, x: np.ndarray, frame0: int) -> np.ndarray:
        n, period = x.shape[-1], self.FLUSH_PERIOD
        end = frame0 + n
        boundary = (frame0 // period + 1) * period        # first flush point after frame0
        if boundary >= end:                               # none inside the block (the usual case)
            y, self.zi = self._sosfilt(self.sos, x, axis=-1, zi=self.zi)
            if boundary == end:
                self._flush()
            return y
        y = np.empty_like(x)
        start = 0
        for stop in list(range(boundary - frame0, n, period)) + [n]:
            y[:, start:stop], self.zi = self._sosfilt(self.sos, x[:, start:stop], axis=-1, zi=self.zi)
            if (frame0 + stop) % period == 0:
                self._flush()
            start = stop
        return y

    def _flush(self) -> None:
        self.zi[np.abs(self.zi) < self.DENORMAL_FLOOR] = 0.0

    def __call__(self, x: np.ndarray, frame0: int, x_peak: float) -> np.ndarray:
        """Filter one block; ``x_peak`` is max |x| of the block (the reader has it already)."""
        y = self._filter(x, frame0)
        self.block_peak = 0.0
        self.extremes = None
        if x.size:
            self.in_peak = max(self.in_peak, x_peak)
            his, los = y.max(axis=1), y.min(axis=1)
            self.extremes = (his, los)         # per channel, for the output meter
            hi, lo = float(his.max()), float(los.min())
            if not (math.isfinite(hi) and math.isfinite(lo)):
                raise AudioError(f"the filter output became non-finite near sample {frame0}; "
                                 "nothing was delivered")
            peak = max(hi, -lo)
            # Guard promise: |y| <= L1 * max|x| for every input; allow rounding.
            if peak > self.bound * self.in_peak * (1 + 1e-9) + 1e-12:
                raise AudioError(f"the filter output ({20 * math.log10(peak):+.2f} dBFS) passed the guard's "
                                 f"worst-case bound near sample {frame0}; nothing was delivered")
            self.block_peak = peak
            self.out_peak = max(self.out_peak, peak)
        return y


def _over(peak: float, true_peak: float | None, policy: Policy) -> float:
    """dB by which the output passes the ceiling(s); <= 0 when it fits."""
    return max(_db(peak) - policy.ceiling_dbfs, _true_peak_over(true_peak, policy))


def _true_peak_over(true_peak: float | None, policy: Policy) -> float:
    """dB by which ``true_peak`` passes the true-peak ceiling; -inf with no ceiling or no reading."""
    if policy.true_peak_ceiling_dbtp is None or true_peak is None:
        return -math.inf
    return _db(true_peak) - policy.true_peak_ceiling_dbtp


def render_file(src: Source, dst: str, sos: np.ndarray, bound: float, policy: Policy,
                seed_key: str, relpath: str | None = None) -> FileResult:
    """Filter one file into ``dst`` atomically.

    Parameters
    ----------
    src
        From :func:`probe`.
    dst
        Final output path; its folder must exist. Never the input itself.
    sos
        The chain designed at ``src.rate`` (S x 6).
    bound
        The guard's worst-case peak gain (L1 norm) for ``sos``: the runtime guard
        stops the file if the output ever passes ``bound * input peak``.
    policy
        Headroom policy, ceilings, output format, block size.
    seed_key
        Seeds the dither (the file's relative path).

    Returns
    -------
    FileResult
        Status ``ok``, ``clipped``, ``rejected`` or ``failed``; on anything but ok
        and clipped, nothing is written under ``dst`` (a file already there is left as it was).
    """
    t0 = time.perf_counter()
    res = FileResult(input=src.path, relpath=relpath or seed_key, status="failed", source=src)
    tmp = scratch = None
    blas = _one_blas_thread()
    try:
        if os.path.exists(dst) and os.path.samefile(dst, src.path):
            raise AudioError("the output would overwrite the input; refused")
        fmt, out_subtype = output_format(src, policy.subtype)
        res.out_format, res.out_subtype = fmt, out_subtype
        res.dither = wants_dither(policy.dither, src.subtype, out_subtype)
        block = policy.block_size
        in_meter = Meter(src.rate, src.channels, full_scale=_full_scale(src.subtype),
                         true_peak=policy.true_peak, max_regions=policy.max_regions)
        out_fs = _full_scale(out_subtype)
        quantise = Quantiser(out_subtype, res.dither, seed_for(seed_key))
        filt = _Filter(sos, src.channels, bound)
        tmp = temp_path_for(dst)

        # A true-peak ceiling is always checked: without true-peak metering (--no-true-peak) the
        # output is still metered for it, only the input is not.
        out_true_peak = policy.true_peak or policy.true_peak_ceiling_dbtp is not None
        meter_args = dict(true_peak=out_true_peak, max_regions=policy.max_regions)
        if policy.on_over == "scale":
            # Pass 1: filter to a float64 scratch file, metering the unscaled output.
            pre = Meter(src.rate, src.channels, full_scale=out_fs, true_peak=out_true_peak, max_regions=0)
            scratch = temp_path_for(dst, ".f64")
            store = _Scratch(scratch, src.channels)
            reader = _Blocks(src, block, in_meter)
            fh, write_scratch = store.writer()
            try:
                def pass1(item):
                    frame0, x, x_peak = item
                    return filt(x, frame0, x_peak), filt.extremes

                def keep(item):
                    y, extremes = item
                    pre.update(y, extremes)
                    write_scratch(y)
                _pipeline(reader, pass1, keep, policy.threads > 1)
            finally:
                reader.close()
                fh.close()
            over = _over(filt.out_peak, _max_tp(pre.result()), policy)
            # Fit the ceiling and also the codes: for integer output +1.0 (0 dBFS) has no code, so
            # scaling to a 0 dBFS ceiling alone would leave the positive crests hard-clipped.
            fit = max(over, _db(filt.out_peak) - _db(quantise.limit))
            gain = 10.0 ** (-fit / 20.0) if fit > 0 else 1.0
            res.gain_db = _db(gain) if fit > 0 else 0.0
            res.over_db = over if over > 0 else None
            # Pass 2: scale, meter, quantise, write.
            out_meter = Meter(src.rate, src.channels, full_scale=out_fs, **meter_args)
            with _Output(tmp, src, fmt, out_subtype) as out:
                def pass2(y):
                    extremes = y.max(axis=1), y.min(axis=1)
                    out_meter.update(y, extremes)
                    return y, max(float(extremes[0].max()), -float(extremes[1].min()))

                def encode(item):
                    y, peak = item
                    out.put(quantise, y, peak=peak)
                _pipeline(store.blocks(block, gain), pass2, encode, policy.threads > 1)
            _remove_quietly(scratch)
            scratch = None
        else:
            ceiling = policy.ceiling
            clip = policy.on_over == "clip"
            # Under the clip policy, samples held at the ceiling count as clipped in the output meter.
            out_meter = Meter(src.rate, src.channels, full_scale=min(out_fs, ceiling) if clip else out_fs,
                              **meter_args)
            reader = _Blocks(src, block, in_meter)
            out = _Output(tmp, src, fmt, out_subtype)
            rejecting = [False]
            try:
                def process(item):
                    frame0, x, x_peak = item
                    y = filt(x, frame0, x_peak)
                    over_mask = None
                    extremes, peak = filt.extremes, filt.block_peak
                    if clip and peak > ceiling:
                        over_mask = np.abs(y) > ceiling
                        res.clipped_by_chainrun += int(np.count_nonzero(over_mask))
                        np.clip(y, -ceiling, ceiling, out=y)
                        # clipping is monotonic: the extremes of the clipped block are the clipped extremes
                        extremes = (np.minimum(extremes[0], ceiling), np.maximum(extremes[1], -ceiling))
                        peak = ceiling
                    if policy.on_over == "reject" and _over(filt.out_peak, None, policy) > 0:
                        rejecting[0] = True        # will be rejected: stop writing, keep metering
                    return y, over_mask, not rejecting[0], extremes, peak

                def encode(item):
                    y, over_mask, wanted, extremes, peak = item
                    out_meter.update(y, extremes)  # here, not above: balances the threads' work
                    if wanted:
                        out.put(quantise, y, over_mask, peak)
                _pipeline(reader, process, encode, policy.threads > 1)
            finally:
                reader.close()
                out.close()
            over = _over(filt.out_peak, _max_tp(out_meter.result()), policy)
            if over > 0:
                res.over_db = over
            if policy.on_over == "reject" and over > 0:
                _remove_quietly(tmp)
                tmp = None
                res.input_meters, res.output_meters = in_meter.result(), out_meter.result()
                res.trim_db = -over - 0.01
                res.status = "rejected"
                res.message = (f"output would pass the ceiling by {over:.2f} dB; not delivered. "
                               f"A trim of {res.trim_db:.2f} dB (a gain section, or on_over: scale) would fit")
                return res

        at_ceiling = res.clipped_by_chainrun          # by the clip policy; the rest by the word length
        res.clipped_by_chainrun += quantise.clipped
        _check_unchanged(src)
        _fsync_path(tmp)
        os.replace(tmp, dst)
        tmp = None
        res.output = dst          # in place from here on, even if syncing its folder fails below
        _fsync_path(os.path.dirname(dst) or ".", directory=True)
        res.input_meters, res.output_meters = in_meter.result(), out_meter.result()
        # Clipping holds the sample ceiling only: a true peak still over its ceiling is said, not hidden.
        tp_left = _true_peak_over(_max_tp(res.output_meters), policy) if policy.on_over == "clip" else -math.inf
        res.status = "clipped" if res.clipped_by_chainrun or tp_left > 0 else "ok"
        if res.status == "clipped":
            said = []
            if at_ceiling:
                said.append(f"{at_ceiling} sample(s) hard-clipped at the ceiling")
                sample_over = _db(filt.out_peak) - policy.ceiling_dbfs
                if sample_over > 0:
                    said[-1] += f" (the filtered peak passed it by {sample_over:.2f} dB)"
            if quantise.clipped:
                said.append(f"{quantise.clipped} sample(s) hard-clipped at the largest {out_subtype} code "
                            "(at full scale, where rounding or dither took them past it)")
            if tp_left > 0:
                said.append(f"the true peak passes the true-peak ceiling by {tp_left:.2f} dB (clipping holds the "
                            "sample ceiling only; on_over: scale or reject would hold it)")
            res.message = "; ".join(said)
        elif res.gain_db:
            res.message = (f"scaled by {res.gain_db:.2f} dB to fit the ceiling" if res.gain_db <= -0.005
                           else "scaled by less than 0.01 dB to fit the ceiling")
        return res
    except AudioError as exc:
        res.status, res.message = "failed", str(exc)
        return res
    except (sf.LibsndfileError, RuntimeError) as exc:
        res.status, res.message = "failed", _why(exc)
        return res
    except OSError as exc:
        res.status = "failed"
        if exc.errno in (errno.ENOSPC, errno.EDQUOT, errno.EFBIG):
            res.message = f"cannot write the output: {os.strerror(exc.errno).lower()}; nothing was delivered"
        else:
            res.message = f"{exc.strerror.lower() if exc.strerror else exc}: {exc.filename or dst}"
        return res
    except Exception as exc:  # a fault (MemoryError, a bug): this file fails, the batch goes on
        text = (str(exc).strip().splitlines() or [""])[0]
        res.status = "failed"
        res.message = (f"unexpected fault while rendering ({type(exc).__name__}{': ' + text if text else ''}); "
                       "nothing was delivered; please report it")
        return res
    finally:
        _remove_quietly(tmp)
        _remove_quietly(scratch)
        blas.restore_original_limits()
        res.seconds = time.perf_counter() - t0


def scan_file(src: Source, block: int = DEFAULT_BLOCK, true_peak: bool = True, relpath: str = "") -> FileResult:
    """Meter an existing file; nothing is written. Status ok, clipped (samples at full scale) or failed."""
    t0 = time.perf_counter()
    res = FileResult(input=src.path, relpath=relpath or src.path, status="failed", source=src)
    meter = Meter(src.rate, src.channels, full_scale=_full_scale(src.subtype), true_peak=true_peak)
    try:
        reader = _Blocks(src, block, meter)
        try:
            with _one_blas_thread():
                for _ in reader:
                    pass
        finally:
            reader.close()
        res.input_meters = meter.result()
        clipped = sum(c.clipped_samples for c in res.input_meters.channels)
        res.status = "clipped" if clipped else "ok"
        if clipped:
            res.message = f"{clipped} sample(s) at or beyond full scale"
    except AudioError as exc:
        res.message = str(exc)
    except (sf.LibsndfileError, RuntimeError, OSError) as exc:
        res.message = _why(exc)
    res.seconds = time.perf_counter() - t0
    return res


def _one_blas_thread():
    """Keep BLAS on the calling thread while a file is metered (a context manager).

    The true-peak meter's matrix products are small; OpenBLAS would still spread
    each over its own worker threads, which on a busy machine stall and which take
    cores that ``--workers`` did not grant. chainrun's parallelism is its own:
    worker processes, and the threads of one file's pipeline.
    """
    from threadpoolctl import threadpool_limits

    return threadpool_limits(limits=1, user_api="blas")


def _max_tp(reading: MeterReading) -> float | None:
    tps = [c.true_peak for c in reading.channels if c.true_peak is not None]
    return max(tps) if tps else None


def _check_unchanged(src: Source) -> None:
    try:
        st = os.stat(src.path)
    except OSError as exc:
        raise AudioError(f"disappeared while being read ({exc.strerror})") from None
    if st.st_size != src.size or st.st_mtime_ns != src.mtime_ns:
        raise AudioError("changed while being read (size or modification time differs); "
                         "nothing was delivered, run again once it is stable")
