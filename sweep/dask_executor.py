"""The dask.distributed executor: an embedded LocalCluster, or an existing scheduler.

- Embedded (no address): a LocalCluster in the driver, worker *processes*, one
  thread each (the work is CPU-bound Python and numpy), a memory limit per
  worker (the spec's ``memory_limit``, else the machine's memory split evenly).
  It is closed to everyone but this run: TLS on loopback with credentials made
  for this run alone (``Security.temporary()``), so that no other local user can
  connect to it and run code as the sweep's user. Its workers are on this host:
  each dataset is written once to a file they load and keep
  (:class:`sweep.executor_base.FileShare`). Each worker process watches the
  driver and ends with it (:mod:`sweep.lifeline`).
- Existing cluster (``--scheduler tls://HOST:PORT`` or ``tcp://``): the jobs run
  wherever that scheduler places them; the worker count is the cluster's thread
  count. Its security settings come from dask's configuration
  (``distributed.comm.tls.*``, e.g. in ``~/.config/dask/`` or ``DASK_*``
  variables). Each dataset is scattered once to every worker
  (``broadcast=True``); should every copy die with its workers, it is scattered
  again before the next job that needs it.

The embedded scheduler does not retry a task whose worker died
(``allowed-failures = 0``): the run loop's own attempt accounting decides
(:mod:`sweep.loop_core`). A task cancelled for another reason (its dataset's
copies were lost, the scheduler restarted) goes back without counting an
attempt against the job.

Settings (``EMBEDDED_CONFIG``) turn off what only a dashboard would show: with
dask's defaults, two idle workers and their scheduler use about 20 % of a core
(measured: driver 9 %, workers 11.5 %; with these settings 1.3 % and 1.0 %), CPU
taken from the jobs.
"""

from __future__ import annotations

import concurrent.futures as cf
import os
import queue
import signal
from typing import Any, Iterable

from sweep.errors import StoreError
from sweep.executor_base import Executor, FileShare
from sweep.loop_core import Verdict
from workers.job import Job, run_jobs

#: seconds to wait for a worker before scattering a dataset again
WORKER_WAIT_SECONDS = 120

#: dask settings for the embedded cluster, in force while the executor lives (a worker that the
#: nanny restarts gets them too)
EMBEDDED_CONFIG: dict[str, Any] = {
    # the run loop counts attempts itself, and runs a suspect job alone
    "distributed.scheduler.allowed-failures": 0,
    # a job may start processes of its own (e.g. a worker that uses joblib)
    "distributed.worker.daemon": False,
    # each worker process ends with the driver, however the driver ends
    "distributed.worker.preload": ["sweep.lifeline"],
    # checks that only feed the dashboard or a warning, at dask's default 20 ms to 500 ms
    "distributed.admin.tick.interval": "1s",
    "distributed.admin.system-monitor.interval": "5s",
    "distributed.worker.profile.enabled": False,
    # no HTTP endpoints (metrics, health, the dashboard's pages): importing and serving them costs
    # 0.3 s of CPU per run (measured), and they would be reachable without the TLS credentials
    "distributed.scheduler.http.routes": [],
    "distributed.worker.http.routes": [],
    # the nanny's check of the worker's memory against its limit (default 100 ms)
    "distributed.worker.memory.monitor-interval": "500ms",
}


class DaskExecutor(Executor):
    #: the scheduler, the client and the nanny together spend about 13 ms of CPU per task
    #: (measured): short jobs go 2 s of work to a task
    task_seconds = 2.0

    def __init__(self, workers: int, scheduler: str | None = None, memory_limit: str | None = None,
                 **_: Any) -> None:
        import dask
        from distributed import Client

        self.cluster: Any = None
        self._config: Any = None
        self._files: FileShare | None = None
        #: the keys of the tasks that finished (their done-callbacks), and the futures not yet handed back:
        #: a future the run loop has collected is referenced nowhere any more, so dask forgets its
        #: result (else a worker's death later makes the scheduler compute it again)
        self._finished: queue.SimpleQueue[Any] = queue.SimpleQueue()
        self._futures: dict[Any, Any] = {}
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
        self.client = Client(self.cluster)  # with the cluster's credentials
        self.workers = workers
        self._files = FileShare()

    def share(self, data: Any) -> Any:
        if self._files is not None:
            return self._files.share(data)
        future = self.client.scatter(data, broadcast=True, hash=False)
        self._shared[data.fingerprint] = (data, future)
        return future

    def submit(self, jobs: list[Job], handle: Any) -> Any:
        future = self.client.submit(run_jobs, jobs, self._current(jobs[0].fingerprint, handle), pure=False,
                                    retries=0)
        self._futures[future.key] = future
        future.add_done_callback(lambda f: self._finished.put(f.key))  # also when it errs or is cancelled
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
        self._keep_workers()
        keys: set[Any] = set()
        try:
            keys.add(self._finished.get(timeout=timeout))
            while True:
                keys.add(self._finished.get_nowait())
        except queue.Empty:
            pass
        pending = set(futures)
        done = {self._futures.pop(k) for k in keys if k in self._futures}
        return (done | {f for f in pending if f.done()}) & pending

    def _keep_workers(self) -> None:
        """Bring the embedded cluster back to its size should nannies have closed (seen on a loaded
        machine after several worker deaths in a row: the run then waited for ever)."""
        if self.cluster is not None and len(self.cluster.workers) < self.workers:
            self.cluster.scale(self.workers)

    def forget(self, future: Any) -> None:
        # its result stays on a worker while any client holds the key: released now, a later death of
        # that worker does not make the scheduler compute the task again
        future.release()

    def verdict(self, exc: BaseException) -> Verdict:
        # KilledWorker: a worker died with the task assigned to it; a worker may hold more than the
        # task it runs, so which one killed it is not known. Cancelled or a closed connection: the
        # task's data or the scheduler went away, no fault of the job.
        if isinstance(exc, cf.CancelledError) or type(exc).__name__ in ("CancelledError", "CommClosedError"):
            return Verdict.NOT_JOB
        return Verdict.UNKNOWN

    def close(self, *, kill: bool = False, timeout: float | None = None) -> None:
        if kill and self.cluster is not None:  # stopped: the jobs in flight are given back, not finished
            for nanny in list(self.cluster.workers.values()):
                pid = getattr(nanny, "pid", None)
                if pid:
                    try:
                        os.kill(pid, signal.SIGKILL)
                    except ProcessLookupError:
                        pass
        self.client.close()
        if self.cluster is not None:
            self.cluster.close(timeout=timeout)
        if self._files is not None:
            self._files.remove()
        if self._config is not None:
            self._config.__exit__(None, None, None)


def local_cluster(workers: int, memory_limit: str | None) -> Any:
    """The embedded cluster: TLS on loopback with credentials made for it alone."""
    from distributed import LocalCluster
    from distributed.security import Security

    return LocalCluster(n_workers=workers, threads_per_worker=1, processes=True, host="127.0.0.1",
                        protocol="tls", security=Security.temporary(), dashboard_address=None,
                        scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},  # never the shared 8787
                        memory_limit=memory_limit or "auto", silence_logs=50)
