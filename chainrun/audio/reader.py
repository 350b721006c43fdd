"""Reading audio: headers (:func:`probe`), files cut short, and blocks of channel-major float64.

Little-endian PCM_24 in the containers that say so (:data:`~chainrun.audio.formats.CONTAINERS`)
is read as raw bytes and unpacked here (:func:`unpack24`); everything else is read by libsndfile.
"""
from __future__ import annotations

import math
import os
import re
import sys

import numpy as np
import soundfile as sf

from ..dsp import compiled as _compiled
from ..dsp.sums import row_extremes
from ..errors import AudioError
from ..interrupt import stop_point as _stop_point
from . import sndfile
from .formats import _UNPACKED_24, sample_bytes
from .metadata.carry import read_source_meta
from .source import Source

__all__ = ["probe", "cut_short", "unpack24", "NoAudioFrames", "NO_AUDIO_FRAMES", "MIN_RATE", "MAX_RATE"]

NO_AUDIO_FRAMES = "no audio frames: an empty file, such as a recording's false start; nothing to filter"


class NoAudioFrames(AudioError):
    """A whole file that holds no audio frames and declares none: nothing to render, nothing wrong with it."""


# The sample rates chainrun accepts, in Hz. Above 768 kHz (the highest rate of audio interfaces) there is
# room for ultrasound recordings; a header declaring more than 1 MHz, less than 1 Hz, NaN or infinity
# is damaged (libsndfile reads an AIFF rate of NaN or infinity as 67108864 Hz, and 0 as 1 Hz).
MIN_RATE, MAX_RATE = 1, 1_000_000
# libsndfile copies a path into a buffer of 1024 bytes: a longer one fails to open as "System error"
# or "Supplied filename too long" (measured with libsndfile 1.2.2: 1023 bytes open, 1024 do not).
SNDFILE_MAX_PATH = 1023


def probe(path: str) -> Source:
    """Read an input's header.

    Raises
    ------
    AudioError
        If the file cannot be opened as audio, holds no frames or has no channels; for a file
        that declares and holds no frames at all (and is not cut short), :class:`NoAudioFrames`.
    """
    size = len(os.fsencode(path))
    if size > SNDFILE_MAX_PATH:
        raise AudioError(f"its path is {size} bytes long, and libsndfile (which reads the audio) opens paths of "
                         f"at most {SNDFILE_MAX_PATH} bytes; shorten it (move the file or rename a folder above "
                         "it), or give it relative to a working folder nearer to it")
    try:
        st = os.stat(path)
        info = sf.info(_sf_path(path))
    except (sf.LibsndfileError, RuntimeError, OSError, ValueError) as exc:
        raise AudioError(_why(exc)) from None
    meta = read_source_meta(path, info.format)
    frames = _streamed_frames(meta, int(info.frames))
    if info.channels <= 0 or info.samplerate <= 0:
        raise AudioError("declares no channels or no sample rate; the header is damaged")
    _check_rate(info.samplerate, getattr(meta.layout, "rate", None) if meta is not None else None)
    src = Source(path, int(info.samplerate), int(info.channels), max(frames, 0), info.format, info.subtype,
                 st.st_size, st.st_mtime_ns, meta.channel_mask if meta else None, meta,
                 inode=st.st_ino, ctime_ns=st.st_ctime_ns)
    if frames <= 0:
        short = cut_short(src)      # a header promising audio the file does not hold: a copy cut short, not empty
        raise AudioError(short) if short else NoAudioFrames(NO_AUDIO_FRAMES)
    return src


def _check_rate(rate: int, written: float | None) -> None:
    """Refuse a rate outside MIN_RATE..MAX_RATE: libsndfile's, or the one the header writes (AIFF: a float)."""
    shown = rate if written is None else written
    if written is not None and not (math.isfinite(written) and MIN_RATE <= written <= MAX_RATE) \
            or not MIN_RATE <= rate <= MAX_RATE:
        value = f"{shown:g}" if isinstance(shown, float) else str(shown)
        raise AudioError(f"its header declares a sample rate of {value} Hz; accepted: {MIN_RATE} to {MAX_RATE} Hz; "
                         "the header is damaged, not rendered")


