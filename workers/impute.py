"""Filling missing cells inside a fold job, from its training part alone.

A dataset loaded with ``missing = "impute"`` keeps its empty cells as NaN.
Each fold job fills them with statistics of *its own training rows*: the
median of a numeric column, the most frequent code of a nominal one (on a
tie the smallest code, which is the first category in sorted order). The
test rows are filled with those same training values, so nothing about a
test fold leaks into the model that is scored on it: imputing from the
whole file first would let every test row's values shift the medians its
own model was trained with (common practice in cross-validation: every
step fitted to data is fitted inside the fold).
"""

from __future__ import annotations

from typing import Sequence

import numpy as np


def fill_from_training(X_train: np.ndarray, X_test: np.ndarray, nominal: Sequence[bool],
                       feature_names: Sequence[str] = ()) -> tuple[np.ndarray, np.ndarray]:
    """``X_train`` and ``X_test`` with every NaN replaced by its column's training statistic.

    Returns the inputs themselves when neither holds a NaN. Raises ``ValueError`` naming the
    column when a column with missing cells has no value at all among the training rows.
    """
    gaps = np.isnan(X_train).any(axis=0) | np.isnan(X_test).any(axis=0)
    if not gaps.any():
        return X_train, X_test
    X_train, X_test = X_train.copy(), X_test.copy()
    for j in np.flatnonzero(gaps):
        present = X_train[:, j][~np.isnan(X_train[:, j])]
        if present.size == 0:
            name = feature_names[j] if j < len(feature_names) else f"#{j}"
            raise ValueError(f"column {name!r} has no value in this fold's training part to impute from")
        if nominal[j]:
            fill = float(np.argmax(np.bincount(present.astype(np.int64))))  # argmax: the first on a tie
        else:
            fill = float(np.median(present))
        X_train[np.isnan(X_train[:, j]), j] = fill
        X_test[np.isnan(X_test[:, j]), j] = fill
    return X_train, X_test
