"""The run loop's driver: claim jobs from the tracker, dispatch them, collect, commit.

::

    load spec ─► load datasets ─► plan ─► sync tracker ─► requeue stale ─┐
                                                                         ▼
        ┌──── claim a window of pending jobs (lease) ◄──────────────────┐
        ▼                                                               │
    submit to executor ─► wait for any ─► batch results ─► commit ──────┘
                                    (every second or 50 results, one transaction)

The loop's decisions are :class:`sweep.loop_core.LoopCore`'s, a state
machine without I/O (its module docstring has the states and the rules); this
module is the thin driver that carries its actions out on the tracker
(:class:`sweep.store.Store`) and the executor (:mod:`sweep.executors`), and
turns what happens (outcomes, time, signals) into its events.

Signals: SIGINT (Ctrl-C), SIGTERM (what batch schedulers send at the wall
time) and SIGHUP (a closed terminal) all stop the run the same way: no more
dispatching, what finished is committed, every held job goes back to pending
without an attempt, and the command exits with 128 + the signal's number (130,
143, 129). A second signal exits at once (the jobs still held go back to
pending at the next run, see ``Store.requeue_stale``).
"""

from __future__ import annotations

import os
import re
import signal
import sys
import threading
import time
from collections import deque
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping, TextIO

from sweep.errors import DatasetError
from sweep.loop_core import (
    GUIDED_FRACTION,
    MAX_BATCH,
    Action,
    Claim,
    Commit,
    Event,
    Held,
    Interrupt,
    JobsClaimed,
    LoopCore,
    Release,
    Renew,
    Requeued,
    RequeueStale,
    Settings,
    Start,
    Stop,
    Submit,
    TaskFinished,
    TaskLost,
    Tick,
    Verdict,
    task_size,
    task_sizes,
)
from sweep.nested import JobRows, inner_progress
from sweep.plan import Plan, make_plan
from sweep.spec import Spec, load_spec
from sweep.store import Claimed, Store, owner_id

__all__ = ["GUIDED_FRACTION", "MAX_BATCH", "Inputs", "RunOptions", "RunSummary", "load_inputs", "open_store",
           "run_sweep", "sync_store", "task_size", "task_sizes"]

#: seconds a claim is valid without renewal
LEASE_SECONDS = 60.0
COMMIT_EVERY_SECONDS = 1.0
COMMIT_EVERY_RESULTS = 50
#: seconds the driver waits for an outcome before it looks at the clock and the signals
WAIT_SECONDS = 0.5


@dataclass(frozen=True)
class Inputs:
    """A spec with its datasets loaded and its plan expanded: everything before the tracker."""

    spec: Spec
    datasets: Mapping[str, Any]
    workers: Mapping[str, Any]
    plan: Plan


@dataclass
class RunOptions:
    workers: int | None = None
    backend: str = "joblib"
    scheduler: str | None = None
    retry_failed: bool = False
    #: jobs claimed per round trip to the tracker (None: a window sized to the workers)
    claim: int | None = None
    accept_changed_data: bool = False
    progress: str = "auto"
    lease_seconds: float = LEASE_SECONDS
    executor_options: dict[str, Any] = field(default_factory=dict)


@dataclass
class RunSummary:
    sweep: str
    planned: int
    new: int
    done: int = 0
    failed: int = 0
    pending: int = 0
    ran: int = 0
    #: of ``planned``, the inner jobs of nested selection
    planned_inner: int = 0
    requeued: int = 0
    interrupted: bool = False
    #: the signal that interrupted the run (SIGINT, SIGTERM, SIGHUP), if any
    signal: int | None = None
    planning_seconds: float = 0.0
    seconds: float = 0.0


def load_inputs(spec_path: str | Path) -> Inputs:
    """Parse the spec, load and check its datasets, expand the plan. No tracker I/O."""
    from sweep._datacache import cached_load
    from sweep.folds import check_feasible
    from workers.registry import get_worker

    spec = load_spec(spec_path)
    datasets = {}
    for i, entry in enumerate(spec.datasets):
        where = f"{spec.path}: dataset[{i}] {entry['name']!r}"
        data = cached_load(entry, spec.path.resolve().parent, where)
        check_feasible(data.y, data.classes, spec.folds, where)
        if spec.selection is not None:
            from sweep.nested import check_inner_feasible

            check_inner_feasible(data.y, data.classes, spec.folds.k, spec.selection.inner_k, where)
        datasets[entry["name"]] = data
    workers = {m.worker: get_worker(m.worker) for m in spec.models}
    plan = make_plan(spec, {n: d.fingerprint for n, d in datasets.items()}, workers)
    return Inputs(spec, datasets, workers, plan)


