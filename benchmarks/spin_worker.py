"""A calibrated CPU-bound worker for the pipeline benchmarks: ``fit`` computes for ``ms`` milliseconds."""

from __future__ import annotations

import time

import numpy as np

from workers.params import Param
from workers.registry import Worker


def spin(ms: float) -> float:
    """Compute for ``ms`` milliseconds of CPU time; returns a value so the work is not optimised away."""
    end = time.process_time() + ms / 1000.0
    acc = 0.0
    while time.process_time() < end:
        acc += sum(i * i for i in range(200))
    return acc


class SpinEstimator:
    def __init__(self, ms: float = 20.0) -> None:
        self.ms = ms

    def fit(self, X: np.ndarray, y: np.ndarray) -> "SpinEstimator":
        spin(self.ms)
        self.majority_ = int(np.bincount(y).argmax())
        return self

    def predict(self, X: np.ndarray) -> np.ndarray:
        return np.full(len(X), self.majority_)


SPIN = Worker(
    name="spin", version="1",
    params={"ms": Param("float", 20.0, low=0, high=60_000), "index": Param("int", 0, low=0, high=10**9)},
    build=lambda params, data: SpinEstimator(params["ms"]),
)
