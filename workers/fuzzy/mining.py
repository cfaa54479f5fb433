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
frequent children. The sums over every example are formed the same way
once per distinct parent for all classes together (an item set is a
parent in several classes' trees: on digits 22,000 distinct parents stand
for 91,000), and the out-of-class sum is the total less the in-class sum
(a difference below ``RTOL`` of the total is rounding and counts as 0, so
that a pure rule keeps confidence 1). A node's matching vector is formed
again from its items when it is expanded, so that memory holds one block
at a time, never a level's vectors. On digits (first fold, 2.1 million
frequent item sets) mining took 1.7 CPU seconds with each class's sums
over the other examples formed on their own, 0.9 s this way.

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
    present = [c for c in range(n_classes) if np.any(y == c)]
    if not present:
        return _empty(depth)
    # the right-hand sides of the blocks' products: (examples, items), items sorted by variable, so
    # that the items of the variables after v are one slice
    by_var = np.argsort(item_var, kind="stable")
    layout = (by_var, item_var[by_var])
    monotone = bool(np.all(np.diff(by_var) > 0))
    whole = np.ascontiguousarray(M[:-1][by_var].T)
    members = {c: M[:-1, y == c] for c in present}
    sides = {c: np.ascontiguousarray(members[c][by_var].T) for c in present}
    minsup = {c: min_support * np.count_nonzero(y == c) / n for c in present}
    nodes = {c: np.zeros((1, 0), dtype=np.intp) for c in present}  # the root: the empty item set
    found: dict[int, list] = {c: [] for c in present}
    for level in range(1, depth + 1):
        kids = {c: _frequent_children(nodes[c], item_var, layout, members[c], sides[c], minsup[c], n)
                for c in present}
        totals = _totals([(nodes[c], kids[c][0], kids[c][1]) for c in present], item_var, layout, M[:-1],
                         whole)
        for c, total in zip(present, totals):
            parent, column, in_sum = kids[c]
            # the other classes' examples; below the tolerance of the total, the difference is rounding
            out_sum = total - in_sum
            out_sum[out_sum <= RTOL * total] = 0.0
            # tree order: by parent, then by item (a parent's children come in column order, which is
            # the items' order when no item of a later variable has a smaller index)
            order = (np.argsort(parent, kind="stable") if monotone
                     else np.lexsort((by_var[column], parent)))
            parent, item = parent[order], by_var[column[order]]
            children = np.concatenate([nodes[c][parent], item[:, None]], axis=1)
            in_sum, out_sum = in_sum[order], out_sum[order]
            _, conf = _support_confidence(in_sum, out_sum, n)
            cand = reaches(conf, min_confidence) if min_confidence > 0 else slice(None)
            found[c].append((children[cand], in_sum[cand], out_sum[cand], conf[cand]))
            nodes[c] = children[~exceeds(conf, max_confidence)]
    levels = [level for c in present for level in found[c]]
    padded = np.full((sum(len(lv[0]) for lv in levels), depth), pad, dtype=np.intp)
    at = 0
    for items, *_ in levels:
        padded[at: at + len(items), : items.shape[1]] = items
        at += len(items)
    classes = np.concatenate([np.full(sum(len(lv[0]) for lv in found[c]), c, dtype=np.intp) for c in present])
    in_sum = np.concatenate([lv[1] for lv in levels])
    out_sum = np.concatenate([lv[2] for lv in levels])
    sup, conf = in_sum / n, np.concatenate([lv[3] for lv in levels])
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


