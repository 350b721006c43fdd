"""Executors: who renders a batch's files, and where. The run loop never knows which one it has.

The protocol (:class:`Executor`) is small on purpose:

* ``threads`` — how many pipeline threads one file may use (``Policy.threads``); :func:`~.run.execute`
  sets it on the policy of every task before the executor sees them.
* ``run(tasks, finished) -> interrupted`` — render every :class:`Task` (longest first, as given) and
  call ``finished(job, result)`` with each file's :class:`~chainrun.results.FileResult` as soon as it
  is known, in the calling thread. Ctrl-C is the executor's to take: it stops at a safe point, calls
  ``finished`` for every file that did finish, and returns True; it never raises KeyboardInterrupt.
  A task it never finished is not reported: the caller marks it as not rendered (INTERRUPTED). A
  fault in one file is that file's failed result, never the batch's end.
* ``notes`` — one line each for what the batch report should say about the executor's run (a worker
  that died, say), filled during ``run``.

:class:`InlineExecutor` renders in this process, one file after the other, each with the pipeline
threads; :class:`PoolExecutor` renders one file per forked worker process. The cluster executor
(:class:`~.cluster.ClusterExecutor`, Dask) is one more class with the same three members: it ships each
task to a worker running :func:`_render_in_worker`, and passes Ctrl-C on to its workers through a stop event.
"""
from __future__ import annotations

import errno
import multiprocessing
import os
import signal
import sys
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import replace
from typing import Callable, NamedTuple, Protocol, Sequence

from ..audio.source import Source
from ..dsp.kernel import preload_kernels
from ..interrupt import (allow_rendering, ctrl_c_stops_rendering, rendering_stopped, stop_point as _stop_point,
                         worker_rendering, worker_signals)
from ..render import MAX_BLOCK, MIN_BLOCK, Policy, render_file
from ..results import DELIVERED, FAILED, INTERRUPTED, NOT_RENDERED, FileResult
from ..fsutil import HELD_FOLDERS as _HELD_FOLDERS, open_below as _open_below, still_at as _still_at
from ..text import first_line, reason as _reason
from .discover import Job, foreign_run_folder, foreign_run_message
from .outdir import LOCK_NAME as _LOCK_NAME

__all__ = ["Task", "Finished", "Executor", "InlineExecutor", "PoolExecutor", "render_task", "still_the_rendered_file"]

# Workers are forked on Linux (instant start; the parent holds no threads of its own when the pool
# starts, and the progress bar runs without its monitor thread); elsewhere they start fresh.
_POOL_CONTEXT = multiprocessing.get_context("fork" if sys.platform.startswith("linux") else "spawn")


class Task(NamedTuple):
    """One file to render with its chain: the arguments of :func:`render_task`."""

    job: Job
    src: Source
    sos: object              # the chain's second-order sections (numpy array, one row per biquad)
    bound: float             # the guard's worst-case peak gain
    policy: Policy
    group: object = None     # a linked loudness group (chainrun.render.loudness.Group), or None


Finished = Callable[[Job, FileResult], None]


class Executor(Protocol):
    """Renders a batch's tasks; see the module docstring for the contract."""

    threads: int
    notes: list[str]

    def run(self, tasks: Sequence[Task], finished: Finished) -> bool:
        """Render ``tasks``, calling ``finished(job, result)`` for each; True if Ctrl-C stopped it."""
        ...


