"""Fuzzy reasoning: matching degrees, association degrees, class aggregation.

The association degree of rule r with example x is ``mu_r(x) * weight_r``.
For each class the association degrees of that class's rules are
aggregated by the fuzzy reasoning method:

* ``"winning_rule"``: the maximum;
* ``"additive"``: the sum (the additive combination; normalising by the
  largest sum would not change the predicted class);
* ``"choquet"``, ``"sugeno_integral"``, ``"choquet_t"``: the Choquet
  integral, the Sugeno integral, or the CT-integral generalisation of the
  Choquet integral with a t-norm (Lucca et al.), computed by
  :mod:`workers.fuzzy.measures` with the fuzzy measure ``"cardinality"``,
  ``"power"`` (exponent q per class) or ``"sugeno_lambda"`` (data-driven:
  the densities are the association degrees being aggregated).

Choice left open, documented here: the integrals aggregate, per class, a
vector with one entry per rule of that class in the rule base, the rules
that do not fire contributing 0, so that the cardinality and power
measures count the class's rules (``|A| / n`` with n the number of rules of
the class), after Barrenechea et al. (2013) and Lucca et al. (2016). The
vectors are zero-padded to the class with the most rules, the measures
receiving the true ``n`` per class (padding zeros change no integral).

The predicted class is the one with the largest value (the first such
class on ties); an example where every class gets 0 is *uncovered*.
"""

from __future__ import annotations

import numpy as np

METHODS = ("winning_rule", "additive", "choquet", "sugeno_integral", "choquet_t")
INTEGRALS = ("choquet", "sugeno_integral", "choquet_t")
MEASURES = ("cardinality", "power", "sugeno_lambda")
TNORMS = ("product", "minimum", "lukasiewicz", "hamacher")


def matching_degrees(M: np.ndarray, items: np.ndarray) -> np.ndarray:
    """Matching degrees ``(n_rules, n_examples)``: product of the antecedents' memberships.

    ``M`` is the ``(n_items + 1, n_examples)`` membership matrix whose last
    row (ones) pads rules with fewer antecedents; ``items`` is ``(n_rules, depth)``.
    """
    out = np.take(M, items[:, 0], axis=0)
    for k in range(1, items.shape[1]):
        out *= np.take(M, items[:, k], axis=0)
    return out


def rule_scores(M: np.ndarray, items: np.ndarray, rule_class: np.ndarray, weight: np.ndarray,
                n_classes: int, method: str, measure: str = "power",
                q: np.ndarray | float | None = None, tnorm: str = "product") -> np.ndarray:
    """Class scores ``(n_examples, n_classes)`` of a rule base from the membership matrix ``M``.

    The additive combination folds the rule weights into one matrix product
    (``match.T @ W`` with ``W[r, class_r] = weight_r``); the other methods
    form the association degrees first.
    """
    n = M.shape[1]
    if len(rule_class) == 0:
        return np.zeros((n, n_classes))
    match = matching_degrees(M, items)
    if method == "additive":
        W = np.zeros((len(rule_class), n_classes))
        W[np.arange(len(rule_class)), rule_class] = weight
        return match.T @ W
    match *= weight[:, None]
    return class_scores(match, rule_class, n_classes, method, measure, q, tnorm)


def shortcut_applies(method: str, tnorm: str) -> bool:
    """Whether :func:`contested_part` may stand in for the full aggregation (see there)."""
    return method in INTEGRALS and not (method == "choquet_t" and tnorm == "lukasiewicz")


