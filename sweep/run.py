"""The run loop: claim jobs from the tracker, dispatch them, collect, commit.

::

    load spec ─► load datasets ─► plan ─► sync tracker ─► requeue stale ─┐
                                                                         ▼
        ┌──── claim a window of pending jobs (lease) ◄──────────────────┐
        ▼                                                               │
    submit to executor ─► wait for any ─► batch results ─► commit ──────┘
                                    (every second or 50 results, one transaction)

Jobs that turn out to take milliseconds are sent several to a task (about
the executor's ``task_seconds`` of work each: its per-task cost must not
dominate), fewer as the work left shrinks, so that the workers finish
together ("guided" sizing: a task is at most half of each worker's share of
the work not yet handed out); jobs of seconds go one to a task.

Events and what they do: a job finished (its result joins the next commit),
a job raised (recorded failed with its traceback), its worker process died
(the job goes back to pending; after ``max_attempts`` deaths it is failed,
and a job retried after a death runs alone so that the blame is exact), a
lease is due (renewed for the jobs in hand; the jobs of other drivers whose
lease expired, or who died on this host, go back to pending, as they also
do when this driver's own work runs out), Ctrl-C (stop dispatching, commit
what finished, give the rest back as pending), an error the loop cannot go
on from, such as the embedded cluster's process dying (the same, then the
error is raised).
"""

from __future__ import annotations

import os
import re
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping, TextIO

from sweep.errors import DatasetError
from sweep.nested import JobRows, inner_progress
from sweep.plan import Plan, make_plan
from sweep.spec import Spec, load_spec
from sweep.store import Claimed, Store, owner_id

#: seconds a claim is valid without renewal
LEASE_SECONDS = 60.0
COMMIT_EVERY_SECONDS = 1.0
COMMIT_EVERY_RESULTS = 50
#: the most jobs in one task (short jobs go several to a task; see task_size)
MAX_BATCH = 64
#: a task is at most this fraction of each worker's share of the work not yet in a task
GUIDED_FRACTION = 1 / 2


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
              out: TextIO | None = None, cluster: Any = None) -> RunSummary:
    """Plan, sync and run every pending job of the sweep at ``spec_path``.

    ``cluster``: an embedded dask cluster already started for this run
    (:func:`sweep.cluster_process.start_for`); else it is started here when the options ask for one.
    """
    options = options or RunOptions()
    out = out or sys.stderr
    started = time.monotonic()
    if cluster is None:
        from sweep.cluster_process import start_for

        cluster = start_for(spec_path, options.backend, options.workers, options.scheduler)
    try:
        return _run(spec_path, options, out, started, cluster)
    finally:
        if cluster is not None:
            cluster.stop()  # unless the run used (and stopped) it: nothing to do, or bad input


def _run(spec_path: str | Path, options: RunOptions, out: TextIO, started: float, cluster: Any) -> RunSummary:
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
        loop = _Loop(store, inputs, options, out, cluster)
        try:
            loop.run(counts)
        finally:
            summary.ran, summary.interrupted = loop.ran, loop.interrupted
        _finish(summary, store.counts(inputs.spec.name), started)
        return summary
    finally:
        store.close()


def _finish(summary: RunSummary, counts: Mapping[str, int], started: float) -> None:
    summary.done, summary.failed = counts["done"], counts["failed"]
    summary.pending = counts["pending"] + counts["running"]
    summary.seconds = time.monotonic() - started


