"""The only module that reaches into soundfile's private cffi handles (``sf._snd``, ``sf._ffi``, ``f._file``).

python-soundfile exposes no public call for libsndfile's header log, its PEAK chunk switch,
raw reads and writes or its error text; each is one small function here, so that a change
in soundfile's internals is mended in one place.
"""
from __future__ import annotations

import numpy as np
import soundfile as sf

__all__ = ["log_info", "no_peak_chunk", "pointer_to", "read_raw", "write_raw", "error_text", "reserve_chunk"]

_SFC_GET_LOG_INFO = 0x1001                # sf_command: the log libsndfile wrote while parsing the header
_SFC_SET_ADD_PEAK_CHUNK = 0x1050          # sf_command: the PEAK chunk holds a time stamp
_LOG_SIZE = 16384


def log_info(f: sf.SoundFile) -> str:
    """libsndfile's log of parsing ``f``'s header (SFC_GET_LOG_INFO)."""
    buf = sf._ffi.new("char[]", _LOG_SIZE)
    sf._snd.sf_command(f._file, _SFC_GET_LOG_INFO, buf, _LOG_SIZE)
    return sf._ffi.string(buf).decode("latin-1")


def no_peak_chunk(f: sf.SoundFile) -> None:
    """Switch off the PEAK chunk of a file opened for writing (SFC_SET_ADD_PEAK_CHUNK, false)."""
    sf._snd.sf_command(f._file, _SFC_SET_ADD_PEAK_CHUNK, sf._ffi.NULL, 0)


def pointer_to(array: np.ndarray):
    """A C pointer to ``array``'s buffer, for :func:`read_raw` (keep ``array`` alive while it is used)."""
    return sf._ffi.from_buffer(array)


def read_raw(f: sf.SoundFile, pointer, nbytes: int) -> int:
    """Read up to ``nbytes`` bytes of encoded samples into ``pointer`` (sf_read_raw); returns the bytes read.

    libsndfile stops at the last frame of the data chunk and keeps the position.
    """
    return int(sf._snd.sf_read_raw(f._file, pointer, nbytes))


def write_raw(f: sf.SoundFile, words: np.ndarray, nbytes: int) -> int:
    """Hand ``nbytes`` bytes of already-encoded samples to libsndfile (sf_write_raw); returns the bytes it took."""
    return int(sf._snd.sf_write_raw(f._file, sf._ffi.from_buffer(words), nbytes))


def error_text(f: sf.SoundFile | None) -> str:
    """libsndfile's description of the last error of ``f`` (or of the last open, for None or a closed file)."""
    ptr = sf._snd.sf_strerror(f._file if f is not None and not f.closed else sf._ffi.NULL)
    return sf._ffi.string(ptr).decode("utf-8", "replace")


def reserve_chunk(f: sf.SoundFile, chunk_id: bytes, size: int) -> str | None:
    """Have libsndfile write a ``chunk_id`` chunk of ``size`` zero bytes in ``f``'s header
    (``sf_set_chunk``; call before the first audio write). Returns None, or libsndfile's reason.

    python-soundfile declares no chunk call, so the function is taken from the same library
    through ctypes and handed ``f``'s SNDFILE pointer. libsndfile rounds the size up to 4 bytes.
    """
    import ctypes

    class ChunkInfo(ctypes.Structure):
        _fields_ = [("id", ctypes.c_char * 64), ("id_size", ctypes.c_uint),
                    ("datalen", ctypes.c_uint), ("data", ctypes.c_void_p)]

    name = getattr(sf, "_full_path", None) or getattr(sf, "_libname", None) or "libsndfile.so.1"
    set_chunk = ctypes.CDLL(name).sf_set_chunk
    set_chunk.argtypes, set_chunk.restype = [ctypes.c_void_p, ctypes.POINTER(ChunkInfo)], ctypes.c_int
    buf = ctypes.create_string_buffer(size)
    info = ChunkInfo(chunk_id, len(chunk_id), size, ctypes.cast(buf, ctypes.c_void_p))
    code = set_chunk(int(sf._ffi.cast("uintptr_t", f._file)), ctypes.byref(info))
    if code == 0:
        return None
    return sf._ffi.string(sf._snd.sf_error_number(code)).decode("utf-8", "replace")
