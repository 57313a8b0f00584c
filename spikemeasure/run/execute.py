"""Run the files' tasks: one loop over a :class:`concurrent.futures.Executor`.

- ``jobs=1``: :class:`InProcessExecutor` runs each task in this process when it is submitted,
  with the stop request as its `cancel`, so a stop lands at the next sweep.
- ``jobs>1``: a :class:`~concurrent.futures.ProcessPoolExecutor` whose workers leave signals
  to this process and end with it. A worker that dies breaks the whole pool; the files it
  took with it are measured again one at a time, each in a pool of its own, so that only the
  file that kills its worker fails.
- a cluster: the executor of a Dask distributed client (its workers must see the files at the
  same paths).

On a stop (Ctrl-C, SIGTERM, SIGHUP) the workers end at once; the files they held are not
finished and are not failures.
"""
from __future__ import annotations

import os
import signal
import sys
import threading
import time
import traceback
from concurrent.futures import FIRST_COMPLETED, Executor, Future, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Iterator

from ..errors import SpikemeasureError
from .outcome import FileOutcome, internal_error_outcome
from .task import measure_file

__all__ = ["RunStopped", "StopRequest", "STOP_SIGNALS", "Task", "InProcessExecutor",
           "execute_tasks", "start_worker"]

#: How often (s) the run looks whether it was asked to stop while workers measure.
STOP_POLL_S = 0.2
#: prctl(2) option: the signal a process gets when the thread that started it ends (Linux).
_PR_SET_PDEATHSIG = 1
#: How often (s) a worker's watchdog looks whether its parent process is still there.
WORKER_WATCH_S = 1.0


@dataclass(frozen=True)
class Task:
    """A file to measure: its place in the run, its path and name, where its outcome is kept
    (None: not known before it is hashed, while it is read, `hash_while_reading`)."""

    index: int
    path: Path
    shown: str
    cache_path: Path | None
    hash_while_reading: bool = False


class RunStopped(KeyboardInterrupt):
    """A run stopped by a signal (Ctrl-C, SIGTERM, SIGHUP) after writing the tables of the files
    finished and a run record saying ``interrupted``; `signum` is the signal's number."""

    def __init__(self, signum: int = signal.SIGINT) -> None:
        super().__init__(signum)
        self.signum = int(signum)


#: Signals that stop a run cleanly: Ctrl-C, a polite kill, a closed terminal or session.
STOP_SIGNALS = tuple(getattr(signal, name) for name in ("SIGINT", "SIGTERM", "SIGHUP")
                     if hasattr(signal, name))


class StopRequest:
    """Ctrl-C, SIGTERM or SIGHUP during a run (one handler for all three): the first one stops
    the work at the next sweep, piece of a long sweep or file boundary (never inside a library
    call, which could swallow or mangle it) and ends the worker processes; a second one stops
    at once. Only in the main thread, where signals are delivered."""

    def __init__(self) -> None:
        self.requested = False
        self.signum = int(signal.SIGINT)
        self._previous: dict = {}

    def __enter__(self) -> "StopRequest":
        if threading.current_thread() is threading.main_thread():
            for signum in STOP_SIGNALS:
                self._previous[signum] = signal.signal(signum, self.handle)
        return self

    def handle(self, signum, frame) -> None:
        """The signal handler: note the request; raise at a second one."""
        if self.requested:
            raise RunStopped(self.signum)
        self.requested = True
        self.signum = int(signum)

    def check(self) -> None:
        """Raise :class:`RunStopped` when a stop was asked for."""
        if self.requested:
            raise RunStopped(self.signum)

    def __exit__(self, *exc) -> None:
        for signum, previous in self._previous.items():
            signal.signal(signum, previous)
        self._previous = {}


def start_worker(parent_pid: int) -> None:
    """Initializer of each worker process: leave Ctrl-C and hang-ups to the parent, which
    stops the run cleanly and ends the workers; and end this worker when the parent ends,
    however it ends (also SIGKILL): on Linux through prctl(PR_SET_PDEATHSIG), everywhere
    through a watchdog thread that exits when the parent process id changes."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if hasattr(signal, "SIGHUP"):
        signal.signal(signal.SIGHUP, signal.SIG_IGN)
    # a forked worker inherits the parent's stop handler: SIGTERM (how the parent ends it)
    # must end it at once, silently
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    if sys.platform.startswith("linux"):
        try:
            import ctypes

            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(_PR_SET_PDEATHSIG, int(signal.SIGKILL), 0, 0, 0)
        except (OSError, AttributeError):  # no prctl here: the watchdog does the job
            pass
    if os.getppid() != parent_pid:  # the parent ended before the line above
        os._exit(1)

    def watch() -> None:
        while True:
            time.sleep(WORKER_WATCH_S)
            if os.getppid() != parent_pid:
                os._exit(1)

    threading.Thread(target=watch, name="spikemeasure-parent-watch", daemon=True).start()


class InProcessExecutor(Executor):
    """Runs each task in this process, when it is submitted; a ``KeyboardInterrupt`` (a stop)
    propagates from :meth:`submit` at once."""

    def submit(self, fn, /, *args, **kwargs) -> Future:
        future: Future = Future()
        try:
            result = fn(*args, **kwargs)
        except Exception as exc:
            future.set_exception(exc)
        else:
            future.set_result(result)
        return future


def _end_pool(pool: ProcessPoolExecutor) -> None:
    """End a pool's workers now (the run stops): their files are not finished."""
    processes = list((getattr(pool, "_processes", None) or {}).values())
    for process in processes:
        if process.is_alive():
            process.terminate()
    for process in processes:
        process.join(10.0)
        if process.is_alive():
            process.kill()
            process.join(10.0)
    pool.shutdown(wait=True, cancel_futures=True)


