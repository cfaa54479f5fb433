"""The driver's side and the cluster process's side of a relayed executor.

The embedded dask cluster runs in a process of its own
(:mod:`sweep.cluster_process`), and so does its dask client: the driver
never imports distributed (about 0.4 s of CPU at every start, on the way to
the first job) and spends no CPU on the client's event loop. It sends its
tasks over a socket pair instead, and gets their outcomes back:

====================  ==========================================================
driver -> cluster     ``("submit", task, jobs, dataset handle)``
cluster -> driver     ``("ready",)`` or ``("failed", why)`` first, then
                      ``("done", task, results)`` or
                      ``("lost", task, kind, message, death, blamed)``;
                      ``("stopped", why)`` when it cannot go on
====================  ==========================================================

The embedded cluster's workers are on this host: the driver writes each dataset
once to a file that they load and keep (:class:`sweep.executors.FileShare`), so
no dataset goes through the relay or the scheduler, and the first task does not
wait for a scatter to every worker (70 ms, measured).

A task whose worker died arrives as :class:`TaskLost`, carrying the
cluster-side executor's verdict (a worker death? does it count as an attempt
of the job?), so the run loop treats it exactly as it would the engine's own
exception. The driver closing its end (or dying) ends the cluster process.
"""

from __future__ import annotations

import concurrent.futures as cf
import threading
from typing import Any

from sweep.errors import FoldsweepError
from sweep.executors import Executor, FileShare

#: seconds to wait for the cluster to come up
START_SECONDS = 120.0


class TaskLost(Exception):
    """A task that did not return results, as the cluster process saw it: the engine's exception
    ``kind`` and ``message``, whether its worker died, and whether that counts against the job."""

    def __init__(self, kind: str, message: str, death: bool, blamed: bool) -> None:
        super().__init__(message)
        self.kind, self.death, self.blamed = kind, death, blamed


class RelayedExecutor(Executor):
    """Runs tasks on an executor in another process, reached through ``process.connection``
    (see the module docstring); ``process`` is a :class:`sweep.cluster_process.ClusterProcess`."""

    #: dask's own cost per task is about 13 ms of CPU (7.5 ms in the cluster process: scheduler,
    #: client, nannies; 5.5 ms in the worker; measured), so short jobs go 2 s of work to a task
    #: (400 jobs of 50 ms: 0.08-0.14 s less wall time than with 1 s, measured)
    task_seconds = 2.0

    def __init__(self, process: Any, workers: int, start_seconds: float = START_SECONDS) -> None:
        self.process = process
        self.workers = workers
        self._conn = process.connection
        self._futures: dict[int, cf.Future[Any]] = {}
        self._lock = threading.Lock()
        self._next = 0
        self._gone: str | None = None
        first = self._first_message(start_seconds)
        if first[0] != "ready":
            process.kill()
            raise FoldsweepError(f"the embedded dask cluster did not start: {first[1]}")
        self._files = FileShare()
        self._reader = threading.Thread(target=self._read, name="foldsweep-relay", daemon=True)
        self._reader.start()

    def _first_message(self, timeout: float) -> tuple[Any, ...]:
        try:
            if not self._conn.poll(timeout):
                return ("failed", f"no answer in {timeout:g} s")
            return tuple(self._conn.recv())
        except (EOFError, OSError):
            return ("failed", "its process ended")

    def share(self, data: Any) -> Any:
        return self._files.share(data)

    def submit(self, jobs: list[Any], handle: Any) -> cf.Future[Any]:
        future: cf.Future[Any] = cf.Future()
        with self._lock:
            if self._gone:
                raise FoldsweepError(f"the embedded dask cluster stopped: {self._gone}")
            task, self._next = self._next, self._next + 1
            self._futures[task] = future
        self._send(("submit", task, jobs, handle))
        return future

    def _send(self, message: tuple[Any, ...]) -> None:
        try:
            self._conn.send(message)
        except OSError as exc:
            raise FoldsweepError(f"the embedded dask cluster stopped: {exc}") from None

    def _read(self) -> None:
        """The outcomes, as they arrive; when the cluster process is gone, every task still out
        is lost with it (a worker death that is not the job's fault)."""
        why = "its process ended"
        try:
            while True:
                message = self._conn.recv()
                if message[0] == "stopped":  # it cannot go on, and says why
                    why = message[1]
                    break
                with self._lock:
                    future = self._futures.pop(message[1], None)
                if future is None:  # not ours (cannot happen with this module's cluster side)
                    continue
                if message[0] == "done":
                    future.set_result(message[2])
                else:
                    future.set_exception(TaskLost(*message[2:]))
        except (EOFError, OSError):
            pass
        with self._lock:
            self._gone = why
            lost, self._futures = list(self._futures.values()), {}
        for future in lost:
            future.set_exception(TaskLost("ClusterGone", f"the embedded dask cluster stopped: {why}", True, False))

    def is_worker_death(self, exc: BaseException) -> bool:
        return isinstance(exc, TaskLost) and exc.death

    def blames_job(self, exc: BaseException) -> bool:
        return isinstance(exc, TaskLost) and exc.blamed

    def close(self, *, kill: bool = False) -> None:
        self.process.stop()  # the reader wakes up to the closed socket and ends
        self._reader.join(timeout=5)
        self._files.remove()


def serve(executor: Executor, conn: Any) -> None:
    """In the cluster process: run what the driver sends on ``executor`` and send back each
    outcome, until the driver closes ``conn`` (or dies)."""
    tasks: dict[Any, int] = {}  # future -> the driver's task number
    lock = threading.Lock()
    send_lock = threading.Lock()
    closed = threading.Event()

    def send(message: tuple[Any, ...]) -> None:
        with send_lock:
            try:
                conn.send(message)
            except OSError:  # the driver is gone: the reader sees it too
                closed.set()

    def read() -> None:
        try:
            while True:
                _, task, jobs, handle = conn.recv()
                try:
                    with lock:
                        tasks[executor.submit(jobs, handle)] = task
                except Exception as exc:  # noqa: BLE001 - the engine is broken: say so, and stop
                    send(("stopped", f"cannot submit a task: {type(exc).__name__}: {' '.join(str(exc).split())}"))
                    break
        except (EOFError, OSError):
            pass
        finally:
            closed.set()
            executor.wake()  # the loop below ends now, not at its next timeout

    reader = threading.Thread(target=read, name="foldsweep-relay", daemon=True)
    reader.start()
    while not closed.is_set():
        with lock:
            pending = list(tasks)
        # a future submitted after this snapshot still wakes the wait up, and is in the next one
        for future in executor.wait(pending, timeout=0.25):
            with lock:
                task = tasks.pop(future)
            send(_outcome(executor, task, future))


def _outcome(executor: Executor, task: int, future: Any) -> tuple[Any, ...]:
    try:
        return ("done", task, future.result())
    except (KeyboardInterrupt, SystemExit):
        raise
    except BaseException as exc:  # noqa: BLE001 - a worker death, a cancelled task, a bug
        return ("lost", task, type(exc).__name__, str(exc), executor.is_worker_death(exc),
                executor.blames_job(exc))
