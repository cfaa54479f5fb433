"""Stratified, seeded fold assignments: computed once per dataset and scheme, then stored.

The assignment is scikit-learn's ``RepeatedStratifiedKFold`` (the reference
the tests compare against), reimplemented in numpy to keep planning light. Every configuration of a sweep sees
the same folds, so comparisons between configurations are paired.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sweep.errors import DatasetError
from sweep.spec import FoldScheme


@dataclass(frozen=True, eq=False)
class Fold:
    repeat: int
    fold: int
    #: sorted row indices of the test part
    test_index: np.ndarray
    #: class codes absent from the training part (reported, never hidden)
    missing_classes: tuple[int, ...]


def check_feasible(y: np.ndarray, classes: tuple[str, ...], scheme: FoldScheme, where: str) -> None:
    """Refuse a dataset with a class smaller than k (stratification cannot place it in every fold)."""
    counts = np.bincount(y, minlength=len(classes))
    small = [(classes[c], int(n)) for c, n in enumerate(counts) if n < scheme.k]
    if small:
        listed = ", ".join(f"{name!r} has {n}" for name, n in small)
        raise DatasetError(f"{where}: {listed} rows, fewer than folds.k = {scheme.k}; "
                           f"lower folds.k or drop the class")


def compute_folds(y: np.ndarray, scheme: FoldScheme) -> list[Fold]:
    """The folds of ``scheme`` over class labels ``y``, repeat by repeat.

    The same assignment as scikit-learn's ``RepeatedStratifiedKFold(n_splits=k,
    n_repeats=repeats, random_state=seed)`` (the tests check it fold for fold),
    computed here with numpy alone so that planning does not import scikit-learn.
    """
    y = np.asarray(y)
    classes = np.unique(y)
    rng = np.random.RandomState(scheme.seed)
    folds = []
    for repeat in range(scheme.repeats):
        assignment = _test_folds(y, scheme.k, rng)
        for fold in range(scheme.k):
            test = np.flatnonzero(assignment == fold)
            train_classes = np.unique(y[assignment != fold])
            missing = tuple(int(c) for c in np.setdiff1d(classes, train_classes))
            folds.append(Fold(repeat, fold, test.astype(np.int32), missing))
    return folds


def stratified_kfold(y: np.ndarray, k: int, seed: int) -> list[np.ndarray]:
    """The test parts (sorted positions into ``y``) of scikit-learn's ``StratifiedKFold(n_splits=k,
    shuffle=True, random_state=seed).split(y, y)``, in split order (the tests check it split for split)."""
    assignment = _test_folds(np.asarray(y), k, np.random.RandomState(seed))
    return [np.flatnonzero(assignment == i) for i in range(k)]


def _test_folds(y: np.ndarray, k: int, rng: np.random.RandomState) -> np.ndarray:
    # scikit-learn's stratified allocation: classes coded by order of first appearance, per-fold
    # counts by dealing the sorted labels round robin, each class's fold labels shuffled.
    _, first, inverse = np.unique(y, return_index=True, return_inverse=True)
    _, by_appearance = np.unique(first, return_inverse=True)
    coded = by_appearance[inverse]
    n_classes = len(first)
    dealt = np.sort(coded)
    allocation = np.asarray([np.bincount(dealt[i::k], minlength=n_classes) for i in range(k)])
    assignment = np.empty(len(y), dtype=np.int64)
    for c in range(n_classes):
        labels = np.arange(k).repeat(allocation[:, c])
        rng.shuffle(labels)
        assignment[coded == c] = labels
    return assignment
