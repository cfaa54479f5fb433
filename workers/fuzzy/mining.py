"""Fuzzy association rule mining: a depth-limited search tree per class.

For each class C the search tree's nodes are item sets (no two items of the
same variable); the matching degree of an item set A is the product of its
items' memberships. With N training examples,

* fuzzy support ``sup(A -> C) = sum_{x in C} mu_A(x) / N``,
* confidence ``conf(A -> C) = sum_{x in C} mu_A(x) / sum_x mu_A(x)``,
* the minimum support of class C is ``min_support * N_C / N``.

The published semantics (FARC-HD, section III-A): a node is a candidate rule
when it is frequent (its support meets the class's minimum support); it is
expanded (one more item) only when it is frequent, its confidence does not
exceed ``max_confidence`` (above it the rule is already good enough) and it
has fewer than ``depth`` items. ``min_confidence`` (default 0: no filter) is
an optional extra filter on the candidates, not part of the published
method; it must not exceed ``max_confidence``.

Choice left open by the method: the tree is
the usual enumeration (prefix) tree, a child adds an item of a variable with
a larger index than the node's last item, so that every item set is visited
at most once and in a fixed order (level by level, then by items), which
fixes the rule order used downstream.

Computation (the results are those of the straightforward one, which
forms every child's matching vector and sums it, up to the order of the
floating-point sums): a level is extended in blocks of parents that end in
the same variable, the in-class sums of all their one-item extensions at
once as one matrix product (BLAS) of the parents' matching vectors on the
class's examples with the item memberships on those examples; the sums on
the other examples (for the confidence) likewise, then kept only for the
frequent children. A node's matching vector is formed again from its items
when it is expanded, so that memory holds one block at a time, never a
level's vectors.

Thresholds are compared with a relative tolerance of 1e-9 (``RTOL``): a
support or confidence equal to its threshold in exact arithmetic (common
with few examples) reaches it whatever the rounding of its sums, so that
the result does not depend on the order of summation.

Rule weights: the certainty factor ``CF = conf(A -> C)`` or the penalized
certainty factor ``PCF = (sum_{x in C} mu_A - sum_{x not in C} mu_A) / sum_x mu_A``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: at most this many floats in one block of parents' vectors or children's sums (memory bound)
_BLOCK_FLOATS = 1 << 21


@dataclass(frozen=True)
class RuleSet:
    """Rules as arrays; rule ``r`` reads ``IF items[r] THEN classes[r]``.

    Attributes
    ----------
    items : ndarray of shape (n_rules, depth), int
        Item indices, padded with the partition's ``pad`` index.
    classes : ndarray of shape (n_rules,), int
        Consequent class index.
    support, confidence, weight : ndarray of shape (n_rules,)
        Fuzzy support, confidence and rule weight on the training part.
    outside, inside : ndarray of shape (n_rules,) or None
        Sums of the rule's matching degrees over the training examples of
        the other classes and of its own class (prescreening's starting
        point); None when unknown.
    """

    items: np.ndarray
    classes: np.ndarray
    support: np.ndarray
    confidence: np.ndarray
    weight: np.ndarray
    outside: np.ndarray | None = None
    inside: np.ndarray | None = None

    def __len__(self) -> int:
        return len(self.classes)

    def take(self, index: np.ndarray) -> RuleSet:
        """The rules at ``index`` (an index or boolean array), in that order."""
        return RuleSet(self.items[index], self.classes[index], self.support[index],
                       self.confidence[index], self.weight[index],
                       None if self.outside is None else self.outside[index],
                       None if self.inside is None else self.inside[index])

    def lengths(self, pad: int) -> np.ndarray:
        """Number of antecedents per rule."""
        return (self.items != pad).sum(axis=1)


#: relative tolerance of the threshold comparisons
RTOL = 1e-9


def reaches(value: np.ndarray, threshold: float) -> np.ndarray:
    """``value >= threshold`` up to the relative tolerance (thresholds are >= 0)."""
    return value >= threshold * (1.0 - RTOL)


def exceeds(value: np.ndarray, threshold: float) -> np.ndarray:
    """``value > threshold`` beyond the relative tolerance (thresholds are >= 0)."""
    return value > threshold * (1.0 + RTOL)


def support_confidence(match: np.ndarray, in_class: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Fuzzy support and confidence of item sets with matching vectors ``match`` (n_sets, N)."""
    n = match.shape[1]
    in_c = match @ in_class.astype(float)
    total = match.sum(axis=1)
    conf = np.divide(in_c, total, out=np.zeros_like(in_c), where=total > 0)
    # the two sums round differently: a pure rule could reach 1 + eps
    np.minimum(conf, 1.0, out=conf)
    return in_c / n, conf