def _render_job(job: Job, src: Source, sos, bound: float, policy: Policy, group=None) -> FileResult:
    folder = os.path.dirname(job.output) or "."

    def fail(why: str) -> FileResult:
        return FileResult(job.input, job.relpath, FAILED, why, source=src)

    if job.outdir:
        # OUTDIR deleted (or replaced) during the run: never re-create it, nor its subfolders, without its lock.
        if not os.path.isfile(os.path.join(job.outdir, _LOCK_NAME)):
            return fail(f"the output folder {job.outdir} or its lock disappeared during the run; not re-created, "
                        "nothing was delivered")
        foreign = foreign_run_folder(job.outdir, job.output)     # another run started there meanwhile
        if foreign is not None:
            return fail(foreign_run_message(foreign))
    if job.outdir and _HELD_FOLDERS:
        # The output folder is opened from OUTDIR down (created where missing), never through a link, and the
        # file is written and renamed through that open folder (/proc/self/fd/N/NAME): a folder swapped for a
        # link mid-run cannot send the output outside OUTDIR.
        try:
            fd = _open_below(job.outdir, folder)
        except OSError as exc:
            if exc.errno in (errno.ELOOP, errno.ENOTDIR):
                return fail(f"its output folder {folder} is a link or not a folder (it was replaced during the "
                            "run?); nothing is written through it, nothing was delivered")
            return fail(f"cannot create its output folder {folder}: {_reason(exc)}")
        try:
            return _checked_render(job, src, sos, bound, policy, fail, fd, group)
        finally:
            os.close(fd)
    try:
        os.makedirs(folder, exist_ok=True)
    except OSError as exc:
        return fail(f"cannot create its output folder {folder}: {_reason(exc)}")
    return _checked_render(job, src, sos, bound, policy, fail, None, group)


