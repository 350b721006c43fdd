"""Ctrl-C, taken at a safe point. The only module that handles SIGINT (and SIGTERM, SIGHUP, SIGQUIT).

A SIGINT handler that raised KeyboardInterrupt could raise it anywhere, even inside a finaliser
(``SoundFile.__del__``), where Python prints the exception with a traceback and drops it. The
handlers here only call :func:`stop_rendering`; the file being rendered then raises
KeyboardInterrupt as it starts its next block (:func:`stop_point`, in chainrun's own code), and
the renderer removes its temporary file as for any other interruption.

SIGTERM, SIGHUP and SIGQUIT (:data:`STOP_SIGNALS`) are taken exactly like Ctrl-C: outside rendering
they raise KeyboardInterrupt (as Python's own SIGINT handler does), while rendering they only set the
flag. :func:`stopped_by` tells which signal stopped the run, so that the command line can say so and
exit with 128 + its number (the shell's convention for a death by that signal).
"""
from __future__ import annotations

import contextlib
import os
import signal
import threading

__all__ = ["stop_rendering", "rendering_stopped", "allow_rendering", "stop_point", "on_sigint",
           "ctrl_c_stops_rendering", "from_ctrl_c", "STOP_SIGNALS", "stopped_by", "stop_signals_like_ctrl_c",
           "worker_signals", "worker_rendering", "hold_stop_signals", "release_stop_signals"]

_stop_requested = False
_stopped_by: int | None = None          # the first signal other than SIGINT that asked for a stop
# Signals that stop a run like Ctrl-C: `kill`, a closed terminal, Ctrl-\.
STOP_SIGNALS = tuple(getattr(signal, n) for n in ("SIGTERM", "SIGHUP", "SIGQUIT") if hasattr(signal, n))


def stopped_by() -> int | None:
    """The stop signal (SIGTERM, SIGHUP, SIGQUIT) received in this process since the command began, if any."""
    return _stopped_by


def _note(signum) -> None:
    global _stopped_by
    if signum != signal.SIGINT and _stopped_by is None:
        _stopped_by = signum


def _raise_like_ctrl_c(signum, frame) -> None:
    _note(signum)
    raise KeyboardInterrupt


def _installable(signum) -> bool:
    """Not a signal ignored on purpose (``nohup`` ignores SIGHUP, a background job SIGINT)."""
    try:
        return signal.getsignal(signum) is not signal.SIG_IGN
    except (ValueError, OSError):
        return False


@contextlib.contextmanager
def stop_signals_like_ctrl_c():
    """Inside, SIGTERM, SIGHUP and SIGQUIT raise KeyboardInterrupt, as SIGINT does (main thread only)."""
    global _stopped_by
    _stopped_by = None
    previous = {}
    if threading.current_thread() is threading.main_thread():
        previous = {signum: signal.signal(signum, _raise_like_ctrl_c) for signum in STOP_SIGNALS
                    if _installable(signum)}
    try:
        yield
    finally:
        for signum, handler in previous.items():
            signal.signal(signum, signal.SIG_DFL if handler is None else handler)


def hold_stop_signals() -> dict:
    """Ignore SIGINT and the stop signals from now on (main thread only): a command whose work is done
    has nothing left to stop, and a late Ctrl-C must not become a traceback on the way out. Returns
    the handlers to give back to :func:`release_stop_signals`."""
    held = {}
    if threading.current_thread() is threading.main_thread():
        for signum in (signal.SIGINT,) + STOP_SIGNALS:
            if _installable(signum):
                held[signum] = signal.signal(signum, signal.SIG_IGN)
    return held


def release_stop_signals(held: dict) -> None:
    """Give back the handlers :func:`hold_stop_signals` replaced (a signal that came meanwhile is gone)."""
    for signum, handler in held.items():
        signal.signal(signum, signal.SIG_DFL if handler is None else handler)


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
    """SIGINT handler of a worker process and of the calling process while it renders: only sets the flag.

    Also the handler of SIGTERM, SIGHUP and SIGQUIT there, which it records (:func:`stopped_by`).
    """
    _note(signum)
    stop_rendering()


_worker_busy = False


def _on_worker_stop_signal(signum, frame) -> None:
    # An idle worker holds nothing to clean up and dies as the signal asks (the pool terminates
    # the workers of a broken pool with SIGTERM and then waits for them); a busy one stops its file
    # at the next block, removes its temporary file, and dies once its result is handed back.
    if not _worker_busy:
        signal.signal(signum, signal.SIG_DFL)
        os.kill(os.getpid(), signum)
        return
    on_sigint(signum, frame)


def worker_signals() -> None:
    """Install a pool worker's handlers: SIGINT sets the flag; SIGTERM, SIGHUP, SIGQUIT stop its file too."""
    if _installable(signal.SIGINT):                     # a batch run in the background ignores it
        signal.signal(signal.SIGINT, on_sigint)
    for signum in STOP_SIGNALS:
        if _installable(signum):
            signal.signal(signum, _on_worker_stop_signal)


@contextlib.contextmanager
def worker_rendering():
    """A worker renders one file; a stop signal that came meanwhile ends the worker once it is done."""
    global _worker_busy
    _worker_busy = True
    try:
        yield
    finally:
        _worker_busy = False
        signum = _stopped_by
        if signum is not None:
            # The result is handed back right after this returns; then the worker dies by the signal.
            signal.signal(signum, signal.SIG_DFL)
            timer = threading.Timer(1.0, os.kill, (os.getpid(), signum))
            timer.daemon = True
            timer.start()


@contextlib.contextmanager
def ctrl_c_stops_rendering():
    """Rendering in this process: Ctrl-C stops the file at its next block, and the files after it.

    Only in the main thread (where signal handlers live), and not for a signal that is ignored (SIGINT
    in a background job, SIGHUP under ``nohup``). SIGTERM, SIGHUP and SIGQUIT are taken the same way. The flag is cleared on the way in and out, so a later batch in the same
    process runs; a Ctrl-C that came after the last block is raised on the way out, so the batch
    still counts as interrupted.
    """
    allow_rendering()
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = {signum: signal.signal(signum, on_sigint)
                for signum in (signal.SIGINT, *STOP_SIGNALS) if _installable(signum)}
    try:
        yield
    finally:
        try:
            for signum, handler in previous.items():
                signal.signal(signum, signal.SIG_DFL if handler is None else handler)
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
