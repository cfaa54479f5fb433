"""FARC-HD at its default parameters on real datasets: the accuracies the published method reaches.

Stratified 5-fold (the project's folds, seed 0, as in ``sweeps/real-study.toml``), every parameter at
its default, additive fuzzy reasoning, each fold job seeded as a study seeds it
(``workers.job.derived_seed``). The published figures are those of Alcalá-Fdez, Alcalá and Herrera,
"A fuzzy association rule-based classification model for high-dimensional problems with genetic rule
selection and lateral tuning", IEEE Transactions on Fuzzy Systems 19(5), 2011 (FARC-HD), values recalled
from memory: glass about 70 %, pima about 76 %. The floors sit a little below them, because a single
5-fold split of a small dataset moves by a few points between seeds.

The folds of a dataset run two at a time (joblib); the fits are shared by the tests of that dataset.
"""

from __future__ import annotations

from functools import lru_cache
from pathlib import Path

import numpy as np
import pytest
from joblib import Parallel, delayed

from sweep.datasets import BUILTINS, Dataset, load_dataset
from sweep.folds import compute_folds
from sweep.spec import FoldScheme
from workers.job import Job, job_params
from workers.metrics import accuracy
from workers.registry import get_worker

pytestmark = pytest.mark.slow

SCHEME = FoldScheme(k=5, repeats=1, seed=0)


@lru_cache(maxsize=None)
def dataset(name: str) -> Dataset:
    return load_dataset({"name": name, "builtin": name}, base_dir=Path("."), where=f"builtin {name}")


def fit_fold(worker_name: str, params: dict, data: Dataset, repeat: int, fold: int, test_index: np.ndarray):
    """One fold job as a study runs it: (test accuracy, rules per class or None)."""
    worker = get_worker(worker_name)
    job = Job(key="validation", worker=worker_name, params=params, dataset=data.name,
              fingerprint=data.fingerprint, repeat=repeat, fold=fold, test_index=test_index,
              folds_seed=SCHEME.seed)
    estimator = worker.build(job_params(worker, job), data)
    test = np.zeros(data.n_samples, dtype=bool)
    test[test_index] = True
    estimator.fit(data.X[~test], data.y[~test])
    rules = getattr(estimator, "rules_", None)
    per_class = None if rules is None else np.bincount(rules.classes, minlength=data.n_classes)
    return accuracy(data.y[test], estimator.predict(data.X[test])), per_class


@lru_cache(maxsize=None)
def cross_validate(worker_name: str, name: str, **overrides) -> tuple[float, list]:
    """(mean test accuracy over the 5 folds, per fold the rules per class) at default parameters."""
    data = dataset(name)
    worker = get_worker(worker_name)
    params = {key: p.default for key, p in worker.params.items()} | overrides
    folds = compute_folds(data.y, SCHEME)
    out = Parallel(n_jobs=2)(delayed(fit_fold)(worker_name, params, data, f.repeat, f.fold, f.test_index)
                             for f in folds)
    return float(np.mean([a for a, _ in out])), [c for _, c in out]


def fuzzy(name: str) -> tuple[float, list]:
    return cross_validate("fuzzy_rules", name, reasoning="additive")


def test_glass_reaches_the_published_accuracy():
    # FARC-HD on glass: about 70 % (Alcalá-Fdez, Alcalá, Herrera, IEEE TFS 19(5) 2011, from memory)
    assert fuzzy("glass")[0] >= 0.64


def test_pima_reaches_the_published_accuracy():
    # FARC-HD on pima: about 76 % (Alcalá-Fdez, Alcalá, Herrera, IEEE TFS 19(5) 2011, from memory)
    assert fuzzy("pima")[0] >= 0.76


def test_no_glass_class_is_left_without_rules():
    # the published method mines every class's frequent item sets (support scaled by the class's share,
    # Alcalá-Fdez et al. 2011), so every class, even tableware's 9 rows, keeps rules
    for per_class in fuzzy("glass")[1]:
        assert (per_class > 0).all(), per_class


@pytest.mark.parametrize("name", BUILTINS)
def test_no_worse_than_a_decision_tree(name):
    # reference: scikit-learn's decision tree (CART) on the same folds, 2 points of slack; that a rule
    # classifier at least matches a single tree on these classic sets is common practice, and FARC-HD's
    # published accuracies (Alcalá-Fdez et al. 2011, from memory) are above a tree's on glass and pima
    assert fuzzy(name)[0] >= cross_validate("decision_tree", name)[0] - 0.02
