"""The dask.distributed executor: an embedded LocalCluster, or an existing scheduler.

``foldsweep run --backend dask`` runs the embedded cluster and this executor in a process of
their own where it can (:mod:`sweep.cluster_process`, reached through :mod:`sweep.relay`), in
the driver where it cannot fork safely; with ``--scheduler`` this executor is in the driver.

- Embedded (no address): worker *processes*, one thread each (the work is
  CPU-bound Python and numpy), on loopback TCP, a memory limit per worker
  (the spec's ``memory_limit``, else the machine's memory split evenly).
- Existing cluster (``--scheduler tcp://HOST:PORT``): the jobs run wherever
  that scheduler places them; the worker count is the cluster's thread count.

Each dataset given to :meth:`DaskExecutor.share` is scattered once to every
worker (``broadcast=True``) and every job refers to it, so no dataset
travels with each job (the embedded cluster's own process is handed files
instead: :mod:`sweep.relay`). A worker that
starts later (a restart, a new batch job) fetches it from a peer; should
every copy die with its workers, the dataset is scattered again before the
next job that needs it. The run loop keeps a bounded window of futures in
flight. The embedded scheduler does not retry a task whose worker died
(``allowed-failures = 0``): the run loop's own attempt accounting decides,
and runs a retried job alone so that a job that kills its worker is
identified exactly. A task cancelled for another reason (its dataset's
copies were lost, the scheduler restarted) goes back without counting an
attempt against the job.

The embedded cluster's worker processes are forked from a server process
that has already imported what a worker needs (:mod:`sweep.forking`). Its
settings (``EMBEDDED_CONFIG``) turn off what only a dashboard would show: with dask's defaults, two idle workers and their
scheduler use about 20 % of a core (measured: driver 9 %, workers 11.5 %;
with these settings 1.3 % and 1.0 %), CPU taken from the jobs.
"""

from __future__ import annotations

import concurrent.futures as cf
import queue
from typing import Any, Iterable

from sweep.errors import StoreError
from sweep.executors import JOB_MODULES, Executor
from sweep.forking import ensure_fork_server
from workers.job import Job, run_jobs

#: seconds to wait for a worker before scattering a dataset again
WORKER_WAIT_SECONDS = 120

#: dask settings for the embedded cluster, in force while the executor lives (a worker that the
#: nanny restarts gets them too)
EMBEDDED_CONFIG: dict[str, Any] = {
    # the run loop counts attempts itself, and runs a retried job alone
    "distributed.scheduler.allowed-failures": 0,
    # a job may start processes of its own (e.g. a worker that uses joblib)
    "distributed.worker.daemon": False,
    # workers fork from a server that has the imports done (see sweep.forking)
    "distributed.worker.multiprocessing-method": "forkserver",
    # checks that only feed the dashboard or a warning, at dask's default 20 ms to 500 ms
    "distributed.admin.tick.interval": "1s",
    "distributed.admin.system-monitor.interval": "5s",
    "distributed.worker.profile.enabled": False,
    # no HTTP endpoints (metrics, health, the dashboard's pages): nobody can reach this cluster's
    # random loopback ports, and importing and serving them costs 0.3 s of CPU per run (measured)
    "distributed.scheduler.http.routes": [],
    "distributed.worker.http.routes": [],
    # the nanny's check of the worker's memory against its limit (default 100 ms)
    "distributed.worker.memory.monitor-interval": "500ms",
}

#: what a dask worker process imports besides the job code (see sweep.forking)
WORKER_MODULES = ["distributed", "distributed.nanny", "distributed.worker", *JOB_MODULES]


