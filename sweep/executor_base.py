"""The executor interface, below its implementations (:mod:`sweep.executors`,
:mod:`sweep.dask_executor`): where fold jobs run.

An executor ships each dataset once (:meth:`Executor.share`), submits
``workers.job.run_jobs`` calls and hands back futures with the
``concurrent.futures`` interface. A future that fails instead of returning
results is judged by :meth:`Executor.verdict` (:class:`sweep.loop_core.Verdict`):
whose fault the loss is, which decides whether the job is charged an attempt.
"""

from __future__ import annotations

import concurrent.futures as cf
import fcntl
import glob
import os
import pickle
import shutil
import tempfile
from typing import Any, Iterable

from sweep.loop_core import Verdict
from workers.job import DataRef, Job

#: scratch folders of the datasets shipped as files (see FileShare)
SCRATCH_PREFIX = "foldsweep-data-"


class Executor:
    """Base class; ``workers`` is the number of jobs run at once."""

    workers: int = 1
    #: seconds of work to put in one task when jobs are short (see ``sweep.loop_core``): enough that
    #: the executor's own cost per task is small beside it
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

    def verdict(self, exc: BaseException) -> Verdict:
        """Whose fault a task that raised ``exc`` instead of returning is: by default a worker
        died and which task was running on it is not known."""
        return Verdict.UNKNOWN

    def forget(self, future: Any) -> None:
        """The run loop has read ``future``'s outcome: the executor may drop what it keeps for it."""

    def close(self, *, kill: bool = False) -> None:
        pass


class FileShare:
    """Datasets shipped once to pickle files in a scratch folder that worker processes on this
    host load and keep (:class:`workers.job.DataRef`, cached per process by fingerprint).

    The folder holds a lock (``flock``) on its ``.lock`` file while its driver lives; a new
    FileShare removes the folders whose lock is free, those of drivers that died (the kernel
    frees the lock of a process however it ends, and it works across PID namespaces)."""

    def __init__(self) -> None:
        remove_orphaned_scratch()
        self.dir = tempfile.mkdtemp(prefix=SCRATCH_PREFIX)
        self._lock = os.open(os.path.join(self.dir, ".lock"), os.O_CREAT | os.O_WRONLY, 0o600)
        fcntl.flock(self._lock, fcntl.LOCK_EX)

    def share(self, data: Any) -> DataRef:
        path = os.path.join(self.dir, f"{data.fingerprint}.pickle")
        with open(path, "wb") as handle:
            pickle.dump(data, handle, protocol=pickle.HIGHEST_PROTOCOL)
        return DataRef(path, data.fingerprint)

    def remove(self) -> None:
        shutil.rmtree(self.dir, ignore_errors=True)
        if self._lock >= 0:
            os.close(self._lock)
            self._lock = -1


def remove_orphaned_scratch() -> int:
    """Remove the scratch folders of drivers that are gone (their lock is free); returns how many."""
    removed = 0
    for folder in glob.glob(os.path.join(tempfile.gettempdir(), SCRATCH_PREFIX + "*")):
        try:
            fd = os.open(os.path.join(folder, ".lock"), os.O_WRONLY)
        except OSError:
            continue  # being made right now, or not ours to judge
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            continue  # its driver lives
        finally:
            os.close(fd)  # also frees the lock taken just now
        shutil.rmtree(folder, ignore_errors=True)
        removed += 1
    return removed
