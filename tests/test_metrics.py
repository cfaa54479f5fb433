"""workers.metrics against scikit-learn's metrics (the reference implementation)."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import accuracy_score, balanced_accuracy_score, cohen_kappa_score

from workers.metrics import accuracy, balanced_accuracy, kappa


@pytest.mark.parametrize("seed", range(25))
def test_metrics_equal_scikit_learn(seed: int) -> None:
    # reference: scikit-learn's accuracy_score, balanced_accuracy_score, cohen_kappa_score
    rng = np.random.default_rng(seed)
    k = int(rng.integers(2, 6))
    y_true = rng.integers(0, k, size=int(rng.integers(5, 80)))
    y_pred = np.where(rng.random(len(y_true)) < 0.6, y_true, rng.integers(0, k + 1, size=len(y_true)))
    assert accuracy(y_true, y_pred) == pytest.approx(accuracy_score(y_true, y_pred), abs=1e-12)
    with np.errstate(all="ignore"):
        import warnings

        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # scikit-learn warns on predicted classes absent from y_true
            expected_balanced = balanced_accuracy_score(y_true, y_pred)
    assert balanced_accuracy(y_true, y_pred) == pytest.approx(expected_balanced, abs=1e-12)
    assert kappa(y_true, y_pred) == pytest.approx(cohen_kappa_score(y_true, y_pred), abs=1e-12)


def test_kappa_hand_example() -> None:
    # Cohen (1960): kappa = (p_o - p_e) / (1 - p_e); here p_o = 0.7, p_e = 0.5*0.6 + 0.5*0.4 = 0.5 -> 0.4
    y_true = np.array([1] * 5 + [0] * 5)
    y_pred = np.array([1, 1, 1, 1, 0, 0, 0, 0, 1, 1])
    assert kappa(y_true, y_pred) == pytest.approx(0.4)


def test_kappa_of_one_shared_class_is_perfect_agreement() -> None:
    # 0/0 in Cohen's formula when both sides hold one and the same class; reported as 1.0 (common practice)
    assert kappa(np.array([2, 2, 2]), np.array([2, 2, 2])) == 1.0
