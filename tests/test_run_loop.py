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


# ---- the loop's core (sweep.loop_core): its rules as events in, actions out ----------------------

from dataclasses import dataclass  # noqa: E402

from sweep.loop_core import (Claim, Commit, Held, Interrupt, JobsClaimed, LoopCore, Release, Renew,  # noqa: E402
                             Requeued, RequeueStale, Settings, Start, Stop, Submit, TaskFinished, TaskLost,
                             Tick, Verdict)


@dataclass(frozen=True)
class R:
    """A job's result as the core reads it (workers.job.JobResult has these fields)."""

    key: str
    ok: bool = True
    started_at: float = 0.0
    finished_at: float = 30.0  # jobs of 30 s: one job a task


def core(workers: int = 2, max_attempts: int = 3, claim: int | None = None, lease: float = 60.0) -> LoopCore:
    return LoopCore(Settings(workers=workers, task_seconds=1.0, max_attempts=max_attempts,
                             lease_seconds=lease, claim=claim))


def held(*keys: str, attempts: int = 1) -> tuple[Held, ...]:
    return tuple(Held(k, "fp", attempts) for k in keys)


def submits(actions: list) -> dict[int, tuple[str, ...]]:
    return {a.task: a.keys for a in actions if isinstance(a, Submit)}


def started(c: LoopCore, *keys: str, attempts: int = 1) -> dict[int, tuple[str, ...]]:
    """Start ``c`` and give it ``keys`` for the first claim; the tasks it submits."""
    first = c.handle(Start(0.0, len(keys)))
    assert isinstance(first[0], Claim)
    return submits(c.handle(JobsClaimed(0.0, held(*keys, attempts=attempts), first[0].count)))


def test_first_claim_is_one_job_per_worker_each_its_own_task() -> None:
    c = core(workers=2)
    assert c.handle(Start(0.0, 10)) == [Claim(2)]
    actions = c.handle(JobsClaimed(0.0, held("a", "b"), 2))
    assert submits(actions) == {0: ("a",), 1: ("b",)}


def test_death_with_several_jobs_in_flight_charges_none_and_each_then_runs_alone() -> None:
    c = core(workers=3, claim=3)
    tasks = started(c, "a", "b", "c")
    assert len(tasks) == 3
    # one worker died and the pool took every task in flight down with it (loky): culprit unknown
    actions = [a for t in tasks for a in c.handle(TaskLost(1.0, t, Verdict.UNKNOWN, "died"))]
    assert not [a for a in actions if isinstance(a, (Release, Commit))]  # no attempt charged, nothing given back
    solo = submits(actions)
    assert list(solo.values()) == [("a",)]  # the first suspect runs alone; nothing else is claimed
    assert not [a for a in actions if isinstance(a, Claim)]
    (task,) = solo
    # it finishes: the next suspect runs alone
    actions = c.handle(TaskFinished(2.0, task, (R("a"),)))
    assert list(submits(actions).values()) == [("b",)]
    (task,) = submits(actions)
    # it dies alone: its own fault, one attempt charged (given back as pending with the attempt)
    actions = c.handle(TaskLost(3.0, task, Verdict.UNKNOWN, "died"))
    assert Release(("b",), count_attempt=True) in actions
    assert list(submits(actions).values()) == [("c",)]


def test_a_job_that_kills_its_worker_alone_is_given_up_after_max_attempts() -> None:
    c = core(workers=2, max_attempts=2)
    c.handle(Start(0.0, 1))
    actions = c.handle(JobsClaimed(0.0, held("k", attempts=2), 2))  # its second attempt: it runs alone
    (task,) = submits(actions)
    actions = c.handle(TaskLost(1.0, task, Verdict.UNKNOWN, "worker process died (SIGKILL)"))
    assert not [a for a in actions if isinstance(a, Release)]
    commits = [a for a in actions if isinstance(a, Commit)]
    if not commits:  # committed at the next tick, with the reason
        commits = [a for a in c.handle(Tick(5.0)) if isinstance(a, Commit)]
    assert commits[0].give_up == (("k", "worker process died (SIGKILL); gave up after 2 attempts"),)
    assert c.handle(Tick(6.0)) == [] or "k" not in c.held


