"""What runs inside one fold job.

Public names: the job and result records, the one entry point executors
call, and the worker registry. Workers never import ``sweep.store`` or
``sweep.run``: a job in, a result record out.
"""

from workers.job import Job, JobResult, run_job
from workers.params import Param
from workers.registry import Worker, get_worker, worker_names

__all__ = [
    # one fold job
    "Job",
    "JobResult",
    "run_job",
    # declaring and finding workers
    "Param",
    "Worker",
    "get_worker",
    "worker_names",
]
