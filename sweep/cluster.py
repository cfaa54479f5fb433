"""Cluster helpers: refusing SQLite on network file systems, and launching dask workers on SLURM or PBS.

SQLite's locking is unreliable on network file systems (NFS, Lustre, SMB
and the like; see SQLite's own documentation, "SQLite Over a Network"):
several hosts sharing one SQLite file can corrupt it. For many hosts use a
PostgreSQL store; this module refuses an SQLite store on such a mount when
``/proc/mounts`` shows one.

Launch recipes (the optional extra ``foldsweep[cluster]``, dask-jobqueue):
each batch job runs ``cores`` dask worker processes of one thread each (the
fold jobs are CPU-bound Python), with ``memory`` split between them, and
every worker retires on its own a little before the batch system's wall
time (``--lifetime`` below the wall time, ``--lifetime-stagger`` so that
they do not all leave at once). A worker that retires hands its running job
back to the scheduler, which runs it elsewhere; a worker the batch system
kills anyway is a worker death, and the run loop re-queues what it held.
Jobs are never lost either way, only re-run. ::

    python -m sweep.cluster slurm --scheduler tcp://LOGIN:8786 --cores 4 --memory 16GiB --walltime 02:00:00
        prints a job script; submit it as often as wanted (sbatch), and run
        foldsweep run SPEC --backend dask --scheduler tcp://LOGIN:8786
    python -m sweep.cluster slurm --serve --jobs 10 --cores 4 --memory 16GiB --walltime 02:00:00
        starts the scheduler here, submits 10 batch jobs, prints the --scheduler address; Ctrl-C ends it

From Python: :func:`cluster_script` (the text) and :func:`make_cluster` (a
live dask-jobqueue cluster, whose ``job_script()`` is the same recipe).
"""

from __future__ import annotations

import argparse
import os
import re
import sys
from pathlib import Path
from typing import Any, Sequence

from sweep.errors import StoreError

NETWORK_FILE_SYSTEMS = frozenset({"nfs", "nfs4", "lustre", "cifs", "smbfs", "smb3", "fuse.sshfs",
                                  "gpfs", "beegfs", "ceph", "glusterfs", "fuse.glusterfs", "9p"})


def mount_type(path: str | Path, mounts: str = "/proc/mounts") -> str | None:
    """The file system type of the mount holding ``path``, or None when it cannot be told."""
    try:
        with open(mounts) as handle:
            table = [line.split()[:3] for line in handle if len(line.split()) >= 3]
    except OSError:
        return None
    target = os.path.realpath(path)
    best, kind = "", None
    for _, point, fstype in table:
        point = point.replace("\\040", " ")
        if (target == point or target.startswith(point.rstrip("/") + "/")) and len(point) >= len(best):
            best, kind = point, fstype
    return kind


def refuse_network_sqlite(url: str, mounts: str = "/proc/mounts") -> None:
    """Raise :class:`StoreError` for an SQLite store on a network file system."""
    if not url.startswith("sqlite:///"):
        return
    path = Path(url[len("sqlite:///"):])
    kind = mount_type(path.parent if not path.exists() else path, mounts)
    if kind in NETWORK_FILE_SYSTEMS:
        raise StoreError(f"{path}: an SQLite store on a network file system ({kind}) can be corrupted by "
                         "concurrent access; use a local path, or a PostgreSQL URL for several hosts")


# ---- launch recipes (dask-jobqueue) -----------------------------------------------------------

#: batch systems with a recipe, and the shell variable holding each batch job's id
KINDS = {"slurm": "SLURM_JOB_ID", "pbs": "PBS_JOBID"}
#: a worker retires this share of the wall time early (at least MIN_MARGIN_SECONDS)
MARGIN_SHARE = 0.1
MIN_MARGIN_SECONDS = 300


