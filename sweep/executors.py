"""Executors: where fold jobs run. Each registers by name; a run names one.

An executor ships each dataset once (:meth:`Executor.share`), submits
``workers.job.run_job`` calls and hands back futures with the
``concurrent.futures`` interface. A future whose worker process died raises
an exception that :meth:`Executor.is_worker_death` recognises; the run loop
then re-queues the job rather than recording it as the job's own failure,
counting the attempt when :meth:`Executor.blames_job` says the job was
running in the process that died.

Adding an executor: subclass :class:`Executor`, then add one line to
``EXECUTORS``.
"""

from __future__ import annotations

import concurrent.futures as cf
import os
import pickle
import shutil
import tempfile
from typing import Any, Callable, Iterable

from sweep.forking import ensure_fork_server
from workers.job import DataRef, Job, run_jobs


class Executor:
    """Base class; ``workers`` is the number of jobs run at once."""

    workers: int = 1
    #: seconds of work to put in one task when jobs are short (see ``sweep.run``): enough that the
    #: executor's own cost per task is small beside it
    task_seconds: float = 0.25

    def share(self, data: Any) -> Any:
        """A handle for ``data`` that can be passed with every job cheaply."""
        return data

    def submit(self, jobs: list[Job], handle: Any) -> Any:
        """A future of the list of results of ``jobs`` (one task; all on the dataset ``handle``)."""
        raise NotImplementedError

    def wait(self, futures: Iterable[Any], timeout: float) -> set[Any]:
        """The futures among ``futures`` that are finished, waiting at most ``timeout`` s for one."""
        done, _ = cf.wait(list(futures), timeout=timeout, return_when=cf.FIRST_COMPLETED)
        return set(done)

    def wake(self) -> None:
        """Make a :meth:`wait` in another thread return early (here: it returns at its timeout)."""

    def is_worker_death(self, exc: BaseException) -> bool:
        return False

    def blames_job(self, exc: BaseException) -> bool:
        """Whether a worker death ``exc`` counts as an attempt of the job (it was running there)."""
        return True

    def close(self, *, kill: bool = False) -> None:
        pass


class InProcessExecutor(Executor):
    """One job at a time in this process: the same code path, debuggable with pdb."""

    def submit(self, jobs: list[Job], handle: Any) -> cf.Future[Any]:
        future: cf.Future[Any] = cf.Future()
        future.set_result(run_jobs(jobs, handle))
        return future


class FileShare:
    """Datasets shipped once to pickle files in a scratch directory that worker processes on this
    host load and keep (:class:`workers.job.DataRef`, cached per process by fingerprint)."""

    def __init__(self) -> None:
        self.dir = tempfile.mkdtemp(prefix="foldsweep-data-")

    def share(self, data: Any) -> DataRef:
        path = os.path.join(self.dir, f"{data.fingerprint}.pickle")
        with open(path, "wb") as handle:
            pickle.dump(data, handle, protocol=pickle.HIGHEST_PROTOCOL)
        return DataRef(path, data.fingerprint)

    def remove(self) -> None:
        shutil.rmtree(self.dir, ignore_errors=True)


class JoblibExecutor(Executor):
    """Worker processes from joblib's loky backend (the embedded default)."""

    task_seconds = 1.0

    def __init__(self, workers: int) -> None:
        self.workers = workers
        self._get = lambda: _loky_pool(workers)
        self._pool = self._get()
        self._files = FileShare()

    def share(self, data: Any) -> DataRef:
        return self._files.share(data)

    def submit(self, jobs: list[Job], handle: Any) -> cf.Future[Any]:
        try:
            return self._pool.submit(run_jobs, jobs, handle)
        except RuntimeError:  # a broken pool after a worker died: start a fresh one
            self._pool = self._get()
            return self._pool.submit(run_jobs, jobs, handle)

    def is_worker_death(self, exc: BaseException) -> bool:
        from joblib.externals.loky.process_executor import BrokenProcessPool

        return isinstance(exc, BrokenProcessPool)

    def close(self, *, kill: bool = False) -> None:
        if kill:
            _shutdown_killing(self._pool)
        self._files.remove()


#: modules every worker process needs (imported by a fork server that had to start the standard way)
JOB_MODULES = ["numpy", "workers.job", "sweep.datasets",
               # workers exit without a last garbage collection; else they hold the driver's
               # stdout open a quarter of a second after it exited
               "sweep._quick_exit"]


#: what a loky worker imports besides the job code
LOKY_MODULES = ["joblib.externals.loky.process_executor", *JOB_MODULES]


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
    """loky's reusable pool of ``workers`` processes (the same one on every call while it lives),
    forked from the fork server."""
    from joblib.externals.loky import get_reusable_executor

    ensure_fork_server(LOKY_MODULES)
    return get_reusable_executor(max_workers=workers, timeout=60, context="forkserver")


def _joblib(workers: int, **options: Any) -> Executor:
    return InProcessExecutor() if workers == 1 else JoblibExecutor(workers)


def _dask(workers: int, scheduler: str | None = None, memory_limit: str | None = None, cluster: Any = None,
          **options: Any) -> Executor:
    """An existing scheduler's client, else the embedded cluster: in a process of its own
    (``cluster``, or one started now) reached through a relay, in this process if it cannot fork."""
    if not scheduler:
        from sweep.cluster_process import ClusterProcess

        process = cluster or ClusterProcess.start(workers, memory_limit)
        if process is not None:
            from sweep.relay import RelayedExecutor

            return RelayedExecutor(process, workers)
    from sweep.dask_executor import DaskExecutor

    return DaskExecutor(workers, scheduler=scheduler, memory_limit=memory_limit, **options)


EXECUTORS: dict[str, Callable[..., Executor]] = {
    "joblib": _joblib,
    "dask": _dask,
}


def make_executor(backend: str, workers: int, **options: Any) -> Executor:
    """The executor called ``backend`` with ``workers`` workers."""
    return EXECUTORS[backend](workers, **options)
