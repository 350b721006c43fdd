"""The cluster executor: each file's render sent to the workers of a Dask scheduler.

``--cluster tcp://host:port`` uses a running scheduler; ``--cluster local:N`` starts a LocalCluster of
N worker processes on this machine (on 127.0.0.1) and closes it after the batch. Dask is an optional
extra (``pip install 'chainrun[cluster]'``) imported here only, on first use.

The guarantees are a local run's:

* Inputs and OUTDIR are read and written by the workers under the same paths, so they must be on
  storage every worker sees. :meth:`ClusterExecutor.open` asks every worker, before any audio is read,
  whether it sees OUTDIR (the very lock file this run holds, with its contents), may write there and
  sees the first input with its size, and whether it runs this chainrun version; one line refuses if not.
* The client alone holds the OUTDIR lock and writes the journal and the reports; a worker only renders
  one file into a temporary name of its own and renames it complete (``render_file``).
* A worker that dies while rendering: the scheduler renders its file again elsewhere. On a cluster
  started here ``distributed.scheduler.allowed-failures`` is 1, so a file that takes down a second
  worker fails with that reason; a running scheduler keeps its own setting (Dask's default is 3).
* Each run has its own task keys and its own stop :class:`distributed.Event`. Ctrl-C (or the batch's
  end) sets it: a task that starts afterwards renders nothing, and a running one stops at its next
  block (its temporary file removed). The run's keys are released as soon as their results are read,
  so a worker lost later never makes the scheduler render a delivered file again behind the journal.
* At most one task per worker thread, plus one, is with the scheduler at a time, so Ctrl-C has little
  to cancel and a worker's death takes down no bystanders.
"""
from __future__ import annotations

import logging
import os
import signal
import threading
import time
import uuid
from dataclasses import replace
from typing import Sequence

from ..errors import BatchError
from ..interrupt import allow_rendering, ctrl_c_stops_rendering, rendering_stopped, stop_rendering
from ..results import FAILED, INTERRUPTED, NOT_RENDERED, FileResult
from ..text import first_line
from ..version import __version__
from .executors import Finished, Task, _render_in_worker, still_the_rendered_file

__all__ = ["EXTRA", "ClusterExecutor", "parse_address", "dask_missing"]

EXTRA = "pip install 'chainrun[cluster]'"
LOCAL_PREFIX = "local:"
MAX_LOCAL_WORKERS = 64
CONNECT_TIMEOUT_S = 20.0     # to reach a scheduler, and to wait for its first worker
GONE_TIMEOUT_S = 10.0        # after Ctrl-C, how long the files already rendering are given to stop
_POLL_S = 0.25               # how often the client looks for Ctrl-C while it waits for results
_WATCH_S = 1.0               # a worker's long poll of the stop event


def parse_address(address: str) -> tuple[str, int | None]:
    """``("local", N)`` for ``local:N``, else ``(address, None)`` for a scheduler address.

    Raises
    ------
    BatchError
        For anything else, in one line.
    """
    if address.startswith(LOCAL_PREFIX):
        n = address[len(LOCAL_PREFIX):]
        if n.isdigit() and 1 <= int(n) <= MAX_LOCAL_WORKERS:
            return "local", int(n)
    elif "://" in address and address.split("://", 1)[1]:
        return address, None
    raise BatchError(f"--cluster {address}: error: not a cluster address; allowed: tcp://HOST:PORT (a running "
                     f"Dask scheduler) or local:N (N worker processes here, 1 to {MAX_LOCAL_WORKERS})")


def dask_missing() -> str | None:
    """The one line to show when Dask's distributed scheduler cannot be imported, else None."""
    import importlib

    try:
        importlib.import_module("distributed")
    except ImportError:
        return f"--cluster needs Dask's distributed scheduler, not installed here: {EXTRA}; no audio was touched"
    return None


# --------------------------------------------------------------------------- the worker's side

_active = 0                        # chainrun tasks running in this worker process
_active_lock = threading.Lock()


def _watch(stop, done: threading.Event) -> None:
    """Poll the run's stop event until the task is done; when it is set, stop the file at its next block."""
    while not done.is_set():
        try:
            if stop.wait(timeout=_WATCH_S):
                if not done.is_set():
                    stop_rendering()
                return
        except Exception:      # the scheduler is out of reach for now: the worker closes itself if it stays so
            done.wait(_WATCH_S)