class _Loop:
    """One driver's dispatch loop over the tracker (see the module docstring)."""

    def __init__(self, store: Store, inputs: Inputs, options: RunOptions, out: TextIO,
                 cluster: Any = None) -> None:
        from sweep.executors import make_executor

        self.store, self.inputs, self.options, self.out = store, inputs, options, out
        self.spec = inputs.spec
        self.owner = owner_id()
        workers = options.workers or os.cpu_count() or 1
        # the executor may fork this process (sweep.forking): no database connection is copied
        store.drop_connections()
        self.executor = make_executor(options.backend, workers, scheduler=options.scheduler,
                                      memory_limit=self.spec.memory_limit, cluster=cluster,
                                      **options.executor_options)
        self.job_seconds: float | None = None
        self.unclaimed = 0  # pending jobs not yet claimed, as far as this driver knows
        self.configs = inputs.plan.by_config
        self.rows = JobRows(store, inputs.plan, inputs.datasets)
        self.handles: dict[str, Any] = {}
        self.inflight: dict[Any, list[Claimed]] = {}
        self.isolated: list[Claimed] = []
        self.finished: list[Any] = []
        self.give_up: dict[str, str] = {}
        self.ran = 0
        self.interrupted = False
        self.exhausted = False

    def run(self, counts: Mapping[str, int]) -> None:
        from sweep.progress import Progress

        inner, self.inner_keys = inner_progress(self.store, self.inputs.plan, self.spec.name)
        self.progress = Progress(sum(counts.values()), counts["done"], counts["failed"],
                                 mode=self.options.progress, stream=self.out, inner=inner)
        self.unclaimed = counts["pending"]
        last_commit = last_renew = time.monotonic()
        try:
            while True:
                self._dispatch()
                if not self.inflight:
                    if self._requeue_stale():  # a dead driver's jobs, found once ours ran out
                        continue
                    break
                for future in self.executor.wait(self.inflight, timeout=0.5):
                    self._collect(future)
                now = time.monotonic()
                if len(self.finished) >= COMMIT_EVERY_RESULTS or now - last_commit >= COMMIT_EVERY_SECONDS:
                    self._commit()
                    last_commit = now
                if now - last_renew >= self.options.lease_seconds / 3:
                    self.store.renew(self.owner, [c.key for batch in self.inflight.values() for c in batch],
                                     self.options.lease_seconds)
                    self._requeue_stale()
                    last_renew = now
            self._commit()
            self.executor.close()
        except KeyboardInterrupt:
            self.interrupted = True
            self._stop()
        except Exception:
            self._abandon()
            raise
        finally:
            self.progress.close()

    def _requeue_stale(self) -> int:
        """Give back to pending the jobs of drivers that died or lost touch (expired leases)."""
        requeued = self.store.requeue_stale(self.spec.name)
        if requeued:
            self.exhausted = False
            self.unclaimed += requeued
        return requeued

    def _stop(self) -> None:
        print("interrupted: committing finished jobs, giving the rest back as pending", file=self.out, flush=True)
        for future in [f for f in self.inflight if f.done()]:
            try:
                self._collect(future)
            except KeyboardInterrupt:  # Ctrl-C reached its worker too (the whole process group):
                pass  # its jobs are given back below, with every other one still held
        self._give_back()

    def _abandon(self) -> None:
        """After an error the loop cannot go on from (the embedded cluster stopped, the store
        failed): keep what finished, give the rest back as pending, as far as the store still
        lets it (else the leases expire, and the next run re-queues those jobs)."""
        try:
            self._give_back()
        except Exception:  # noqa: BLE001 - the error being raised says what went wrong
            pass

    def _give_back(self) -> None:
        """Commit what finished, give back as pending every job still held (including jobs
        claimed but not yet submitted), and stop the executor."""
        try:
            self._commit()
            self.store.release_all(self.owner)
        finally:
            self.executor.close(kill=True)

    @property
    def window(self) -> int:
        """Jobs to hold at once: ``--claim``, else four tasks per worker (one job per worker until
        the first results tell how long a job takes)."""
        if self.options.claim:
            return self.options.claim
        if self.job_seconds is None:
            return self.executor.workers
        batch = task_size(self.unclaimed, self.job_seconds, self.executor.task_seconds, self.executor.workers)
        return 4 * self.executor.workers * batch

    def _dispatch(self) -> None:
        held = [c for batch in self.inflight.values() for c in batch]
        if any(c.attempts > 1 for c in held):
            return  # a job retried after a worker death runs alone
        if not self.isolated and not self.exhausted and len(held) <= self.window // 2:
            wanted = self.window - len(held)
            if self.unclaimed <= wanted + self.window // 2:
                wanted = max(wanted, self.unclaimed)  # the last few too, not in a round of their own
            claimed = self.store.claim(self.spec.name, self.owner, wanted,
                                       self.options.lease_seconds, self.spec.max_attempts)
            self.exhausted = not claimed
            # fewer than asked: the rest went to other drivers
            self.unclaimed = max(0, self.unclaimed - len(claimed)) if len(claimed) == wanted else 0
            self.isolated.extend(c for c in claimed if c.attempts > 1)
            for batch in self._batches([c for c in claimed if c.attempts == 1]):
                self._submit(batch)
        if self.isolated and not self.inflight:
            self._submit([self.isolated.pop(0)])

    def _batches(self, claimed: list[Claimed]) -> list[list[Claimed]]:
        """Tasks of :func:`task_sizes` jobs, each on one dataset (the executors run tasks in the
        order submitted, so the small ones come last)."""
        by_data: dict[str, list[Claimed]] = {}
        for c in claimed:
            by_data.setdefault(c.fingerprint, []).append(c)
        tasks, unassigned = [], self.unclaimed + len(claimed)
        for group in by_data.values():
            start = 0
            for size in task_sizes(len(group), unassigned, self.job_seconds, self.executor.task_seconds,
                                   self.executor.workers):
                tasks.append(group[start:start + size])
                start += size
            unassigned -= len(group)
        return tasks

    def _submit(self, batch: list[Claimed]) -> None:
        from workers.job import Job

        fp = batch[0].fingerprint
        if fp not in self.handles:
            self.handles[fp] = self.executor.share(self.inputs.datasets[batch[0].dataset])
        jobs = []
        for c in batch:
            config = self.configs[c.config_id]
            test, train = self.rows(c)
            jobs.append(Job(key=c.key, worker=config.worker, params=dict(config.params), dataset=c.dataset,
                            fingerprint=fp, repeat=c.repeat, fold=c.fold,
                            test_index=test, time_limit=self.spec.time_limit, train_index=train))
        self.inflight[self.executor.submit(jobs, self.handles[fp])] = batch

    def _collect(self, future: Any) -> None:
        batch = self.inflight.pop(future)
        try:
            results = future.result()
        except BaseException as exc:  # noqa: BLE001 - the worker died or the engine lost the task
            if not self.executor.is_worker_death(exc) and not isinstance(exc, Exception):
                raise
            for claimed in batch:
                self._worker_died(claimed, exc)
            return
        self.finished.extend(results)
        self.ran += len(results)
        self._learn_job_seconds(results)

    def _learn_job_seconds(self, results: list[Any]) -> None:
        seconds = sum(r.finished_at - r.started_at for r in results) / len(results)
        self.job_seconds = seconds if self.job_seconds is None else 0.8 * self.job_seconds + 0.2 * seconds

    def _worker_died(self, claimed: Claimed, exc: BaseException) -> None:
        kind = getattr(exc, "kind", type(exc).__name__)  # a relayed loss names the engine's exception
        reason = f"worker process died ({kind}: {_death_message(exc)})"
        blamed = self.executor.blames_job(exc)
        if blamed and claimed.attempts >= self.spec.max_attempts:
            self.give_up[claimed.key] = f"{reason}; gave up after {claimed.attempts} attempts"
        else:
            self.store.release(self.owner, [claimed.key], count_attempt=blamed)
            self.exhausted = False
            self.unclaimed += 1

    def _commit(self) -> None:
        if not self.finished and not self.give_up:
            return
        self.store.commit_results(self.owner, self.finished, self.give_up)
        ok = sum(r.ok for r in self.finished)
        inner = sum(r.key in self.inner_keys for r in self.finished) + sum(k in self.inner_keys for k in self.give_up)
        self.progress.update(done=ok, failed=len(self.finished) - ok + len(self.give_up), inner=inner)
        self.finished, self.give_up = [], {}


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


def _death_message(exc: BaseException) -> str:
    """The first sentence of a worker-death error, without the engine's task names and addresses,
    so that ``status`` groups the failures of one cause under one message."""
    text = " ".join(str(exc).split())
    text = re.sub(r"'[\w.-]+-[0-9a-f]{32}'|'run_jobs?-[0-9a-f-]+'", "the job", text)
    first = re.split(r"(?<=[.!?])\s", text, maxsplit=1)[0]
    return first[:200]
