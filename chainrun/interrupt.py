"""Ctrl-C, taken at a safe point. The only module that handles SIGINT.

A SIGINT handler that raised KeyboardInterrupt could raise it anywhere, even inside a finaliser
(``SoundFile.__del__``), where Python prints the exception with a traceback and drops it. The
handlers here only call :func:`stop_rendering`; the file being rendered then raises
KeyboardInterrupt as it starts its next block (:func:`stop_point`, in chainrun's own code), and
the renderer removes its temporary file as for any other interruption.
"""
from __future__ import annotations

import contextlib
import signal
import threading

__all__ = ["stop_rendering", "rendering_stopped", "allow_rendering", "stop_point", "on_sigint",
           "ctrl_c_stops_rendering", "from_ctrl_c"]

_stop_requested = False


def stop_rendering() -> None:
    """Ask the file being rendered to stop at its next block (safe to call from a signal handler)."""
    global _stop_requested
    _stop_requested = True


def rendering_stopped() -> bool:
    """True once :func:`stop_rendering` was called, until :func:`allow_rendering`."""
    return _stop_requested


def allow_rendering() -> None:
    """Clear the stop flag (a batch starts, a worker starts)."""
    global _stop_requested
    _stop_requested = False


def stop_point() -> None:
    """Raise KeyboardInterrupt here if a stop was asked for (called at the start of every block)."""
    if _stop_requested:
        raise KeyboardInterrupt


def on_sigint(signum, frame) -> None:
    """SIGINT handler of a worker process and of the calling process while it renders: only sets the flag."""
    stop_rendering()


@contextlib.contextmanager
def ctrl_c_stops_rendering():
    """Rendering in this process: Ctrl-C stops the file at its next block, and the files after it.

    Only in the main thread (where signal handlers live), and not when SIGINT is ignored (a
    background job). The flag is cleared on the way in and out, so a later batch in the same
    process runs; a Ctrl-C that came after the last block is raised on the way out, so the batch
    still counts as interrupted.
    """
    allow_rendering()
    if threading.current_thread() is not threading.main_thread() \
            or signal.getsignal(signal.SIGINT) is signal.SIG_IGN:
        yield
        return
    previous = signal.signal(signal.SIGINT, on_sigint)
    try:
        yield
    finally:
        try:
            signal.signal(signal.SIGINT, signal.SIG_DFL if previous is None else previous)
        finally:
            late = rendering_stopped()
            allow_rendering()
        if late:
            raise KeyboardInterrupt


def from_ctrl_c(exc: BaseException) -> bool:
    """True when ``exc`` wraps a KeyboardInterrupt.

    Python turns a Ctrl-C that lands in some places (a descriptor's __set_name__
    while a module defines its classes, e.g. during matplotlib's import) into a
    RuntimeError whose cause is the KeyboardInterrupt; it is still a Ctrl-C.
    """
    seen = set()
    while exc is not None and id(exc) not in seen:
        if isinstance(exc, KeyboardInterrupt):
            return True
        seen.add(id(exc))
        exc = exc.__cause__ or exc.__context__
    return False
