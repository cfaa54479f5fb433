"""The run loop's decisions, without I/O: events in, actions out.

:class:`LoopCore` is a state machine. The driver (:mod:`sweep.run`) feeds it
what happened (:data:`Event`) and carries out what it answers
(:data:`Action`) on the tracker and the executor; the core never touches a
clock, a file, a process or a database, so every rule below is a unit test
that runs in microseconds (``tests/test_run_loop.py``).

A job this driver holds is in one of these states::

    claimed ─► queued ──(Submit)──► in flight ──TaskFinished──► finished ──(Commit)──► gone
                 ▲                     │
                 │                     ├─TaskLost, no fault of the job ──(Release)──► gone (pending)
                 │                     ├─TaskLost, blame exact ──► charged: (Release +1 attempt) or
                 │                     │                            given up after max_attempts (Commit)
                 └── suspect ◄─────────┘ TaskLost, a worker died but the culprit is not known:
                    (runs alone)         no attempt charged, still held; each suspect then runs
                                         alone, so that a second death is the job's own

Rules:

- **Claims.** A window of jobs is held at once (``claim``, else four tasks
  per worker; one job per worker until a duration is known), topped up when
  half of it is left. No claim while a job runs alone. A claimed key this
  driver already holds (its lease lapsed and it came back) is not run twice.
- **Tasks.** Short jobs go several to a task (:func:`task_size`); a job
  claimed with earlier counted attempts, and every suspect, runs alone.
- **Results.** One result per key: a second result for a key already
  finished or no longer held is dropped, so a commit never carries a key
  twice. Finished results are committed every ``commit_seconds`` or
  ``commit_results`` results, in one transaction.
- **Losses.** The engine's :class:`Verdict` says whose fault a lost task
  is. ``NOT_JOB`` (a cancelled task, a cluster that went away): released
  without an attempt. ``JOB`` for a task of one job, or any death of a job
  that ran alone: one attempt charged, or the job given up once it has had
  ``max_attempts``. Otherwise (``UNKNOWN``: one worker died and took every
  task in flight with it, as loky's pool does): no attempt, the jobs become
  suspects.
- **Lease.** Every third of ``lease_seconds`` the held jobs' lease is renewed
  and other drivers' stale jobs are re-queued; when no work is left, once more
  before stopping.
- **Interrupt** (Ctrl-C, SIGTERM, SIGHUP): commit what finished, release every
  held job without an attempt, stop. Outcomes arriving later are ignored.
"""

from __future__ import annotations

import enum
from dataclasses import dataclass, field
from collections.abc import Sequence
from typing import Protocol

#: the most jobs in one task (short jobs go several to a task; see task_size)
MAX_BATCH = 64
#: a task is at most this fraction of each worker's share of the work not yet in a task
GUIDED_FRACTION = 1 / 2


class Result(Protocol):
    """What the core reads of a job's result (:class:`workers.job.JobResult`)."""

    @property
    def key(self) -> str: ...
    @property
    def ok(self) -> bool: ...
    @property
    def started_at(self) -> float: ...
    @property
    def finished_at(self) -> float: ...


class Verdict(enum.Enum):
    """The engine's word on a lost task."""

    #: the task's job was running on the worker that died
    JOB = "job"
    #: a worker died; which of the tasks in flight was running on it is not known
    UNKNOWN = "unknown"
    #: not the job's fault: cancelled, the cluster went away, interrupted
    NOT_JOB = "not the job"


@dataclass(frozen=True)
class Held:
    """A job claimed by this driver: its key, its dataset's fingerprint, its attempts so far
    (this one included)."""

    key: str
    fingerprint: str
    attempts: int


@dataclass(frozen=True)
class Settings:
    workers: int
    task_seconds: float
    max_attempts: int
    lease_seconds: float
    #: jobs held at once (None: a window sized to the workers)
    claim: int | None = None
    commit_seconds: float = 1.0
    commit_results: int = 50


# ---- events ---------------------------------------------------------------------------------

@dataclass(frozen=True)
class Start:
    now: float
    #: pending jobs in the tracker
    pending: int


