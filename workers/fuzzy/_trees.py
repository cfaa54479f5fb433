"""Pairwise (tree) reductions along the FIRST axis of a 2-D array ``(w, cols)``, in place.

The vectors are the columns: with the reduced axis first, every operation
is a contiguous element-wise operation over whole rows of the array, which
numpy runs at full speed; reducing along a short last axis instead pays a
per-vector cost. Combining pairwise also keeps rounding errors at
O(log w) instead of O(w).

Every function here *consumes* its inputs: it overwrites them.
"""

from __future__ import annotations

import numpy as np


def _levels(w: int):
    """Yield ``(left, right)`` row slices of each pairwise level for ``w`` rows."""
    step = 1
    while step < w:
        yield slice(0, w - step, 2 * step), slice(step, w, 2 * step)
        step *= 2


def tree_prod(b: np.ndarray) -> np.ndarray:
    """Column products of ``b`` (w, cols) -> (cols,) (a view into ``b``)."""
    for left, right in _levels(b.shape[0]):
        b[left] *= b[right]
    return b[0]


def tree_expm1_prod(a: np.ndarray) -> np.ndarray:
    """Column values of ``prod(1 + a) - 1`` computed without forming ``1 + a``.

    Combining ``E = E_l + E_r + E_l * E_r`` keeps full relative accuracy
    when the product is close to 1 (where ``prod(1 + a) - 1`` would cancel),
    which is the regime of a Sugeno lambda close to 0.
    """
    for left, right in _levels(a.shape[0]):
        cross = a[left] * a[right]
        a[left] += a[right]
        a[left] += cross
    return a[0]


def tree_weighted_suffix(c: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Column values of ``sum_i c_i * prod_{j > i} b_j`` -> (cols,).

    The pair ``(c, b)`` composes associatively as
    ``(c_l, b_l) o (c_r, b_r) = (c_l * b_r + c_r, b_l * b_r)`` (a linear
    recurrence), so the sum reduces pairwise like a product.
    """
    for left, right in _levels(c.shape[0]):
        c[left] *= b[right]
        c[left] += c[right]
        b[left] *= b[right]
    return c[0]