def test_lost_task_blamed_on_the_job_vs_on_the_machine() -> None:
    c = core(workers=2, claim=2)
    tasks = started(c, "a", "b")
    ta, tb = sorted(tasks)
    # the engine says the job was running on the worker that died: charged, even with another task out
    actions = c.handle(TaskLost(1.0, ta, Verdict.JOB, "killed"))
    assert Release(("a",), count_attempt=True) in actions
    # the engine says it was not the job (the cluster went away, the task was cancelled): no attempt
    actions = c.handle(TaskLost(1.0, tb, Verdict.NOT_JOB, "cancelled"))
    assert Release(("b",), count_attempt=False) in actions
    assert c.held == {}


def test_lease_is_renewed_every_third_of_it_for_every_held_job() -> None:
    c = core(workers=2, lease=30.0)
    started(c, "a", "b")
    assert not [a for a in c.handle(Tick(9.0)) if isinstance(a, Renew)]
    actions = c.handle(Tick(10.0))
    assert Renew(("a", "b")) in actions and RequeueStale() in actions
    c.handle(Requeued(10.0, 0))
    assert not [a for a in c.handle(Tick(15.0)) if isinstance(a, Renew)]
    assert Renew(("a", "b")) in c.handle(Tick(20.5))


def test_interrupt_with_jobs_in_flight_commits_the_finished_and_releases_the_rest() -> None:
    c = core(workers=3, claim=3)
    tasks = started(c, "a", "b", "c")
    first = min(tasks)
    c.handle(TaskFinished(0.5, first, (R("a"),)))  # not yet committed (under a second)
    actions = c.handle(Interrupt(0.6))
    assert actions == [Commit((R("a"),), ()), Release(("b", "c"), count_attempt=False), Stop(True)]
    # outcomes arriving later change nothing: their jobs are pending again
    assert c.handle(TaskFinished(0.7, max(tasks), (R("c"),))) == []


def test_duplicate_result_for_one_key_is_committed_once() -> None:
    c = core(workers=2, claim=2)
    tasks = started(c, "a", "b")
    ta, tb = sorted(tasks)
    c.handle(TaskFinished(0.1, ta, (R("a"), R("a"))))  # the same key twice in one task
    c.handle(TaskFinished(0.2, tb, (R("a"), R("b"))))  # and a key of another task
    commits = [a for a in c.handle(Tick(2.0)) if isinstance(a, Commit)]
    assert [r.key for r in commits[0].results] == ["a", "b"]


def test_a_key_claimed_again_while_in_flight_is_not_run_twice() -> None:
    c = core(workers=2, claim=4)
    tasks = started(c, "a", "b")
    assert sorted(tasks.values()) == [("a",), ("b",)]
    # its lease lapsed, it went back to pending, and this driver claimed it again
    actions = c.handle(JobsClaimed(1.0, held("a", "c"), 2))
    assert list(submits(actions).values()) == [("c",)]


def test_no_work_left_looks_for_stale_jobs_once_then_stops() -> None:
    c = core(workers=2, claim=2)
    (task,) = started(c, "a")
    # fewer jobs than asked came: none left pending, so once it finished other drivers' stale jobs
    # are looked for, and then the loop stops
    assert c.handle(TaskFinished(0.5, task, (R("a"),))) == [RequeueStale()]
    actions = c.handle(Requeued(0.5, 0))
    assert actions == [Commit((R("a"),), ()), Stop(False)]


def test_short_jobs_are_batched_by_task_size() -> None:
    c = core(workers=2)
    assert c.handle(Start(0.0, 1000)) == [Claim(2)]
    (task, _) = submits(c.handle(JobsClaimed(0.0, held("a", "b"), 2)))
    (claim,) = [a for a in c.handle(TaskFinished(0.0, task, (R("a", finished_at=0.01),))) if isinstance(a, Claim)]
    keys = tuple(f"j{i}" for i in range(claim.count))
    batches = list(submits(c.handle(JobsClaimed(0.0, held(*keys), claim.count))).values())
    assert [len(b) for b in batches] == task_sizes(len(keys), c.unclaimed + len(keys), c.job_seconds, 1.0, 2)
    assert len(batches[0]) > 1