@dataclass(frozen=True)
class JobsClaimed:
    """The answer to :class:`Claim`: the jobs the tracker gave (fewer than ``asked`` when it ran out)."""

    now: float
    jobs: tuple[Held, ...]
    asked: int


@dataclass(frozen=True)
class TaskFinished:
    now: float
    task: int
    results: tuple[Result, ...]


@dataclass(frozen=True)
class TaskLost:
    now: float
    task: int
    verdict: Verdict
    reason: str


@dataclass(frozen=True)
class Requeued:
    """The answer to :class:`RequeueStale`: how many jobs of other drivers went back to pending."""

    now: float
    count: int


@dataclass(frozen=True)
class Tick:
    """Time passed (the driver waited for outcomes); commits and the lease may be due."""

    now: float


@dataclass(frozen=True)
class Interrupt:
    now: float


Event = Start | JobsClaimed | TaskFinished | TaskLost | Requeued | Tick | Interrupt


# ---- actions --------------------------------------------------------------------------------

@dataclass(frozen=True)
class Claim:
    """Take up to ``count`` pending jobs (answered by :class:`JobsClaimed`)."""

    count: int


@dataclass(frozen=True)
class Submit:
    """Run these held jobs as one task, numbered ``task`` (all on one dataset)."""

    task: int
    keys: tuple[str, ...]


@dataclass(frozen=True)
class Commit:
    """Write these results and give these jobs up (key, reason), in one transaction."""

    results: tuple[Result, ...]
    give_up: tuple[tuple[str, str], ...]


@dataclass(frozen=True)
class Release:
    """Give these held jobs back to pending, counting the attempt or not."""

    keys: tuple[str, ...]
    count_attempt: bool


@dataclass(frozen=True)
class Renew:
    keys: tuple[str, ...]


@dataclass(frozen=True)
class RequeueStale:
    """Give other drivers' stale jobs back to pending (answered by :class:`Requeued`)."""


@dataclass(frozen=True)
class Stop:
    interrupted: bool


Action = Claim | Submit | Commit | Release | Renew | RequeueStale | Stop


# ---- the state machine ----------------------------------------------------------------------

