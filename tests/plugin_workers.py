"""Plug-in workers for the end-to-end tests, named in specs as ``"tests.plugin_workers:SLOW_CENTROID"``.

Module level, so that loky worker processes import them by name.

``SLOW_CENTROID`` is a nearest-centroid classifier on the first ``n_features``
columns, written with numpy alone (no scikit-learn import, so that a fresh
worker process starts quickly and no import falls inside a job's time limit).
Building it takes ``build_delay`` seconds (as a first import of a model's
libraries can); before fitting it sleeps ``delay`` seconds (a parameter, part of the
configuration) plus ``FOLDSWEEP_TEST_DELAY`` seconds (an environment
variable, *not* part of the job key, so that a slow run and a quick
reference run have the same keys and must give the same metrics). It raises
``RuntimeError`` while the file named by ``fail_if_exists`` exists, so that a
test can make a job fail and then, once the file is gone, retry it.
"""

from __future__ import annotations

import os
import time
from typing import Any

import numpy as np

from workers.params import Param
from workers.registry import Worker

FAILURE_MESSAGE = "planned failure for the tests"


class _SlowCentroid:
    def __init__(self, params: dict[str, Any]) -> None:
        self.params = params

    def fit(self, X: np.ndarray, y: np.ndarray) -> "_SlowCentroid":
        # short sleeps in a Python loop: like a model's own Python code, a job time limit can stop it
        # between them (one long C-level sleep could not be interrupted before it returns)
        end = time.monotonic() + self.params["delay"] + float(os.environ.get("FOLDSWEEP_TEST_DELAY", "0"))
        while time.monotonic() < end:
            time.sleep(min(0.02, max(0.0, end - time.monotonic())))
        flag = self.params["fail_if_exists"]
        if flag and os.path.exists(flag):
            raise RuntimeError(FAILURE_MESSAGE)
        X = X[:, : self.params["n_features"]]
        self.classes_ = np.unique(y)
        self.centroids_ = np.array([X[y == c].mean(axis=0) for c in self.classes_])
        return self

    def predict(self, X: np.ndarray) -> np.ndarray:
        X = X[:, : self.params["n_features"]]
        distances = ((X[:, None, :] - self.centroids_[None, :, :]) ** 2).sum(axis=2)
        return self.classes_[np.argmin(distances, axis=1)]


def _build(params: dict[str, Any], data: Any) -> _SlowCentroid:
    time.sleep(params["build_delay"])  # stands in for a slow first import of a model's libraries
    return _SlowCentroid(params)


SLOW_CENTROID = Worker(
    name="slow_centroid", version="1", build=_build,
    params={
        "n_features": Param("int", 2, low=1, high=50, doc="leading feature columns used"),
        "delay": Param("float", 0.0, low=0.0, high=60.0, doc="seconds to sleep before fitting"),
        "fail_if_exists": Param("str", "", doc="raise while this file exists"),
        "build_delay": Param("float", 0.0, low=0.0, high=60.0, doc="seconds building the estimator takes"),
    },
)


class _SeedEcho:
    """Predicts the majority class and reports the seed it was built with (the seed tests read it back)."""

    def __init__(self, params: dict[str, Any]) -> None:
        self.random_state = params["random_state"]

    def fit(self, X: np.ndarray, y: np.ndarray) -> _SeedEcho:
        self.majority_ = int(np.bincount(y).argmax())
        return self

    def predict(self, X: np.ndarray) -> np.ndarray:
        return np.full(len(X), self.majority_)


SEED_ECHO = Worker(
    name="seed_echo", version="1", build=lambda params, data: _SeedEcho(params),
    report=lambda est, X_test: {"figures": {"seed": est.random_state}, "model_text": None},
    params={
        "random_state": Param("int", None, low=0, high=2**31 - 1, nullable=True, doc="seed; none: derived per fold"),
        "label": Param("str", "a", doc="a parameter that only makes configurations differ"),
    },
)
