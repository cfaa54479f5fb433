"""Plug-in workers for the fault tests, named in specs as ``"tests.fault_workers:FAULTY"``.

Module level, so that loky and dask worker processes import them by name.

``FAULTY`` predicts the training majority class after ``seconds`` of waiting
(in 10 ms slices, so that the time limit's asynchronous exception lands
promptly). Its parameters are part of the job key:

- ``index``: a grid over it makes as many configurations as wanted;
- ``seconds``: how long ``fit`` takes;
- ``crash``: ``fit`` calls ``os._exit`` (the worker process dies, every time);
- ``text_kb``: kilobytes of model text in the result, to make commits heavy.

Two environment variables (*not* part of the key) let a test watch the runs:

- ``FOLDSWEEP_FAULT_STARTED``: a file; ``fit`` appends ``PID`` when it starts,
  so that a test can SIGKILL a worker process that is inside a job;
- ``FOLDSWEEP_FAULT_LOG``: a file; every job that ran to completion appends
  ``INDEX:TRAIN-DIGEST`` (one line per run, ``O_APPEND`` so that concurrent
  processes never interleave a line), so that a test can count how many
  times each job ran to completion across drivers and retries.
"""

from __future__ import annotations

import hashlib
import os
import time
from typing import Any

import numpy as np

from workers.params import Param
from workers.registry import Worker

CRASH_EXIT_CODE = 3


def _append(variable: str, line: str) -> None:
    path = os.environ.get(variable)
    if not path:
        return
    fd = os.open(path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
    try:
        os.write(fd, (line + "\n").encode())
    finally:
        os.close(fd)


class _Faulty:
    def __init__(self, params: dict[str, Any]) -> None:
        self.params = params

    def fit(self, X: np.ndarray, y: np.ndarray) -> "_Faulty":
        _append("FOLDSWEEP_FAULT_STARTED", str(os.getpid()))
        if self.params["crash"]:
            os._exit(CRASH_EXIT_CODE)
        end = time.monotonic() + self.params["seconds"]
        while time.monotonic() < end:
            time.sleep(0.01)
        self.digest = hashlib.md5(np.ascontiguousarray(X).tobytes()).hexdigest()[:12]
        values, counts = np.unique(y, return_counts=True)
        self.majority = values[np.argmax(counts)]
        return self

    def predict(self, X: np.ndarray) -> np.ndarray:
        return np.full(len(X), self.majority)


def _report(estimator: _Faulty, X_test: Any) -> dict[str, Any]:
    # the last step of a job: reaching it means the job ran to completion
    _append("FOLDSWEEP_FAULT_LOG", f"{estimator.params['index']}:{estimator.digest}")
    return {"figures": {"labelled": float(estimator.params["index"])},
            "model_text": "m" * (1024 * estimator.params["text_kb"]) or None}


FAULTY = Worker(
    name="faulty", version="1", build=lambda params, data: _Faulty(params), report=_report,
    params={
        "index": Param("int", 0, low=0, high=10**6, doc="a label that makes configurations distinct"),
        "seconds": Param("float", 0.0, low=0.0, high=600.0, doc="seconds fit takes"),
        "crash": Param("bool", False, doc="fit kills its worker process with os._exit"),
        "text_kb": Param("int", 0, low=0, high=4096, doc="kilobytes of model text in the result"),
    },
)