def _frequent_children(nodes, item_var, layout, inside, side, minsup, n):
    """The frequent one-item extensions (by a variable after the last item's) of ``nodes``.

    Returns, per child, its parent (row of ``nodes``), its item's column in
    the variable-sorted layout, and its sum of matching degrees over the
    class's examples (``inside``: their memberships; ``side``: the same,
    ``(examples, items)`` in the layout's order). Children of one parent
    come in increasing column order.
    """
    sorted_var = layout[1]
    last = item_var[nodes[:, -1]] if nodes.shape[1] else np.full(len(nodes), -1)
    rows_per_block = max(1, _BLOCK_FLOATS // max(inside.shape[1], len(item_var), 1))
    parents, columns, sums = [], [], []
    for var in np.unique(last):
        start = np.searchsorted(sorted_var, var, side="right")
        if start == len(sorted_var):
            continue
        group = np.flatnonzero(last == var)
        for s in range(0, len(group), rows_per_block):
            block = group[s: s + rows_per_block]
            in_sum = _vectors(nodes[block], inside) @ side[:, start:]  # (block, items): all children at once
            p, i = np.nonzero(reaches(in_sum / n, minsup))
            parents.append(block[p])
            columns.append(start + i)
            sums.append(in_sum[p, i])
    if not parents:
        return np.zeros(0, dtype=np.intp), np.zeros(0, dtype=np.intp), np.zeros(0)
    return np.concatenate(parents), np.concatenate(columns), np.concatenate(sums)


def _totals(classes, item_var, layout, members, whole):
    """Per class, the sums of its children's matching degrees over every example.

    ``classes`` holds per class ``(nodes, parent, column)`` as
    :func:`_frequent_children` gives them. An item set is often a parent in
    several classes' trees: the sums are formed once per distinct parent,
    ``(parents' vectors on every example) @ whole[:, columns after the
    parent's last variable]``, in blocks, and read for every class's children.
    """
    sorted_var = layout[1]
    width = classes[0][0].shape[1]
    n_children = sum(len(parent) for _, parent, _ in classes)
    if n_children == 0:
        return [np.zeros(0) for _ in classes]
    if width:
        # each class's parents once, then the distinct item sets among them
        per_class = [np.unique(parent, return_inverse=True) for _, parent, _ in classes]
        distinct, where = np.unique(np.concatenate([nodes[up] for (nodes, _, _), (up, _) in zip(classes, per_class)]),
                                    axis=0, return_inverse=True)
        offsets = np.cumsum([0] + [len(up) for up, _ in per_class])
        which = np.concatenate([where.ravel()[offsets[k] + inv.ravel()] for k, (_, inv) in enumerate(per_class)])
    else:
        distinct, which = np.zeros((1, 0), dtype=np.intp), np.zeros(n_children, dtype=np.intp)
    columns = np.concatenate([column for _, _, column in classes])
    last = item_var[distinct[:, -1]] if width else np.full(len(distinct), -1)
    by_last = np.argsort(last, kind="stable")  # a block's parents then share most of their columns
    rank = np.empty(len(distinct), dtype=np.intp)
    rank[by_last] = np.arange(len(distinct))
    which = rank[which]
    distinct, last = distinct[by_last], last[by_last]
    total = np.empty(n_children)
    rows_per_block = max(1, _BLOCK_FLOATS // max(members.shape[1], len(item_var), 1))
    # entries grouped by block of parents (a counting sort: blocks are few)
    block_of = which // rows_per_block
    if len(distinct) // rows_per_block < 1 << 16:
        block_of = block_of.astype(np.uint16)  # sorted by radix
    order = np.argsort(block_of, kind="stable")
    bounds = np.searchsorted(block_of[order], np.arange(0, len(distinct) // rows_per_block + 2))
    for b, s in enumerate(range(0, len(distinct), rows_per_block)):
        here = order[bounds[b]: bounds[b + 1]]
        if len(here) == 0:
            continue
        start = np.searchsorted(sorted_var, last[s], side="right")  # last is sorted: the block's least
        table = _vectors(distinct[s: s + rows_per_block], members) @ whole[:, start:]
        total[here] = table[which[here] - s, columns[here] - start]
    return np.split(total, np.cumsum([len(parent) for _, parent, _ in classes])[:-1])


def _vectors(nodes: np.ndarray, memberships: np.ndarray) -> np.ndarray:
    """Matching vectors ``(k, examples)`` of item sets: products of their items' rows."""
    if nodes.shape[1] == 0:
        return np.ones((len(nodes), memberships.shape[1]))
    out = memberships[nodes[:, 0]]
    for j in range(1, nodes.shape[1]):
        out *= memberships[nodes[:, j]]
    return out
