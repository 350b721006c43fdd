"""Writing the output: :class:`_Output`, the temporary file libsndfile writes, and its PEAK time stamp."""
from __future__ import annotations

import os
import re
import sys

import numpy as np
import soundfile as sf

from ..errors import AudioError
from ..fsutil import TEMP_TAG
from . import sndfile
from .formats import _PACKED_24
from .metadata.carry import MetaError, OutputMeta
from .quantise import Quantiser
from .reader import _sf_path
from .source import Source

__all__ = ["_Output", "meta_failure"]


def _write_raw(f: sf.SoundFile, words: np.ndarray, nbytes: int) -> int:
    """Hand ``nbytes`` bytes of already-encoded samples to libsndfile; returns the bytes it took."""
    return sndfile.write_raw(f, words, nbytes)


class _Output:
    """The temporary output file; libsndfile's errors become one line naming their cause.

    PCM_24 in the containers of ``_PACKED_24`` is packed here (:meth:`Quantiser.packed24`) and
    written raw; every other subtype goes through libsndfile's own conversion.
    Both give the same bytes (tests/unit/render/test_render.py checks it for each container).
    """

    def __init__(self, path: str, src: Source, fmt: str, subtype: str, meta: OutputMeta | None = None):
        self.path, self.fmt, self.subtype = path, fmt, subtype
        try:
            self.f = sf.SoundFile(_sf_path(path), "w", src.rate, src.channels, subtype, format=fmt)
        except (sf.LibsndfileError, RuntimeError) as exc:
            raise AudioError(f"cannot create the output: {_sf_reason(None, exc)}; nothing was delivered") from None
        # The PEAK chunk of float WAV/AIFF carries a time stamp; without it reruns are bit-identical.
        sndfile.no_peak_chunk(self.f)
        if meta is not None:                  # room for the input's metadata, before the first write
            try:
                meta.prepare(self.f)
            except MetaError as exc:
                self.f.close()
                raise AudioError(meta_failure(exc)) from None
        self.packed = (subtype == "PCM_24" and fmt in _PACKED_24 and sys.byteorder == "little")
        self.big_endian = _PACKED_24.get(fmt, False)
        self._bytes: np.ndarray | None = None

    def write(self, data: np.ndarray) -> None:
        """Write what :class:`Quantiser` returns (frames x channels, libsndfile's layout)."""
        try:
            self.f.write(data)
        except (sf.LibsndfileError, RuntimeError) as exc:
            raise AudioError(f"cannot write the output: {_sf_reason(self.f, exc)}; nothing was delivered") from None

    def put(self, quantise: Quantiser, y: np.ndarray, counted: np.ndarray | None = None,
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
        elif self.fmt == "SVX":
            _final_svx_name(self.path)

    def __enter__(self) -> "_Output":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def meta_failure(exc: MetaError) -> str:
    """A :class:`MetaError` (one line naming the temporary file) as a file's failure message."""
    return f"cannot write its metadata: {str(exc).split(': error: ', 1)[-1]}; nothing was delivered"


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


_TEMP_SHAPE = re.compile(r"\.(.+)" + re.escape(TEMP_TAG) + r"[0-9a-f]{8}(?:\.f64)?", re.DOTALL)


def _final_svx_name(path: str) -> None:
    """Put the final name, not the temporary one, in an 8SVX or 16SVX file's NAME chunk.

    libsndfile writes the file's own name there (its ANNO chunk is a constant), which for chainrun is
    the temporary name and its random part, so reruns differed. The name the file is renamed to is
    written instead, NUL-padded to the chunk's size (the temporary name is always longer). IFF: "FORM",
    a big-endian size, "8SVX" or "16SV", then chunks (id, big-endian size, payload padded to even),
    walked from the header up to the audio (BODY).
    """
    base = os.path.basename(path)
    m = _TEMP_SHAPE.fullmatch(base)
    name = os.fsencode(m.group(1) if m else base)
    with open(path, "r+b") as fh:
        head = fh.read(1 << 16)
        if head[:4] != b"FORM" or head[8:12] not in (b"8SVX", b"16SV"):
            return
        at = 12
        while at + 8 <= len(head):
            cid, size = head[at:at + 4], int.from_bytes(head[at + 4:at + 8], "big")
            if cid == b"NAME":
                fh.seek(at + 8)
                fh.write(name[:size].ljust(size, b"\0"))
                return
            if cid == b"BODY":
                return
            at += 8 + size + (size & 1)


def _sf_reason(f: sf.SoundFile | None, exc: BaseException) -> str:
    """libsndfile's own description of the last error (it keeps the system's reason for I/O errors)."""
    try:
        text = sndfile.error_text(f).strip().rstrip(".")
    except Exception:
        text = ""
    if not text or text.lower() in ("no error", "system error"):
        text = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    return text.replace("System error : ", "").lower()
