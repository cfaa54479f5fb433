"""Stratified, seeded fold assignments: computed once per dataset and scheme, then stored.

scikit-learn's ``RepeatedStratifiedKFold`` is the splitter (and the
reference the tests compare against). Every configuration of a sweep sees
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
    """The folds of ``scheme`` over class labels ``y``, repeat by repeat."""
    from sklearn.model_selection import RepeatedStratifiedKFold

    splitter = RepeatedStratifiedKFold(n_splits=scheme.k, n_repeats=scheme.repeats, random_state=scheme.seed)
    classes = np.unique(y)
    folds = []
    for i, (train, test) in enumerate(splitter.split(np.zeros((len(y), 1)), y)):
        missing = tuple(int(c) for c in np.setdiff1d(classes, np.unique(y[train])))
        folds.append(Fold(i // scheme.k, i % scheme.k, np.sort(test).astype(np.int32), missing))
    return folds