class DaskExecutor(Executor):
    #: the scheduler, the client and the nanny together spend about 13 ms of CPU per task (as in
    #: sweep.relay): short jobs go 2 s of work to a task
    task_seconds = 2.0

    def __init__(self, workers: int, scheduler: str | None = None, memory_limit: str | None = None,
                 **_: Any) -> None:
        import dask
        from distributed import Client

        self.cluster: Any = None
        self._config: Any = None
        self._finished: queue.SimpleQueue[Any] = queue.SimpleQueue()
        #: fingerprint -> (dataset, the future of its scattered copies)
        self._shared: dict[str, tuple[Any, Any]] = {}
        if scheduler:
            try:
                self.client = Client(scheduler)  # waits distributed.comm.timeouts.connect (30 s)
            except (OSError, TimeoutError) as exc:
                raise StoreError(f"--scheduler {scheduler}: cannot reach the dask scheduler: {exc}") from None
            self.workers = max(1, sum(self.client.nthreads().values()))
            return
        self._config = dask.config.set(EMBEDDED_CONFIG)  # while the cluster lives
        self.cluster = local_cluster(workers, memory_limit)
        self.client = Client(self.cluster)
        self.workers = workers

    def share(self, data: Any) -> Any:
        future = self.client.scatter(data, broadcast=True, hash=False)
        self._shared[data.fingerprint] = (data, future)
        return future

    def submit(self, jobs: list[Job], handle: Any) -> Any:
        future = self.client.submit(run_jobs, jobs, self._current(jobs[0].fingerprint, handle), pure=False,
                                    retries=0)
        future.add_done_callback(self._finished.put)  # also when it errs or is cancelled
        return future

    def _current(self, fingerprint: str, handle: Any) -> Any:
        data, future = self._shared.get(fingerprint, (None, handle))
        if data is not None and future.status != "finished":  # every copy died with its workers
            self.client.wait_for_workers(1, timeout=WORKER_WAIT_SECONDS)  # restarting ones come back
            future = self.client.scatter(data, broadcast=True, hash=False)
            self._shared[fingerprint] = (data, future)
        return future

    def wait(self, futures: Iterable[Any], timeout: float) -> set[Any]:
        # the finished futures arrive through their done-callbacks (see submit): waiting costs the
        # scheduler's event loop nothing, where distributed.wait sets up a waiter per future per call
        pending = set(futures)
        done = {f for f in pending if f.done()}
        try:
            if not done:
                done.add(self._finished.get(timeout=timeout))
            while True:
                done.add(self._finished.get_nowait())
        except queue.Empty:
            pass
        return done & pending  # the others were collected already (through the first line)

    def wake(self) -> None:
        """Make a :meth:`wait` in another thread return now (with what it has)."""
        self._finished.put(None)  # never among the futures waited for

    def is_worker_death(self, exc: BaseException) -> bool:
        from distributed.scheduler import KilledWorker

        return isinstance(exc, (KilledWorker, cf.CancelledError)) or type(exc).__name__ == "CommClosedError"

    def blames_job(self, exc: BaseException) -> bool:
        from distributed.scheduler import KilledWorker

        return isinstance(exc, KilledWorker)

    def close(self, *, kill: bool = False, timeout: float | None = None) -> None:
        self.client.close()
        if self.cluster is not None:
            self.cluster.close(timeout=timeout)
        if self._config is not None:
            self._config.__exit__(None, None, None)


def local_cluster(workers: int, memory_limit: str | None) -> Any:
    """The embedded cluster, in this process: the cluster process (:mod:`sweep.cluster_process`), or
    a driver that cannot fork it off."""
    import distributed.nanny  # noqa: F401 - in this process, so in a fork server made from it
    import distributed.utils
    import distributed.versions
    import distributed.worker  # noqa: F401
    from distributed import LocalCluster

    # the package versions every worker reports when it registers and the scheduler and client
    # check: importlib.metadata lookups, cached per process, 30-60 ms each (measured); looked up once
    # here, before the fork server is forked, every worker starts with them
    distributed.versions.get_versions()
    ensure_fork_server(WORKER_MODULES)
    distributed.utils._forkserver_preload_set = True  # the preload is ours (no pandas import here)
    # the scheduler's HTTP server on a free loopback port: never the shared 8787
    return LocalCluster(n_workers=workers, threads_per_worker=1, processes=True, host="127.0.0.1",
                        protocol="tcp", dashboard_address=None,
                        scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
                        memory_limit=memory_limit or "auto", silence_logs=50)
