"""The Sugeno lambda: the root lambda > -1 of ``1 + lambda = prod(1 + lambda * g_i)``.

Solved for many density vectors at once, without polynomial root finding.

The unknown is ``u = log1p(lambda)``. In ``u`` the equation reads
``phi(u) = sum_i log(1 - g_i + g_i e^u) - u = 0``; each term is a
log-sum-exp of ``u``, so ``phi`` is convex, with ``phi(0) = 0`` (the
trivial root), ``phi'(0) = sum(g) - 1`` and linear asymptotes on both sides.
The wanted root is therefore the only other zero, on the side of 0 that
the sign of ``1 - sum(g)`` gives, and Newton's method started anywhere on
the far side of it ("outer" side, ``phi >= 0``) converges monotonically.
The iteration below (Halley's: Newton's step with a curvature correction)
keeps, per vector, the nearest known inner point (``phi < 0``, starting
at 0) and the nearest known outer point, and falls back to bisection or to
expansion when a step would leave them. Starts: the quadratic Taylor
model's root near ``sum(g) = 1``, a root bound for ``sum(g) < 1``, and the
root ``sum log(1 - g)`` of the left asymptote for ``sum(g) > 1`` (accepted
outright when provably within 1e-13: the common case of many densities).

``phi`` is evaluated in one of two ways, chosen per vector:

* far from ``sum(g) = 1`` from a pairwise product of ``1 + lambda g_i``
  (a logarithm per vector, not per density: this is the fast path);
* close to it, where the product is close to 1 and its logarithm would
  lose the digits that decide the root, from ``prod(1 + lambda g) - 1``
  accumulated without cancellation (:func:`tree_expm1_prod`).
"""

from __future__ import annotations

import numpy as np

from workers.fuzzy._trees import tree_expm1_prod, tree_prod, tree_weighted_suffix

#: ``|sum(g) - 1|`` up to this is taken as ``sum(g) == 1``: lambda = 0
SUM_TOL = 1e-12
#: stop when a step changes lambda by at most this, relatively
STEP_RTOL = 1e-12
#: ``(sum(g) - 1)**2 < NEAR * sum(g (1 - g))`` selects the accurate evaluation
NEAR = 1e-2
MAX_ITER = 100
_U_MAX = 709.0  # expm1 stays finite
_U_MIN = -745.0  # exp underflows to 0 below: lambda == -1 in floating point
_U_DEEP = -60.0  # a start on the outer side for sum(g) > 1: exp(-60) ~ 1e-26
#: accept a step once Newton's error estimate for it is below this (relative, on lambda)
ACCEPT = 1e-12


def lambda_rows(g: np.ndarray, enough: np.ndarray | None = None,
                has_one: np.ndarray | None = None) -> np.ndarray:
    """Sugeno lambda of each row of ``g`` (rows, n), densities in [0, 1].

    ``enough`` (at least two positive densities) and ``has_one`` (some
    density equals 1) may be passed when the caller knows them cheaply,
    e.g. from sorted rows.
    """
    if enough is None:
        enough = np.count_nonzero(g, axis=1) >= 2
    if has_one is None:
        has_one = (g == 1.0).any(axis=1)
    return lambda_columns(np.ascontiguousarray(g.T), enough, has_one)


def lambda_columns(gt: np.ndarray, enough: np.ndarray, has_one: np.ndarray) -> np.ndarray:
    """Sugeno lambda of each column of ``gt`` (n, cols): the vectors as columns.

    In this layout every step of the iteration is an element-wise
    operation over whole rows, and the sums and products over a vector are
    reductions along the first axis, which numpy vectorises.
    """
    cols = gt.shape[1]
    s = np.add.reduce(gt, axis=0)
    lam = np.zeros(cols)
    lam[enough & has_one] = -1.0
    todo = enough & ~has_one & (np.abs(s - 1.0) > SUM_TOL)
    idx = np.flatnonzero(todo)
    if idx.size == 0:
        return lam
    sub = gt if idx.size == cols else gt[:, idx]
    lam[idx] = _solve(sub, s[idx], np.einsum("ij,ij->j", sub, sub))
    return lam