def _checked_render(job: Job, src: Source, sos, bound: float, policy: Policy, fail, fd: int | None,
                    group=None) -> FileResult:
    folder = os.path.dirname(job.output) or "."
    if os.path.isdir(job.output) and not os.path.islink(job.output):
        return fail(f"a folder already has its output name ({job.output}); move that folder away")
    if not os.access(folder, os.W_OK | os.X_OK, effective_ids=os.access in os.supports_effective_ids):
        try:
            read_only = bool(os.statvfs(folder).f_flag & os.ST_RDONLY)
        except OSError:
            read_only = False
        return fail(f"cannot write into its output folder {folder}: "
                    f"{'read-only file system' if read_only else 'permission denied'}; nothing was delivered")
    # The largest block in samples (frames x channels) is MAX_BLOCK: a file with many channels is read in
    # fewer frames per block, so memory stays bounded (the block size never changes the output).
    if src.channels * policy.block_size > MAX_BLOCK:
        policy = replace(policy, block_size=max(MIN_BLOCK, MAX_BLOCK // src.channels))
    if fd is None:
        return render_file(src, job.output, sos, bound, policy, seed_key=job.relpath.replace(os.sep, "/"),
                           relpath=job.relpath, group=group)
    name = os.path.basename(job.output)
    held = f"/proc/self/fd/{fd}"
    r = render_file(src, os.path.join(held, name), sos, bound, policy,
                    seed_key=job.relpath.replace(os.sep, "/"), relpath=job.relpath, group=group)
    if r.output and r.output.startswith(held + os.sep):
        r.output = job.output
    if r.message and held in r.message:
        r.message = r.message.replace(os.path.join(held, name), job.output).replace(held, folder)
    if r.status in DELIVERED and not _still_at(job.outdir, folder, fd):
        # moved or replaced meanwhile: what was written went into the folder opened, never through a link
        try:
            os.unlink(name, dir_fd=fd)
        except OSError:
            pass
        r.status = FAILED
        r.message = (f"its output folder {folder} was moved or replaced (by a link?) while it was rendered; "
                     "its output was removed, nothing was delivered")
    return r


def still_the_rendered_file(task: Task, r: FileResult) -> FileResult:
    """A delivered result, checked once more right before it is reported (and the journal records it).

    The renderer checked the input at the end of the file; an input replaced after that (another file,
    same size and modification time) would otherwise be recorded as the source of an output made from
    the earlier file, and resume would keep that output for ever. Such a file is failed, unrecorded.
    """
    src = task.src
    if r.status not in DELIVERED or not src.inode:
        return r
    try:
        st = os.stat(src.path)
        same = (st.st_ino, st.st_ctime_ns, st.st_size, st.st_mtime_ns) == (src.inode, src.ctime_ns, src.size,
                                                                           src.mtime_ns)
    except OSError:
        same = False
    if same:
        return r
    r.status = FAILED
    r.message = ("was replaced or changed right after it was rendered; its output, made from the earlier file, "
                 "is not recorded as delivered: run again to render the file now there")
    return r


def render_task(task: Task) -> FileResult:
    """Render one task in this process (a fault outside render_file's own handling fails this file only)."""
    job, src = task.job, task.src
    try:
        return _render_job(*task)
    except OSError as exc:          # e.g. no file descriptor left (ulimit -n)
        return FileResult(job.input, job.relpath, FAILED, f"cannot be rendered: {_reason(exc)}; nothing was "
                          "delivered", source=src)
    except Exception as exc:
        return FileResult(job.input, job.relpath, FAILED, f"unexpected fault: {type(exc).__name__}: "
                          f"{first_line(exc)}; nothing was delivered", source=src)


class InlineExecutor:
    """Every file in this process, one after the other; Ctrl-C stops the file at its next block."""

    def __init__(self, threads: int = 1):
        self.threads = threads
        self.notes: list[str] = []

    def run(self, tasks: Sequence[Task], finished: Finished) -> bool:
        try:
            with ctrl_c_stops_rendering():
                for task in tasks:
                    _stop_point()
                    finished(task.job, still_the_rendered_file(task, render_task(task)))
        except KeyboardInterrupt:
            return True
        return False


def _worker_init(parent: int | None = None) -> None:
    if sys.platform.startswith("linux"):
        # A worker must not outlive its batch: if the parent is killed (SIGKILL, a crash), the kernel kills
        # the worker too. Otherwise it would go on writing outputs that no journal records, and hold the
        # output folder's lock (inherited with fork) for ever.
        try:
            import ctypes

            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(1, int(signal.SIGKILL), 0, 0, 0)     # PR_SET_PDEATHSIG
        except (OSError, AttributeError):
            pass
    if parent is not None and os.getppid() != parent:       # the parent died before prctl took effect
        os._exit(1)
    allow_rendering()
    worker_signals()        # Ctrl-C, SIGTERM, SIGHUP, SIGQUIT: stop the file at its next block


def _render_in_worker(job: Job, src: Source, sos, bound: float, policy: Policy, group=None) -> FileResult:
    interrupted = FileResult(job.input, job.relpath, NOT_RENDERED, INTERRUPTED, source=src)
    if rendering_stopped():
        return interrupted
    try:
        with worker_rendering():
            return _render_job(job, src, sos, bound, policy, group)     # execute gave it one thread: one core
    except KeyboardInterrupt:
        return interrupted


def _stop_workers(pool: ProcessPoolExecutor) -> None:
    """Pass Ctrl-C on to every worker (each stops its file and skips the rest of its queue).

    Also for SIGTERM, SIGHUP or SIGQUIT received by this process: SIGINT only stops the workers' files,
    and the pool's shutdown then ends them in order.
    """
    for proc in list((getattr(pool, "_processes", None) or {}).values()):
        try:
            os.kill(proc.pid, signal.SIGINT)
        except (OSError, AttributeError, TypeError):
            pass


def _abandon(pool: ProcessPoolExecutor) -> None:
    """Drop a pool that failed to start: its workers are killed (a half-started pool would keep them,
    and the interpreter would wait for them at exit for ever)."""
    procs = list((getattr(pool, "_processes", None) or {}).values())
    for proc in procs:
        try:
            proc.kill()
        except (OSError, AttributeError, ValueError):
            pass
    for proc in procs:
        try:
            proc.join(5)
        except (OSError, AttributeError, ValueError, AssertionError):
            pass
    try:
        pool.shutdown(wait=False, cancel_futures=True)
    except Exception:
        pass
    for name in ("_call_queue", "_result_queue"):       # give their descriptors back
        try:
            getattr(pool, name).close()
        except Exception:
            pass
    try:
        pool._executor_manager_thread_wakeup.close()
    except Exception:
        pass


class PoolExecutor:
    """One file per worker process, ``workers`` at a time, each file rendering in one thread.

    At most one file waits in the pool beyond those rendering. A worker that dies (the out-of-memory
    killer, say) breaks its pool, and every file the pool holds fails with it, so the pool holds few;
    those files are tried once more, each alone, so that only the one that kills its worker fails.
    The files not yet handed over go to a new pool.
    """

    threads = 1

    def __init__(self, workers: int):
        self.workers = workers
        self.notes: list[str] = []

    def _inline(self, exc: OSError, rest: list[Task], finished: Finished) -> bool:
        """The worker processes cannot be started: render what is left here, one file after the other."""
        self.notes.append(f"the worker processes could not be started ({_reason(exc)}); "
                          "the files were rendered one after the other in this process")
        return InlineExecutor(1).run(rest, finished)

    def run(self, tasks: Sequence[Task], finished: Finished) -> bool:
        # The workers are forked: what the parent has loaded they share. Load the compiled filter
        # loops the render path uses (scipy.signal itself only when a raw iir section or a fallback
        # has imported it already), so that no worker pays for loading them again.
        preload_kernels()
        allow_rendering()           # the workers fork with the flag as it is here
        interrupted = False
        tried_again: set[str] = set()      # files a broken worker pool took down, rendered once more
        size = min(self.workers, len(tasks))
        waiting = list(tasks)
        again: list[Task] = []
        pool: ProcessPoolExecutor | None = None
        broken = False
        pending: dict = {}          # future -> (task, rendering alone)

        def next_to_submit():
            if again:
                return None if pending else again
            if waiting and len(pending) <= size and not any(alone for _, alone in pending.values()):
                return waiting
            return None

        try:
            while waiting or again or pending:
                if pool is None:
                    try:
                        pool = ProcessPoolExecutor(max_workers=size, initializer=_worker_init,
                                                   initargs=(os.getpid(),), mp_context=_POOL_CONTEXT)
                    except OSError as exc:      # no descriptors even for its queues
                        if pending:
                            raise
                        return self._inline(exc, [*again, *waiting], finished)
                while not broken and (source := next_to_submit()) is not None:   # Ctrl-C here stops them too
                    task = source[0]
                    try:
                        fut = pool.submit(_render_in_worker, *task)
                    except (BrokenProcessPool, RuntimeError):   # broken while submitting (3.11 may say
                        broken = True                           # "cannot schedule new futures")
                        break
                    except OSError as exc:      # the workers cannot be started (no descriptors, no memory)
                        if pending:
                            broken = True
                            break
                        _abandon(pool)
                        pool = None
                        return self._inline(exc, [*again, *waiting], finished)
                    pending[fut] = (task, source is again)
                    source.pop(0)
                if pending:
                    done, _ = wait(pending, return_when=FIRST_COMPLETED)
                    for fut in done:
                        task, _ = pending[fut]
                        job, src = task.job, task.src
                        try:
                            r = fut.result()
                        except Exception as exc:  # a worker died: the file is failed, the batch goes on
                            if isinstance(exc, BrokenProcessPool):
                                broken = True
                                if job.relpath not in tried_again:
                                    tried_again.add(job.relpath)
                                    again.append(task)
                                    del pending[fut]
                                    continue
                            text = first_line(exc, type(exc).__name__)
                            r = FileResult(job.input, job.relpath, FAILED, f"the worker rendering it stopped: "
                                           f"{text}; nothing was delivered", source=src)
                        finished(job, still_the_rendered_file(task, r))
                        del pending[fut]            # after: a Ctrl-C in between leaves it to the finally
                if broken and not pending:         # every file the broken pool held is accounted for
                    pool.shutdown(wait=True)
                    pool, broken = None, False
        except KeyboardInterrupt:
            interrupted = True
            for fut in pending:
                fut.cancel()
            if pool is not None:
                _stop_workers(pool)
        finally:
            while pool is not None:
                try:
                    pool.shutdown(wait=True, cancel_futures=True)
                    break
                except KeyboardInterrupt:      # Ctrl-C again: the workers are already stopping
                    interrupted = True
                    _stop_workers(pool)
            for fut, (task, _) in pending.items():
                if fut.done() and not fut.cancelled() and fut.exception() is None:
                    finished(task.job, still_the_rendered_file(task, fut.result()))
        if tried_again:
            self.notes.append(f"a worker process stopped while rendering (killed from outside, or out of memory?); "
                              f"the {len(tried_again)} file(s) its pool held were rendered again, each on its own")
        return interrupted
