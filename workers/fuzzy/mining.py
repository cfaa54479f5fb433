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

Rule weights: the certainty factor ``CF = conf(A -> C)`` or the penalized
certainty factor ``PCF = (sum_{x in C} mu_A - sum_{x not in C} mu_A) / sum_x mu_A``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: at most this many floats in one batch of child matching vectors (memory bound)
_BATCH_FLOATS = 1 << 22


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
    """

    items: np.ndarray
    classes: np.ndarray
    support: np.ndarray
    confidence: np.ndarray
    weight: np.ndarray

    def __len__(self) -> int:
        return len(self.classes)

    def take(self, index: np.ndarray) -> RuleSet:
        """The rules at ``index`` (an index or boolean array), in that order."""
        return RuleSet(self.items[index], self.classes[index], self.support[index],
                       self.confidence[index], self.weight[index])

    def lengths(self, pad: int) -> np.ndarray:
        """Number of antecedents per rule."""
        return (self.items != pad).sum(axis=1)


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
    parts = []
    n = len(y)
    for c in range(n_classes):
        in_class = y == c
        if not in_class.any():
            continue
        minsup = min_support * in_class.sum() / n
        parts.append(_mine_class(M, item_var, in_class, minsup, max_confidence, min_confidence, depth, c))
    pad = M.shape[0] - 1
    if not parts:
        return _empty(depth)
    items = [row for part in parts for row in part[0]]
    padded = np.full((len(items), depth), pad, dtype=np.intp)
    for r, row in enumerate(items):
        padded[r, : len(row)] = row
    classes = np.concatenate([p[1] for p in parts])
    sup = np.concatenate([p[2] for p in parts])
    conf = np.concatenate([p[3] for p in parts])
    weight = conf if rule_weight == "certainty" else 2.0 * conf - 1.0
    return RuleSet(padded, classes.astype(np.intp), sup, conf, weight)


def _empty(depth: int) -> RuleSet:
    z = np.zeros(0)
    return RuleSet(np.zeros((0, depth), dtype=np.intp), np.zeros(0, dtype=np.intp), z, z, z)


def _mine_class(M, item_var, in_class, minsup, max_conf, min_conf, depth, c):
    n_items = len(item_var)
    nodes = np.arange(n_items)[:, None]
    match = M[:n_items]
    sup, conf = support_confidence(match, in_class)
    found_items, found_sup, found_conf = [], [], []
    for level in range(1, depth + 1):
        # only frequent nodes reach here past level 1; the filter keeps level 1 alike
        frequent = sup >= minsup
        cand = frequent & (conf >= min_conf) if min_conf > 0 else frequent
        found_items.extend(list(nodes[cand]))
        found_sup.append(sup[cand])
        found_conf.append(conf[cand])
        if level == depth:
            break
        grow = np.flatnonzero(frequent & ~(conf > max_conf))
        if len(grow) == 0:
            break
        nodes, match, sup, conf = _children(nodes[grow], match[grow], M, item_var, in_class, minsup)
    return found_items, np.full(len(found_items), c), np.concatenate(found_sup), np.concatenate(found_conf)


def _children(nodes, match, M, item_var, in_class, minsup):
    """The frequent one-item extensions by a variable after the node's last item.

    Children below the minimum support are dropped batch by batch, so that
    memory holds only the frequent ones (support never grows with depth).
    """
    last_var = item_var[nodes[:, -1]]
    parent, item = np.nonzero(item_var[None, :] > last_var[:, None])
    batch = max(1, _BATCH_FLOATS // max(1, match.shape[1]))
    keep_nodes, keep_match, keep_sup, keep_conf = [], [], [], []
    for s in range(0, len(parent), batch):
        p, i = parent[s: s + batch], item[s: s + batch]
        m = match[p] * M[i]
        sup, conf = support_confidence(m, in_class)
        ok = sup >= minsup
        keep_nodes.append(np.concatenate([nodes[p[ok]], i[ok, None]], axis=1))
        keep_match.append(m[ok])
        keep_sup.append(sup[ok])
        keep_conf.append(conf[ok])
    width = nodes.shape[1] + 1
    if not keep_nodes:
        return np.zeros((0, width), dtype=np.intp), match[:0], np.zeros(0), np.zeros(0)
    return (np.concatenate(keep_nodes), np.concatenate(keep_match),
            np.concatenate(keep_sup), np.concatenate(keep_conf))