def _solve(g: np.ndarray, s: np.ndarray, q: np.ndarray) -> np.ndarray:
    """Halley on ``phi(u)`` for columns with >= 2 positive densities, none 1, ``sum != 1``."""
    v = s - q  # sum g (1 - g) > 0 here
    near = (s - 1.0) ** 2 < NEAR * v
    u0 = _start(s, q, v, near)
    lam = np.full(len(s), np.nan)
    deep = np.flatnonzero(u0 == _U_DEEP)
    if deep.size:
        u0[deep], lam[deep] = _asymptote(g if deep.size == len(s) else g[:, deep], s[deep])
    for mask, kernel in ((near, _phi_near), (~near & np.isnan(lam), _phi_far)):
        idx = np.flatnonzero(mask)
        if idx.size:
            sub = g if idx.size == len(s) else g[:, idx]
            lam[idx] = _newton(sub, u0[idx], np.where(s[idx] < 1.0, 1.0, -1.0), kernel)
    return lam


def _asymptote(g: np.ndarray, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """For ``sum(g) > 1`` far from 1: a start from ``u_a = sum log(1 - g)``, the root of ``phi``'s left asymptote.

    With ``t = 1 + lambda``, ``p = prod(1 - g)`` and ``r = g / (1 - g)``
    the equation reads ``t = p prod(1 + r t)``. When ``exp(u_a) = p`` is
    tiny, ``u_a`` is the answer: ``phi(u_a) <= p sum(r)``, so lambda moves
    by about ``p**2 sum(r)`` from ``expm1(u_a)``; accepted when that is
    below 1e-13. Otherwise the start is the Lagrange inversion series of
    ``t``, ``p + E1 p**2 + (E2 + E1**2) p**3`` (``E1``, ``E2`` the elementary
    symmetric polynomials of ``r``; error of order ``p (E1 p)**3``, so that
    one Halley step usually finishes), used while ``E1 p <= 0.1``
    (:func:`_series`). Its
    terms are positive, so it stays below the root's ``t``, on the outer
    side (``phi >= 0``) like ``u_a``. Returns the start and, where
    accepted, lambda (NaN elsewhere).
    """
    bound = s / (1.0 - np.max(g, axis=0))  # >= sum(r), cheaper: enough for the common acceptance
    with np.errstate(under="ignore"):
        p = tree_prod(1.0 - g)
    ok = p > 1e-300
    u = np.where(ok, np.log(np.where(ok, p, 1.0)), _U_DEEP)
    eu = np.exp(u)
    accept = ok & (eu * bound <= 1e-2) & (eu * eu * bound <= 1e-13)
    lam = np.where(accept, np.expm1(u), np.nan)
    rest = np.flatnonzero(ok & ~accept)
    if rest.size:
        u[rest] += _series(g if rest.size == len(s) else g[:, rest], eu[rest])
    return u, lam


def _series(g: np.ndarray, p: np.ndarray) -> np.ndarray:
    """``log(t / p)`` for ``t`` the Lagrange series of :func:`_asymptote` where ``E1 p <= 0.1``, else 0."""
    r = g / (1.0 - g)
    e1 = np.add.reduce(r, axis=0)
    r *= r
    e2 = 0.5 * (e1 * e1 - np.add.reduce(r, axis=0))
    x = e1 * p
    return np.where(x <= 0.1, np.log1p(x + (e2 + e1 * e1) * p * p), 0.0)


def _start(s: np.ndarray, q: np.ndarray, v: np.ndarray, near: np.ndarray) -> np.ndarray:
    """A first ``u`` per row.

    Close to ``s = 1``: the root of the quadratic Taylor model of ``phi`` at 0,
    ``phi(u) ~ (s - 1) u + v u**2 / 2``. For ``s < 1`` it is capped by the
    root bound ``lambda <= (1 - s) / e2`` (``e2`` the second elementary
    symmetric polynomial), which one Newton step on the deflated polynomial
    ``(prod(1 + lambda g) - 1 - lambda) / lambda`` from 0 gives. For ``s > 1``
    and a quadratic model root below -2: far out on the outer side, where ``phi`` is linear
    (``sum log(1 - g) - u``), so that the first step lands on that
    asymptote's root, an outer point, and is often already the answer
    (``lambda`` within 1e-12 of -1).
    """
    with np.errstate(divide="ignore", over="ignore"):
        u = -2.0 * (s - 1.0) / v
        e2 = np.maximum(0.5 * (s * s - q), 1e-300)
        cap = np.log1p(np.clip((1.0 - s) / e2, 0.0, 1e300))  # used for s < 1 only: no log1p(< -1) elsewhere
    u = np.where(s < 1.0, np.minimum(u, cap), np.where(near | (u > -2.0), u, _U_DEEP))
    return np.clip(u, _U_MIN, _U_MAX)


def _newton(g: np.ndarray, u: np.ndarray, sigma: np.ndarray, kernel) -> np.ndarray:
    """Safeguarded Halley iteration in ``w = sigma * u > 0`` (the root's side made positive).

    Halley's correction of the Newton step costs one more sum per
    evaluation and makes convergence cubic. Each vector keeps its nearest
    inner (``phi < 0``) and outer (``phi >= 0``) points; a step that would
    leave them is replaced by bisection, or by expansion while no outer
    point is known. A vector stops when the step changes lambda by less
    than ``STEP_RTOL``, or when the step in ``u`` is already small (below
    1e-3 relative, so that the curvature at hand describes the way to the
    root) and Newton's a posteriori error estimate ``|phi'' / (2 phi')| step**2``
    of the new point is below ``ACCEPT`` (relative, on lambda): that saves
    the confirming evaluation. Finished vectors leave the arrays at once.
    """
    cols = len(u)
    w_max = np.where(sigma > 0, _U_MAX, -_U_MIN)
    w = sigma * u
    w_in = np.zeros(cols)  # inner points: phi < 0, between 0 and the root
    w_out = np.full(cols, np.inf)  # outer points: phi >= 0
    result = np.empty(cols)
    where = np.arange(cols)  # original column of each column still in g
    lam = np.expm1(u)
    for _ in range(MAX_ITER):
        phi, d1, d2 = kernel(g, lam, u)
        inner = phi < 0.0
        np.maximum(w_in, w, out=w_in, where=inner)
        np.minimum(w_out, w, out=w_out, where=~inner)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            ratio = d2 / d1
            newton = phi / d1
            curv = newton * ratio
            np.minimum(curv, 1.0, out=curv)  # Halley: step / (1 - curv / 2), curv < 2 kept
            step = newton / (1.0 - 0.5 * curv)
            cand = w - sigma * step
            ok = (cand > w_in) & (cand <= w_out)
            if not ok.all():
                bad = ~ok
                cand[bad] = np.where(np.isfinite(w_out[bad]), 0.5 * (w_in[bad] + w_out[bad]), 4.0 * w[bad])
            np.minimum(cand, w_max, out=cand)
            u_new = sigma * cand
            lam_new = np.expm1(u_new)
            # the estimate needs few digits: 1 + lambda stands in for exp(u) (cheaper)
            est = np.abs(0.5 * ratio * (1.0 + lam_new) / lam_new) * step * step
        change = np.abs(lam_new - lam)
        done = (change <= STEP_RTOL * np.abs(lam_new)) | (cand == w)
        done |= ok & (est <= ACCEPT) & (np.abs(step) <= 1e-3 * np.maximum(np.abs(u), 1.0))
        if done.any():
            result[where[done]] = lam_new[done]
            keep = np.flatnonzero(~done)  # integer indices: faster than a mask, above all for g
            if not keep.size:
                return result
            g = np.take(g, keep, axis=1)
            where, w_in, w_out, sigma, w_max = where[keep], w_in[keep], w_out[keep], sigma[keep], w_max[keep]
            cand, u_new, lam_new = cand[keep], u_new[keep], lam_new[keep]
        w, u, lam = cand, u_new, lam_new
    result[where] = lam  # not reached in practice: bisection bounds the count
    return result


def _phi_far(g: np.ndarray, lam: np.ndarray, u: np.ndarray):
    """``phi``, ``phi'`` and ``phi''`` from a product (fast; for lambda away from 0).

    ``prod(1 + lam g) = lam**n prod(g + 1/lam)`` and
    ``r = g / (1 + lam g) = (g / (g + 1/lam)) / lam`` need one addition and
    one division per density.
    """
    n = g.shape[0]
    b = g + (1.0 / lam)
    r = np.divide(g, b)
    r1 = np.add.reduce(r, axis=0)
    r *= r
    r2 = np.add.reduce(r, axis=0)
    with np.errstate(over="ignore", under="ignore"):
        p = np.abs(tree_prod(b))
    ok = (p > 1e-300) & (p < 1e300)
    logp = np.log(np.where(ok, p, 1.0)) + n * np.log(np.abs(lam))
    if not ok.all():  # under/overflow of the product: sum the logarithms instead
        bad = ~ok
        logp[bad] = np.log1p(g[:, bad] * lam[bad]).sum(axis=0)
    return logp - u, *_derivatives(r1 / lam, r2 / (lam * lam), lam)


def _phi_near(g: np.ndarray, lam: np.ndarray, u: np.ndarray):
    """``phi``, ``phi'``, ``phi''`` with ``prod(1 + a) - 1`` accumulated without cancellation."""
    a = g * lam
    r = a + 1.0
    np.divide(g, r, out=r)
    r1 = np.add.reduce(r, axis=0)
    r *= r
    r2 = np.add.reduce(r, axis=0)
    e = tree_expm1_prod(a)
    return np.log1p(e) - u, *_derivatives(r1, r2, lam)


def _derivatives(r1: np.ndarray, r2: np.ndarray, lam: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``phi' = e^u sum r - 1`` and ``phi'' = e^u sum r - e^2u sum r**2``, ``r = g / (1 + lam g)``.

    ``e^u`` is taken as ``1 + lam`` (cheaper than ``exp``): its relative
    error, up to ``eps / (1 + lam)``, changes the steps, not the root.
    """
    eu = 1.0 + lam
    first = eu * r1
    return first - 1.0, first - eu * eu * r2


# --- the data-driven Choquet integral (g = x), by the number of non-zero values --------------

#: below this smallest value a 3-value vector goes to the iterative solver (its closed form would overflow)
_TINY3 = 1e-100


def data_driven_choquet(xt: np.ndarray) -> np.ndarray:
    """Choquet integral of each column of ``xt`` (w, cols), sorted ascending, for ``mu`` the lambda measure of g = x.

    Zeros take no part (in lambda nor in the integral), so a column is
    worth only its ``k`` non-zero values, its last ``k`` rows. ``k <= 2``
    have closed forms that need no lambda (``c * c``; ``a + (b - a) b``),
    ``k = 3`` a closed-form lambda (the root of a quadratic); the other
    columns go to the iterative solver together (one call: its cost is
    mostly per call and per column), cut to the largest of their ``k``
    (and with the smaller columns too when they are few: no copy). In
    fuzzy reasoning most vectors have at most three firing rules.
    """
    w, cols = xt.shape
    out = np.zeros(cols)
    if w == 0 or cols == 0:
        return out
    if w >= 4 and xt[0].all():  # no zeros (the smallest values are row 0): nothing to compact
        out[:] = _iterated(xt)
        return out
    k = np.count_nonzero(xt, axis=0).astype(np.int16)  # a small integer type: argsort is a radix sort
    order = np.argsort(k, kind="stable")
    bounds = np.searchsorted(k[order], np.arange(w + 2))  # columns with k = j: order[bounds[j]:bounds[j+1]]
    rest = order[bounds[4]:] if w >= 4 else order[:0]
    if rest.size:
        sub = xt[w - int(k[rest[-1]]):]
        if 2 * rest.size >= cols:  # most columns: all of them, rather than a copy of most
            out[:] = _iterated(sub)  # the closed forms below overwrite the smaller columns
        else:
            out[rest] = _iterated(np.take(sub, rest, axis=1))
    top = xt[-1]
    for j, fn in ((1, _one), (2, _two), (3, _three)):
        idx = order[bounds[j]:bounds[j + 1]] if j <= w else order[:0]
        if idx.size:
            out[idx] = fn(xt, idx, top)
    return out


def _one(xt: np.ndarray, idx: np.ndarray, top: np.ndarray) -> np.ndarray:
    """One value c: lambda = 0 and ``mu({c}) = c``, the integral is ``c * c``."""
    c = top[idx]
    return c * c


def _two(xt: np.ndarray, idx: np.ndarray, top: np.ndarray) -> np.ndarray:
    """Two values ``a <= b``: ``mu({b}) = b`` whatever lambda (also -1 and 0), so ``a + (b - a) b``.

    ``mu`` of both is 1, except where ``|a + b - 1| <= SUM_TOL`` is taken
    as lambda = 0: there it is ``a + b``, as the iteration's convention has it.
    """
    a, b = xt[-2, idx], top[idx]
    s = a + b
    whole = np.where(np.abs(s - 1.0) <= SUM_TOL, s, 1.0)
    return a * whole + (b - a) * b


def _three(xt: np.ndarray, idx: np.ndarray, top: np.ndarray) -> np.ndarray:
    """Three values ``a <= b <= c``: lambda solves ``e3 lam**2 + e2 lam + (s - 1) = 0``.

    (``1 + lam = prod(1 + lam g)`` divided by ``lam``.) The wanted root is
    ``-2 (s - 1) / (e2 + sqrt(e2**2 - 4 e3 (s - 1)))``, the form without
    cancellation: for ``s < 1`` the positive root, for ``s > 1`` the one in
    (-1, 0) (the other is below -1). The degenerate cases are those of
    :func:`lambda_columns`. Vectors with a value below ``1e-100`` (whose
    lambda may overflow) are solved by the iteration instead.
    """
    a, b, c = xt[-3, idx], xt[-2, idx], top[idx]
    s = a + b + c
    sm1 = s - 1.0
    e2 = a * b + (a + b) * c
    e3 = a * b * c
    lam = -2.0 * sm1 / (e2 + np.sqrt(np.maximum(e2 * e2 - 4.0 * e3 * sm1, 0.0)))
    lam[np.abs(sm1) <= SUM_TOL] = 0.0
    lam[c == 1.0] = -1.0
    tiny = a < _TINY3
    if tiny.any():
        lam[tiny] = lambda_columns(xt[-3:, idx[tiny]], np.ones(int(tiny.sum()), bool), c[tiny] == 1.0)
    bc = 1.0 + lam * c
    return (a * a * (1.0 + lam * b) + b * b) * bc + c * c


def _iterated(gt: np.ndarray) -> np.ndarray:
    """Lambda by the iteration, then ``sum_i x(i) g(i) prod_{j > i} (1 + lam g(j))`` (columns sorted)."""
    lam = lambda_columns(gt, enough=gt[-2] > 0, has_one=gt[-1] == 1.0)
    c = gt * gt
    b = gt * lam
    b += 1.0
    return tree_weighted_suffix(c, b)