def _streamed_frames(meta, frames: int) -> int:
    """The frames of audio in a WAV whose 'data' size is a streaming placeholder (0, 0x7FFFFFFF,
    0xFFFFFFFF); ``frames`` (libsndfile's count) for any other file.

    libsndfile takes such a chunk to run to the end of the file, so a LIST chunk after it would
    be read as samples; the chunk layout tells where the audio really ends.

    Raises
    ------
    AudioError
        If the end of the audio cannot be told, or libsndfile cannot read up to it.
    """
    layout = meta.layout if meta is not None and meta.kind == "riff" else None
    data = next((c for c in layout.chunks if c.id == "data"), None) if layout is not None else None
    if data is None or data.size not in _UNKNOWN_LENGTH:
        return frames
    if layout.audio_error:
        raise AudioError(f"{layout.audio_error} (its 'data' size {data.size:#x} is a streaming placeholder); "
                         "not rendered, repair its header")
    align = layout.fmt.block_align if layout.fmt and layout.fmt.block_align else 1
    real = layout.data_size // align
    if real > frames:
        raise AudioError(f"its 'data' size {data.size:#x} is a streaming placeholder and only {frames} of its "
                         f"{real} frames can be read; not rendered, repair its header")
    return real


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


# libsndfile's header log (sndfile.log_info): a chunk whose size says more than the file holds
# is logged as "<chunk> : <declared> (should be <present>)", and RF64 as a frame count that does not match.
_DECLARED_RE = re.compile(r"^\s*(?:data|SSND|Data Size)\s*:\s*(\d+)\s*\(should be (\d+)\)", re.M)
_DS64_RE = re.compile(r"Calculated frame count (\d+) does not match value from 'ds64' chunk of (\d+)")
_W64_RE = re.compile(r"^\s*riff\s*:\s*(\d+)\s*\(should be (\d+)\)", re.M)
_UNKNOWN_LENGTH = {0, 0x7FFFFFFF, 0xFFFFFFFF}        # placeholders of unfinished or streamed headers


def cut_short(src: Source) -> str | None:
    """Why ``src`` holds less audio than its header declares, or None.

    libsndfile quietly reads what is there when a header promises more (a copy or
    a recording that did not finish); chainrun does not deliver such a file as if
    it were whole.
    """
    try:
        with sf.SoundFile(_sf_path(src.path)) as f:
            log = sndfile.log_info(f)
    except Exception:          # unreadable now: rendering will say so
        return None
    frame = src.channels * sample_bytes(src.subtype)
    for m in _DECLARED_RE.finditer(log):
        declared, present = int(m.group(1)), int(m.group(2))
        if declared not in _UNKNOWN_LENGTH and declared - present >= frame:
            return (f"cut short: its header declares {declared} bytes of audio but the file holds {present} "
                    f"({present // frame} of {declared // frame} frames; a copy or recording that did not "
                    "finish); not rendered, copy it again or repair its header")
    m = _DS64_RE.search(log)                    # RF64: frames present, frames declared
    short = m is not None and int(m.group(1)) < int(m.group(2))
    if not short and src.format == "W64":
        m = _W64_RE.search(log)                 # Wave64 logs only its outer size: declared, present
        short = m is not None and int(m.group(1)) - int(m.group(2)) >= frame
    if short:
        return (f"cut short: the file holds less audio than its header declares ({m.group(0).strip()}; a copy "
                "or recording that did not finish); not rendered, copy it again or repair its header")
    return None


