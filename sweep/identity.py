"""A driver's identity, and whether the driver behind one is gone.

An identity is ``host:pid:token:boot:pidns:start``: the host name, the process
id, a random token, the kernel's boot id, the PID namespace and the process's
start time (in clock ticks since boot). The token makes every process instance
unique; the last three make a check of the pid meaningful. Another driver is
judged gone here only when all of these hold: same host, same boot, same PID
namespace as this process, and no process with that pid and that start time
exists. A driver in another PID namespace (another container on the same host),
on another host, or of an older identity format, is never judged so: only its
lease's expiry frees its jobs. Where ``/proc`` is missing (not Linux) or is not
this namespace's, the check is off and leases alone decide.
"""

from __future__ import annotations

import os
import socket
import uuid
from functools import lru_cache

#: "not known here" in an identity's fields
UNKNOWN = "-"


def owner_id() -> str:
    """The identity of this driver process (see the module docstring)."""
    pid = os.getpid()
    return ":".join([socket.gethostname(), str(pid), uuid.uuid4().hex[:12], _boot_id(), _pid_namespace(),
                     _start_time(pid) or UNKNOWN])


def is_gone(owner: str | None) -> bool:
    """Whether the driver ``owner`` certainly no longer runs (no owner at all counts as gone)."""
    if not owner:
        return True
    parts = owner.split(":")
    if len(parts) != 6:
        return False  # an identity of another format: judged by its lease alone
    host, pid, _token, boot, namespace, start = parts
    if UNKNOWN in (boot, namespace, start) or not pid.isdigit():
        return False
    if host != socket.gethostname() or boot != _boot_id() or namespace != _pid_namespace():
        return False
    return _start_time(int(pid)) != start  # None (no such process) or another process with that pid


@lru_cache(maxsize=1)
def _boot_id() -> str:
    try:
        with open("/proc/sys/kernel/random/boot_id") as handle:
            return handle.read().strip().replace(":", "") or UNKNOWN
    except OSError:
        return UNKNOWN


@lru_cache(maxsize=1)
def _pid_namespace() -> str:
    """This process's PID namespace, if ``/proc`` is this namespace's (else pids read there would be
    another namespace's)."""
    try:
        link = os.readlink("/proc/self/ns/pid")  # e.g. "pid:[4026531836]"
        with open("/proc/self/stat") as handle:
            own_pid = handle.read().split(" ", 1)[0]
    except OSError:
        return UNKNOWN
    if own_pid != str(os.getpid()):
        return UNKNOWN  # a /proc mounted for another namespace
    return link.replace("pid:", "").strip("[]") or UNKNOWN


def _start_time(pid: int) -> str | None:
    """The start time of process ``pid`` (field 22 of /proc/PID/stat), None if there is none."""
    try:
        with open(f"/proc/{pid}/stat") as handle:
            text = handle.read()
    except OSError:
        return None
    return text[text.rindex(")") + 2:].split()[19]  # the fields after the command name start at field 3
