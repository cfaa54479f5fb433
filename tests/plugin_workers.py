"""Plug-in workers for the end-to-end tests, named in specs as ``"tests.plugin_workers:SLOW_TREE"``.

Module level, so that loky worker processes import them by name.

``SLOW_TREE`` is a decision tree that first sleeps: ``delay`` seconds (a
parameter, part of the configuration) plus ``FOLDSWEEP_TEST_DELAY`` seconds
(an environment variable, *not* part of the job key, so that a slow run and
a quick reference run have the same keys and must give the same metrics).
It raises ``RuntimeError`` when the file named by ``fail_if_exists`` exists,
so that a test can make a job fail and then, once the file is gone, retry it.
"""

from __future__ import annotations

import os
import time
from typing import Any

# imported here, when the worker is looked up, not inside a job: a first import of scikit-learn on a
# loaded machine can take longer than a test's time limit, which then interrupts the import itself
from sklearn.tree import DecisionTreeClassifier

from workers.params import Param
from workers.registry import Worker

FAILURE_MESSAGE = "planned failure for the tests"


class _SlowTree:
    def __init__(self, params: dict[str, Any]) -> None:
        self.params = params
        self.tree = DecisionTreeClassifier(max_depth=params["max_depth"], random_state=0)

    def fit(self, X: Any, y: Any) -> "_SlowTree":
        # short sleeps in a Python loop: like a model's own Python code, a job time limit can stop it
        # between them (one long C-level sleep could not be interrupted before it returns)
        end = time.monotonic() + self.params["delay"] + float(os.environ.get("FOLDSWEEP_TEST_DELAY", "0"))
        while time.monotonic() < end:
            time.sleep(min(0.02, max(0.0, end - time.monotonic())))
        flag = self.params["fail_if_exists"]
        if flag and os.path.exists(flag):
            raise RuntimeError(FAILURE_MESSAGE)
        self.tree.fit(X, y)
        return self

    def predict(self, X: Any) -> Any:
        return self.tree.predict(X)


SLOW_TREE = Worker(
    name="slow_tree", version="1", build=lambda params, data: _SlowTree(params),
    params={
        "max_depth": Param("int", 3, low=1, high=50, doc="depth of the tree"),
        "delay": Param("float", 0.0, low=0.0, high=60.0, doc="seconds to sleep before fitting"),
        "fail_if_exists": Param("str", "", doc="raise when this file exists"),
    },
)
