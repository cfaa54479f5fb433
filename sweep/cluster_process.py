"""The embedded dask cluster in a process of its own, started before planning.

``foldsweep run --backend dask`` without ``--scheduler`` needs a
``distributed.LocalCluster``: a scheduler, a nanny per worker and the worker
processes, and a client. Starting them takes about a second of CPU, most
of it importing distributed and bringing up the scheduler, all Python code
that would hold the driver's GIL. :meth:`ClusterProcess.start` forks the
driver at the very start of a run (while it is single-threaded and has
imported and opened almost nothing) into a process that starts the cluster
and its client there, on the other cores, while the driver loads its
datasets and plans. The driver then sends its tasks over a socket pair
(:mod:`sweep.relay`): it never imports distributed itself, and the
scheduler's and the client's per-task work runs beside the driver rather
than inside it.

Lifetime: the cluster process lives while the driver holds its end of the
socket pair. :meth:`ClusterProcess.stop` closes it and the process closes
the cluster (the nannies stop their workers) on its own; when the driver
dies, even by SIGKILL, the socket closes all the same. Ctrl-C is the
driver's to handle: the cluster process ignores SIGINT.
"""

from __future__ import annotations

import os
import signal
import socket
from typing import Any

from sweep.forking import can_fork, fork_call

#: seconds for the cluster to close once let go
STOP_SECONDS = 15.0


class ClusterProcess:
    """Handle of a forked process running a LocalCluster and its client (see the module
    docstring); ``connection`` is the driver's end of the socket pair (:mod:`sweep.relay`)."""

    def __init__(self, pid: int, sock: socket.socket) -> None:
        from multiprocessing.connection import Connection

        self.pid = pid
        self._sock: socket.socket | None = sock
        self.connection = Connection(os.dup(sock.fileno()))
        self._gone = False

    @classmethod
    def start(cls, workers: int, memory_limit: str | None) -> ClusterProcess | None:
        """Fork the cluster process now; None where forking is not safe or not possible here
        (:func:`sweep.forking.can_fork`)."""
        if not can_fork():
            return None
        _reap()
        ours, theirs = socket.socketpair()

        def body() -> int:
            ours.close()
            return _serve(workers, memory_limit, theirs)

        pid = fork_call(body)
        theirs.close()
        return cls(pid, ours)

    def stop(self) -> None:
        """Let the process go: it closes the cluster on its own (the nannies stop their workers,
        which frees their semaphores and scratch directories), finishing its start first if need
        be, while the driver goes on. For a run that never used it (nothing to do, bad input) or
        once every result is committed. Nothing the second time."""
        if self._sock is None:
            return
        self._close()
        _UNREAPED.append(self.pid)  # reaped by a later start (or gone with this process)
        self._gone = True  # no longer ours to signal: its pid may be reused once reaped

    def kill(self) -> None:
        """End the process now (its workers follow it); nothing once it has been reaped or let go."""
        self._close()
        if self._gone:
            return  # its pid may belong to another process by now
        try:
            os.kill(self.pid, signal.SIGKILL)
            os.waitpid(self.pid, 0)
        except (ProcessLookupError, ChildProcessError):
            pass
        self._gone = True

    def _close(self) -> None:
        if self._sock is None:
            return
        try:
            self._sock.shutdown(socket.SHUT_RDWR)  # wakes a thread blocked reading the connection
        except OSError:
            pass
        self._sock.close()
        self._sock = None
        self.connection.close()


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
    first thing: only the spec's ``memory_limit`` is read and checked here (a spec that is not
    TOML is reported before anything starts), nothing heavy is imported."""
    if backend != "dask" or scheduler:
        return None
    from sweep.spec import read_memory_limit

    memory_limit = read_memory_limit(spec_path)
    return ClusterProcess.start(workers or os.cpu_count() or 1, memory_limit)


def _serve(workers: int, memory_limit: str | None, sock: socket.socket) -> int:
    """In the cluster process: start the cluster and its client, say so (or why they did not
    start), relay the driver's tasks until it closes its end, close the cluster."""
    from multiprocessing.connection import Connection

    signal.signal(signal.SIGINT, signal.SIG_IGN)
    conn = Connection(sock.detach())
    try:
        from sweep.dask_executor import DaskExecutor
        from sweep.relay import serve

        executor = DaskExecutor(workers, memory_limit=memory_limit)
    except Exception as exc:  # noqa: BLE001 - reported to the driver, which raises it
        _send(conn, ("failed", " ".join(f"{type(exc).__name__}: {exc}".split())))
        return 1
    if _send(conn, ("ready",)):
        serve(executor, conn)
    conn.close()
    executor.close(timeout=STOP_SECONDS)
    return 0


def _send(conn: Any, message: tuple[Any, ...]) -> bool:
    """Send ``message`` to the driver; False if it stopped listening (it has exited, or let the
    cluster go: the cluster is then closed all the same)."""
    try:
        conn.send(message)
        return True
    except OSError:
        return False
