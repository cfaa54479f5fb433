"""Prescreening of the candidate rules by subgroup discovery (weighted relative accuracy).

For each class C, rules are selected one at a time. Every training example
e carries a count i(e) of how often an already selected rule of class C has
covered it (matching degree > 0) and the weight ``w(e) = 1 / (i(e) + 1)``;
an example of class C is removed once covered ``cover_limit`` (the kt of the
method) times. With the sums taken over the examples not removed,

* ``n''(A)     = sum_e w(e) mu_A(e)``,
* ``n''(A, C)  = sum_{e in C} w(e) mu_A(e)``,
* ``n'(C)      = sum_{e in C} w(e)``,

the weighted relative accuracy is
``wWRAcc''(A -> C) = n''(A, C) / n'(C) * (n''(A, C) / n''(A) - N_C / N)``
and the best not yet selected rule is taken.

Choices left open by the method, documented here: only examples of class C
are counted and removed (the others keep weight 1, as in subgroup discovery
the negatives are never "covered"); a rule that covers no remaining example
of C is not a candidate any more; selection stops when no example of C is
left or no candidate is; ties go to the rule found first by the miner.
"""

from __future__ import annotations

import numpy as np


def weighted_relative_accuracy(match: np.ndarray, in_class: np.ndarray, weight: np.ndarray,
                               class_share: float) -> tuple[np.ndarray, np.ndarray]:
    """wWRAcc'' of rules with matching vectors ``match`` (n_rules, N); also n''(A, C).

    ``weight`` is zero for removed examples. Rules with ``n''(A, C) = 0``
    get ``-inf``.
    """
    n_a = match @ weight
    w_c = np.where(in_class, weight, 0.0)
    n_ac = match @ w_c
    n_c = w_c.sum()
    ok = (n_ac > 0) & (n_c > 0)
    safe_a = np.where(ok, n_a, 1.0)
    value = np.where(ok, n_ac / max(n_c, 1e-300) * (n_ac / safe_a - class_share), -np.inf)
    return value, n_ac


def prescreen_class(match: np.ndarray, in_class: np.ndarray, cover_limit: int,
                    trace: list[np.ndarray] | None = None) -> np.ndarray:
    """Select rules of one class; returns their indices in selection order.

    Parameters
    ----------
    match : ndarray of shape (n_rules, n_examples)
        Matching degrees of this class's candidate rules on the training part.
    in_class : ndarray of bool, shape (n_examples,)
    cover_limit : int
        Times an example may be covered before it is removed.
    trace : list, optional
        When given, the example weights after each selection are appended
        (removed examples weigh 0), for inspection and tests.
    """
    n_rules = match.shape[0]
    share = in_class.mean()
    count = np.zeros(match.shape[1])
    fired = match > 0
    available = np.ones(n_rules, dtype=bool)
    chosen: list[int] = []
    while available.any():
        active = ~in_class | (count < cover_limit)
        weight = np.where(active, 1.0 / (count + 1.0), 0.0)
        if not (active & in_class).any():
            break
        value, n_ac = weighted_relative_accuracy(match, in_class, weight, share)
        value[~available] = -np.inf
        available &= n_ac > 0
        if not available.any():
            break
        best = int(np.argmax(value))
        chosen.append(best)
        available[best] = False
        count[fired[best] & in_class & active] += 1
        if trace is not None:
            active = ~in_class | (count < cover_limit)
            trace.append(np.where(active, 1.0 / (count + 1.0), 0.0))
    return np.asarray(chosen, dtype=np.intp)


def prescreen(M: np.ndarray, items: np.ndarray, classes: np.ndarray, y: np.ndarray,
              cover_limit: int) -> np.ndarray:
    """Indices of the rules kept, class by class (each class in selection order).

    ``M`` is the membership matrix and ``items`` the rules' padded
    antecedents; matching degrees are formed one class at a time, which
    bounds the memory by the largest class's candidates.
    """
    from workers.fuzzy.reasoning import matching_degrees

    kept = []
    for c in np.unique(classes):
        idx = np.flatnonzero(classes == c)
        kept.append(idx[prescreen_class(matching_degrees(M, items[idx]), y == c, cover_limit)])
    return np.concatenate(kept) if kept else np.zeros(0, dtype=np.intp)