def parse_walltime(text: str) -> int:
    """Seconds in a batch wall time: ``"HH:MM:SS"``, ``"MM:SS"``, ``"MM"``, ``"D-HH"``, ``"D-HH:MM"``, ``"D-HH:MM:SS"``.

    >>> parse_walltime("02:00:00"), parse_walltime("1-00:30:00"), parse_walltime("90")
    (7200, 88200, 5400)
    """
    match = re.fullmatch(r"(?:(\d+)-)?(\d+)(?::(\d+))?(?::(\d+))?", text.strip())
    if not match:
        raise StoreError(f"walltime {text!r}: expected HH:MM:SS, MM:SS, MM, D-HH, D-HH:MM or D-HH:MM:SS")
    days, *parts = match.groups()
    numbers = [int(p) for p in parts if p is not None]
    if len(numbers) == 1:  # a bare number is minutes, after a day it is hours (as sbatch -t reads them)
        seconds = (3600 if days else 60) * numbers[0]
    elif len(numbers) == 2:
        seconds = (3600 if days else 60) * numbers[0] + (60 if days else 1) * numbers[1]
    else:
        seconds = 3600 * numbers[0] + 60 * numbers[1] + numbers[2]
    return seconds + 86400 * int(days or 0)


def batch_walltime(kind: str, walltime: str) -> str:
    """``walltime`` as the batch system reads it: as given for SLURM (sbatch reads every form
    :func:`parse_walltime` does), ``HH:MM:SS`` for PBS, whose ``-l walltime`` has no days and
    reads a bare number as seconds, not minutes (``"1-00:30:00"`` -> ``"24:30:00"``)."""
    seconds = parse_walltime(walltime)  # a malformed one is refused for either
    if kind != "pbs":
        return walltime
    return f"{seconds // 3600:02d}:{seconds % 3600 // 60:02d}:{seconds % 60:02d}"


def lifetime_options(walltime: str, margin_seconds: float | None = None) -> list[str]:
    """``--lifetime`` and ``--lifetime-stagger`` for a worker that must leave before ``walltime``.

    The worker retires at ``walltime - margin`` give or take ``margin / 2``
    (uniformly at random, distributed's rule for the stagger), so the last one
    leaves at least ``margin / 2`` before the batch system's kill. The margin
    defaults to a tenth of the wall time, at least five minutes, at most half.
    """
    total = parse_walltime(walltime)
    margin = margin_seconds if margin_seconds is not None else max(MIN_MARGIN_SECONDS, MARGIN_SHARE * total)
    margin = min(margin, total / 2)
    return ["--lifetime", f"{int(total - margin)}s", "--lifetime-stagger", f"{int(margin / 2)}s"]


def jobqueue_options(kind: str, *, cores: int = 1, memory: str = "4GiB", walltime: str = "01:00:00",
                     queue: str | None = None, account: str | None = None, job_extra: Sequence[str] = (),
                     prologue: Sequence[str] = (), margin_seconds: float | None = None,
                     interface: str | None = None, python: str | None = None,
                     local_directory: str | None = None, log_directory: str | None = None) -> dict[str, Any]:
    """Keyword arguments for dask-jobqueue's ``SLURMCluster`` / ``PBSCluster`` (and their job classes).

    Parameters
    ----------
    kind : {"slurm", "pbs"}
    cores : int, default=1
        Cores per batch job; as many single-threaded worker processes run in it.
    memory : str, default="4GiB"
        Memory per batch job, split evenly between its worker processes.
    walltime : str, default="01:00:00"
        The batch job's wall time; the workers retire before it (:func:`lifetime_options`).
    queue, account : str, optional
        The partition/queue and the account to charge.
    job_extra : sequence of str
        More batch directives, e.g. ``["--qos=long"]``.
    prologue : sequence of str
        Shell lines run before the worker starts, e.g. ``["source ~/venv/bin/activate"]``.
    """
    _check_kind(kind)
    if cores < 1:
        raise StoreError(f"cores must be a positive integer, got {cores!r}")
    return dict(cores=cores, processes=cores, memory=memory, walltime=batch_walltime(kind, walltime),
                queue=queue, account=account,
                job_extra_directives=list(job_extra), job_script_prologue=list(prologue),
                worker_extra_args=lifetime_options(walltime, margin_seconds), interface=interface,
                python=python or sys.executable, local_directory=local_directory, log_directory=log_directory,
                job_name="foldsweep")