def sync_store(store: Store, inputs: Inputs, *, accept_changed_data: bool = False,
               out: TextIO | None = None) -> int:
    """Record the sweep, datasets, configurations, folds and new jobs. Returns the new job count."""
    import json

    from sweep.folds import compute_folds
    from sweep.nested import record_inner_folds

    spec, plan = inputs.spec, inputs.plan
    _refuse_changed_data(store, inputs, accept_changed_data)
    store.record_sweep(spec.name, str(spec.path), spec.digest)
    store.record_datasets([dict(fingerprint=d.fingerprint, name=d.name, source=d.source, n_samples=d.n_samples,
                                n_features=d.n_features, class_counts=json.dumps(d.class_counts.tolist()))
                           for d in inputs.datasets.values()])
    store.record_configurations([dict(config_id=c.config_id, worker=c.worker, label=c.label, params=c.canonical)
                                 for c in plan.configurations])
    for data in inputs.datasets.values():
        if not store.has_folds(plan.scheme, data.fingerprint):
            store.record_folds(plan.scheme, data.fingerprint, compute_folds(data.y, spec.folds))
        record_inner_folds(store, plan, data, spec.folds.seed)
        for repeat, fold, missing in store.fold_warnings(plan.scheme, data.fingerprint):
            names = ", ".join(repr(data.classes[c]) for c in missing)
            print(f"warning: dataset {data.name!r} repeat {repeat} fold {fold}: the training part lacks "
                  f"class {names}", file=out or sys.stderr)
    return store.sync_jobs(spec.name, plan.scheme, plan.all_jobs)


def _refuse_changed_data(store: Store, inputs: Inputs, accept: bool) -> None:
    seen = store.sweep_fingerprints(inputs.spec.name)
    for name, data in inputs.datasets.items():
        earlier = seen.get(name)
        if earlier and data.fingerprint not in earlier and not accept:
            raise DatasetError(
                f"{inputs.spec.path}: dataset {name!r} changed since this sweep's earlier jobs "
                f"(fingerprint {', '.join(sorted(earlier))} -> {data.fingerprint}); restore it, or run with "
                "--accept-changed-data to plan new jobs for the new content (earlier results are kept apart)")


def open_store(spec: Spec, *, create: bool = True) -> Store:
    from sweep.cluster import refuse_network_sqlite

    refuse_network_sqlite(spec.store_url)
    return Store.open(spec.store_url, create=create)


def run_sweep(spec_path: str | Path, options: RunOptions | None = None, *,
              out: TextIO | None = None) -> RunSummary:
    """Plan, sync and run every pending job of the sweep at ``spec_path``.

    In the main thread, SIGINT, SIGTERM and SIGHUP stop it (see the module docstring) while it
    runs: the summary then says ``interrupted`` and which ``signal``; before the loop starts
    they raise :class:`Interrupted`.
    """
    options = options or RunOptions()
    out = out or sys.stderr
    started = time.monotonic()
    with Signals() as signals:
        return _run(spec_path, options, out, started, signals)


class Interrupted(KeyboardInterrupt):
    """A stopping signal that arrived before the run loop started (nothing held yet)."""

    def __init__(self, signum: int) -> None:
        super().__init__(signal.Signals(signum).name)
        self.signum = signum


class Signals:
    """SIGINT, SIGTERM and SIGHUP while a run lasts: the first is noted (``received``) for the
    loop to stop on, or raised as :class:`Interrupted` while the loop is not running
    (``deferred`` false); a second ends the process at once with 128 + its number."""

    NAMES = ("SIGINT", "SIGTERM", "SIGHUP")

    def __init__(self) -> None:
        self.received: int | None = None
        self.deferred = False
        self._old: dict[int, Any] = {}

    def __enter__(self) -> Signals:
        if threading.current_thread() is threading.main_thread():
            for name in self.NAMES:
                number = getattr(signal, name, None)
                if number is not None:
                    self._old[number] = signal.signal(number, self._handle)
        return self

    def __exit__(self, *exc: object) -> None:
        for number, old in self._old.items():
            signal.signal(number, old)

    def _handle(self, signum: int, frame: Any) -> None:
        if self.received is not None:
            os.write(2, f"foldsweep: {signal.Signals(signum).name} again: exiting now\n".encode())
            os._exit(128 + signum)
        self.received = signum
        if not self.deferred:
            raise Interrupted(signum)


