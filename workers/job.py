"""One fold job: build a fresh estimator, fit on the training part, score the test part.

``run_job`` is the only function executors call. It never raises for a
failing fit: the failure, with its traceback, is part of the result record,
so that one bad configuration does not stop a sweep.
"""

from __future__ import annotations

import signal
import socket
import threading
import time
import traceback
from dataclasses import dataclass, field
from typing import Any

import numpy as np


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


class JobTimeout(Exception):
    """Raised inside a job that exceeded its time limit."""


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
        with _time_limit(job.time_limit):
            scores = _fit_and_score(worker, job, data)
        return JobResult(ok=True, finished_at=time.time(), **base, **scores)
    except JobTimeout:
        return JobResult(ok=False, timed_out=True, error=f"timed out after {job.time_limit:g} s",
                         finished_at=time.time(), **base)
    except Exception:  # a failing job is data, not a crash: keep its traceback
        return JobResult(ok=False, error=traceback.format_exc(limit=20), finished_at=time.time(), **base)


def _fit_and_score(worker: Any, job: Job, data: Any) -> dict[str, Any]:
    from workers.metrics import accuracy, balanced_accuracy, kappa

    test = np.zeros(len(data.y), dtype=bool)
    test[job.test_index] = True
    X_train, y_train = data.X[~test], data.y[~test]
    X_test, y_test = data.X[test], data.y[test]
    estimator = worker.build(dict(job.params), data)
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
    """SIGALRM-based limit; only where signals can be used (the main thread of a process)."""

    def __init__(self, seconds: float | None) -> None:
        self.seconds = seconds
        self.armed = False

    def __enter__(self) -> None:
        if not self.seconds or threading.current_thread() is not threading.main_thread() \
                or not hasattr(signal, "setitimer"):
            return
        self.previous = signal.signal(signal.SIGALRM, _raise_timeout)
        signal.setitimer(signal.ITIMER_REAL, self.seconds)
        self.armed = True

    def __exit__(self, *exc: object) -> None:
        if self.armed:
            signal.setitimer(signal.ITIMER_REAL, 0)
            signal.signal(signal.SIGALRM, self.previous)


def _raise_timeout(signum: int, frame: object) -> None:
    raise JobTimeout()

