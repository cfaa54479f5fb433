"""Workers by name: what a spec's ``worker = "..."`` refers to.

A :class:`Worker` bundles a name, a version (part of every job key: a new
version means new jobs), its parameter declarations and two functions:

``build(params, data) -> estimator``
    a fresh, unfitted scikit-learn style estimator for one job, given the
    complete canonical parameters (defaults filled in) and the
    :class:`sweep.datasets.Dataset` (for its feature names, nominal mask,
    categories and class names).
``report(estimator, X_test) -> dict``  (optional)
    after fitting: ``{"figures": {name: number}, "model_text": str | None}``,
    the model size figures and a readable model stored with the job.
``check(params) -> list[str]``  (optional)
    problems across parameters of one complete canonical parameter set
    (each declared parameter alone is checked by its :class:`Param`); the
    spec reports the first as a one-line error.

Built-in workers are imported lazily, on first use, so that the command
line starts fast. A spec may also name ``"package.module:attribute"``, an
importable :class:`Worker` of the user's own (tests and benchmarks use this).

Adding a built-in worker: write the module, then add one line to
``_BUILTIN`` below.
"""

from __future__ import annotations

import difflib
import importlib
from dataclasses import dataclass, field
from typing import Any, Callable, Mapping

from workers.params import Param

_BUILTIN: dict[str, str] = {
    "decision_tree": "workers.baselines:DECISION_TREE",
    "knn": "workers.baselines:KNN",
    "logistic_regression": "workers.baselines:LOGISTIC_REGRESSION",
    "random_forest": "workers.baselines:RANDOM_FOREST",
    "fuzzy_rules": "workers.fuzzy.worker:FUZZY_RULES",
}


@dataclass(frozen=True)
class Worker:
    """A kind of fold job: how to build the estimator and what it declares."""

    #: the name a spec uses
    name: str
    #: changes whenever the worker's results could change; part of every job key
    version: str
    #: declared parameters, by name
    params: Mapping[str, Param]
    #: (params, data) -> unfitted estimator
    build: Callable[[dict[str, Any], Any], Any] = field(compare=False)
    #: (fitted estimator, X_test) -> {"figures": {...}, "model_text": str | None}
    report: Callable[[Any, Any], dict[str, Any]] | None = field(default=None, compare=False)
    #: (complete params) -> problems across parameters, [] when none
    check: Callable[[dict[str, Any]], list[str]] | None = field(default=None, compare=False)


_loaded: dict[str, Worker] = {}


def worker_names() -> list[str]:
    """The built-in worker names."""
    return sorted(_BUILTIN)


def get_worker(name: str) -> Worker:
    """Return the worker called ``name``, or raise ``KeyError`` with the nearest valid name."""
    if name in _loaded:
        return _loaded[name]
    target = _BUILTIN.get(name, name if ":" in name else None)
    if target is None:
        near = difflib.get_close_matches(name, _BUILTIN, n=1)
        hint = f"did you mean {near[0]!r}? " if near else ""
        raise KeyError(f"unknown worker {name!r}: {hint}known workers are {', '.join(worker_names())}, "
                       "or 'package.module:attribute'")
    module_name, _, attr = target.partition(":")
    try:
        worker = getattr(importlib.import_module(module_name), attr)
    except (ImportError, AttributeError) as exc:
        raise KeyError(f"worker {name!r} cannot be imported: {exc}") from None
    if not isinstance(worker, Worker):
        raise KeyError(f"worker {name!r} is not a workers.registry.Worker")
    _loaded[name] = worker
    return worker
