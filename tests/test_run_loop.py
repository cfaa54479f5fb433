"""The run loop's cutting of short jobs into tasks (``sweep.run.task_size`` / ``task_sizes``)."""

from __future__ import annotations

import pytest

from sweep.run import GUIDED_FRACTION, MAX_BATCH, task_size, task_sizes


def test_one_job_a_task_until_a_duration_is_known():
    # common practice: a scheduler that knows nothing of the jobs' length hands them out singly
    assert task_sizes(7, 100, None, 1.0, 2) == [1] * 7


def test_long_jobs_go_one_to_a_task():
    assert task_sizes(5, 50, 30.0, 1.0, 4) == [1] * 5


@pytest.mark.parametrize("job_seconds, task_seconds, workers", [(0.05, 1.0, 2), (0.002, 0.25, 8), (0.3, 1.0, 3)])
def test_guided_sizes_cover_every_job_and_shrink_to_single_jobs(job_seconds, task_seconds, workers):
    jobs = 400
    sizes = task_sizes(jobs, jobs, job_seconds, task_seconds, workers)
    assert sum(sizes) == jobs and min(sizes) >= 1 and max(sizes) <= MAX_BATCH
    # non-increasing: the largest tasks first, as guided self-scheduling hands them out
    # (Polychronopoulos & Kuck, "Guided self-scheduling", IEEE Trans. Computers 36(12), 1987;
    # from memory); the last one is a single job, so no worker finishes long after the others
    assert sizes == sorted(sizes, reverse=True) and sizes[-1] == 1
    left = jobs
    for size in sizes:
        seconds = size * job_seconds
        # about task_seconds of work (a single job may exceed it) ...
        assert size == 1 or seconds <= task_seconds + 1e-9
        # ... and never more than a fixed fraction of each worker's share of the work left: the
        # "factoring" rule of Hummel, Schonberg & Flynn (CACM 35(8), 1992; from memory) halves it
        assert size == 1 or seconds <= GUIDED_FRACTION * left * job_seconds / workers + 1e-9
        left -= size


def test_tasks_fill_task_seconds_while_much_work_is_left():
    # 50 ms jobs, 1 s tasks, plenty left: 20 jobs a task (1 s / 50 ms)
    assert task_size(10_000, 0.05, 1.0, 2) == 20
    # the cap on jobs per task holds for very short jobs
    assert task_size(10**6, 1e-5, 1.0, 2) == MAX_BATCH
    # near the end: 10 jobs of 50 ms left on 2 workers -> half of each worker's 0.25 s share = 2 jobs
    assert task_size(10, 0.05, 1.0, 2) == 2