@contextmanager
def _process_pool(workers: int) -> Iterator[ProcessPoolExecutor]:
    pool = ProcessPoolExecutor(max_workers=workers, initializer=start_worker,
                               initargs=(os.getpid(),))
    try:
        yield pool
    except BaseException:
        _end_pool(pool)
        raise
    pool.shutdown(wait=True)


@contextmanager
def _cluster_executor(address: str, timeout_s: float) -> Iterator[Executor]:
    try:
        from distributed import Client
    except ImportError:
        raise SpikemeasureError(
            "--cluster needs Dask distributed: pip install \"spikemeasure[cluster]\"") from None
    try:
        client = Client(address, timeout=f"{timeout_s:g}s")
    except (OSError, TimeoutError, ValueError) as exc:
        raise SpikemeasureError(
            f"cannot reach the Dask scheduler at {address} ({exc}); check the address and "
            "that the scheduler is running") from exc
    executor = client.get_executor(pure=False)
    try:
        yield executor
    finally:
        executor.shutdown(wait=False)  # cancels what is left (after a stop or an error)
        client.close()


def task_outcome(future: Future, shown: str) -> FileOutcome:
    """A finished task's outcome; a task that raised (a worker that died, a result that could
    not be sent back) becomes an internal error of its file."""
    try:
        return future.result()
    except BrokenProcessPool as exc:
        outcome = internal_error_outcome(shown, exc, traceback.format_exc())
        outcome.failures[0]["message"] = (
            f"{shown}: the worker process measuring it ended unexpectedly (killed, out of "
            "memory, or crashed in a library); the file was not measured. Run the same "
            "command again to retry it")
        return outcome
    except Exception as exc:
        return internal_error_outcome(shown, exc, traceback.format_exc())


def _round(executor: Executor, tasks: list[Task], parameters: dict, figures: dict | None,
           finish: Callable[[Task, FileOutcome], None], stop: StopRequest, *,
           in_process: bool, retry_broken: bool) -> list[Task]:
    """Submit `tasks` to `executor` and hand each outcome to `finish` as it comes; the tasks
    a broken process pool took with it (when `retry_broken`)."""
    futures: dict[Future, Task] = {}
    broken: list[Task] = []
    for task in tasks:
        stop.check()
        cancel = stop.check if in_process else None
        futures[executor.submit(measure_file, str(task.path), task.shown, parameters, figures,
                                cancel=cancel, hash_input=task.hash_while_reading)] = task
        if in_process:  # finished already: hand it over before the next one runs
            _collect(futures, set(futures), finish, stop, retry_broken, broken)
            futures.clear()
    waiting = set(futures)
    while waiting:
        done, waiting = wait(waiting, timeout=STOP_POLL_S, return_when=FIRST_COMPLETED)
        _collect(futures, done, finish, stop, retry_broken, broken)
        stop.check()
    stop.check()
    return sorted(broken, key=lambda t: t.index)


def _collect(futures: dict, done: set, finish, stop: StopRequest, retry_broken: bool,
             broken: list[Task]) -> None:
    for future in sorted(done, key=lambda f: futures[f].index):
        if stop.requested and future.exception() is not None:
            continue  # a worker ended by the stop: no failure of its file
        task = futures[future]
        if retry_broken and isinstance(future.exception(), BrokenProcessPool):
            broken.append(task)
            continue
        finish(task, task_outcome(future, task.shown))


def execute_tasks(tasks: list[Task], parameters: dict, figures: dict | None,
                  finish: Callable[[Task, FileOutcome], None], stop: StopRequest, *,
                  jobs: int = 1, cluster: str | None = None,
                  cluster_timeout_s: float = 20.0) -> None:
    """Measure every task and call ``finish(task, outcome)`` for each, in this process.

    Parameters
    ----------
    tasks : list of Task
    parameters, figures : dict
        As :func:`~spikemeasure.run.task.measure_file` takes them.
    finish : callable
        Called with each task and its outcome as it finishes (in this process).
    stop : StopRequest
        Checked between tasks and while waiting; a stop ends the workers and raises
        :class:`RunStopped`.
    jobs : int, optional
        Worker processes (1: this process).
    cluster : str, optional
        A Dask scheduler's address: the tasks run on its workers instead.
    cluster_timeout_s : float, optional
        How long to wait for the scheduler to answer.
    """
    if not tasks:
        return
    if cluster:
        with _cluster_executor(cluster, cluster_timeout_s) as executor:
            _round(executor, tasks, parameters, figures, finish, stop, in_process=False,
                   retry_broken=False)
    elif jobs <= 1 or len(tasks) <= 1:
        _round(InProcessExecutor(), tasks, parameters, figures, finish, stop, in_process=True,
               retry_broken=False)
    else:
        with _process_pool(min(jobs, len(tasks))) as pool:
            broken = _round(pool, tasks, parameters, figures, finish, stop, in_process=False,
                            retry_broken=True)
        for task in broken:
            with _process_pool(1) as pool:
                _round(pool, [task], parameters, figures, finish, stop, in_process=False,
                       retry_broken=False)