def cluster_script(kind: str, *, scheduler: str = "tcp://SCHEDULER:8786", **options: Any) -> str:
    """The batch job script that starts foldsweep's dask workers for the scheduler at ``scheduler``.

    Submit it as many times as workers are wanted (``sbatch``/``qsub``); no
    scheduler is started here. ``options`` are those of :func:`jobqueue_options`.
    """
    job_cls = _cluster_class(kind).job_cls
    # each batch job names its workers after its own id, so that submissions of one script never clash
    job = job_cls(scheduler=scheduler, name=f"foldsweep-${KINDS[kind]}", **jobqueue_options(kind, **options))
    return str(job.job_script())


def make_cluster(kind: str, **options: Any) -> Any:
    """A live dask-jobqueue cluster (its scheduler runs in this process) with foldsweep's worker recipe.

    ``cluster.scale(jobs=N)`` submits N batch jobs; pass ``cluster.scheduler_address`` to
    ``foldsweep run SPEC --backend dask --scheduler ...``.
    """
    return _cluster_class(kind)(**jobqueue_options(kind, **options))


def _check_kind(kind: str) -> None:
    if kind not in KINDS:
        raise StoreError(f"cluster kind {kind!r}: expected one of {', '.join(KINDS)}")


def _cluster_class(kind: str) -> Any:
    _check_kind(kind)
    try:
        import dask_jobqueue
    except ImportError:
        raise StoreError("dask-jobqueue is not installed: pip install 'foldsweep[cluster]'") from None
    return {"slurm": dask_jobqueue.SLURMCluster, "pbs": dask_jobqueue.PBSCluster}[kind]


def main(argv: Sequence[str] | None = None) -> int:
    """``python -m sweep.cluster KIND ...``: print a job script, or ``--serve`` a cluster."""
    parser = argparse.ArgumentParser(prog="python -m sweep.cluster", description="dask workers on SLURM or PBS "
                                     "for foldsweep run --backend dask --scheduler ADDRESS")
    parser.add_argument("kind", choices=sorted(KINDS))
    parser.add_argument("--scheduler", default="tcp://SCHEDULER:8786", help="address the workers connect to")
    parser.add_argument("--cores", type=int, default=1, help="cores (= worker processes) per batch job")
    parser.add_argument("--memory", default="4GiB", help="memory per batch job")
    parser.add_argument("--walltime", default="01:00:00")
    parser.add_argument("--queue")
    parser.add_argument("--account")
    parser.add_argument("--job-extra", action="append", default=[], help="one more batch directive")
    parser.add_argument("--prologue", action="append", default=[], help="one shell line before the worker starts")
    parser.add_argument("--serve", action="store_true", help="start the scheduler here and submit --jobs jobs")
    parser.add_argument("--jobs", type=int, default=1)
    args = parser.parse_args(argv)
    options = dict(cores=args.cores, memory=args.memory, walltime=args.walltime, queue=args.queue,
                   account=args.account, job_extra=args.job_extra, prologue=args.prologue)
    try:
        if not args.serve:
            print(cluster_script(args.kind, scheduler=args.scheduler, **options))
            return 0
        return _serve(args.kind, args.jobs, options)
    except StoreError as exc:
        print(f"foldsweep: error: {exc}", file=sys.stderr)
        return 2


def _serve(kind: str, jobs: int, options: dict[str, Any]) -> int:
    import time

    cluster = make_cluster(kind, **options)
    try:
        cluster.scale(jobs=jobs)
        print(f"scheduler at {cluster.scheduler_address}; {jobs} batch jobs submitted. Run:\n"
              f"  foldsweep run SPEC --backend dask --scheduler {cluster.scheduler_address}\n"
              "Ctrl-C here ends the scheduler and cancels the batch jobs.", flush=True)
        while True:
            time.sleep(60)
    except KeyboardInterrupt:
        return 0
    finally:
        cluster.close()


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
