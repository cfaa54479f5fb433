"""One fold job: build a fresh estimator, fit on the training part, score the test part.

``run_job`` is the only function executors call. It never raises for a
failing fit: the failure, with its traceback, is part of the result record,
so that one bad configuration does not stop a sweep.

Seeds: a worker that declares a ``random_state`` parameter gets, when the
configuration leaves it at ``None`` (the default), the fold job's derived
seed :func:`derived_seed` of the fold scheme's seed, the repeat and the
fold: the same for every configuration on that fold (common random numbers,
so comparisons stay paired) and different across folds and repeats, so that
repeated cross-validation samples the variance of a model's own randomness.
An explicit value in the configuration is used as given.
"""

from __future__ import annotations

import ctypes
import socket
import threading
import time
import traceback
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from workers.impute import fill_from_training


@dataclass(frozen=True, eq=False)
class Job:
    """Everything a worker needs to run one (dataset, configuration, repeat, fold)."""

    #: stable identity: same key, same result
    key: str
    #: registered worker name, or "package.module:attribute"
    worker: str
    #: complete canonical parameters (defaults filled in)
    params: dict[str, Any]
    #: dataset name (for messages) and content fingerprint (checked against the data)
    dataset: str
    fingerprint: str
    repeat: int
    fold: int
    #: row indices of the test part; the training part is every other row
    test_index: np.ndarray
    #: seconds; None for no limit
    time_limit: float | None = None
    #: row indices of the training part when it is not every row outside the test part (an inner job of
    #: nested selection trains on part of its outer training part; the outer test rows are in neither)
    train_index: np.ndarray | None = None
    #: the fold scheme's seed: a declared ``random_state`` left at None gets ``derived_seed(folds_seed, repeat, fold)``
    folds_seed: int = 0


@dataclass(frozen=True)
class JobResult:
    """What one job produced; ``ok`` is False for a failed or timed-out job."""

    key: str
    ok: bool
    accuracy: float | None = None
    balanced_accuracy: float | None = None
    kappa: float | None = None
    train_accuracy: float | None = None
    fit_seconds: float = 0.0
    predict_seconds: float = 0.0
    #: model size figures the worker reports (e.g. rules_selected)
    figures: dict[str, float] = field(default_factory=dict)
    #: the fitted model as readable text, when the worker offers one
    model_text: str | None = None
    #: the traceback or reason when not ok
    error: str | None = None
    timed_out: bool = False
    worker_version: str = ""
    host: str = ""
    started_at: float = 0.0
    finished_at: float = 0.0


@dataclass(frozen=True)
class DataRef:
    """A dataset shipped once to a file that worker processes load and keep."""

    path: str
    fingerprint: str


_cache: dict[str, Any] = {}
_CACHE_SIZE = 4


def resolve_data(data: Any) -> Any:
    """The dataset itself, loading (once per process) a :class:`DataRef`."""
    if not isinstance(data, DataRef):
        return data
    if data.fingerprint not in _cache:
        import pickle

        with open(data.path, "rb") as handle:
            loaded = pickle.load(handle)
        while len(_cache) >= _CACHE_SIZE:
            _cache.pop(next(iter(_cache)))
        _cache[data.fingerprint] = loaded
    return _cache[data.fingerprint]


def derived_seed(folds_seed: int, repeat: int, fold: int, *, inner: bool = False) -> int:
    """The seed of fold ``fold`` of repeat ``repeat`` under a fold scheme seeded ``folds_seed``.

    numpy's ``SeedSequence`` with the scheme's seed as entropy and ``(repeat,
    fold)`` as spawn key (its documented way to derive independent streams;
    ``(repeat, fold, 1)`` for an inner job of nested selection, whose packed
    fold number could otherwise repeat an outer fold's seed),
    cut to ``[0, 2**31 - 1]``, the range every declared ``random_state`` accepts.
    Part of what a job key stands for (it covers the scheme's seed, the repeat
    and the fold): never change it without changing the workers' versions.
    """
    key = (repeat, fold, 1) if inner else (repeat, fold)
    state = np.random.SeedSequence(folds_seed, spawn_key=key).generate_state(1, np.uint32)
    return int(state[0] >> 1)


def job_params(worker: Any, job: Job) -> dict[str, Any]:
    """The job's parameters as the worker's ``build`` gets them: a declared ``random_state`` left at
    None filled with the fold's :func:`derived_seed`."""
    params = dict(job.params)
    if "random_state" in worker.params and params.get("random_state") is None:
        params["random_state"] = derived_seed(job.folds_seed, job.repeat, job.fold,
                                              inner=job.train_index is not None)
    return params


