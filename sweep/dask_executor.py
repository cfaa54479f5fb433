"""The dask.distributed executor: an embedded LocalCluster, or an existing scheduler.

- Embedded (no address): worker *processes*, one thread each (the work is
  CPU-bound Python and numpy), on loopback TCP, a memory limit per worker
  (the spec's ``memory_limit``, else the machine's memory split evenly).
- Existing cluster (``--scheduler tcp://HOST:PORT``): the jobs run wherever
  that scheduler places them; the worker count is the cluster's thread count.

Each dataset is scattered once to every worker (``broadcast=True``) and
every job refers to it, so no dataset travels with each job. The run loop
keeps a bounded window of futures in flight. The embedded scheduler does not
retry a task whose worker died (``allowed-failures = 0``): the run loop's own
attempt accounting decides, and runs a retried job alone so that a job that
kills its worker is identified exactly.
"""

from __future__ import annotations

import concurrent.futures as cf
from typing import Any, Iterable

from sweep.errors import StoreError
from sweep.executors import Executor
from workers.job import Job, run_job


class DaskExecutor(Executor):
    def __init__(self, workers: int, scheduler: str | None = None, memory_limit: str | None = None,
                 **_: Any) -> None:
        import dask
        from distributed import Client, LocalCluster

        self.cluster = None
        if scheduler:
            try:
                self.client = Client(scheduler, timeout="20s")
            except (OSError, TimeoutError) as exc:
                raise StoreError(f"--scheduler {scheduler}: cannot reach the dask scheduler: {exc}") from None
            self.workers = max(1, sum(self.client.nthreads().values()))
        else:
            with dask.config.set({"distributed.scheduler.allowed-failures": 0,
                                  "distributed.worker.daemon": False}):
                self.cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                            host="127.0.0.1", protocol="tcp", dashboard_address=None,
                                            memory_limit=memory_limit or "auto", silence_logs=50)
                self.client = Client(self.cluster)
            self.workers = workers

    def share(self, data: Any) -> Any:
        return self.client.scatter(data, broadcast=True, hash=False)

    def submit(self, job: Job, handle: Any) -> Any:
        return self.client.submit(run_job, job, handle, pure=False, retries=0)

    def wait(self, futures: Iterable[Any], timeout: float) -> set[Any]:
        from distributed import wait

        futures = list(futures)
        try:
            done, _ = wait(futures, timeout=timeout, return_when="FIRST_COMPLETED")
        except (TimeoutError, cf.TimeoutError):
            return set()
        return set(done)

    def is_worker_death(self, exc: BaseException) -> bool:
        from distributed.scheduler import KilledWorker

        return isinstance(exc, (KilledWorker, cf.CancelledError)) or type(exc).__name__ in (
            "FutureCancelledError", "CommClosedError")

    def close(self, *, kill: bool = False) -> None:
        self.client.close()
        if self.cluster is not None:
            self.cluster.close()