def contested_part(M: np.ndarray, items: np.ndarray, rule_class: np.ndarray, weight: np.ndarray,
                   onehot: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """What the genetic stage must still aggregate, for an integral method.

    The genetic stage needs only each example's predicted class and whether
    it is covered. Where the rules of one class alone fire, that class wins
    whatever the integral, since the integrals of a non-zero vector of
    degrees are positive; so only the examples where rules of two or more
    classes fire ("contested") need the integrals, and the others keep their
    additive scores. Not for the CT-integral with the Lukasiewicz t-norm,
    which can be 0 for a non-zero vector (:func:`shortcut_applies`). A
    vector whose integral underflows below 1e-300 is the one (theoretical)
    case where the decision differs from the full computation's: it counts
    as covered here.

    Parameters
    ----------
    M, items, rule_class, weight
        As for :func:`rule_scores`; ``rule_class`` must be non-decreasing.
    onehot : ndarray (n_rules, n_classes)
        ``onehot[r, rule_class[r]] = 1``.

    Returns
    -------
    scores : ndarray (n_examples, n_classes)
        Additive scores; rows ``contested`` are to be overwritten by the integrals.
    contested : ndarray of int
        Examples where two or more classes fire.
    degrees : ndarray (n_rules, len(contested))
        Their association degrees, to be laid out by :func:`cube_slots`.
    counts : ndarray (n_classes,)
        Rules per class (the measures' ``n``).
    """
    assoc = matching_degrees(M, items)
    assoc *= weight[:, None]
    scores = assoc.T @ onehot
    # classes firing per example, by a product (count_nonzero along an axis is slower)
    contested = np.flatnonzero((scores > 0).astype(float) @ np.ones(onehot.shape[1]) >= 2)
    return scores, contested, assoc[:, contested], onehot.sum(axis=0).astype(np.intp)


def cube_slots(rule_class: np.ndarray, counts: np.ndarray, width: int) -> np.ndarray:
    """Column of each rule in a ``(..., n_classes * width)`` layout; ``rule_class`` non-decreasing."""
    start = np.cumsum(counts) - counts
    return rule_class * width + np.arange(len(rule_class)) - start[rule_class]


def class_scores(assoc: np.ndarray, rule_class: np.ndarray, n_classes: int, method: str,
                 measure: str = "power", q: np.ndarray | float | None = None,
                 tnorm: str = "product") -> np.ndarray:
    """Aggregated association degrees ``(n_examples, n_classes)``.

    Parameters
    ----------
    assoc : ndarray of shape (n_rules, n_examples)
        Association degrees (matching degree times rule weight).
    rule_class : ndarray of shape (n_rules,)
        Consequent class of each rule.
    n_classes : int
    method : str
        One of :data:`METHODS`.
    measure : str
        For the integrals, one of :data:`MEASURES`.
    q : float or ndarray of shape (n_classes,), optional
        Exponents of the power measure.
    tnorm : str
        For ``"choquet_t"``, one of :data:`TNORMS`.
    """
    n = assoc.shape[1]
    if method == "additive":
        onehot = np.zeros((len(rule_class), n_classes))
        onehot[np.arange(len(rule_class)), rule_class] = 1.0
        return assoc.T @ onehot
    if method == "winning_rule":
        out = np.zeros((n, n_classes))
        for c in range(n_classes):
            sel = rule_class == c
            if sel.any():
                out[:, c] = assoc[sel].max(axis=0)
        return out
    return _integral(assoc, rule_class, n_classes, method, measure, q, tnorm)


def padded_degrees(assoc: np.ndarray, rule_class: np.ndarray,
                   n_classes: int) -> tuple[np.ndarray, np.ndarray]:
    """Association degrees as ``(n_examples, n_classes, k)``, zero-padded, in rule order.

    ``k`` is the largest number of rules of one class (at least 1); entry
    ``[e, c, j]`` is the degree of class c's j-th rule on example e. Not
    sorted: the integrals sort. Also returns the number of rules per class.
    """
    n = assoc.shape[1]
    counts = np.bincount(rule_class, minlength=n_classes)
    width = max(1, int(counts.max(initial=0)))
    order = np.argsort(rule_class, kind="stable")
    start = np.concatenate([[0], np.cumsum(counts)[:-1]])
    rank = np.arange(len(order)) - start[rule_class[order]]
    flat = np.zeros((n, n_classes * width))
    flat[:, rule_class[order] * width + rank] = assoc[order].T
    return flat.reshape(n, n_classes, width), counts


def _integral(assoc, rule_class, n_classes, method, measure, q, tnorm):
    cube, counts = padded_degrees(assoc, rule_class, n_classes)
    return integrate(cube, counts, method, measure, 1.0 if q is None else q, tnorm)


def integrate(cube: np.ndarray, n: np.ndarray, method: str, measure: str,
              q: np.ndarray | float = 1.0, tnorm: str = "product") -> np.ndarray:
    """The integral of each ``cube[..., c, :]`` by :mod:`workers.fuzzy.measures`.

    ``n`` (rules per vector, zero-padded beyond) and ``q`` (power exponent)
    broadcast to ``cube.shape[:-1]``: ``(n_classes,)`` for one rule base,
    ``(rows, n_classes)`` for rows stacked from several.
    """
    from workers.fuzzy import measures as fm

    params: dict = {}
    if measure in ("cardinality", "power"):
        params["n"] = np.maximum(n, 1)
    if measure == "power":
        params["q"] = q
    if method == "choquet":
        return fm.choquet(cube, measure, **params)
    if method == "sugeno_integral":
        return fm.sugeno_integral(cube, measure, **params)
    return fm.generalized_choquet(cube, measure, tnorm, **params)


def decide(scores: np.ndarray, default: int) -> tuple[np.ndarray, np.ndarray]:
    """Predicted class index per example and the uncovered mask (``default`` where uncovered)."""
    uncovered = ~(scores.max(axis=1, initial=0.0) > 0)
    pred = np.argmax(scores, axis=1)
    pred[uncovered] = default
    return pred, uncovered
