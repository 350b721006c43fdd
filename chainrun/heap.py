"""Keep freed block-sized buffers in the process's heap, so that the next block reuses them.

Every block of a render makes and frees arrays about a block's size (1 MB for 65536 stereo
frames of float64). glibc's malloc serves such sizes with fresh ``mmap`` pages once they pass
its mmap threshold (128 KB at start, raised as chunks are freed, at most 32 MB), and gives the
heap's free top back to the kernel past its trim threshold; then every block pays page faults on
new zeroed pages. Measured on a 600 s stereo PCM_24 render with one worker: 0.29 s of system
time, 0.13 s with the thresholds below (benchmarks/RESULTS.md). :func:`keep_freed_buffers` sets
them once per process (a forked worker inherits them): allocations below 64 MB come from the
heap, and up to 256 MB of free heap is kept. Peak memory is unchanged (the buffers are the same;
they are only not handed back between blocks); the process keeps its peak until it exits.
Nothing happens where malloc is not glibc's (``mallopt`` missing or refusing). Handing each
step a buffer to reuse instead would not reach most of these arrays: they are numpy's own
temporaries inside the meters, the quantiser and the filter's adapter.
"""
from __future__ import annotations

import sys

__all__ = ["keep_freed_buffers"]

_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3     # glibc <malloc.h>
MMAP_THRESHOLD = 64 << 20
TRIM_THRESHOLD = 256 << 20
_state: list[bool] = []                           # [whether it took], once set


def keep_freed_buffers() -> bool:
    """Set glibc malloc's mmap and trim thresholds (once per process); True if they took."""
    if _state:
        return _state[0]
    ok = False
    if sys.platform.startswith("linux"):
        try:
            import ctypes                          # threadpoolctl has imported it already on the render path
            mallopt = ctypes.CDLL(None).mallopt
            mallopt.argtypes, mallopt.restype = (ctypes.c_int, ctypes.c_int), ctypes.c_int
            ok = mallopt(_M_MMAP_THRESHOLD, MMAP_THRESHOLD) == 1 and mallopt(_M_TRIM_THRESHOLD, TRIM_THRESHOLD) == 1
        except (OSError, AttributeError):         # no mallopt: not glibc
            ok = False
    _state.append(ok)
    return ok
