"""The fork server that worker processes (loky's, the embedded dask cluster's) start from.

Worker processes use multiprocessing's ``forkserver`` start method: each is
forked from a server process instead of being a fresh interpreter that
imports numpy, the job code and (for dask) distributed all over again, about
0.3 to 1 s of CPU per worker, taken from the jobs on a small machine.

:func:`ensure_fork_server` makes that server a fork of the driver itself,
taken while the driver is still single-threaded, just before the executor
starts: everything the driver imported is then there for free, at the cost
of a fork. Where that cannot be done safely (another thread already runs,
or the interpreter's fork server internals are not the ones this was
written against: CPython 3.9 to 3.13), the standard fork server starts
instead, importing ``modules`` once.

Workers therefore see the environment variables as they were when the
server started (the first executor of a process), not later changes.
"""

from __future__ import annotations

import os
import socket
import sys
import threading
from typing import Callable

#: the attributes of multiprocessing.forkserver.ForkServer a driver-made server must set
_SERVER_STATE = ("_forkserver_address", "_forkserver_alive_fd", "_forkserver_pid")


def can_fork() -> bool:
    """Whether this process may fork now: it can, and no other thread runs (a fork could copy a
    lock that another thread holds, and the child would wait on it for ever)."""
    return hasattr(os, "fork") and threading.active_count() == 1


def fork_call(body: Callable[[], int]) -> int:
    """Fork; the child runs ``body`` and exits with the code it returns (or raises as
    ``SystemExit``), never running the parent's exit handlers nor writing its buffered output.
    Returns the child's pid."""
    sys.stdout.flush()  # nothing buffered gets written twice
    sys.stderr.flush()
    pid = os.fork()
    if pid == 0:
        code = 1
        try:
            code = body()
        except SystemExit as stop:
            code = stop.code if isinstance(stop.code, int) else 0
        finally:
            os._exit(code)
    return pid


def ensure_fork_server(modules: list[str]) -> None:
    """Make sure the fork server runs: a fork of this process if possible, else a fresh one
    that imports ``modules``."""
    if not _fork_server_here():
        start_fork_server(modules)


def start_fork_server(modules: list[str]) -> None:
    """Start the standard fork server, which imports ``modules`` once (idempotent; the first call
    fixes the list)."""
    import multiprocessing
    from multiprocessing import forkserver

    multiprocessing.get_context("forkserver").set_forkserver_preload(modules)
    forkserver.ensure_running()


def _fork_server_here() -> bool:
    """Fork this process into the fork server; False where that is not safe (see the module)."""
    from multiprocessing import connection, forkserver, resource_tracker, util

    server = forkserver._forkserver
    if not (3, 9) <= sys.version_info[:2] <= (3, 13) or not all(hasattr(server, a) for a in _SERVER_STATE):
        return False
    if server._forkserver_pid is not None:
        forkserver.ensure_running()  # already made (by us or the standard way): restarted if it died
        return True
    if not can_fork():
        return False
    resource_tracker.ensure_running()  # before the fork, so that server and workers share it
    address = connection.arbitrary_address("AF_UNIX")
    with socket.socket(socket.AF_UNIX) as listener:
        listener.bind(address)
        if not util.is_abstract_socket_namespace(address):
            os.chmod(address, 0o600)
        listener.listen()
        # every client holds the write end of the "alive" pipe: when all are gone, the server stops
        alive_r, alive_w = os.pipe()

        def serve() -> int:  # until the driver and its workers are gone (it ends with SystemExit)
            os.close(alive_w)
            forkserver.main(listener.fileno(), alive_r, [])
            return 0

        pid = fork_call(serve)
        os.close(alive_r)
    server._forkserver_address = address
    server._forkserver_alive_fd = alive_w
    server._forkserver_pid = pid
    return True
