"""Executors: where fold jobs run. Each registers by name; a run names one.

The interface is :class:`sweep.executor_base.Executor`. Worker processes are
plain ones: loky's (started fresh, the standard way) or the embedded dask
cluster's; each watches the driver and ends with it (:mod:`sweep.lifeline`).

Adding an executor: subclass :class:`Executor`, then add one line to
``EXECUTORS``.
"""

from __future__ import annotations

import concurrent.futures as cf
from typing import Any, Callable, Iterable

from sweep.executor_base import Executor, FileShare
from sweep.lifeline import watch_parent
from sweep.loop_core import Verdict
from workers.job import DataRef, Job, run_jobs

__all__ = ["EXECUTORS", "Executor", "FileShare", "InProcessExecutor", "JoblibExecutor", "make_executor"]


class InProcessExecutor(Executor):
    """One job at a time in this process: the same code path, debuggable with pdb.

    A task runs when the loop waits, one task per wait, so that the loop commits, renews its
    lease and sees a signal between tasks (run at submit, a window of tasks would run before
    the loop could commit the first one's results)."""

    def __init__(self) -> None:
        self._queued: list[tuple[cf.Future[Any], list[Job], Any]] = []

    def submit(self, jobs: list[Job], handle: Any) -> cf.Future[Any]:
        future: cf.Future[Any] = cf.Future()
        self._queued.append((future, jobs, handle))
        return future

    def wait(self, futures: Iterable[Any], timeout: float) -> set[Any]:
        wanted = set(futures)
        done = {f for f in wanted if f.done()}
        if done:
            return done
        self._queued = [entry for entry in self._queued if not entry[0].cancelled()]
        for index, (future, jobs, handle) in enumerate(self._queued):
            if future in wanted:
                del self._queued[index]
                future.set_result(run_jobs(jobs, handle))
                return {future}
        return set()


class JoblibExecutor(Executor):
    """Worker processes from joblib's loky backend (the embedded default)."""

    task_seconds = 1.0

    def __init__(self, workers: int) -> None:
        self.workers = workers
        self._pool = _loky_pool(workers)
        self._files = FileShare()

    def share(self, data: Any) -> DataRef:
        return self._files.share(data)

    def submit(self, jobs: list[Job], handle: Any) -> cf.Future[Any]:
        try:
            return self._pool.submit(run_jobs, jobs, handle)
        except RuntimeError:  # a broken pool after a worker died: start a fresh one
            self._pool = _loky_pool(self.workers)
            return self._pool.submit(run_jobs, jobs, handle)

    def verdict(self, exc: BaseException) -> Verdict:
        # a worker's death breaks the whole pool: every task in flight fails alike, whichever ran there
        return Verdict.UNKNOWN

    def close(self, *, kill: bool = False) -> None:
        if kill:
            _shutdown_killing(self._pool)
        self._files.remove()


def _shutdown_killing(pool: Any) -> None:
    """Shut ``pool`` down, killing its workers, without the traceback of a race in loky.

    When its manager thread cancels the tasks not yet handed to a worker, it can then look up
    one of them again and die of a ``KeyError`` (seen about one Ctrl-C in five). The pool is
    being killed and the run loop has already given those jobs back, so that one exception of
    that one thread is dropped; any other goes to the usual hook.
    """
    import threading

    usual = threading.excepthook

    def hook(args: Any) -> None:
        if not (args.exc_type is KeyError and args.thread is not None
                and args.thread.name == "ExecutorManagerThread"):
            usual(args)

    threading.excepthook = hook
    try:
        pool.shutdown(wait=True, kill_workers=True)
    finally:
        threading.excepthook = usual


def _loky_pool(workers: int) -> Any:
    """loky's reusable pool of ``workers`` processes (the same one on every call while it lives);
    each worker watches the driver (:mod:`sweep.lifeline`)."""
    from joblib.externals.loky import get_reusable_executor

    return get_reusable_executor(max_workers=workers, timeout=60, initializer=watch_parent)


def _joblib(workers: int, **options: Any) -> Executor:
    return InProcessExecutor() if workers == 1 else JoblibExecutor(workers)


def _dask(workers: int, scheduler: str | None = None, memory_limit: str | None = None, **options: Any) -> Executor:
    """An existing scheduler's client, else the embedded cluster, in this process."""
    from sweep.dask_executor import DaskExecutor

    return DaskExecutor(workers, scheduler=scheduler, memory_limit=memory_limit, **options)


EXECUTORS: dict[str, Callable[..., Executor]] = {
    "joblib": _joblib,
    "dask": _dask,
}


def make_executor(backend: str, workers: int, **options: Any) -> Executor:
    """The executor called ``backend`` with ``workers`` workers."""
    return EXECUTORS[backend](workers, **options)
