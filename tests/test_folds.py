"""Tests of sweep.folds: equal to scikit-learn's splitter, the CV invariants, infeasible data, missing classes."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from sklearn.datasets import load_iris, load_wine
from sklearn.model_selection import RepeatedStratifiedKFold

from sweep.errors import DatasetError
from sweep.folds import Fold, check_feasible, compute_folds
from sweep.spec import FoldScheme


def labels(name: str) -> np.ndarray:
    return {"iris": load_iris, "wine": load_wine}[name]().target.astype(np.int64)


def unbalanced() -> np.ndarray:
    rng = np.random.default_rng(3)
    return rng.permutation(np.repeat([0, 1, 2], [50, 17, 6])).astype(np.int64)


SCHEMES = [FoldScheme(k=5, repeats=1, seed=0), FoldScheme(k=3, repeats=3, seed=11), FoldScheme(k=6, repeats=2, seed=5)]
DATA = ["iris", "wine", "unbalanced"]


def y_of(name: str) -> np.ndarray:
    return unbalanced() if name == "unbalanced" else labels(name)


@pytest.mark.parametrize("scheme", SCHEMES, ids=lambda s: s.key)
@pytest.mark.parametrize("data", DATA)
def test_folds_equal_scikit_learns_repeated_stratified_kfold(data: str, scheme: FoldScheme) -> None:
    # reference implementation: scikit-learn's RepeatedStratifiedKFold with the same k, repeats and seed
    y = y_of(data)
    reference = RepeatedStratifiedKFold(n_splits=scheme.k, n_repeats=scheme.repeats, random_state=scheme.seed)
    expected = [np.sort(test) for _, test in reference.split(np.zeros((len(y), 1)), y)]
    folds = compute_folds(y, scheme)
    assert [(f.repeat, f.fold) for f in folds] == [(r, i) for r in range(scheme.repeats) for i in range(scheme.k)]
    assert len(folds) == len(expected)
    for fold, test in zip(folds, expected):
        np.testing.assert_array_equal(fold.test_index, test)


@pytest.mark.parametrize("seed", range(12))
def test_folds_equal_scikit_learn_on_random_labels(seed: int) -> None:
    # reference implementation: scikit-learn's RepeatedStratifiedKFold, over random class sizes and k
    rng = np.random.default_rng(seed)
    k = int(rng.integers(2, 7))
    sizes = rng.integers(k, 40, size=int(rng.integers(2, 6)))
    y = rng.permutation(np.repeat(np.arange(len(sizes)), sizes)).astype(np.int64)
    scheme = FoldScheme(k=k, repeats=int(rng.integers(1, 4)), seed=int(rng.integers(0, 2**31 - 1)))
    reference = RepeatedStratifiedKFold(n_splits=k, n_repeats=scheme.repeats, random_state=scheme.seed)
    expected = [np.sort(test) for _, test in reference.split(np.zeros((len(y), 1)), y)]
    got = compute_folds(y, scheme)
    assert len(got) == len(expected)
    for fold, test in zip(got, expected):
        np.testing.assert_array_equal(fold.test_index, test)
    check_cv_coverage(got, y, scheme)


def check_cv_coverage(folds: list[Fold], y: np.ndarray, scheme: FoldScheme) -> None:
    """The invariants of a repeated k-fold split (common practice; cf. scikit-learn's check_cv_coverage)."""
    n = len(y)
    classes, totals = np.unique(y, return_counts=True)
    for repeat in range(scheme.repeats):
        tested = np.zeros(n, dtype=int)
        for fold in (f for f in folds if f.repeat == repeat):
            test = fold.test_index
            assert len(np.unique(test)) == len(test), "no row twice in one test part"
            train = np.setdiff1d(np.arange(n), test)
            assert not np.intersect1d(train, test).size, "train and test disjoint"
            assert len(train) + len(test) == n
            tested[test] += 1
            # stratified: each class's share of the test part is within one row of its share of the data
            counts = np.array([(y[test] == c).sum() for c in classes])
            assert np.all(np.abs(counts - totals / scheme.k) < 1 + 1e-9)
            assert fold.missing_classes == ()
        assert np.all(tested == 1), "every row tested exactly once per repeat"


@pytest.mark.parametrize("scheme", SCHEMES, ids=lambda s: s.key)
@pytest.mark.parametrize("data", DATA)
def test_cv_invariants(data: str, scheme: FoldScheme) -> None:
    y = y_of(data)
    check_cv_coverage(compute_folds(y, scheme), y, scheme)


def test_repeats_differ_and_seed_changes_folds() -> None:
    y = labels("iris")
    folds = compute_folds(y, FoldScheme(k=5, repeats=2, seed=0))
    assert not np.array_equal(folds[0].test_index, folds[5].test_index)
    other = compute_folds(y, FoldScheme(k=5, repeats=2, seed=1))
    assert any(not np.array_equal(a.test_index, b.test_index) for a, b in zip(folds, other))
    again = compute_folds(y, FoldScheme(k=5, repeats=2, seed=0))
    assert all(np.array_equal(a.test_index, b.test_index) for a, b in zip(folds, again))


def test_class_smaller_than_k_is_refused() -> None:
    y = np.array([0] * 10 + [1] * 10 + [2] * 2)
    with pytest.raises(DatasetError, match=r"data\.csv.*'rare' has 2 rows, fewer than folds\.k = 3"):
        check_feasible(y, ("common", "other", "rare"), FoldScheme(k=3), "data.csv")
    check_feasible(y, ("common", "other", "rare"), FoldScheme(k=2), "data.csv")  # 2 rows, 2 folds: fine


def test_training_part_lacking_a_class_is_reported() -> None:
    # one row of class 2: the fold that tests it trains without class 2 (check_feasible refuses such data
    # before a run; compute_folds itself must still record the gap, not hide it)
    y = np.array([0] * 6 + [1] * 6 + [2])
    with warnings.catch_warnings():
        # scikit-learn's splitter, if used underneath, warns about the least populated class
        warnings.filterwarnings("ignore", "The least populated class", UserWarning)
        folds = compute_folds(y, FoldScheme(k=3, repeats=1, seed=0))
    lacking = [f for f in folds if f.missing_classes]
    assert len(lacking) == 1
    assert lacking[0].missing_classes == (2,)
    assert 12 in lacking[0].test_index
    assert all(12 not in f.test_index for f in folds if not f.missing_classes)