def unpack24(raw: np.ndarray, frames: int, channels: int, out: np.ndarray,
             scratch: np.ndarray | None = None, extremes: np.ndarray | None = None) -> np.ndarray:
    """Packed little-endian 3-byte samples -> channel-major float64, the values libsndfile reads.

    The inverse of :meth:`Quantiser.packed24`. ``raw`` (uint8, contiguous) holds the bytes of
    ``frames * channels`` interleaved samples and at least one byte more, of any
    value. Each sample is read as a little-endian int32 starting at its first byte
    (a strided view, three bytes per step, so its top byte belongs to the next
    sample) and shifted left by 8, which drops that byte and leaves ``code << 8``;
    times 2**-31 that is exactly ``code / 2**23``, libsndfile's normalised reading.
    The result is written into ``out[:, :frames]`` (shape channels x at least
    frames) and returned; ``scratch`` (int32, at least ``frames`` long) saves an
    allocation. With ``extremes`` (float64, C-contiguous, 2 x channels) and ``frames >= 1``, each
    row's max and min go into ``extremes[0]`` and ``extremes[1]``, the values ``row_extremes``
    gives (the compiled loop takes them from the codes as it unpacks). The compiled loop
    (``chainrun.dsp.compiled.unpack24_rows``) does the same when it is built.
    """
    if raw.size < frames * channels * 3 + 1:
        raise ValueError("unpack24: the buffer must hold one byte past the last sample")
    unpack = _compiled.unpack24_rows
    if (unpack is not None and raw.dtype == np.uint8 and raw.ndim == 1 and raw.flags.c_contiguous
            and out.dtype == np.float64 and out.ndim == 2 and out.flags.c_contiguous
            and channels >= 1 and out.shape[0] == channels and out.shape[1] >= frames >= 0):
        unpack(raw, frames, channels, out, extremes if frames else None)  # the same values (_cascade.c)
        return out[:, :frames]
    if frames == 0:                                          # no samples: a strided view would not fit the buffer
        return out[:, :0]
    if scratch is None or scratch.size < frames:
        scratch = np.empty(frames, dtype=np.int32)
    shifted = scratch[:frames]
    for c in range(channels):
        samples = np.ndarray((frames,), dtype="<i4", buffer=raw, offset=3 * c, strides=(3 * channels,))
        np.left_shift(samples, 8, out=shifted)
        np.multiply(shifted, 2.0 ** -31, out=out[c, :frames])
    if extremes is not None:
        extremes[0], extremes[1] = row_extremes(out[:, :frames])
    return out[:, :frames]


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
    shape (channels, frames) and its largest magnitude. With a meter (anything with
    ``update(block, extremes)``, such as a :class:`~chainrun.meters.MeterBank`), every block
    is metered as it is read.

    Little-endian PCM_24 (the containers of ``_UNPACKED_24``) is read as raw bytes and
    unpacked here (:func:`unpack24`); every other input goes through libsndfile's own
    conversion. Both give the same numbers (tests/unit/audio/test_formats.py checks it for each
    container), and the raw path costs about a third as much (see benchmarks/RESULTS.md).
    """

    def __init__(self, src: Source, block: int, meter=None):
        self.src, self.block, self.meter = src, block, meter
        self.raw = _reads_raw(src)
        self.f = sf.SoundFile(_sf_path(src.path), "r")
        if self.raw:
            self.frame_bytes = 3 * src.channels
            self.bytes = np.zeros(block * self.frame_bytes + 1, dtype=np.uint8)   # + 1: see unpack24
            self.scratch = np.empty(block, dtype=np.int32)
            self.ptr = sndfile.pointer_to(self.bytes)
            self.ext = np.empty((2, src.channels))                                 # the block's extremes
        else:
            self.buf = np.empty((block, src.channels), dtype=np.float64)
        self.done = 0

    def __iter__(self):
        return self

    def _read(self) -> np.ndarray:
        """The next block, channel-major; empty at the end of the data."""
        want = min(self.block, self.src.frames - self.done)    # never past the audio (a streamed WAV's LIST)
        if want <= 0:
            return np.empty((self.src.channels, 0), dtype=np.float64)
        if not self.raw:
            got = self.f.read(want, dtype="float64", always_2d=True, out=self.buf)
            return got.T.copy()       # a new channel-major array: the buffer is reused for the next read
        # libsndfile stops at the last frame of the data chunk and keeps the position.
        got = sndfile.read_raw(self.f, self.ptr, want * self.frame_bytes)
        n = max(got, 0) // self.frame_bytes
        x = np.empty((self.src.channels, n), dtype=np.float64)
        return unpack24(self.bytes, n, self.src.channels, x, self.scratch, self.ext) if n else x

    def __next__(self) -> tuple[int, np.ndarray, float]:
        _stop_point()
        x = self._read()
        n = x.shape[1]
        if n == 0:
            if self.done < self.src.frames:
                raise AudioError(f"ended early: {self.done} of {self.src.frames} frames could be read "
                                 "(cut short, or changed while being read)")
            raise StopIteration
        his, los = (self.ext[0].copy(), self.ext[1].copy()) if self.raw else row_extremes(x)
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
