"""Measures of the chain ``A(0) ⊇ A(1) ⊇ ... ⊇ A(n-1)`` of sorted values, and their parameters.

``A(i)`` holds the elements from the i-th smallest (0-based) to the largest,
so ``|A(i)| = n - i``. Every fuzzy integral here needs only ``mu(A(i))``,
which for the named measures has a closed form or a cumulative product.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from sweep.errors import FoldsweepError
from workers.fuzzy._lambda import lambda_rows

#: the named fuzzy measures
MEASURES = ("cardinality", "power", "sugeno_lambda", "additive", "maximum", "minimum")

_ALLOWED = {
    "cardinality": ("n",),
    "power": ("q", "n"),
    "sugeno_lambda": ("densities", "n"),
    "additive": ("weights", "n"),
    "maximum": ("n",),
    "minimum": ("n",),
}
_REQUIRED = {"power": ("q",), "additive": ("weights",)}


class MeasureError(FoldsweepError, ValueError):
    """A fuzzy measure, t-norm or parameter that is not allowed."""


def check_params(measure: str, params: dict[str, Any], lead: tuple[int, ...], width: int) -> dict[str, Any]:
    """Validate the parameters of a named measure; return them as arrays."""
    if measure not in _ALLOWED:
        raise MeasureError(f"measure={measure!r} is not known; expected one of {MEASURES} or a callable mu(mask)")
    extra = sorted(set(params) - set(_ALLOWED[measure]))
    if extra:
        raise MeasureError(f"measure {measure!r} takes no parameter {extra[0]!r}; allowed: {_ALLOWED[measure]}")
    for key in _REQUIRED.get(measure, ()):
        if params.get(key) is None:
            raise MeasureError(f"measure {measure!r} needs the parameter {key}=")
    out: dict[str, Any] = {}
    if params.get("n") is not None:
        out["n"] = _check_n(params["n"], lead)
    if measure == "power":
        out["q"] = _check_lead(params["q"], lead, "q")
        if not (np.all(out["q"] > 0) and np.all(np.isfinite(out["q"]))):
            raise MeasureError("measure 'power' needs q > 0 (finite), a scalar or an array broadcastable to x.shape[:-1]")
    if measure == "additive":
        out["weights"] = _check_vectors(params["weights"], lead, width, "weights")
        if not np.allclose(out["weights"].sum(axis=-1), 1.0, rtol=0, atol=1e-9):
            raise MeasureError("measure 'additive' needs weights= summing to 1 along the last axis")
    if measure == "sugeno_lambda" and params.get("densities") is not None:
        out["densities"] = _check_vectors(params["densities"], lead, width, "densities")
    return out


def _check_lead(value: Any, lead: tuple[int, ...], key: str) -> np.ndarray:
    arr = np.asarray(value, dtype=float)
    try:
        np.broadcast_shapes(arr.shape, lead)
    except ValueError:
        raise MeasureError(f"{key}= of shape {arr.shape} does not broadcast to x.shape[:-1] = {lead}") from None
    if np.broadcast_shapes(arr.shape, lead) != lead:
        raise MeasureError(f"{key}= of shape {arr.shape} does not broadcast to x.shape[:-1] = {lead}")
    return arr


def _check_n(value: Any, lead: tuple[int, ...]) -> np.ndarray:
    arr = _check_lead(value, lead, "n")
    if not (np.all(arr >= 1) and np.all(arr == np.round(arr))):
        raise MeasureError("n= must hold whole numbers >= 1 (the true number of elements of each vector)")
    return arr


def _check_vectors(value: Any, lead: tuple[int, ...], width: int, key: str) -> np.ndarray:
    arr = np.asarray(value, dtype=float)
    if arr.ndim == 0 or arr.shape[-1] != width:
        raise MeasureError(f"{key}= must have the length of x's last axis ({width}), got shape {arr.shape}")
    _check_lead(arr[..., 0], lead, key)
    if not (np.all(arr >= 0) and np.all(arr <= 1)):
        raise MeasureError(f"{key}= must lie in [0, 1]")
    return arr


def cardinality_chain(measure: str, width: int, params: dict[str, Any]) -> np.ndarray:
    """``mu(A(i))`` for the measures that depend on ``|A|`` only, shape ``(p..., width)``.

    ``p`` is the broadcast shape of ``q`` and ``n``. With ``n`` given
    (the true number of elements, the other ``width - n`` being zeros that
    sort first, or ``n - width`` zeros left out), ``|A(i)| = width - i``
    counts real elements for ``i >= width - n``.
    """
    size = np.arange(width, 0, -1, dtype=float)  # |A(i)|
    n = params.get("n")
    if measure == "maximum":
        return np.ones(width)
    if n is None:
        n = np.asarray(float(width))
    n = n[..., None]
    if measure == "minimum":
        return (size >= n).astype(float)
    ratio = np.minimum(size / n, 1.0)
    if measure == "power":
        return ratio ** params["q"][..., None]
    return ratio


def weight_chain(weights: np.ndarray, order: np.ndarray) -> np.ndarray:
    """``mu(A(i)) = sum of the weights of A(i)`` (additive measure), from the sorting order."""
    w = np.take_along_axis(np.broadcast_to(weights, order.shape), order, axis=-1)
    return np.cumsum(w[..., ::-1], axis=-1)[..., ::-1]


def lambda_chain(g_sorted: np.ndarray, lam: np.ndarray) -> np.ndarray:
    """``mu(A(i))`` of the Sugeno lambda measure, densities in sorted order.

    ``mu(A(i)) = sum_{j >= i} g_j prod_{l > j} (1 + lam g_l)``, the
    telescoped form of ``(prod_{j >= i} (1 + lam g_j) - 1) / lam``: no
    division by lambda, no cancellation for lambda near 0, and lambda = 0
    (additive) and lambda = -1 are ordinary values.
    """
    b = 1.0 + lam[..., None] * g_sorted
    tail = np.cumprod(b[..., :0:-1], axis=-1)[..., ::-1]  # prod_{l > j}, for j < n-1
    terms = g_sorted.copy()
    terms[..., :-1] *= tail
    return np.cumsum(terms[..., ::-1], axis=-1)[..., ::-1]


def lambda_of_rows(g: np.ndarray, sorted_rows: bool) -> np.ndarray:
    """Sugeno lambda per row of a 2-D array; cheap flags when the rows are sorted ascending."""
    if sorted_rows and g.shape[1] >= 2:
        return lambda_rows(g, enough=g[:, -2] > 0, has_one=g[:, -1] == 1.0)
    return lambda_rows(g)