@dataclass
class LoopCore:
    """One driver's run loop, as decisions (see the module docstring)."""

    settings: Settings
    held: dict[str, Held] = field(default_factory=dict)
    #: claimed, not yet in a task (first-attempt jobs are submitted as soon as claimed)
    suspects: list[str] = field(default_factory=list)
    inflight: dict[int, tuple[str, ...]] = field(default_factory=dict)
    #: the task running alone, if any
    solo: int | None = None
    #: tasks that have been in flight together with another one (a death among them is nobody's for sure)
    crowded: set[int] = field(default_factory=set)
    finished: dict[str, Result] = field(default_factory=dict)
    give_up: dict[str, str] = field(default_factory=dict)
    job_seconds: float | None = None
    #: pending jobs not yet claimed, as far as this driver knows
    unclaimed: int = 0
    exhausted: bool = False
    claiming: bool = False
    requeueing: bool = False
    #: other drivers' stale jobs were looked for since the last jobs were claimed
    requeued_at_end: bool = False
    stopped: bool = False
    ran: int = 0
    last_commit: float = 0.0
    last_renew: float = 0.0
    next_task: int = 0

    # -- the one entry point --

    def handle(self, event: Event) -> list[Action]:
        if self.stopped:
            return []  # outcomes after an interrupt or the end: their jobs were released
        if isinstance(event, Start):
            self.unclaimed, self.last_commit, self.last_renew = event.pending, event.now, event.now
            return self._dispatch(event.now)
        if isinstance(event, JobsClaimed):
            return self._claimed(event)
        if isinstance(event, TaskFinished):
            return self._finished(event)
        if isinstance(event, TaskLost):
            return self._lost(event)
        if isinstance(event, Requeued):
            self.requeueing = False
            if event.count:
                self.exhausted = False
                self.unclaimed += event.count
            return self._dispatch(event.now)
        if isinstance(event, Tick):
            return self._due(event.now) + self._dispatch(event.now)
        if isinstance(event, Interrupt):
            return self._stop(interrupted=True)
        raise TypeError(f"not an event: {event!r}")

    def abandon(self) -> list[Action]:
        """After an error the driver cannot go on from: commit what finished, release the rest."""
        return [] if self.stopped else self._stop(interrupted=False)

    # -- the window --

    @property
    def window(self) -> int:
        """Jobs to hold at once: ``claim``, else four tasks per worker (one job per worker until
        the first results tell how long a job takes)."""
        s = self.settings
        if s.claim:
            return s.claim
        if self.job_seconds is None:
            return s.workers
        return 4 * s.workers * task_size(self.unclaimed, self.job_seconds, s.task_seconds, s.workers)

    # -- handlers --

    def _dispatch(self, now: float) -> list[Action]:
        if self.claiming or self.requeueing or self.solo is not None:
            return []
        actions: list[Action] = []
        if self.suspects:
            if not self.inflight:  # a suspect runs alone
                key = self.suspects.pop(0)
                self.solo = self._task((key,), actions)
            return actions
        in_flight = sum(len(keys) for keys in self.inflight.values())
        if not self.exhausted and in_flight <= self.window // 2:
            wanted = self.window - in_flight
            if self.unclaimed <= wanted + self.window // 2:
                wanted = max(wanted, self.unclaimed)  # the last few too, not in a round of their own
            self.claiming = True
            return [Claim(wanted)]
        if not self.inflight:  # no work left here: other drivers' stale jobs, once, then stop
            if self.exhausted and not self.requeued_at_end:
                self.requeued_at_end = True
                self.requeueing = True
                return [RequeueStale()]
            return self._stop(interrupted=False)
        return actions

    def _claimed(self, event: JobsClaimed) -> list[Action]:
        self.claiming = False
        self.exhausted = len(event.jobs) < event.asked  # none left pending just now
        if event.jobs:
            self.requeued_at_end = False
        # fewer than asked: the rest went to other drivers
        self.unclaimed = max(0, self.unclaimed - len(event.jobs)) if len(event.jobs) == event.asked else 0
        fresh: list[Held] = []
        for job in event.jobs:
            if job.key in self.held:  # ours already (its lease lapsed and it came back): not twice
                continue
            self.held[job.key] = job
            if job.attempts > 1:
                self.suspects.append(job.key)  # retried after a death charged to it: alone
            else:
                fresh.append(job)
        actions: list[Action] = []
        for batch in self._batches(fresh):
            self._task(batch, actions)
        return actions + self._dispatch(event.now)

    def _task(self, keys: tuple[str, ...], actions: list[Action]) -> int:
        task, self.next_task = self.next_task, self.next_task + 1
        if self.inflight:
            self.crowded.update(self.inflight)
            self.crowded.add(task)
        self.inflight[task] = keys
        actions.append(Submit(task, keys))
        return task

    def _batches(self, jobs: list[Held]) -> list[tuple[str, ...]]:
        """Tasks of :func:`task_sizes` jobs, each on one dataset (the executors run tasks in the
        order submitted, so the small ones come last)."""
        s = self.settings
        by_data: dict[str, list[str]] = {}
        for job in jobs:
            by_data.setdefault(job.fingerprint, []).append(job.key)
        tasks: list[tuple[str, ...]] = []
        unassigned = self.unclaimed + len(jobs)
        for group in by_data.values():
            start = 0
            for size in task_sizes(len(group), unassigned, self.job_seconds, s.task_seconds, s.workers):
                tasks.append(tuple(group[start:start + size]))
                start += size
            unassigned -= len(group)
        return tasks

    def _finished(self, event: TaskFinished) -> list[Action]:
        keys = self.inflight.pop(event.task, ())
        self.crowded.discard(event.task)
        if event.task == self.solo:
            self.solo = None
        fresh = [r for r in event.results if r.key in keys and r.key in self.held and r.key not in self.finished]
        for result in fresh:
            self.finished[result.key] = result
        self.ran += len(fresh)
        if fresh:
            seconds = sum(r.finished_at - r.started_at for r in fresh) / len(fresh)
            self.job_seconds = seconds if self.job_seconds is None else 0.8 * self.job_seconds + 0.2 * seconds
        actions: list[Action] = []
        if len(self.finished) >= self.settings.commit_results:
            actions += self._commit(event.now)
        return actions + self._dispatch(event.now)

    def _lost(self, event: TaskLost) -> list[Action]:
        alone = event.task in self.inflight and event.task not in self.crowded
        keys = tuple(k for k in self.inflight.pop(event.task, ()) if k in self.held and k not in self.finished)
        self.crowded.discard(event.task)
        if event.task == self.solo:
            self.solo = None
        actions: list[Action] = []
        if event.verdict is Verdict.NOT_JOB:
            self._forget(keys)
            self.exhausted, self.unclaimed = False, self.unclaimed + len(keys)
            actions.append(Release(keys, count_attempt=False))
        elif len(keys) == 1 and (alone or event.verdict is Verdict.JOB):
            actions += self._charge(keys[0], event.reason)
        else:
            self.suspects.extend(keys)  # still held; each runs alone next
        return actions + self._dispatch(event.now)

    def _charge(self, key: str, reason: str) -> list[Action]:
        attempts = self.held[key].attempts
        if attempts >= self.settings.max_attempts:
            self.give_up[key] = f"{reason}; gave up after {attempts} attempts"
            return []  # in the next commit
        self._forget((key,))
        self.exhausted, self.unclaimed = False, self.unclaimed + 1
        return [Release((key,), count_attempt=True)]

    def _forget(self, keys: Sequence[str]) -> None:
        for key in keys:
            self.held.pop(key, None)

    def _due(self, now: float) -> list[Action]:
        actions: list[Action] = []
        if (self.finished or self.give_up) and now - self.last_commit >= self.settings.commit_seconds:
            actions += self._commit(now)
        if now - self.last_renew >= self.settings.lease_seconds / 3:
            self.last_renew = now
            if self.held:
                actions.append(Renew(tuple(self.held)))
            if not self.requeueing:
                self.requeueing = True
                actions.append(RequeueStale())
        return actions

    def _commit(self, now: float) -> list[Action]:
        self.last_commit = now
        if not self.finished and not self.give_up:
            return []
        action = Commit(tuple(self.finished.values()), tuple(self.give_up.items()))
        self._forget(list(self.finished) + list(self.give_up))
        self.finished, self.give_up = {}, {}
        return [action]

    def _stop(self, *, interrupted: bool) -> list[Action]:
        actions = self._commit(self.last_commit)
        if self.held:
            actions.append(Release(tuple(self.held), count_attempt=False))
        self.held, self.suspects, self.inflight, self.solo, self.crowded = {}, [], {}, None, set()
        self.stopped = True
        return actions + [Stop(interrupted)]