def _render_on_worker(task: Task, event_name: str) -> FileResult:
    """Render one task on a Dask worker (the function each submitted task runs)."""
    global _active
    from distributed import Event, get_worker

    worker = get_worker().address
    with _active_lock:
        if _active == 0:
            allow_rendering()       # a stop left by an earlier run in this process
        _active += 1
    done = threading.Event()
    try:
        stop = Event(event_name)
        if stop.is_set():           # Ctrl-C, or the run is over: render nothing
            r = FileResult(task.job.input, task.job.relpath, NOT_RENDERED, INTERRUPTED, source=task.src)
        else:
            threading.Thread(target=_watch, args=(stop, done), daemon=True, name="chainrun-stop-watch").start()
            try:
                r = _render_in_worker(*task)
            except Exception as exc:
                r = FileResult(task.job.input, task.job.relpath, FAILED, f"unexpected fault: {type(exc).__name__}: "
                               f"{first_line(exc)}; nothing was delivered", source=task.src)
    finally:
        done.set()
        with _active_lock:
            _active -= 1
    r.extra["worker"] = worker
    return r


def _worker_sees(outdir: str, lock_path: str, lock_text: str, first_input: str | None, first_size: int | None,
                 version: str) -> str | None:
    """On a worker: None if it can render this batch, else what it lacks (one clause)."""
    if version != __version__:
        return f"runs chainrun {version}, not this client's {__version__}"
    if not os.path.isdir(outdir):
        return f"does not see OUTDIR ({outdir})"
    try:
        with open(lock_path, encoding="utf-8", errors="replace") as fh:
            seen = fh.read()
    except OSError:
        seen = ""
    if seen != lock_text:
        return f"sees another folder at OUTDIR ({outdir}: not the one this run holds)"
    if not os.access(outdir, os.W_OK | os.X_OK):
        return f"cannot write into OUTDIR ({outdir})"
    if first_input is not None:
        try:
            size = os.stat(first_input).st_size
        except OSError:
            return f"does not see the input {first_input}"
        if first_size is not None and size != first_size:
            return f"sees another file at {first_input} ({size} bytes, not {first_size})"
    return None


def _ignore_ctrl_c_plugin():
    """A worker plugin for the workers started here: Ctrl-C at the terminal reaches them too (one process
    group); they leave it to the client, which stops their files through the run's stop event."""
    from distributed.diagnostics.plugin import WorkerPlugin

    class IgnoreCtrlC(WorkerPlugin):
        name = "chainrun-ignore-ctrl-c"

        def setup(self, worker):
            if threading.current_thread() is threading.main_thread():
                signal.signal(signal.SIGINT, signal.SIG_IGN)

    return IgnoreCtrlC()


# --------------------------------------------------------------------------- the client's side