def mine_rules(M: np.ndarray, item_var: np.ndarray, y: np.ndarray, n_classes: int,
               min_support: float, max_confidence: float, depth: int,
               rule_weight: str = "certainty", min_confidence: float = 0.0) -> RuleSet:
    """Mine the candidate rules of every class.

    Parameters
    ----------
    M : ndarray of shape (n_items + 1, n_examples)
        Memberships of the training examples (last row: padding ones).
    item_var : ndarray of shape (n_items,)
        The variable of each item.
    y : ndarray of shape (n_examples,)
        Class indices ``0 .. n_classes - 1``.
    min_support : float
        Minimum support, scaled per class by the class's share.
    max_confidence : float
        A node whose confidence exceeds it is not expanded.
    depth : int
        Maximum antecedents per rule.
    rule_weight : {"certainty", "penalized_certainty"}
    min_confidence : float, default=0.0
        Candidates below it are dropped (0: every frequent node is a candidate).

    Returns
    -------
    RuleSet
        Candidate rules, class by class, each class's in tree order.
    """
    n = len(y)
    pad = M.shape[0] - 1
    item_var = np.asarray(item_var, dtype=np.intp)
    parts = []
    for c in range(n_classes):
        in_class = y == c
        if not in_class.any():
            continue
        minsup = min_support * in_class.sum() / n
        parts.append(_mine_class(M, item_var, in_class, minsup, max_confidence, min_confidence, depth, c))
    if not parts:
        return _empty(depth)
    padded = np.full((sum(len(level) for p in parts for level in p[0]), depth), pad, dtype=np.intp)
    at = 0
    for part in parts:
        for level in part[0]:
            padded[at: at + len(level), : level.shape[1]] = level
            at += len(level)
    classes = np.concatenate([np.full(sum(len(level) for level in p[0]), p[3], dtype=np.intp) for p in parts])
    in_sum = np.concatenate([p[1] for p in parts])
    out_sum = np.concatenate([p[2] for p in parts])
    sup, conf = _support_confidence(in_sum, out_sum, n)
    weight = conf if rule_weight == "certainty" else 2.0 * conf - 1.0
    return RuleSet(padded, classes, sup, conf, weight, out_sum, in_sum)


def _support_confidence(in_sum: np.ndarray, out_sum: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    total = in_sum + out_sum
    conf = np.divide(in_sum, total, out=np.zeros_like(in_sum), where=total > 0)
    np.minimum(conf, 1.0, out=conf)
    return in_sum / n, conf


def _empty(depth: int) -> RuleSet:
    z = np.zeros(0)
    return RuleSet(np.zeros((0, depth), dtype=np.intp), np.zeros(0, dtype=np.intp), z, z, z, z, z)


def _mine_class(M, item_var, in_class, minsup, max_conf, min_conf, depth, c):
    """Per level, the candidates' items, in-class and out-of-class sums; the tree order."""
    n = len(in_class)
    inside, outside = M[:-1, in_class], M[:-1, ~in_class]
    # the right-hand sides of the blocks' products: (examples, items), items sorted by variable, so
    # that the items of the variables after v are one slice
    by_var = np.argsort(item_var, kind="stable")
    sides = (np.ascontiguousarray(inside[by_var].T), np.ascontiguousarray(outside[by_var].T))
    layout = (by_var, item_var[by_var])
    nodes = np.zeros((1, 0), dtype=np.intp)  # the root: the empty item set, matching degree 1
    found_items, found_in, found_out = [], [], []
    for level in range(1, depth + 1):
        nodes, in_sum, out_sum = _frequent_children(nodes, item_var, layout, inside, outside, sides, minsup, n)
        _, conf = _support_confidence(in_sum, out_sum, n)
        cand = reaches(conf, min_conf) if min_conf > 0 else np.ones(len(nodes), dtype=bool)
        found_items.append(nodes[cand])
        found_in.append(in_sum[cand])
        found_out.append(out_sum[cand])
        if level == depth:
            break
        nodes = nodes[~exceeds(conf, max_conf)]
        if len(nodes) == 0:
            break
    return found_items, np.concatenate(found_in), np.concatenate(found_out), c


def _frequent_children(nodes, item_var, layout, inside, outside, sides, minsup, n):
    """The frequent one-item extensions (by a variable after the last item's) of ``nodes``, in tree order.

    Returns the children's items ``(k, level)`` sorted by (parent, item), and
    their sums of matching degrees over the class's examples and the others.
    """
    by_var, sorted_var = layout
    last = item_var[nodes[:, -1]] if nodes.shape[1] else np.full(len(nodes), -1)
    rows_per_block = max(1, _BLOCK_FLOATS // max(inside.shape[1], outside.shape[1], len(item_var), 1))
    parents, items, ins, outs = [], [], [], []
    for var in np.unique(last):
        start = np.searchsorted(sorted_var, var, side="right")
        if start == len(sorted_var):
            continue
        in_cols, out_cols = sides[0][:, start:], sides[1][:, start:]
        group = np.flatnonzero(last == var)
        for s in range(0, len(group), rows_per_block):
            block = group[s: s + rows_per_block]
            in_sum = _vectors(nodes[block], inside) @ in_cols  # (block, items): all children at once
            p, i = np.nonzero(reaches(in_sum / n, minsup))
            if len(p) == 0:
                continue
            out_sum = _vectors(nodes[block], outside) @ out_cols
            parents.append(block[p])
            items.append(by_var[start + i])
            ins.append(in_sum[p, i])
            outs.append(out_sum[p, i])
    width = nodes.shape[1] + 1
    if not parents:
        return np.zeros((0, width), dtype=np.intp), np.zeros(0), np.zeros(0)
    parent, item = np.concatenate(parents), np.concatenate(items)
    order = np.lexsort((item, parent))
    parent, item = parent[order], item[order]
    children = np.concatenate([nodes[parent], item[:, None]], axis=1)
    return children, np.concatenate(ins)[order], np.concatenate(outs)[order]


def _vectors(nodes: np.ndarray, memberships: np.ndarray) -> np.ndarray:
    """Matching vectors ``(k, examples)`` of item sets: products of their items' rows."""
    if nodes.shape[1] == 0:
        return np.ones((len(nodes), memberships.shape[1]))
    out = memberships[nodes[:, 0]]
    for j in range(1, nodes.shape[1]):
        out *= memberships[nodes[:, j]]
    return out