def task_size(unassigned: int, job_seconds: float | None, task_seconds: float, workers: int) -> int:
    """Jobs for the next task while ``unassigned`` jobs are in no task yet, a job taking
    ``job_seconds`` (None: not known yet, one job a task).

    About ``task_seconds`` of work, but at most :data:`GUIDED_FRACTION` of each of the
    ``workers``' share of the unassigned work, so that tasks shrink towards the end of a sweep
    and no worker is left with a long task while the others idle; at most :data:`MAX_BATCH`
    jobs and at least one.
    """
    if job_seconds is None:
        return 1
    job = max(job_seconds, 1e-4)
    seconds = min(task_seconds, GUIDED_FRACTION * unassigned * job / workers)
    return max(1, min(MAX_BATCH, int(seconds / job)))


def task_sizes(jobs: int, unassigned: int, job_seconds: float | None, task_seconds: float,
               workers: int) -> list[int]:
    """The sizes, in order, of the tasks that ``jobs`` jobs are cut into (:func:`task_size`;
    ``unassigned`` counts these jobs too)."""
    sizes: list[int] = []
    while jobs > 0:
        size = min(jobs, task_size(unassigned, job_seconds, task_seconds, workers))
        sizes.append(size)
        jobs -= size
        unassigned -= size
    return sizes
