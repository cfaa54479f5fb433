"""The relay between the driver and the embedded cluster's process (``sweep.relay``), over a real
socket pair, with the cluster side served from a thread by an in-process executor:

- tasks come back with exactly the results of the same jobs run directly (common practice: a
  transport changes nothing it carries);
- an engine that can no longer submit makes the driver's task a worker death that is not the job's
  fault, and every later submit a one-line error that says why (instead of a loop of retries).
"""

from __future__ import annotations

import concurrent.futures as cf
import os
import socket
import threading
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from sweep.datasets import load_dataset
from sweep.errors import FoldsweepError
from sweep.executors import InProcessExecutor
from sweep.relay import RelayedExecutor, TaskLost, serve
from workers.job import Job, run_jobs
from workers.registry import get_worker


class _Peer:
    """What RelayedExecutor needs of a cluster process: its end of the socket pair, stop and kill."""

    def __init__(self, sock: socket.socket) -> None:
        from multiprocessing.connection import Connection

        self.sock = sock
        self.connection = Connection(os.dup(sock.fileno()))

    def stop(self) -> None:
        try:
            self.sock.shutdown(socket.SHUT_RDWR)
        except OSError:
            pass
        self.sock.close()
        self.connection.close()

    kill = stop


def _relay(executor: Any) -> tuple[RelayedExecutor, threading.Thread]:
    from multiprocessing.connection import Connection

    ours, theirs = socket.socketpair()
    conn = Connection(theirs.detach())

    def cluster_side() -> None:
        conn.send(("ready",))
        serve(executor, conn)
        conn.close()

    thread = threading.Thread(target=cluster_side, daemon=True)
    thread.start()
    return RelayedExecutor(_Peer(ours), workers=1, start_seconds=30), thread


def _jobs(data: Any, n: int) -> list[Job]:
    params = {name: p.default for name, p in get_worker("decision_tree").params.items()}
    return [Job(key=f"k{i}", worker="decision_tree", params=params, dataset="iris", fingerprint=data.fingerprint,
                repeat=0, fold=i, test_index=np.arange(i, 150, 3), time_limit=None) for i in range(n)]


@pytest.fixture(scope="module")
def iris() -> Any:
    return load_dataset({"name": "iris", "builtin": "iris"}, base_dir=Path("."), where="test")


def _scores(results: list[Any]) -> list[tuple[Any, ...]]:
    return [(r.key, r.ok, r.accuracy, r.kappa, r.train_accuracy) for r in results]


def test_tasks_come_back_with_the_results_of_the_jobs(iris: Any) -> None:
    relay, thread = _relay(InProcessExecutor())
    try:
        handle = relay.share(iris)
        jobs = _jobs(iris, 3)
        futures = [relay.submit([job], handle) for job in jobs]
        got = [r for f in futures for r in f.result(timeout=60)]
    finally:
        relay.close()
        thread.join(timeout=10)
    assert _scores(got) == _scores(run_jobs(jobs, iris))
    assert all(r.ok for r in got)


class _Breaks(InProcessExecutor):
    """Runs the first task, then cannot submit any more (as a client whose scheduler went away)."""

    def __init__(self) -> None:
        self.submitted = 0

    def submit(self, jobs: list[Job], handle: Any) -> cf.Future[Any]:
        self.submitted += 1
        if self.submitted > 1:
            raise RuntimeError("the scheduler went away")
        return super().submit(jobs, handle)


def test_an_engine_that_cannot_submit_stops_the_relay_with_its_reason(iris: Any) -> None:
    relay, thread = _relay(_Breaks())
    try:
        handle = relay.share(iris)
        first, second = (relay.submit([job], handle) for job in _jobs(iris, 2))
        assert first.result(timeout=60)[0].ok
        with pytest.raises(TaskLost) as lost:
            second.result(timeout=60)
        # a worker death that is not the job's fault: the run loop gives the job back, uncounted
        assert relay.is_worker_death(lost.value) and not relay.blames_job(lost.value)
        with pytest.raises(FoldsweepError, match=r"^the embedded dask cluster stopped: cannot submit a task: "
                                                 r"RuntimeError: the scheduler went away$"):
            relay.submit(_jobs(iris, 1), handle)
    finally:
        relay.close()
        thread.join(timeout=10)
