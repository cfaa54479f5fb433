"""Fuzzy measures and the discrete fuzzy integrals that aggregate with them.

All functions aggregate ``x`` of shape ``(..., n)`` (values in [0, 1], no NaN)
along the last axis and return shape ``(...)`` (a float for a single vector).
Write ``x(0) <= ... <= x(n-1)`` for the sorted values, ``x(-1) = 0``, and
``A(i)`` for the set of the elements from the i-th smallest to the largest
(``|A(i)| = n - i``). Then

* :func:`choquet`: ``C = sum_i (x(i) - x(i-1)) mu(A(i))``;
* :func:`sugeno_integral`: ``S = max_i min(x(i), mu(A(i)))``;
* :func:`generalized_choquet`: ``C_T = sum_i T(x(i) - x(i-1), mu(A(i)))``,
  the CT-integral of Lucca et al. (2016) for a t-norm ``T``.

Measures by name (parameters as keywords):

============== ============================================== ======================
name           mu(A)                                          parameters
============== ============================================== ======================
cardinality    ``|A| / n``                                    ``n=``
power          ``(|A| / n) ** q``                             ``q=`` (> 0), ``n=``
sugeno_lambda  ``(prod_{i in A} (1 + lam g_i) - 1) / lam``    ``densities=`` or none
additive       ``sum_{i in A} w_i``                           ``weights=`` (sum 1)
maximum        1 for every non-empty A                        --
minimum        0 unless A is everything                       ``n=``
============== ============================================== ======================

or any callable ``mu(mask)`` taking a boolean array ``(..., n)`` (which
elements are in the set) and returning the measure of each set, shape
``(...)`` or broadcastable to it: the generic path, slower, and the oracle
for the named ones.

``q`` and ``n`` are scalars or arrays broadcastable to ``x.shape[:-1]``
(e.g. one exponent per class: ``q`` of shape ``(n_classes,)`` for ``x`` of
shape ``(n_examples, n_classes, n_rules)``).

Zeros and padding
-----------------
An element equal to 0 adds nothing to any of the integrals (its increment
``x(i) - x(i-1)`` is 0). But the cardinality-based measures count it:
``"cardinality"``, ``"power"`` and ``"minimum"`` take ``n`` to be the length
of the last axis, padded zeros included. A caller that zero-pads vectors
to a common length (or leaves out zeros) passes the true number of
elements per vector as ``n=``; the padded or left-out elements must be
zeros (they sort first). Then ``|A(i)|`` counts real elements and
``mu(A(i)) = min(1, (width - i) / n) ** q``. ``"maximum"``,
``"additive"`` (weights padded with zeros) and ``"sugeno_lambda"``
(densities padded with zeros, or the data-driven variant) are unchanged by
zero padding; they accept ``n=`` and ignore it, so that one call fits all.

The Sugeno lambda measure
-------------------------
``lam > -1`` solves ``1 + lam = prod_i (1 + lam g_i)`` (:func:`sugeno_lambda`),
which makes ``mu`` of the whole set 1. Densities come from ``densities=``
(shape ``(..., n)`` broadcastable to ``x``), or, without it, are the values
being aggregated (``g = x``, the data-driven variant of fuzzy reasoning: one
lambda per vector). Degenerate densities, as :func:`sugeno_lambda` defines
them: zeros take no part; with fewer than two positive densities lambda is 0
(so the measure is additive and ``mu`` of the whole set is the sum of the
densities: a data-driven Choquet integral of a vector with a single
non-zero value c is ``c * c``); a density equal to 1 beside another
positive one gives the limit lambda = -1 (``mu(A) = 1 - prod_A (1 - g)``);
all densities 0 give every integral 0. Because the data-driven measure
moves with the data, its Choquet integral is not monotone in ``x`` for
three or more values (adding a small value can lower the result); with
two values it is (``C = a + (b - a) b`` for ``a <= b``).

Performance
-----------
Values are sorted once per call along the last axis, in blocks of about
2**18 elements. The cardinality-based measures have closed forms in
``|A(i)| = n - i`` and the Choquet integral is one weighted sum. For the
Sugeno lambda measure the integral is
``sum_i x(i) g(i) prod_{j > i} (1 + lam g(j))``, reduced pairwise, and the
lambdas of all vectors are solved together (:func:`sugeno_lambda`). The
data-driven variant has closed forms for vectors with at most three
non-zero values (the common case in fuzzy reasoning) and solves the others
cut to their non-zero part (:func:`workers.fuzzy._lambda.data_driven_choquet`).

Examples
--------
>>> choquet([0.2, 0.5, 0.8], "cardinality")
0.5
>>> round(choquet([0.2, 0.5, 0.8], "power", q=2.0), 4)
0.3667
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

from workers.fuzzy._chain import (
    MEASURES,
    MeasureError,
    cardinality_chain,
    check_params,
    lambda_chain,
    lambda_of_rows,
    weight_chain,
)
from workers.fuzzy._lambda import data_driven_choquet, lambda_rows
from workers.fuzzy._trees import tree_weighted_suffix

__all__ = [
    "MEASURES",
    "TNORMS",
    "MeasureError",
    "choquet",
    "generalized_choquet",
    "sugeno_integral",
    "sugeno_lambda",
]

#: the t-norms of :func:`generalized_choquet`
TNORMS = ("product", "minimum", "lukasiewicz", "hamacher")

#: elements per block: small enough for the cache, large enough to amortise numpy's call overhead
_BLOCK = 1 << 18
#: rows looked at to choose how the data-driven lambda Choquet integral sorts (see there)
_LOOK = 256

Measure = str | Callable[[np.ndarray], Any]


def choquet(x: Any, measure: Measure, **params: Any) -> np.ndarray | float:
    """Discrete Choquet integral of ``x`` along the last axis.

    Parameters
    ----------
    x : array_like of shape (..., n)
        Values in [0, 1].
    measure : str or callable
        One of :data:`MEASURES`, or ``mu(mask)`` (see the module docstring).
    **params
        The measure's parameters: ``q=``, ``n=``, ``densities=``, ``weights=``.

    Returns
    -------
    ndarray of shape (...) or float
    """
    return _integrate(x, measure, params, "choquet", None)


def sugeno_integral(x: Any, measure: Measure, **params: Any) -> np.ndarray | float:
    """Sugeno integral ``max_i min(x(i), mu(A(i)))`` of ``x`` along the last axis.

    Same parameters and conventions as :func:`choquet`.
    """
    return _integrate(x, measure, params, "sugeno", None)


def generalized_choquet(x: Any, measure: Measure, tnorm: str, **params: Any) -> np.ndarray | float:
    """CT-integral ``sum_i T(x(i) - x(i-1), mu(A(i)))`` of ``x`` along the last axis.

    The generalisation of the Choquet integral by a t-norm ``T`` of Lucca,
    Sanz, Dimuro, Bedregal, Mesiar, Kolesarova and Bustince, "Preaggregation
    functions: construction and an application", IEEE Trans. Fuzzy Syst.
    24(2), 2016. ``"product"`` gives :func:`choquet`.

    Parameters
    ----------
    x, measure, **params
        As for :func:`choquet`.
    tnorm : {"product", "minimum", "lukasiewicz", "hamacher"}
        ``a * b``; ``min(a, b)``; ``max(0, a + b - 1)``; the Hamacher
        product ``a b / (a + b - a b)`` (0 at ``a = b = 0``).
    """
    if tnorm not in TNORMS:
        raise MeasureError(f"tnorm={tnorm!r} is not known; expected one of {TNORMS}")
    return _integrate(x, measure, params, "general", tnorm)


def sugeno_lambda(g: Any) -> np.ndarray | float:
    """The Sugeno lambda of densities ``g`` of shape (..., n), per vector.

    The root ``lam > -1``, other than 0, of ``1 + lam = prod_i (1 + lam g_i)``:
    in (-1, 0) when ``sum(g) > 1`` and in (0, inf) when ``sum(g) < 1``.
    Solved for all vectors at once by a safeguarded Newton iteration on
    ``sum_i log1p(lam g_i) - log1p(lam)`` in the variable ``log1p(lam)``
    (see :mod:`workers.fuzzy._lambda`); no polynomial root finding.

    Degenerate cases, by definition:

    * densities equal to 0 take no part;
    * fewer than two positive densities: ``lam = 0``;
    * a density equal to 1 beside another positive one: ``lam = -1`` (the limit);
    * ``|sum(g) - 1| <= 1e-12``: ``lam = 0`` (the measure is additive);
    * all densities 0: ``lam = 0`` (every integral is then 0).

    Accuracy: relative 1e-10 or better where the problem's conditioning
    allows it. Close to ``sum(g) = 1`` the root itself moves by about
    ``n * eps / |sum(g) - 1|`` relatively when the densities are rounded,
    and no method can do better than that. Roots above ``exp(709)`` (only
    for densities whose products are below about 1e-308) are capped there.

    Parameters
    ----------
    g : array_like of shape (..., n)
        Densities in [0, 1].

    Returns
    -------
    ndarray of shape (...) or float
    """
    g = np.asarray(g, dtype=float)
    if g.ndim == 0 or g.shape[-1] == 0:
        raise MeasureError(f"sugeno_lambda needs densities of shape (..., n) with n >= 1, got shape {g.shape}")
    if not (np.all(g >= 0) and np.all(g <= 1)):
        raise MeasureError("sugeno_lambda needs densities in [0, 1] (no NaN)")
    lead, n = g.shape[:-1], g.shape[-1]
    rows = np.ascontiguousarray(g.reshape(-1, n))
    out = np.empty(len(rows))
    step = max(1, _BLOCK // n)
    for a in range(0, len(rows), step):
        out[a:a + step] = lambda_rows(rows[a:a + step])
    return _finish(out.reshape(lead))


def choquet_weights(measure: str, width: int, **params: Any) -> np.ndarray:
    """Weights ``w`` with ``choquet(x, measure, **params) == choquet_by_weights(x, w)``, shape ``(lead..., width)``.

    For the measures that depend on ``|A|`` only (``"cardinality"``,
    ``"power"``, ``"maximum"``, ``"minimum"``); ``lead`` is the broadcast
    shape of ``n`` and ``q``. A caller integrating many vectors that share
    few ``(n, q)`` computes the weights once per pair and gathers them, the
    values bit-for-bit those :func:`choquet` computes.
    """
    if measure not in ("cardinality", "power", "maximum", "minimum"):
        raise MeasureError(f"choquet_weights: measure {measure!r} is not one of |A| only")
    lead = np.broadcast_shapes(*(np.shape(v) for v in params.values() if v is not None))
    return _increments_to_weights(cardinality_chain(measure, width, check_params(measure, params, lead, width)))


def choquet_by_weights(x: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """The Choquet integral of each ``x[..., :]`` from :func:`choquet_weights` (same shape as ``x``)."""
    return np.einsum("...n,...n->...", _sorted(x), weights)


# --- the machinery -------------------------------------------------------------------


def _integrate(x: Any, measure: Measure, params: dict[str, Any], kind: str, tnorm: str | None):
    x = np.asarray(x, dtype=float)
    if x.ndim == 0 or x.shape[-1] == 0:
        raise MeasureError(f"x must have shape (..., n) with n >= 1, got shape {x.shape}")
    if callable(measure):
        if params:
            raise MeasureError(f"a callable measure takes no parameters, got {sorted(params)}")
        xs, mu = _generic_chain(x, measure)
        return _finish(_from_chain(xs, mu, kind, tnorm))
    single = x.ndim == 1
    xx = x[None] if single else x
    lead, width = xx.shape[:-1], xx.shape[-1]
    p = check_params(measure, params, lead, width)
    plan = _Plan(measure, p, lead, width)
    out = np.empty(lead)
    step = max(1, _BLOCK // max(1, int(np.prod(xx.shape[1:]))))
    for a in range(0, lead[0], step):
        sl = slice(a, a + step)
        out[sl] = plan.block(xx[sl], sl, kind, tnorm)
    return _finish(out[0] if single else out)


class _Plan:
    """What one call needs per block, computed once: chains of |A|-measures, lambdas of densities."""

    def __init__(self, measure: str, p: dict[str, Any], lead: tuple[int, ...], width: int):
        self.measure, self.p, self.lead, self.width = measure, p, lead, width
        self.chain = None
        self.lam = None
        if measure in ("cardinality", "power", "maximum", "minimum"):
            chain = cardinality_chain(measure, width, p)
            self.chain = np.broadcast_to(chain, lead + (width,))
            self.coef = np.broadcast_to(_increments_to_weights(chain), lead + (width,))
        if measure == "sugeno_lambda" and "densities" in p:
            g = p["densities"]
            self.densities = np.broadcast_to(g, lead + (width,))
            self.lam = np.broadcast_to(sugeno_lambda(g), lead)

    def block(self, xb: np.ndarray, sl: slice, kind: str, tnorm: str | None) -> np.ndarray:
        if self.chain is not None:
            xs = _sorted(xb)
            if kind == "choquet":
                return np.einsum("...n,...n->...", xs, self.coef[sl])  # as choquet_by_weights
            return _from_chain(xs, self.chain[sl], kind, tnorm)
        if self.measure == "additive":
            order = np.argsort(xb, axis=-1)
            xs = _checked(np.take_along_axis(xb, order, axis=-1))
            return _from_chain(xs, weight_chain(self.p["weights"], order), kind, tnorm)
        if self.lam is not None:
            order = np.argsort(xb, axis=-1)
            xs = _checked(np.take_along_axis(xb, order, axis=-1))
            gs = np.take_along_axis(self.densities[sl], order, axis=-1)
            lam = self.lam[sl]
            if kind == "choquet":
                return _lambda_choquet(_columns(xs), _columns(gs), lam.reshape(-1)).reshape(xs.shape[:-1])
            return _from_chain(xs, lambda_chain(gs, lam), kind, tnorm)
        if kind == "choquet":
            return _data_driven_choquet(xb.reshape(-1, self.width)).reshape(xb.shape[:-1])
        xs = _sorted(xb)
        lam = lambda_of_rows(xs.reshape(-1, self.width), sorted_rows=True).reshape(xs.shape[:-1])
        return _from_chain(xs, lambda_chain(xs, lam), kind, tnorm)


def _data_driven_choquet(rows: np.ndarray) -> np.ndarray:
    """The data-driven lambda Choquet integral of each row (not sorted), sorting only what needs it.

    A vector with at most one non-zero value c integrates to ``c * c``
    (0 for none), from its maximum: no sort. When many rows are such (a
    look at the first :data:`_LOOK` rows decides; the result is the same
    either way) the values are transposed unsorted, counted and maximised
    along the fast axis, and only the other rows are sorted.
    """
    look = rows[:_LOOK]
    if np.count_nonzero(np.count_nonzero(look, axis=1) <= 1) < 0.1 * len(look):
        return data_driven_choquet(_columns(_sorted(rows)))
    xt = _columns(rows)
    top = np.maximum.reduce(xt, axis=0)
    if not (np.all(np.minimum.reduce(xt, axis=0) >= 0.0) and np.all(top <= 1.0)):  # NaN fails too
        raise MeasureError("x must hold values in [0, 1] (no NaN)")
    many = np.flatnonzero(np.count_nonzero(xt, axis=0) >= 2)
    out = top * top
    if many.size:
        out[many] = data_driven_choquet(_columns(np.sort(rows[many], axis=-1)))
    return out


def _columns(a: np.ndarray) -> np.ndarray:
    """``(..., n)`` -> ``(n, vectors)`` contiguous: the layout of the lambda solver."""
    return np.ascontiguousarray(a.reshape(-1, a.shape[-1]).T)


def _lambda_choquet(xt: np.ndarray, gt: np.ndarray, lam: np.ndarray) -> np.ndarray:
    """``sum_i x(i) g(i) prod_{j > i} (1 + lam g(j))``: the Choquet integral for a lambda measure.

    ``mu(A(i)) - mu(A(i+1)) = g(i) prod_{j > i} (1 + lam g(j))``, so the
    integral is a linear recurrence over the sorted tail, reduced pairwise.
    Vectors are the columns of ``xt`` and ``gt`` (n, vectors).
    """
    c = xt * gt
    b = gt * lam
    b += 1.0
    return tree_weighted_suffix(c, b)


def _increments_to_weights(chain: np.ndarray) -> np.ndarray:
    """``C = sum_i x(i) (mu(A(i)) - mu(A(i+1)))`` (Abel summation), ``mu(A(n)) = 0``."""
    coef = chain.copy()
    coef[..., :-1] -= chain[..., 1:]
    return coef


def _sorted(xb: np.ndarray) -> np.ndarray:
    return _checked(np.sort(xb, axis=-1))


def _checked(xs: np.ndarray) -> np.ndarray:
    """Check values in [0, 1] on the sorted array: only the ends need looking at (NaN sorts last)."""
    if not (np.all(xs[..., 0] >= 0.0) and np.all(xs[..., -1] <= 1.0)):
        raise MeasureError("x must hold values in [0, 1] (no NaN)")
    return xs


def _generic_chain(x: np.ndarray, mu: Callable[[np.ndarray], Any]) -> tuple[np.ndarray, np.ndarray]:
    """Sorted values and ``mu(A(i))`` from a callable measure: n calls with boolean masks."""
    n = x.shape[-1]
    order = np.argsort(x, axis=-1, kind="stable")
    xs = _checked(np.take_along_axis(x, order, axis=-1))
    rank = np.empty_like(order)
    np.put_along_axis(rank, order, np.broadcast_to(np.arange(n), x.shape), axis=-1)
    lead = x.shape[:-1]
    chain = [np.broadcast_to(np.asarray(mu(rank >= i), dtype=float), lead) for i in range(n)]
    return xs, np.stack(chain, axis=-1)


def _from_chain(xs: np.ndarray, mu: np.ndarray, kind: str, tnorm: str | None) -> np.ndarray:
    """An integral from sorted values and the measures of their chain."""
    if kind == "choquet":
        return np.einsum("...n,...n->...", xs, _increments_to_weights(mu))
    if kind == "sugeno":
        return np.minimum(xs, mu).max(axis=-1)
    d = np.diff(xs, axis=-1, prepend=0.0)
    return _tnorm(tnorm, d, mu).sum(axis=-1)


def _tnorm(name: str | None, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    if name == "product":
        return a * b
    if name == "minimum":
        return np.minimum(a, b)
    if name == "lukasiewicz":
        return np.maximum(a + b - 1.0, 0.0)
    ab = a * b
    den = a + b - ab
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(den > 0, ab / np.where(den > 0, den, 1.0), 0.0)


def _finish(out: np.ndarray) -> np.ndarray | float:
    return float(out) if np.ndim(out) == 0 else out
