"""The fast mining and prescreening equal the straightforward computation (small data).

The references below form every item set's matching vector and sum it
(mining), and recompute every rule's weighted relative accuracy over every
example after each selection (prescreening), as the method describes them
(FARC-HD, Alcala-Fdez, Alcala, Herrera, IEEE TFS 19(5) 2011, sections III-A
and III-B). Both compare thresholds and ties with the same relative
tolerance as the project's code (1e-9), so that only the order of the
floating-point sums differs.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_digits, make_classification

from workers.fuzzy.mining import mine_rules
from workers.fuzzy.partitions import build_partition, memberships
from workers.fuzzy.prescreen import prescreen, weighted_relative_accuracy
from workers.fuzzy.reasoning import matching_degrees

TOL = 1e-9


def reference_mining(M, item_var, y, n_classes, min_support, max_conf, depth, min_conf=0.0):
    """Level by level, every child's matching vector formed and summed; rules in tree order."""
    n = len(y)
    rules = []
    for c in range(n_classes):
        in_class = y == c
        minsup = min_support * in_class.sum() / n
        nodes = [((i,), M[i]) for i in range(len(item_var))]
        for level in range(1, depth + 1):
            grow = []
            for items, mu in nodes:
                sup = mu[in_class].sum() / n
                if sup < minsup * (1 - TOL):
                    continue
                conf = min(1.0, mu[in_class].sum() / mu.sum())
                if min_conf == 0 or conf >= min_conf * (1 - TOL):
                    rules.append((items, c, sup, conf))
                if level < depth and not conf > max_conf * (1 + TOL):
                    grow.append((items, mu))
            nodes = [(items + (j,), mu * M[j]) for items, mu in grow
                     for j in range(len(item_var)) if item_var[j] > item_var[items[-1]]]
    return rules


def reference_prescreening(match, in_class, cover_limit):
    """Every rule's wWRAcc'' recomputed over every example after each selection."""
    count = np.zeros(match.shape[1])
    fired = match > 0
    available = np.ones(match.shape[0], dtype=bool)
    chosen = []
    while available.any():
        active = ~in_class | (count < cover_limit)
        if not (active & in_class).any():
            break
        weight = np.where(active, 1.0 / (count + 1.0), 0.0)
        value, n_ac = weighted_relative_accuracy(match, in_class, weight, in_class.mean())
        value[~available] = -np.inf
        available &= n_ac > 0
        if not available.any():
            break
        top = value.max()
        best = int(np.argmax(value >= top - TOL * abs(top)))  # first within the tolerance
        chosen.append(best)
        available[best] = False
        count[fired[best] & in_class & active] += 1
    return chosen


def _problems():
    X, y = make_classification(150, 5, n_informative=3, n_redundant=1, n_classes=3, random_state=2)
    nominal = np.zeros(6, dtype=bool)
    nominal[2] = True  # a nominal column in the middle: items are then not sorted by variable
    X = np.c_[X[:, :2], (X[:, 2] > 0).astype(float) + (X[:, 2] > 1), X[:, 2:]]
    yield X, y, nominal, 3
    digits_X, digits_y = load_digits(return_X_y=True)
    yield digits_X[:120, ::4], digits_y[:120] % 3, np.zeros(16, dtype=bool), 5


@pytest.mark.parametrize("case", range(2))
@pytest.mark.parametrize("max_conf, min_conf", [(0.8, 0.0), (0.7, 0.5)])
def test_fast_mining_equals_straightforward(case, max_conf, min_conf):
    X, y, nominal, labels = list(_problems())[case]
    p = build_partition(X, nominal, labels)
    M = memberships(p, X)
    fast = mine_rules(M, p.item_var, y, 3, 0.05, max_conf, 3, min_confidence=min_conf)
    ref = reference_mining(M, p.item_var, y, 3, 0.05, max_conf, 3, min_conf)
    got = [tuple(int(i) for i in row if i != p.pad) for row in fast.items]
    assert len(ref) > 50
    assert got == [r[0] for r in ref]  # the same rules in the same (tree) order
    assert list(fast.classes) == [r[1] for r in ref]
    np.testing.assert_allclose(fast.support, [r[2] for r in ref], rtol=1e-12)
    np.testing.assert_allclose(fast.confidence, [r[3] for r in ref], rtol=1e-12)
    outside = [matching_degrees(M, row[None])[0][y != c].sum() for row, c in zip(fast.items, fast.classes)]
    np.testing.assert_allclose(fast.outside, outside, rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("case", range(2))
@pytest.mark.parametrize("cover_limit", [1, 2, 3])
def test_fast_prescreening_equals_straightforward(case, cover_limit):
    X, y, nominal, labels = list(_problems())[case]
    p = build_partition(X, nominal, labels)
    M = memberships(p, X)
    rules = mine_rules(M, p.item_var, y, 3, 0.05, 0.8, 3)
    expected = []
    for c in range(3):
        idx = np.flatnonzero(rules.classes == c)
        expected.extend(idx[reference_prescreening(matching_degrees(M, rules.items[idx]), y == c, cover_limit)])
    assert len(expected) > 5
    # with the miner's out-of-class sums, and with those formed by prescreen itself
    assert list(prescreen(M, rules.items, rules.classes, y, cover_limit, rules.outside)) == expected
    assert list(prescreen(M, rules.items, rules.classes, y, cover_limit)) == expected