class JobTimeout(BaseException):
    """Raised inside a job that exceeded its time limit (a BaseException, so that no `except Exception` in a
    worker swallows it)."""


def run_job(job: Job, data: Any) -> JobResult:
    """Run one fold job on ``data`` (a :class:`sweep.datasets.Dataset` or a :class:`DataRef`); never raises."""
    started = time.time()
    base = dict(key=job.key, host=socket.gethostname(), started_at=started)
    try:
        from workers.registry import get_worker

        worker = get_worker(job.worker)
        base["worker_version"] = worker.version
        data = resolve_data(data)
        if data.fingerprint != job.fingerprint:
            raise ValueError(f"dataset {job.dataset!r} has fingerprint {data.fingerprint}, "
                             f"the job expects {job.fingerprint}")
        # built (and its libraries imported) before the clock starts: an import cut short by the
        # limit is rolled back, so every later job in that process would import, and time out, again
        estimator = worker.build(job_params(worker, job), data)
        with _time_limit(job.time_limit):
            scores = _fit_and_score(worker, estimator, job, data)
        return JobResult(ok=True, finished_at=time.time(), **base, **scores)
    except JobTimeout:
        return JobResult(ok=False, timed_out=True, error=f"timed out after {job.time_limit:g} s",
                         finished_at=time.time(), **base)
    except Exception:  # a failing job is data, not a crash: keep its traceback
        return JobResult(ok=False, error=traceback.format_exc(limit=20), finished_at=time.time(), **base)


def run_jobs(jobs: list[Job], data: Any) -> list[JobResult]:
    """Run several short jobs on the same dataset in one task (the run loop batches jobs of
    milliseconds, so that the per-task cost of the executor does not dominate); never raises."""
    return [run_job(job, data) for job in jobs]


def _fit_and_score(worker: Any, estimator: Any, job: Job, data: Any) -> dict[str, Any]:
    from workers.metrics import accuracy, balanced_accuracy, kappa

    test = np.zeros(len(data.y), dtype=bool)
    test[job.test_index] = True
    if job.train_index is None:
        train = ~test
    else:
        train = np.zeros(len(data.y), dtype=bool)
        train[job.train_index] = True
        if (train & test).any():
            raise ValueError(f"job {job.key}: its training and test rows overlap")
    X_train, y_train = data.X[train], data.y[train]
    X_test, y_test = data.X[test], data.y[test]
    # a dataset loaded with missing = "impute" has NaN cells: filled from this training part
    X_train, X_test = fill_from_training(X_train, X_test, data.nominal, data.feature_names)
    t0 = time.perf_counter()
    estimator.fit(X_train, y_train)
    fit_seconds = time.perf_counter() - t0
    t0 = time.perf_counter()
    predicted = estimator.predict(X_test)
    predict_seconds = time.perf_counter() - t0
    train_predicted = estimator.predict(X_train)
    extra = worker.report(estimator, X_test) if worker.report is not None else {}
    return dict(
        accuracy=accuracy(y_test, predicted),
        balanced_accuracy=balanced_accuracy(y_test, predicted),
        kappa=kappa(y_test, predicted),
        train_accuracy=accuracy(y_train, train_predicted),
        fit_seconds=fit_seconds,
        predict_seconds=predict_seconds,
        figures={k: float(v) for k, v in extra.get("figures", {}).items()},
        model_text=extra.get("model_text"),
    )


class _time_limit:
    """Raise :class:`JobTimeout` in the job's own thread once ``seconds`` have passed.

    A timer thread delivers the exception with ``PyThreadState_SetAsyncExc``, so
    the limit works wherever the job runs: a process's main thread (joblib, in
    process) or a worker thread (dask). Like any Python-level interruption it
    lands between bytecodes, i.e. after the numpy call in progress returns.
    """

    def __init__(self, seconds: float | None) -> None:
        self.seconds = seconds
        self.lock = threading.Lock()
        self.active = False
        self.timer: threading.Timer | None = None

    def __enter__(self) -> None:
        if not self.seconds:
            return
        self.thread_id = threading.get_ident()
        self.active = True
        self.timer = threading.Timer(self.seconds, self._expire)
        self.timer.daemon = True
        self.timer.start()

    def _expire(self) -> None:
        with self.lock:
            if self.active:
                ctypes.pythonapi.PyThreadState_SetAsyncExc(ctypes.c_ulong(self.thread_id),
                                                           ctypes.py_object(JobTimeout))

    def __exit__(self, *exc: object) -> None:
        if self.timer is not None:
            with self.lock:
                self.active = False
            self.timer.cancel()
