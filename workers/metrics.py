"""Fold metrics computed from one confusion matrix (numpy only: cheap enough to run per job).

Definitions follow scikit-learn's ``accuracy_score``, ``balanced_accuracy_score``
(mean recall over the classes present in ``y_true``) and ``cohen_kappa_score``
(Cohen, 1960), which the tests use as the reference implementation.
"""

from __future__ import annotations

import numpy as np


def confusion(y_true: np.ndarray, y_pred: np.ndarray) -> np.ndarray:
    """Counts ``C[i, j]`` of true class i predicted as j, over the classes either side uses."""
    labels, codes = np.unique(np.concatenate([y_true, y_pred]), return_inverse=True)
    k = len(labels)
    t, p = codes[: len(y_true)], codes[len(y_true):]
    return np.bincount(t * k + p, minlength=k * k).reshape(k, k)


def accuracy(y_true: np.ndarray, y_pred: np.ndarray) -> float:
    return float(np.mean(np.asarray(y_true) == np.asarray(y_pred)))


def balanced_accuracy(y_true: np.ndarray, y_pred: np.ndarray) -> float:
    c = confusion(y_true, y_pred)
    support = c.sum(axis=1)
    present = support > 0
    return float(np.mean(np.diag(c)[present] / support[present]))


def kappa(y_true: np.ndarray, y_pred: np.ndarray) -> float:
    """Cohen's kappa; 1.0 when both sides hold one and the same class (perfect agreement, 0/0)."""
    c = confusion(y_true, y_pred).astype(float)
    n = c.sum()
    observed = np.trace(c) / n
    expected = float(c.sum(axis=0) @ c.sum(axis=1)) / n**2
    if expected == 1.0:
        return 1.0
    return float((observed - expected) / (1.0 - expected))