def _run(spec_path: str | Path, options: RunOptions, out: TextIO, started: float, signals: Signals) -> RunSummary:
    inputs = load_inputs(spec_path)
    store = open_store(inputs.spec)
    try:
        new = sync_store(store, inputs, accept_changed_data=options.accept_changed_data, out=out)
        summary = RunSummary(inputs.spec.name, len(inputs.plan.all_jobs), new,
                             planned_inner=len(inputs.plan.inner_jobs))
        summary.requeued = store.requeue_stale(inputs.spec.name)
        if options.retry_failed:
            summary.requeued += store.retry_failed(inputs.spec.name)
        summary.planning_seconds = time.monotonic() - started
        counts = store.counts(inputs.spec.name)
        if counts["pending"] == 0:
            _finish(summary, counts, started)
            return summary
        loop = _Loop(store, inputs, options, out, signals)
        try:
            loop.run(counts)
        finally:
            summary.ran, summary.interrupted = loop.core.ran, loop.interrupted
            summary.signal = signals.received if loop.interrupted else None
        _finish(summary, store.counts(inputs.spec.name), started)
        return summary
    finally:
        store.close()


def _finish(summary: RunSummary, counts: Mapping[str, int], started: float) -> None:
    summary.done, summary.failed = counts["done"], counts["failed"]
    summary.pending = counts["pending"] + counts["running"]
    summary.seconds = time.monotonic() - started


