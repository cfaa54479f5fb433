"""Per-stage checks of the FARC-HD classifier on small hand-checkable data."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from workers.fuzzy.genetic import chc, gray_code, hamming, hux, pcblx, penalized_fitness
from workers.fuzzy.mining import mine_rules, support_confidence
from workers.fuzzy.partitions import build_partition, label_names, memberships
from workers.fuzzy.prescreen import prescreen, prescreen_class
from workers.fuzzy.reasoning import class_scores, decide, matching_degrees, padded_degrees


# ------------------------------------------------------------------ partitions
def test_uniform_triangular_partition_by_hand():
    # five labels over [0, 4]: centres 0..4, step 1 (uniform triangular partition, FARC-HD section II)
    X = np.array([[0.0], [1.5], [4.0]])
    p = build_partition(X, np.array([False]), 5)
    np.testing.assert_allclose(p.centres()[0], [0, 1, 2, 3, 4])
    M = memberships(p, X)
    # x = 1.5 lies halfway between the centres 1 and 2: membership 0.5 in each (hand calculation)
    np.testing.assert_allclose(M[:5, 1], [0, 0.5, 0.5, 0, 0])
    np.testing.assert_allclose(M[:5, 0], [1, 0, 0, 0, 0])
    # Ruspini (strong) partition: memberships sum to one (common practice)
    np.testing.assert_allclose(M[:5].sum(axis=0), 1.0)
    np.testing.assert_allclose(M[-1], 1.0)  # padding row


def test_partition_uses_training_range_only_and_clips_test_values():
    train = np.array([[0.0], [2.0]])
    p = build_partition(train, np.array([False]), 3)
    np.testing.assert_allclose(p.centres()[0], [0, 1, 2])  # from the training part only
    test = np.array([[10.0], [-3.0]])
    M = memberships(p, test)
    # beyond the range: the extreme label as at the extreme training value (documented choice)
    np.testing.assert_allclose(M[:3, 0], [0, 0, 1])
    np.testing.assert_allclose(M[:3, 1], [1, 0, 0])


def test_lateral_displacement_shifts_whole_label():
    # 2-tuple representation (Alcalá, Alcalá-Fdez, Herrera, IEEE TFS 15(4), 2007):
    # (s_i, alpha) moves label s_i by alpha times the distance between label centres.
    X = np.array([[0.0], [4.0]])
    p = build_partition(X, np.array([False]), 5)
    disp = np.zeros(5)
    disp[2] = 0.25
    np.testing.assert_allclose(p.centres(disp)[0], [0, 1, 2.25, 3, 4])
    probe = np.array([[2.25], [1.25], [3.25], [1.75], [2.0]])
    M = memberships(p, probe, disp)
    # the triangle keeps its shape: peak at 2.25, feet at 1.25 and 3.25; 1.75 halfway up
    np.testing.assert_allclose(M[2], [1.0, 0.0, 0.0, 0.5, 0.75])
    # the other labels do not move
    np.testing.assert_allclose(M[1], memberships(p, probe)[1])


def test_nominal_variables_are_crisp_items():
    X = np.array([[0.0, 0.5], [2.0, 1.0], [1.0, 0.0], [2.0, 0.2]])
    p = build_partition(X, np.array([True, False]), 3)
    assert p.n_numeric_items == 3 and p.n_items == 6
    M = memberships(p, X)
    crisp = M[3:6]
    np.testing.assert_array_equal(crisp, [[1, 0, 0, 0], [0, 0, 1, 0], [0, 1, 0, 1]])
    assert list(p.item_var[3:]) == [0, 0, 0] and list(p.item_label[3:]) == [0, 1, 2]


def test_label_names_for_five_labels():
    assert label_names(5) == ("very_low", "low", "medium", "high", "very_high")


# ------------------------------------------------------------------ mining
def _two_label_data():
    # one variable, labels low = 1 - x and high = x over [0, 1]
    X = np.array([[0.0], [0.25], [0.5], [1.0]])
    y = np.array([0, 0, 1, 1])
    p = build_partition(X, np.array([False]), 2)
    return X, y, p, memberships(p, X)


def test_support_and_confidence_by_hand():
    _, y, _, M = _two_label_data()
    sup, conf = support_confidence(M[:2], y == 0)
    # rule "x IS low -> 0": mu = (1, .75, .5, 0); support (1 + .75)/4, confidence 1.75/2.25 (by hand)
    assert sup[0] == pytest.approx(1.75 / 4)
    assert conf[0] == pytest.approx(1.75 / 2.25)
    # rule "x IS high -> 0": mu = (0, .25, .5, 1); support .25/4, confidence .25/1.75 (by hand)
    assert sup[1] == pytest.approx(0.25 / 4)
    assert conf[1] == pytest.approx(0.25 / 1.75)


def test_mined_rule_weights_certainty_and_penalized():
    _, y, p, M = _two_label_data()
    cf = mine_rules(M, p.item_var, y, 2, 0.05, 0.8, 1, "certainty", min_confidence=0.7)
    pcf = mine_rules(M, p.item_var, y, 2, 0.05, 0.8, 1, "penalized_certainty", min_confidence=0.7)
    # candidates (conf >= 0.7): low -> 0 (conf 7/9) and high -> 1 (conf 1.5/1.75, by hand)
    assert [(int(r[0]), int(c)) for r, c in zip(cf.items, cf.classes)] == [(0, 0), (1, 1)]
    np.testing.assert_allclose(cf.weight, [7 / 9, 1.5 / 1.75])
    # PCF = (in-class - out-of-class) / total (Ishibuchi and Yamamoto, IEEE TFS 13(4), 2005)
    np.testing.assert_allclose(pcf.weight, [(1.75 - 0.5) / 2.25, (1.5 - 0.25) / 1.75])


def test_minimum_support_scaled_by_class_share():
    # class 1 holds 2 of 20 examples: its minimum support is 0.05 * 2/20 = 0.005 (FARC-HD, section III-A)
    X = np.r_[np.zeros(18), np.ones(2)][:, None]
    y = np.r_[np.zeros(18, int), np.ones(2, int)]
    p = build_partition(X, np.array([False]), 2)
    M = memberships(p, X)
    # "x IS high -> 1" has support 2/20 = 0.1: kept at min_support 0.5 (scaled: 0.05), dropped at 1.0 (scaled 0.1 + eps)
    kept = mine_rules(M, p.item_var, y, 2, 0.5, 0.8, 1)
    assert (1, 1) in {(int(r[0]), int(c)) for r, c in zip(kept.items, kept.classes)}
    dropped = mine_rules(M, p.item_var, y, 2, 1.0 + 1e-9, 0.8, 1)
    assert (1, 1) not in {(int(r[0]), int(c)) for r, c in zip(dropped.items, dropped.classes)}
    # the majority class's minimum support at 1.0 is 0.9: "x IS low -> 0" (support 18/20) just meets it
    at_one = mine_rules(M, p.item_var, y, 2, 1.0, 0.8, 1)
    assert (0, 0) in {(int(r[0]), int(c)) for r, c in zip(at_one.items, at_one.classes)}


def _crisp_two_variables():
    """Two nominal variables a, b in {0, 1}; twelve rows, class 0 holds 8 (hand-checkable).

    rows (a, b, y): (0, 0, 0) x5, (0, 1, 1) x1, (1, 0, 0) x3, (1, 1, 1) x3.
    """
    rows = [(0, 0, 0)] * 5 + [(0, 1, 1)] + [(1, 0, 0)] * 3 + [(1, 1, 1)] * 3
    data = np.array(rows, dtype=float)
    p = build_partition(data[:, :2], np.array([True, True]), 3)
    item = {(int(v), int(c)): i for i, (v, c) in enumerate(zip(p.item_var, p.item_label))}
    return memberships(p, data[:, :2]), p, data[:, 2].astype(int), item


def _class_rules(rules, pad, c):
    return {tuple(int(i) for i in row if i != pad) for row, k in zip(rules.items, rules.classes) if k == c}


def test_mining_published_confidence_semantics_by_hand():
    # FARC-HD (Alcala-Fdez, Alcala, Herrera, IEEE TFS 19(5) 2011, section III-A): a node whose confidence
    # exceeds the maximum confidence is a rule but is not expanded; every frequent node is a candidate.
    M, p, y, item = _crisp_two_variables()
    a0, a1, b0 = item[0, 0], item[0, 1], item[1, 0]
    rules = mine_rules(M, p.item_var, y, 2, 0.05, 0.8, 2)
    # class 0 (minimum support 0.05 * 8/12); by hand:
    #   a=0: support 5/12, confidence 5/6 > 0.8 -> a rule, not expanded (so no {a=0, b=0}, support 5/12)
    #   a=1: support 3/12, confidence 3/6 <= 0.8 -> a rule and expanded: {a=1, b=0} support 3/12, conf 1
    #   b=0: support 8/12, confidence 1; b=1 and {a=1, b=1}: support 0 for class 0
    assert _class_rules(rules, p.pad, 0) == {(a0,), (a1,), (b0,), (a1, b0)}
    at = {(tuple(int(i) for i in r if i != p.pad), int(c)): k
          for k, (r, c) in enumerate(zip(rules.items, rules.classes))}
    assert rules.confidence[at[(a0,), 0]] == pytest.approx(5 / 6)
    assert rules.confidence[at[(a1,), 0]] == pytest.approx(0.5)
    assert rules.support[at[(a1, b0), 0]] == pytest.approx(3 / 12)
    # a higher maximum confidence expands a=0 (5/6 <= 0.9): {a=0, b=0} appears
    assert (a0, b0) in _class_rules(mine_rules(M, p.item_var, y, 2, 0.05, 0.9, 2), p.pad, 0)
    # the optional filter drops only what is below it: a=1 (0.5) goes at 0.6, its child stays
    filtered = mine_rules(M, p.item_var, y, 2, 0.05, 0.8, 2, min_confidence=0.6)
    assert _class_rules(filtered, p.pad, 0) == {(a0,), (b0,), (a1, b0)}
    # min_confidence left at 0 keeps even a low-confidence frequent rule (class 1: a=1 has conf 3/6)
    assert (a1,) in _class_rules(rules, p.pad, 1)


def _brute_force(M, item_var, y, n_classes, min_support, max_conf, depth, min_conf=0.0):
    """Every candidate rule by direct enumeration of item sets (plain loops)."""
    n = len(y)
    found = set()
    items = range(len(item_var))
    for c in range(n_classes):
        minsup = min_support * np.mean(y == c)

        def stats(itemset):
            mu = np.prod([M[i] for i in itemset], axis=0)
            return mu[y == c].sum() / n, mu[y == c].sum() / mu.sum() if mu.sum() > 0 else 0.0

        for k in range(1, depth + 1):
            for itemset in itertools.combinations(items, k):
                vars_ = [item_var[i] for i in itemset]
                if len(set(vars_)) < k or vars_ != sorted(vars_):
                    continue
                # reachable: every proper prefix frequent and not above the maximum confidence
                prefixes = [stats(itemset[:j]) for j in range(1, k)]
                if any(s < minsup or cf > max_conf for s, cf in prefixes):
                    continue
                s, cf = stats(itemset)
                if s >= minsup and cf >= min_conf:
                    found.add((itemset, c))
    return found


@pytest.mark.parametrize("depth, min_conf", [(1, 0.0), (2, 0.0), (3, 0.0), (3, 0.6)])
def test_search_tree_matches_enumeration_respects_depth_and_variables(depth, min_conf):
    rng = np.random.default_rng(1)
    X = rng.random((60, 4))
    y = (X[:, 0] + 0.5 * X[:, 1] > 0.8).astype(int)
    p = build_partition(X, np.zeros(4, bool), 3)
    M = memberships(p, X)
    rules = mine_rules(M, p.item_var, y, 2, 0.05, 0.75, depth, min_confidence=min_conf)
    got = set()
    for row, c in zip(rules.items, rules.classes):
        items = tuple(int(i) for i in row if i != p.pad)
        assert 1 <= len(items) <= depth
        vars_ = [p.item_var[i] for i in items]
        assert len(set(vars_)) == len(vars_)  # never two items of one variable
        got.add((items, int(c)))
    assert len(got) == len(rules)  # no duplicates
    assert got == _brute_force(M, p.item_var, y, 2, 0.05, 0.75, depth, min_conf)
    assert len(got) > 0


# ------------------------------------------------------------------ prescreening
def test_prescreening_weights_after_one_and_two_selections():
    # 4 examples of class 0, 2 of class 1; kt = 2. Hand calculation with
    # wWRAcc'' = n''(A,C)/n'(C) * (n''(A,C)/n''(A) - N_C/N) (FARC-HD section III-B, after Kavsek and Lavrac 2006):
    # round 1: R0 = 3/4 * (1 - 2/3) = 0.25, R1 = 2/4 * 1/3 = 0.167, R2 = 1/4 * (1/2 - 2/3) < 0  -> R0
    # weights 1/(i+1): examples 0, 1, 2 -> 1/2
    # round 2: n'(C) = 2.5; R1 = 1/2.5 * 1/3 = 0.133, R2 = 1/2.5 * (1/2 - 2/3) < 0 -> R1
    # examples 0 and 1 now covered twice: removed (weight 0)
    match = np.array([[1, 1, 1, 0, 0, 0],
                      [1, 1, 0, 0, 0, 0],
                      [0, 0, 0, 1, 1, 0]], dtype=float)
    in_class = np.array([True, True, True, True, False, False])
    trace: list[np.ndarray] = []
    chosen = prescreen_class(match, in_class, 2, trace)
    np.testing.assert_allclose(trace[0], [0.5, 0.5, 0.5, 1, 1, 1])
    np.testing.assert_allclose(trace[1], [0, 0, 0.5, 1, 1, 1])
    # round 3: R2 still covers example 3, the last pattern left -> selected; then no candidate is left
    assert list(chosen) == [0, 1, 2]
    np.testing.assert_allclose(trace[2], [0, 0, 0.5, 0.5, 1, 1])


def test_prescreening_stops_when_patterns_removed():
    # kt = 1: after R0 covers every class example, nothing is left to select
    match = np.array([[1, 1, 0], [1, 0, 0]], dtype=float)
    in_class = np.array([True, True, False])
    assert list(prescreen_class(match, in_class, 1)) == [0]
    # the same through prescreen(): memberships of two items, rules "item 0" and "item 1"
    M = np.vstack([match, np.ones(3)])
    items = np.array([[0], [1]])
    assert list(prescreen(M, items, np.array([0, 0]), np.array([0, 0, 1]), 1)) == [0]


# ------------------------------------------------------------------ genetic stage
def test_fitness_penalty_by_hand():
    # FARC-HD fitness: #hits/N - delta * NR0 / (NR0 - NR + 1): 0.9 - 0.15 * 10 / 7 (by hand)
    assert penalized_fitness(0.9, 10, 4, 0.15) == pytest.approx(0.9 - 0.15 * 10 / 7)
    assert penalized_fitness(0.9, 10, 10, 0.15) == pytest.approx(0.9 - 1.5)


def test_gray_code_of_small_integers():
    # reflected binary Gray code: 0, 1, 3, 2, 6, 7, 5, 4 (Gray, US patent 2,632,058; common practice)
    genes = -0.5 + np.arange(8) / 2**30
    assert list(gray_code(genes)) == [0, 1, 3, 2, 6, 7, 5, 4]
    # neighbouring quantised values differ by one bit (the Gray property)
    g = gray_code(genes)
    no_bits = np.zeros((8, 0), bool)
    assert list(hamming(g[:-1, None], no_bits[:-1], g[1:, None], no_bits[1:])) == [1] * 7


def test_hux_exchanges_half_of_differing_bits():
    # HUX (Eshelman 1991): exactly half of the differing bits are swapped
    rng = np.random.default_rng(0)
    x = rng.random((20, 31)) < 0.5
    y = rng.random((20, 31)) < 0.5
    k1, k2 = hux(x, y, rng)
    d = (x != y).sum(axis=1)
    np.testing.assert_array_equal((k1 != x).sum(axis=1), d // 2)
    np.testing.assert_array_equal(k1 ^ k2, x ^ y)  # bits are exchanged, never invented


def test_pcblx_stays_in_parent_centred_interval():
    rng = np.random.default_rng(0)
    x, y = rng.uniform(-0.5, 0.5, (200, 5)), rng.uniform(-0.5, 0.5, (200, 5))
    c1, c2 = pcblx(x, y, rng)
    spread = np.abs(x - y)
    assert np.all(np.abs(c1 - x) <= spread + 1e-15) and np.all(np.abs(c2 - y) <= spread + 1e-15)
    assert np.all((c1 >= -0.5) & (c1 < 0.5) & (c2 >= -0.5) & (c2 < 0.5))


def test_chc_solves_onemax_within_budget_deterministically():
    # OneMax is the textbook check that a GA optimises (common practice)
    def f(reals, bits):
        return bits.mean(axis=1) - np.abs(reals).mean(axis=1)

    a = chc(f, 3, 24, 20, 3000, np.random.default_rng(5))
    b = chc(f, 3, 24, 20, 3000, np.random.default_rng(5))
    assert a.bits.all()
    assert a.evaluations == 3000
    assert a.fitness == b.fitness and np.array_equal(a.real, b.real)


def test_chc_four_offspring_keeps_the_best_two_of_each_mating():
    # the four-offspring mating of Alcala, Alcala-Fdez, Herrera (IEEE TFS 15(4), 2007; from memory):
    # both PCBLX children with both HUX children, the best two of each four enter the survival
    from workers.fuzzy.genetic import _best_two_of_four

    real = np.arange(8.0)[:, None]
    bits = np.zeros((8, 2), dtype=bool)
    fit = np.array([0.1, 0.9, 0.5, 0.7, 0.3, 0.3, 0.2, 0.8])
    r, _, f = _best_two_of_four(real, bits, fit)
    assert list(r[:, 0]) == [1, 3, 4, 7] and list(f) == [0.9, 0.7, 0.3, 0.8]  # a tie keeps the first

    def onemax(reals, bits):
        return bits.mean(axis=1) - np.abs(reals).mean(axis=1)

    out = chc(onemax, 3, 24, 20, 3000, np.random.default_rng(5), four=True)
    assert out.bits.all() and out.evaluations == 3000


def test_chc_restarts_when_population_stalls():
    # flat fitness: no offspring is ever strictly better, so L falls below 0 and CHC restarts
    out = chc(lambda r, b: np.zeros(len(r)), 1, 4, 10, 500, np.random.default_rng(0))
    assert out.restarts > 0 and out.evaluations == 500


# ------------------------------------------------------------------ reasoning
def test_matching_degree_is_product_of_antecedents():
    M = np.array([[0.5, 1.0], [0.4, 0.2], [0.9, 0.0], [1.0, 1.0]])  # last row: padding
    items = np.array([[0, 1, 3], [2, 3, 3], [0, 1, 2]])
    np.testing.assert_allclose(matching_degrees(M, items),
                               [[0.2, 0.2], [0.9, 0.0], [0.18, 0.0]])


def test_winning_rule_and_additive_by_hand():
    # class 0 rules fire 0.2 and 0.5, class 1 rule 0.6: sum picks class 0, maximum class 1 (by hand)
    assoc = np.array([[0.2], [0.5], [0.6]])
    classes = np.array([0, 0, 1])
    np.testing.assert_allclose(class_scores(assoc, classes, 2, "additive"), [[0.7, 0.6]])
    np.testing.assert_allclose(class_scores(assoc, classes, 2, "winning_rule"), [[0.5, 0.6]])
    pred, unc = decide(np.array([[0.7, 0.6], [0.0, 0.0]]), default=1)
    assert list(pred) == [0, 1] and list(unc) == [False, True]


def test_padded_degrees_layout():
    assoc = np.array([[0.2, 0.0], [0.6, 0.3], [0.5, 0.0], [0.0, 0.1], [0.4, 0.0]])
    classes = np.array([0, 1, 0, 1, 0])
    cube, counts = padded_degrees(assoc, classes, 2)
    assert list(counts) == [3, 2] and cube.shape == (2, 2, 3)
    # per class, the class's rules in rule-base order, zero-padded to the longest class
    np.testing.assert_allclose(cube[0], [[0.2, 0.5, 0.4], [0.6, 0.0, 0.0]])
    np.testing.assert_allclose(cube[1], [[0.0, 0.0, 0.0], [0.3, 0.1, 0.0]])


def test_popcount_fallback_matches_python(monkeypatch):
    # bin(v).count("1") is the reference popcount (Python built-in)
    from workers.fuzzy import genetic

    words = np.random.default_rng(0).integers(0, 2**62, 50).astype(np.uint64)
    expected = [bin(int(v)).count("1") for v in words]
    assert list(genetic._popcount(words)) == expected
    monkeypatch.delattr(np, "bitwise_count")
    assert list(genetic._popcount(words)) == expected
