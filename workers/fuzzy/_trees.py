"""Pairwise (tree) reductions along the last axis of a 2-D array, in place.

numpy's ``prod``/``cumprod`` along a short last axis pay a per-row cost;
combining columns pairwise with strided in-place element-wise operations
is several times faster on ``(rows, 32)`` blocks, allocates nothing, and
the pairwise order keeps rounding errors at O(log n) instead of O(n).

Every function here *consumes* its inputs: it overwrites them.
"""

from __future__ import annotations

import numpy as np


def _levels(w: int):
    """Yield ``(left, right)`` column slices of each pairwise level for width ``w``."""
    step = 1
    while step < w:
        yield slice(0, w - step, 2 * step), slice(step, w, 2 * step)
        step *= 2


def tree_prod(b: np.ndarray) -> np.ndarray:
    """Row products of ``b`` (rows, w) -> (rows,) (a view into ``b``)."""
    for left, right in _levels(b.shape[1]):
        b[:, left] *= b[:, right]
    return b[:, 0]


def tree_expm1_prod(a: np.ndarray) -> np.ndarray:
    """Row values of ``prod(1 + a) - 1`` computed without forming ``1 + a``.

    Combining ``E = E_l + E_r + E_l * E_r`` keeps full relative accuracy
    when the product is close to 1 (where ``prod(1 + a) - 1`` would cancel),
    which is the regime of a Sugeno lambda close to 0.
    """
    for left, right in _levels(a.shape[1]):
        cross = a[:, left] * a[:, right]
        a[:, left] += a[:, right]
        a[:, left] += cross
    return a[:, 0]


def tree_weighted_suffix(c: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Row values of ``sum_i c_i * prod_{j > i} b_j`` -> (rows,).

    The pair ``(c, b)`` composes associatively as
    ``(c_l, b_l) o (c_r, b_r) = (c_l * b_r + c_r, b_l * b_r)`` (a linear
    recurrence), so the sum reduces pairwise like a product.
    """
    for left, right in _levels(c.shape[1]):
        c[:, left] *= b[:, right]
        c[:, left] += c[:, right]
        b[:, left] *= b[:, right]
    return c[:, 0]
