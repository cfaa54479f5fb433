"""The embedded dask cluster in a process of its own, started before planning.

``foldsweep run --backend dask`` without ``--scheduler`` needs a
``distributed.LocalCluster``: a scheduler, a nanny per worker and the worker
processes. Starting one takes about 0.6 s, most of it importing distributed
and bringing up the scheduler, all Python code that would hold the driver's
GIL. :meth:`ClusterProcess.start` forks the driver at the very start of a
run (while it is single-threaded and has opened nothing) into a process
that starts the cluster there, on the other cores, while the driver loads
its datasets and plans; the driver's client then connects to it over
loopback TCP. The scheduler's per-task work also runs there, beside the
driver rather than inside it.

Lifetime: the cluster process lives while the driver holds the write end
of a pipe. :meth:`ClusterProcess.stop` closes it and the process closes
the cluster (the nannies stop their workers) on its own; when the driver dies, even by
SIGKILL, the pipe closes all the same. Ctrl-C is the driver's to handle:
the cluster process ignores SIGINT.
"""

from __future__ import annotations

import os
import select
import signal
import time
from typing import Any

from sweep.errors import FoldsweepError
from sweep.forking import can_fork, fork_call

#: seconds to wait for the cluster to come up, and for it to close once let go
START_SECONDS = 120.0
STOP_SECONDS = 15.0


class ClusterProcess:
    """Handle of a forked process running a LocalCluster (see the module docstring)."""

    def __init__(self, pid: int, address_r: int, alive_w: int) -> None:
        self.pid = pid
        self._address_r: int | None = address_r
        self._alive_w: int | None = alive_w
        self._address: str | None = None
        self._gone = False

    @classmethod
    def start(cls, workers: int, memory_limit: str | None) -> ClusterProcess | None:
        """Fork the cluster process now; None where forking is not safe or not possible here
        (:func:`sweep.forking.can_fork`)."""
        if not can_fork():
            return None
        _reap()
        address_r, address_w = os.pipe()
        alive_r, alive_w = os.pipe()

        def body() -> int:
            os.close(address_r)
            os.close(alive_w)
            return _serve(workers, memory_limit, address_w, alive_r)

        pid = fork_call(body)
        os.close(address_w)
        os.close(alive_r)
        return cls(pid, address_r, alive_w)

    def address(self, timeout: float = START_SECONDS) -> str:
        """The scheduler's address, once the cluster is up."""
        if self._address is None:
            line = _read_line(self._address_r, timeout) if self._address_r is not None else ""
            if self._address_r is not None:
                os.close(self._address_r)
                self._address_r = None
            if not line.startswith("tcp://"):
                self.kill()
                raise FoldsweepError("the embedded dask cluster did not start: "
                                     + (line or f"no answer in {timeout:g} s"))
            self._address = line
        return self._address

    def stop(self) -> None:
        """Let the process go: it closes the cluster on its own (the nannies stop their workers,
        which frees their semaphores and scratch directories), finishing its start first if need
        be, while the driver goes on. For a run that never used it (nothing to do, bad input) or
        once every result is committed. Nothing the second time."""
        if self._alive_w is None:
            return
        os.close(self._alive_w)
        self._alive_w = None
        _UNREAPED.append(self.pid)  # reaped by a later start (or gone with this process)
        self._gone = True  # no longer ours to signal: its pid may be reused once reaped

    def kill(self) -> None:
        """End the process now (its workers follow it); nothing once it has been reaped or let go."""
        if self._alive_w is not None:
            os.close(self._alive_w)
            self._alive_w = None
        if self._gone:
            return  # its pid may belong to another process by now
        try:
            os.kill(self.pid, signal.SIGKILL)
            os.waitpid(self.pid, 0)
        except (ProcessLookupError, ChildProcessError):
            pass
        self._gone = True


#: cluster processes let go without waiting for them (see ClusterProcess.stop)
_UNREAPED: list[int] = []


def _reap() -> None:
    """Collect the exit status of those that have ended, so that none stays a zombie."""
    for pid in list(_UNREAPED):
        try:
            done, _ = os.waitpid(pid, os.WNOHANG)
        except ChildProcessError:
            done = pid
        if done:
            _UNREAPED.remove(pid)


def start_for(spec_path: Any, backend: str, workers: int | None, scheduler: str | None) -> ClusterProcess | None:
    """The cluster process a run with these options needs (None: another backend, an existing
    scheduler, or a driver that cannot fork; it then starts its cluster itself). Cheap to call
    first thing: the spec is read (a bad one is reported before anything starts), nothing heavy
    is imported."""
    if backend != "dask" or scheduler:
        return None
    from sweep.spec import load_spec

    spec = load_spec(spec_path)
    return ClusterProcess.start(workers or os.cpu_count() or 1, spec.memory_limit)


def _serve(workers: int, memory_limit: str | None, address_w: int, alive_r: int) -> int:
    """In the cluster process: start the cluster, report its address (or why it did not start),
    close it when told."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        import dask

        from sweep.dask_executor import EMBEDDED_CONFIG, local_cluster

        dask.config.set(EMBEDDED_CONFIG)  # for this process's lifetime; the nannies pass it on
        cluster = local_cluster(workers, memory_limit)
    except Exception as exc:  # noqa: BLE001 - reported to the driver, which raises it
        _send(address_w, f"{type(exc).__name__}: {exc}")
        return 1
    _send(address_w, cluster.scheduler_address)
    while os.read(alive_r, 1):  # until the driver closes its end, or dies
        pass
    cluster.close(timeout=STOP_SECONDS)
    return 0


def _send(fd: int, line: str) -> None:
    """Write ``line`` for the driver; quietly nothing if it stopped listening (it has exited, or
    let the cluster go: the cluster is then closed all the same)."""
    try:
        os.write(fd, (" ".join(line.split()) + "\n").encode())
    except BrokenPipeError:
        pass
    finally:
        os.close(fd)


def _read_line(fd: int, timeout: float) -> str:
    data = b""
    deadline = time.monotonic() + timeout
    while not data.endswith(b"\n"):
        left = deadline - time.monotonic()
        if left <= 0 or not select.select([fd], [], [], left)[0]:
            break
        chunk = os.read(fd, 4096)
        if not chunk:
            break
        data += chunk
    return data.decode(errors="replace").strip()