class _Loop:
    """The driver of one run: carries :class:`LoopCore`'s actions out on the tracker and the
    executor, and feeds it the outcomes, the time and the signals as events."""

    def __init__(self, store: Store, inputs: Inputs, options: RunOptions, out: TextIO, signals: Signals) -> None:
        from sweep.executors import make_executor

        self.store, self.inputs, self.options, self.out, self.signals = store, inputs, options, out, signals
        self.spec = inputs.spec
        self.owner = owner_id()
        workers = options.workers or os.cpu_count() or 1
        self.executor = make_executor(options.backend, workers, scheduler=options.scheduler,
                                      memory_limit=self.spec.memory_limit, **options.executor_options)
        self.core = LoopCore(Settings(workers=self.executor.workers, task_seconds=self.executor.task_seconds,
                                      max_attempts=self.spec.max_attempts, lease_seconds=options.lease_seconds,
                                      claim=options.claim, commit_seconds=COMMIT_EVERY_SECONDS,
                                      commit_results=COMMIT_EVERY_RESULTS))
        self.claims: dict[str, Claimed] = {}
        self.tasks: dict[Any, int] = {}  # future -> the core's task number
        self.configs = inputs.plan.by_config
        self.rows = JobRows(store, inputs.plan, inputs.datasets)
        self.handles: dict[str, Any] = {}
        self.interrupted = False
        self.stopped = False

    def run(self, counts: Mapping[str, int]) -> None:
        from sweep.progress import Progress

        inner, self.inner_keys = inner_progress(self.store, self.inputs.plan, self.spec.name)
        self.progress = Progress(sum(counts.values()), counts["done"], counts["failed"],
                                 mode=self.options.progress, stream=self.out, inner=inner)
        self.signals.deferred = True  # from here a signal is an event of the loop
        try:
            events: deque[Event] = deque([Start(time.monotonic(), counts["pending"])])
            while not self.stopped:
                while events and not self.stopped:
                    answers = [a for a in map(self._do, self.core.handle(events.popleft())) if a is not None]
                    # an answer (jobs claimed, jobs re-queued) comes before any event still waiting, so that
                    # the core never decides on, say, an interrupt while a claim it made is unknown to it
                    events.extendleft(reversed(answers))
                if not self.stopped:
                    events.extend(self._wait())
        except BaseException:
            self._abandon()
            raise
        finally:
            self.signals.deferred = False
            self.progress.close()

    def _wait(self) -> list[Event]:
        """Outcomes of the tasks that finished, then the time (a tick) or the interrupt."""
        if self.signals.received is None:
            done = self.executor.wait(self.tasks, timeout=WAIT_SECONDS) if self.tasks else set()
            events = [self._outcome(f) for f in done]
        else:
            events = []
        now = time.monotonic()
        if self.signals.received is None:
            return events + [Tick(now)]
        # interrupted: what finished is committed; the rest, lost or not, goes back without an attempt
        print("interrupted: committing finished jobs, giving the rest back as pending", file=self.out, flush=True)
        finished = [e for e in events if isinstance(e, TaskFinished)]
        finished += [e for e in (self._outcome(f) for f in [f for f in self.tasks if f.done()])
                     if isinstance(e, TaskFinished)]
        return [*finished, Interrupt(now)]

    def _outcome(self, future: Any) -> Event:
        task = self.tasks.pop(future)
        now = time.monotonic()
        try:
            return self._read(future, task, now)
        finally:
            self.executor.forget(future)

    def _read(self, future: Any, task: int, now: float) -> Event:
        try:
            return TaskFinished(now, task, tuple(future.result()))
        except KeyboardInterrupt:  # Ctrl-C reached the worker too (the whole process group)
            if self.signals.received is None:
                self.signals.received = signal.SIGINT
            return TaskLost(now, task, Verdict.NOT_JOB, "interrupted")
        except BaseException as exc:  # noqa: BLE001 - the worker died or the engine lost the task
            verdict = self.executor.verdict(exc)
            what = "task lost" if verdict is Verdict.NOT_JOB else "worker process died"
            return TaskLost(now, task, verdict, f"{what} ({type(exc).__name__}: {_death_message(exc)})")

    def _do(self, action: Action) -> Event | None:
        """Carry ``action`` out; the answer it gets, as an event for the core, if any."""
        if isinstance(action, Claim):
            claimed = self.store.claim(self.spec.name, self.owner, action.count, self.options.lease_seconds,
                                       self.spec.max_attempts)
            self.claims.update((c.key, c) for c in claimed)
            return JobsClaimed(time.monotonic(), tuple(Held(c.key, c.fingerprint, c.attempts) for c in claimed),
                               action.count)
        if isinstance(action, Submit):
            self._submit(action)
        elif isinstance(action, Commit):
            self.store.commit_results(self.owner, list(action.results), dict(action.give_up))
            ok = sum(r.ok for r in action.results)
            inner = sum(r.key in self.inner_keys for r in action.results) + sum(k in self.inner_keys
                                                                             for k, _ in action.give_up)
            self.progress.update(done=ok, failed=len(action.results) - ok + len(action.give_up), inner=inner)
            self._drop([r.key for r in action.results] + [k for k, _ in action.give_up])
        elif isinstance(action, Release):
            self.store.release(self.owner, list(action.keys), count_attempt=action.count_attempt)
            self._drop(action.keys)
        elif isinstance(action, Renew):
            self.store.renew(self.owner, list(action.keys), self.options.lease_seconds)
        elif isinstance(action, RequeueStale):
            return Requeued(time.monotonic(), self.store.requeue_stale(self.spec.name))
        elif isinstance(action, Stop):
            self.stopped, self.interrupted = True, action.interrupted
            self.executor.close(kill=action.interrupted)
        return None

    def _drop(self, keys: Any) -> None:
        for key in keys:
            self.claims.pop(key, None)

    def _submit(self, action: Submit) -> None:
        from workers.job import Job

        batch = [self.claims[k] for k in action.keys]
        fp = batch[0].fingerprint
        if fp not in self.handles:
            self.handles[fp] = self.executor.share(self.inputs.datasets[batch[0].dataset])
        jobs = []
        for c in batch:
            config = self.configs[c.config_id]
            test, train = self.rows(c)
            jobs.append(Job(key=c.key, worker=config.worker, params=dict(config.params), dataset=c.dataset,
                            fingerprint=fp, repeat=c.repeat, fold=c.fold,
                            test_index=test, time_limit=self.spec.time_limit, train_index=train,
                            folds_seed=self.spec.folds.seed))
        self.tasks[self.executor.submit(jobs, self.handles[fp])] = action.task

    def _abandon(self) -> None:
        """After an error the loop cannot go on from (the store failed, the cluster went away) or
        a second Ctrl-C: keep what finished, give the rest back as pending, as far as the store
        still lets it (else the leases expire, and the next run re-queues those jobs)."""
        if self.stopped:
            return
        self.stopped = True
        try:
            for action in self.core.abandon():
                if not isinstance(action, Stop):
                    self._do(action)
            self.store.release_all(self.owner)
        except Exception:  # noqa: BLE001 - the error being raised says what went wrong
            pass
        finally:
            self.executor.close(kill=True)


def _death_message(exc: BaseException) -> str:
    """The first sentence of a worker-death error, without the engine's task names and addresses,
    so that ``status`` groups the failures of one cause under one message."""
    text = " ".join(str(exc).split())
    text = re.sub(r"'[\w.-]+-[0-9a-f]{32}'|'run_jobs?-[0-9a-f-]+'", "the job", text)
    first = re.split(r"(?<=[.!?])\s", text, maxsplit=1)[0]
    return first[:200]