class ClusterExecutor:
    """Renders each file on a Dask worker; see the module docstring. Use :meth:`open` and :meth:`close`
    (or ``with``) around :meth:`run`."""

    threads = 1

    def __init__(self, address: str):
        self.address = address
        self.notes: list[str] = []
        self.client = None
        self.cluster = None
        self._log_levels: dict[str, int] = {}
        self._kind, self._local_workers = parse_address(address)

    # ---------------------------------------------------------------- connect

    def open(self, outdir: str, first_input: str | None = None) -> "ClusterExecutor":
        """Connect (or start the local cluster) and check that every worker sees OUTDIR and the first input.

        Raises
        ------
        BatchError
            Dask missing, no scheduler at the address, no worker, or a worker that cannot see the storage.
        """
        missing = dask_missing()
        if missing:
            raise BatchError(missing)
        import dask
        from distributed import Client

        self._quiet_logs()
        try:
            if self._kind == "local":
                from distributed import LocalCluster

                with dask.config.set({"distributed.scheduler.allowed-failures": 1,
                                      "distributed.scheduler.worker-saturation": 1.0}):
                    self.cluster = LocalCluster(n_workers=self._local_workers, threads_per_worker=1, processes=True,
                                                host="127.0.0.1", dashboard_address=None,
                                                # no dashboard, but the scheduler's HTTP endpoints (health,
                                                # metrics) still start: on any free port, not 8787, which a
                                                # second run or another program may hold (a warning then)
                                                scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
                                                silence_logs=logging.CRITICAL, scheduler_port=0)
                    self.client = Client(self.cluster, timeout=CONNECT_TIMEOUT_S)
                    self.client.register_plugin(_ignore_ctrl_c_plugin())
            else:
                self.client = Client(self.address, timeout=CONNECT_TIMEOUT_S)
            self.client.wait_for_workers(1, timeout=CONNECT_TIMEOUT_S)
        except Exception as exc:
            self.close()
            what = "no worker joined it" if "worker" in str(exc).lower() else first_line(exc, type(exc).__name__)
            raise BatchError(f"--cluster {self.address}: error: cannot use the cluster ({what}); "
                             "no audio was touched") from None
        except BaseException:        # Ctrl-C while the cluster starts: nothing left running
            self.close()
            raise
        try:
            self._check_storage(outdir, first_input)
        except BaseException:
            self.close()
            raise
        return self

    def _check_storage(self, outdir: str, first_input: str | None) -> None:
        from .outdir import LOCK_NAME

        outdir = os.path.abspath(outdir)
        lock_path = os.path.join(outdir, LOCK_NAME)
        try:
            with open(lock_path, encoding="utf-8", errors="replace") as fh:
                lock_text = fh.read()
        except OSError:
            lock_text = ""
        first = os.path.abspath(first_input) if first_input else None
        try:
            size = os.stat(first).st_size if first else None
        except OSError:
            size = None
        try:
            answers = self.client.run(_worker_sees, outdir, lock_path, lock_text, first, size, __version__)
        except Exception as exc:
            raise BatchError(f"--cluster {self.address}: error: the workers could not be asked whether they see "
                             f"OUTDIR ({first_line(exc, type(exc).__name__)}); no audio was touched") from None
        for worker, why in sorted(answers.items()):
            if why:
                raise BatchError(f"--cluster {self.address}: error: worker {worker} {why}; inputs and OUTDIR must "
                                 "be on storage every worker sees under the same paths; no audio was touched")

    def _quiet_logs(self) -> None:
        """Dask's own log lines (a worker restarted, a lost connection) are not the user's: the notes say it."""
        import importlib

        importlib.import_module("distributed")      # importing it configures its loggers

        names = ["distributed", "tornado"] + [n for n in logging.root.manager.loggerDict
                                              if n.startswith(("distributed.", "tornado."))]
        for name in names:
            logger = logging.getLogger(name)
            self._log_levels.setdefault(name, logger.level)
            logger.setLevel(logging.CRITICAL + 1)

    def close(self) -> None:
        """Disconnect; close the local cluster if this executor started it."""
        for thing in (self.client, self.cluster):
            if thing is not None:
                try:
                    thing.close()
                except Exception:       # a scheduler already gone: nothing left to close
                    pass
        self.client = self.cluster = None
        for name, level in self._log_levels.items():
            logging.getLogger(name).setLevel(level)
        self._log_levels.clear()

    def __enter__(self) -> "ClusterExecutor":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # ---------------------------------------------------------------- run

    def _slots(self) -> int:
        try:
            threads = sum(self.client.nthreads().values())
        except Exception:
            threads = 0
        return max(1, threads) + 1

    def _gone(self) -> bool:
        return self.client is None or self.client.status not in ("running", "connecting")

    def run(self, tasks: Sequence[Task], finished: Finished) -> bool:
        from distributed import Event, wait
        from distributed.scheduler import KilledWorker

        run_id = uuid.uuid4().hex
        event_name = f"chainrun-stop-{run_id}"
        stop = Event(event_name, client=self.client)
        waiting = list(enumerate(tasks))
        pending: dict = {}          # future -> task
        interrupted = gone = False
        started = time.time()
        per_worker: dict[str, int] = {}

        def shipped(task: Task) -> Task:       # workers have their own working folder: absolute paths
            job = replace(task.job, input=os.path.abspath(task.job.input), output=os.path.abspath(task.job.output))
            return task._replace(job=job, src=replace(task.src, path=os.path.abspath(task.src.path)))

        def account(fut, task: Task) -> None:
            job = task.job
            if fut.status == "finished":
                r = fut.result()
                r.input, r.source = job.input, task.src
                r.output = job.output if r.output else None
                per_worker[r.extra.get("worker", "?")] = per_worker.get(r.extra.get("worker", "?"), 0) + 1
            elif fut.status == "error":
                exc = fut.exception()
                if isinstance(exc, KilledWorker):
                    why = (f"the workers rendering it stopped {exc.allowed_failures + 1} times (killed from outside, "
                           f"or out of memory?), last {exc.last_worker.address}; nothing was delivered")
                else:
                    why = (f"the worker rendering it stopped: {type(exc).__name__}: "
                           f"{first_line(exc)}; nothing was delivered")
                r = FileResult(job.input, job.relpath, FAILED, why, source=task.src)
            else:                                # cancelled: the scheduler went away
                return
            fut.release()                        # no one wants it now: never recomputed behind the journal
            finished(job, still_the_rendered_file(task, r))     # the input checked once more, as the other executors do

        try:
            with ctrl_c_stops_rendering():       # here Ctrl-C only sets the flag, read between waits
                while waiting or pending:
                    if rendering_stopped():
                        interrupted = True
                        break
                    slots = self._slots()
                    while waiting and len(pending) < slots:
                        i, task = waiting.pop(0)
                        fut = self.client.submit(_render_on_worker, shipped(task), event_name,
                                                 key=f"chainrun-render-{run_id}-{i}", pure=False, retries=0)
                        pending[fut] = task
                    try:
                        done, _ = wait(list(pending), timeout=_POLL_S, return_when="FIRST_COMPLETED")
                    except TimeoutError:
                        done = set()
                    except Exception:            # futures cancelled: the scheduler went away
                        done = {f for f in pending if f.done()}
                        gone = True
                    for fut in done:
                        if fut.status == "cancelled" or self._gone():
                            gone = True
                            continue
                        account(fut, pending.pop(fut))
                    if gone or self._gone():
                        gone = True
                        break
        except KeyboardInterrupt:                # came after the loop had left: still an interruption
            interrupted = True
        finally:
            if not gone:
                interrupted = self._wind_down(stop, pending, account) or interrupted
        if gone:
            self._scheduler_gone(pending, waiting, finished)
        else:
            self._worker_losses(started, run_id)
        if per_worker:
            spread = ", ".join(f"{w} {n}" for w, n in sorted(per_worker.items()))
            self.notes.append(f"rendered on the Dask cluster {self.address}; files per worker: {spread}")
        return interrupted

    def _wind_down(self, stop, pending: dict, account) -> bool:
        """Set the run's stop event, collect what the workers still hold (a file finished meanwhile is
        delivered and reported), and cancel the rest. True if Ctrl-C came meanwhile."""
        from distributed import wait

        interrupted = False
        try:
            stop.set()
            if pending:
                try:
                    wait(list(pending), timeout=GONE_TIMEOUT_S)
                except TimeoutError:
                    pass
                for fut in [f for f in pending if f.done()]:
                    account(fut, pending.pop(fut))
                self.client.cancel(list(pending))
        except KeyboardInterrupt:                # Ctrl-C again: the files are already stopping
            interrupted = True
        except Exception:                        # the scheduler went away meanwhile: nothing more to collect
            pass
        return interrupted

    def _scheduler_gone(self, pending: dict, waiting: list, finished: Finished) -> None:
        left = list(pending.values()) + [task for _, task in waiting]
        why = (f"not rendered: the Dask scheduler at {self.address} went away; the next run renders it")
        for task in left:
            finished(task.job, FileResult(task.job.input, task.job.relpath, FAILED, why, source=task.src))
        self.notes.append(f"the Dask scheduler at {self.address} went away; {len(left)} file(s) not rendered, "
                          "the files listed as ok were delivered")

    def _worker_losses(self, started: float, run_id: str) -> None:
        try:
            events = self.client.get_events()
        except Exception:
            return
        lost = {}
        for topic, entries in (events or {}).items():
            for when, msg in entries:
                if when >= started and isinstance(msg, dict) and msg.get("action") == "remove-worker" \
                        and not msg.get("expected"):
                    ours = [k for k in msg.get("processing-tasks") or () if str(k).startswith(f"chainrun-render-{run_id}")]
                    if ours:
                        lost[topic] = len(ours)
        if lost:
            self.notes.append(f"{len(lost)} Dask worker(s) stopped while rendering (killed from outside, or out of "
                              f"memory?): {', '.join(sorted(lost))}; the scheduler gave their files to other workers")
