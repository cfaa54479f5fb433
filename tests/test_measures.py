"""Fuzzy measures and integrals (workers.fuzzy.measures) against outside references."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq

from workers.fuzzy.measures import (
    TNORMS,
    MeasureError,
    choquet,
    generalized_choquet,
    sugeno_integral,
    sugeno_lambda,
)

EPS = np.finfo(float).eps
INTEGRALS = {
    "choquet": choquet,
    "sugeno": sugeno_integral,
    **{f"ct_{t}": (lambda x, m, _t=t, **p: generalized_choquet(x, m, _t, **p)) for t in TNORMS},
}


# --- references -------------------------------------------------------------------------


def brentq_lambda(g: np.ndarray) -> float:
    """Reference root of h(lam) = sum log1p(lam g) - log1p(lam) by scipy.optimize.brentq."""
    g = g[g > 0]
    h = lambda lam: np.log1p(lam * g).sum() - np.log1p(lam)  # noqa: E731
    if g.sum() > 1:
        lo = np.nextafter(-1.0, 0.0)
        if h(lo) <= 0:  # the root is within one ulp of -1
            return -1.0
        return brentq(h, lo, -1e-300, xtol=1e-300, rtol=1e-15, maxiter=1000)
    hi = 1.0
    while h(hi) <= 0:
        hi *= 4.0
    return brentq(h, 1e-300, hi, xtol=1e-300, rtol=1e-15, maxiter=1000)


def roots_lambda(g: np.ndarray) -> np.ndarray:
    """Real roots > -1 of (prod(1 + lam g) - 1 - lam) / lam by numpy.roots."""
    c = np.array([1.0])
    for gi in g:
        c = np.convolve(c, [1.0, gi])  # coefficients, low to high
    c[0] -= 1.0
    c[1] -= 1.0
    r = np.roots(c[1:][::-1])
    r = r[np.abs(r.imag) <= 1e-9 * np.maximum(1.0, np.abs(r.real))].real
    return r[r >= -1.0 - 1e-9]


def lambda_measure(g: np.ndarray, lam: np.ndarray):
    """The Sugeno lambda measure as a callable mu(mask), straight from its definition (Sugeno, 1974)."""
    lam = np.asarray(lam, dtype=float)

    def mu(mask):
        prod = np.prod(np.where(mask, 1.0 + lam[..., None] * g, 1.0), axis=-1)
        safe = np.where(lam == 0, 1.0, lam)
        return np.where(lam == 0, np.where(mask, g, 0.0).sum(axis=-1), (prod - 1.0) / safe)

    return mu


def cardinality_measure(q=1.0, n=None):
    def mu(mask):
        size = mask.sum(axis=-1)
        total = mask.shape[-1] if n is None else n
        return np.minimum(size / total, 1.0) ** q

    return mu


def random_densities(rng: np.random.Generator, n: int, kind: int) -> np.ndarray:
    g = rng.random(n)
    if kind == 1:  # zeros
        g *= rng.random(n) < 0.5
    elif kind == 2:  # near sum(g) = 1
        g = g / g.sum() * (1.0 + rng.choice([-1.0, 1.0]) * 10.0 ** rng.uniform(-7, -1))
    elif kind == 3:  # small densities: large lambda
        g = g ** rng.uniform(1, 8)
    elif kind == 4:  # large densities: lambda close to -1
        g = 1.0 - 0.5 * g ** rng.uniform(1, 8)
    return np.clip(g, 0.0, 1.0)


def condition(g: np.ndarray) -> float:
    """Relative change of the root when the densities are rounded: about n eps / |sum(g) - 1| (common practice)."""
    return 50 * len(g) * EPS / abs(g.sum() - 1.0)


# --- the lambda solver ----------------------------------------------------------------------


def test_lambda_matches_brentq_on_thousands_of_vectors():
    # reference: scipy.optimize.brentq on the h(lam), bracketed on the side sum(g) gives
    rng = np.random.default_rng(3)
    checked = 0
    for n in range(2, 61):
        batch = np.array([random_densities(rng, n, k % 5) for k in range(60)])
        lam = sugeno_lambda(batch)  # one vectorized call mixing every regime
        for g, got in zip(batch, lam):
            if (g > 0).sum() < 2 or abs(g.sum() - 1) <= 1e-12 or (g == 1).any():
                continue
            ref = brentq_lambda(g)
            assert abs(got - ref) <= (1e-10 + condition(g)) * abs(ref), (g.tolist(), got, ref)
            checked += 1
    assert checked > 3000


def test_lambda_matches_numpy_roots():
    # reference: numpy.roots (companion-matrix eigenvalues) of the deflated polynomial. Its roots
    # of these badly scaled polynomials are good to only about 1e-6 (brentq above is the tight
    # reference), so: the same root, and a residual of the defining equation at least as small
    rng = np.random.default_rng(4)
    residual = lambda g, lam: abs(np.log1p(lam * g).sum() - np.log1p(lam))  # noqa: E731
    for k in range(400):
        n = int(rng.integers(2, 31))
        g = random_densities(rng, n, k % 4)
        if (g > 0).sum() < 2 or abs(g.sum() - 1) <= 1e-12:
            continue
        got = sugeno_lambda(g)
        roots = roots_lambda(g)
        ref = roots[np.argmin(np.abs(roots - got))]
        assert abs(got - ref) <= (1e-5 + condition(g)) * abs(ref) + 1e-12, (g.tolist(), got, roots)
        if ref > -1:  # the residual, up to rounding in h and 1e-13 of lambda times h's slope
            slope = np.abs(g / (1 + got * g)).sum() + 1 / (1 + got)
            noise = 1e-13 * abs(got) * slope + 16 * EPS * (abs(np.log1p(got)) + 1)
            assert residual(g, got) <= residual(g, ref) + noise, (g.tolist(), got, ref)


def test_lambda_solves_its_equation_near_sum_one():
    # the defining equation 1 + lam = prod(1 + lam g) (Sugeno, 1974), in the regime of small lambda
    rng = np.random.default_rng(5)
    g = rng.random((2000, 12))
    g /= g.sum(axis=1, keepdims=True)
    g *= 1.0 + rng.choice([-1.0, 1.0], size=(2000, 1)) * 10.0 ** rng.uniform(-9, -3, size=(2000, 1))
    lam = sugeno_lambda(g)
    h = np.log1p(lam[:, None] * g).sum(axis=1) - np.log1p(lam)
    assert np.all(np.sign(lam) == np.sign(1.0 - g.sum(axis=1)))
    assert np.all(np.abs(h) <= 1e-14 * np.abs(lam))


def test_lambda_degenerate_cases():
    # the definitions in the issue; all-zero densities make every integral 0
    assert sugeno_lambda([0.3, 0.0, 0.0]) == 0.0  # fewer than two positive densities
    assert sugeno_lambda([0.0, 0.0]) == 0.0
    assert sugeno_lambda([0.7]) == 0.0
    assert sugeno_lambda([1.0, 0.2, 0.0]) == -1.0  # a 1 beside another positive density
    assert sugeno_lambda([1.0, 0.0]) == 0.0
    assert sugeno_lambda([0.25, 0.25, 0.5]) == 0.0  # sum exactly 1: additive
    assert sugeno_lambda([0.5, 0.5 + 1e-13]) == 0.0  # sum within 1e-12 of 1
    g = np.array([0.1, 0.3, 0.2])
    padded = np.array([0.0, 0.1, 0.0, 0.3, 0.2, 0.0])
    assert sugeno_lambda(padded) == pytest.approx(sugeno_lambda(g), rel=1e-14)  # zeros take no part
    zero = np.zeros((3, 4))
    for f in INTEGRALS.values():
        assert np.all(f(zero, "sugeno_lambda") == 0.0)
        assert f(zero[0], "sugeno_lambda", densities=np.zeros(4)) == 0.0


def test_lambda_next_to_one_warns_not():
    # found by hypothesis: a density one ulp below 1 beside a large one (s > 1 with
    # (1 - s) / e2 < -1) made the start's unused s < 1 bound take log1p of less than -1;
    # reference: scipy.optimize.brentq (pytest turns a warning into an error here)
    g = np.array([0.9459950328088659, 0.9999999999999999])
    ref = brentq_lambda(g)
    assert sugeno_lambda(g) == pytest.approx(ref, rel=1e-10)
    assert np.isfinite(choquet(g, "sugeno_lambda"))


def test_lambda_of_two_densities_closed_form():
    # (1 + lam a)(1 + lam b) = 1 + lam  =>  lam = (1 - a - b) / (a b)  (hand algebra, common practice)
    a, b = np.meshgrid(np.linspace(0.05, 0.95, 19), np.linspace(0.05, 0.95, 19))
    g = np.stack([a.ravel(), b.ravel()], axis=1)
    keep = np.abs(g.sum(axis=1) - 1) > 1e-9
    ref = (1 - g.sum(axis=1)) / g.prod(axis=1)
    np.testing.assert_allclose(sugeno_lambda(g)[keep], ref[keep], rtol=1e-10)


def test_lambda_shape_and_errors():
    assert sugeno_lambda(np.full((2, 3, 4), 0.1)).shape == (2, 3)
    with pytest.raises(MeasureError, match=r"\[0, 1\]"):
        sugeno_lambda([0.5, 1.5])
    with pytest.raises(MeasureError, match=r"\[0, 1\]"):
        sugeno_lambda([0.5, np.nan])
    with pytest.raises(MeasureError, match="shape"):
        sugeno_lambda(0.5)


# --- properties of the Sugeno lambda measure (Sugeno, 1974), by hypothesis ---------------------

densities_st = st.lists(
    st.one_of(st.just(0.0), st.floats(1e-6, 1.0)), min_size=2, max_size=8
).filter(lambda g: sum(v > 0 for v in g) >= 2)


def measure_of(sets: np.ndarray, g: np.ndarray) -> np.ndarray:
    """mu(A) as the module computes it: the Choquet integral of the indicator of A is mu(A)
    (Grabisch, Marichal, Mesiar, Pap, Aggregation Functions, 2009)."""
    return choquet(sets.astype(float), "sugeno_lambda", densities=g)


@settings(max_examples=150, deadline=None)
@given(densities_st, st.data())
def test_lambda_measure_normalised_monotone_and_lambda_additive(gl, data):
    g = np.array(gl)
    n = len(g)
    lam = sugeno_lambda(g)
    a = np.array(data.draw(st.lists(st.booleans(), min_size=n, max_size=n)))
    b = np.array(data.draw(st.lists(st.booleans(), min_size=n, max_size=n))) & ~a
    full, empty = np.ones(n, bool), np.zeros(n, bool)
    mu_a, mu_b, mu_ab, mu_x, mu_0 = measure_of(np.array([a, b, a | b, full, empty]), g)
    assert mu_x == pytest.approx(1.0, abs=1e-9)  # normalised
    assert mu_0 == 0.0
    assert -1e-12 <= mu_a <= mu_ab + 1e-12 and mu_b <= mu_ab + 1e-12 and mu_ab <= 1 + 1e-9  # monotone
    # lambda-additivity for disjoint A, B
    assert mu_ab == pytest.approx(mu_a + mu_b + lam * mu_a * mu_b, abs=1e-9)
    for i in np.flatnonzero(g):  # singletons carry their densities
        single = np.zeros(n, bool)
        single[i] = True
        assert measure_of(single[None], g)[0] == pytest.approx(g[i], rel=1e-9, abs=1e-15)


# --- named measures against the generic (callable) path ---------------------------------------


def named_and_callable(rng: np.random.Generator, x: np.ndarray):
    """Pairs (measure, params, equivalent callable) for every named measure."""
    lead, n = x.shape[:-1], x.shape[-1]
    q = rng.uniform(0.1, 4.0, size=lead[-1:])  # one exponent per "class" (second-to-last axis)
    w = rng.random(n)
    w /= w.sum()
    dens = rng.random(n) * 0.6
    lam_x = sugeno_lambda(x)
    yield "cardinality", {}, cardinality_measure()
    yield "power", {"q": q}, cardinality_measure(q=q)
    yield "power", {"q": 2.5, "n": n + 3}, cardinality_measure(q=2.5, n=n + 3)
    yield "additive", {"weights": w}, lambda m: np.where(m, w, 0.0).sum(axis=-1)
    yield "maximum", {}, lambda m: m.any(axis=-1).astype(float)
    yield "minimum", {}, lambda m: m.all(axis=-1).astype(float)
    yield "sugeno_lambda", {"densities": dens}, lambda_measure(dens, sugeno_lambda(dens))
    yield "sugeno_lambda", {}, lambda_measure(x, lam_x)


@pytest.mark.parametrize("name", list(INTEGRALS))
def test_named_measures_equal_the_callable_oracle(name):
    # the generic path (n calls of mu on boolean masks) is the oracle for the fast paths
    rng = np.random.default_rng(7)
    x = rng.random((40, 3, 6)) * (rng.random((40, 3, 6)) < 0.8)
    x[0, 0] = 0.4  # ties
    integral = INTEGRALS[name]
    for measure, params, mu in named_and_callable(rng, x):
        np.testing.assert_allclose(integral(x, measure, **params), integral(x, mu), rtol=1e-12, atol=1e-13,
                                   err_msg=f"{measure} {params}")


# --- known values and properties (Grabisch, Marichal, Mesiar, Pap, Aggregation Functions, 2009) ---


def test_choquet_special_cases_are_means_max_and_min():
    # Grabisch et al. 2009, properties of the Choquet integral: uniform measure -> arithmetic mean,
    # additive measure -> weighted mean, the greatest measure -> max, the smallest -> min
    rng = np.random.default_rng(8)
    x = rng.random((200, 9))
    w = rng.random(9)
    w /= w.sum()
    np.testing.assert_allclose(choquet(x, "cardinality"), x.mean(axis=1), rtol=1e-13)
    np.testing.assert_allclose(choquet(x, "additive", weights=w), x @ w, rtol=1e-13)
    np.testing.assert_allclose(choquet(x, "maximum"), x.max(axis=1), rtol=1e-13)
    np.testing.assert_allclose(choquet(x, "minimum"), x.min(axis=1), rtol=1e-13)
    # the Sugeno integral of the same two extreme measures (Grabisch et al. 2009)
    np.testing.assert_allclose(sugeno_integral(x, "maximum"), x.max(axis=1))
    np.testing.assert_allclose(sugeno_integral(x, "minimum"), x.min(axis=1))


def test_hand_worked_example():
    # common practice, worked by hand: association degrees 0.2, 0.5, 0.8
    x = [0.2, 0.5, 0.8]
    assert choquet(x, "maximum") == pytest.approx(0.8)  # the winning rule
    assert choquet(x, "cardinality") == pytest.approx(0.5)
    assert choquet(x, "power", q=1.0) == pytest.approx(0.5)
    expected = 0.2 * 1 + 0.3 * (2 / 3) ** 2 + 0.3 * (1 / 3) ** 2
    assert choquet(x, "power", q=2.0) == pytest.approx(expected, rel=1e-14)
    assert round(choquet(x, "power", q=2.0), 4) == 0.3667
    # CT-integrals of the same vector, cardinality measure, by hand (common practice):
    # min: 0.2 + 0.3 + 0.3; Lukasiewicz: 0.2 + 0 + 0; Hamacher: 0.2 + 0.2/0.7667 + 0.1/0.5333
    assert generalized_choquet(x, "cardinality", "minimum") == pytest.approx(0.8)
    assert generalized_choquet(x, "cardinality", "lukasiewicz") == pytest.approx(0.2)
    assert generalized_choquet(x, "cardinality", "hamacher") == pytest.approx(0.2 + 0.2 / (0.3 + 2 / 3 - 0.2)
                                                                               + 0.1 / (0.3 + 1 / 3 - 0.1))
    assert generalized_choquet(x, "cardinality", "product") == pytest.approx(0.5)


def test_sugeno_integral_with_cardinality_hand_values():
    # hand calculation (common practice): max(min(0.2, 1), min(0.5, 2/3), min(0.8, 1/3)) = 0.5
    assert sugeno_integral([0.2, 0.5, 0.8], "cardinality") == pytest.approx(0.5)
    # max(min(.1, 1), min(.9, .75), min(.95, .5), min(.97, .25)) = 0.75
    assert sugeno_integral([0.95, 0.1, 0.97, 0.9], "cardinality") == pytest.approx(0.75)
    assert sugeno_integral([0.3, 0.3, 0.3], "cardinality") == pytest.approx(0.3)


def test_sugeno_integral_median_formula():
    # from memory: S(x) = median(x(1..n), mu(A(2)), ..., mu(A(n))) (Kandel's median formula,
    # Grabisch et al. 2009): 2n - 1 numbers
    rng = np.random.default_rng(9)
    x = rng.random((300, 7))
    q = 1.7
    chain = (np.arange(6, 0, -1) / 7) ** q  # mu(A(i)) for i = 1..n-1
    ref = np.median(np.concatenate([x, np.broadcast_to(chain, (300, 6))], axis=1), axis=1)
    np.testing.assert_allclose(sugeno_integral(x, "power", q=q), ref)


def test_power_measure_limits():
    # (k/n)**q -> 1 as q -> 0 and -> 0 (k < n) as q grows: Choquet -> max and -> min (common practice)
    rng = np.random.default_rng(10)
    x = rng.random((100, 8))
    np.testing.assert_allclose(choquet(x, "power", q=1.0), choquet(x, "cardinality"), rtol=1e-14)
    np.testing.assert_allclose(choquet(x, "power", q=1e-9), x.max(axis=1), atol=1e-8)
    np.testing.assert_allclose(choquet(x, "power", q=1e4), x.min(axis=1), atol=1e-12)
    values = [choquet(x, "power", q=q) for q in (0.01, 0.3, 1.0, 3.0, 100.0)]
    assert all(np.all(a >= b - 1e-15) for a, b in zip(values, values[1:]))  # decreasing in q


def test_ct_integrals_ordered_like_their_tnorms():
    # Lukasiewicz <= product <= Hamacher <= minimum (Klement, Mesiar, Pap, Triangular Norms, 2000),
    # so the CT-integrals are ordered the same way (Lucca et al. 2016)
    rng = np.random.default_rng(11)
    x = rng.random((300, 6))
    for measure, params in (("cardinality", {}), ("power", {"q": 0.5}), ("sugeno_lambda", {})):
        v = [generalized_choquet(x, measure, t, **params) for t in ("lukasiewicz", "product", "hamacher", "minimum")]
        assert all(np.all(a <= b + 1e-15) for a, b in zip(v, v[1:]))


ALL_MEASURES = [
    ("cardinality", {}),
    ("power", {"q": 0.3}),
    ("power", {"q": 3.0}),
    ("sugeno_lambda", {}),
    ("sugeno_lambda", {"densities": [0.1, 0.4, 0.05, 0.3, 0.2]}),
    ("sugeno_lambda", {"densities": [0.9, 0.8, 0.05, 0.3, 0.2]}),
    ("additive", {"weights": [0.1, 0.4, 0.05, 0.3, 0.15]}),
    ("maximum", {}),
    ("minimum", {}),
]


@pytest.mark.parametrize("measure,params", ALL_MEASURES)
@pytest.mark.parametrize("name", list(INTEGRALS))
def test_idempotent_and_bounded(name, measure, params):
    # aggregation-function properties (Grabisch et al. 2009; CT-integrals: Lucca et al. 2016)
    f = INTEGRALS[name]
    c = np.linspace(0.01, 1.0, 25)
    np.testing.assert_allclose(f(np.repeat(c[:, None], 5, axis=1), measure, **params), c, rtol=1e-12)
    x = np.random.default_rng(12).random((500, 5))
    v = f(x, measure, **params)
    assert np.all(v >= x.min(axis=1) - 1e-12) and np.all(v <= x.max(axis=1) + 1e-12)


FIXED_MEASURES = [(m, p) for m, p in ALL_MEASURES if not (m == "sugeno_lambda" and not p)]


@pytest.mark.parametrize("measure,params", FIXED_MEASURES)
@pytest.mark.parametrize("name", ["choquet", "sugeno"])
def test_monotone_in_x(name, measure, params):
    # the Choquet and Sugeno integrals are increasing in x for a fixed measure (Grabisch et al. 2009);
    # the CT-integrals in general are not (Lucca et al. 2016), so they are left out
    rng = np.random.default_rng(13)
    x = rng.random((2000, 5)) * (rng.random((2000, 5)) < 0.8)
    y = np.minimum(x + rng.random((2000, 5)) * (rng.random((2000, 5)) < 0.3) * 0.2, 1.0)
    f = INTEGRALS[name]
    assert np.all(f(y, measure, **params) >= f(x, measure, **params) - 1e-12)


def test_data_driven_lambda_choquet_two_values_and_not_monotone_beyond():
    # two values a <= b, g = x: lam = (1 - a - b) / (a b), mu({b}) = b, so C = a + (b - a) b
    # (hand algebra, common practice), which increases in a and in b
    a, b = np.meshgrid(np.linspace(0.01, 0.99, 30), np.linspace(0.01, 0.99, 30))
    lo, hi = np.minimum(a, b).ravel(), np.maximum(a, b).ravel()
    x = np.stack([hi, lo], axis=1)
    np.testing.assert_allclose(choquet(x, "sugeno_lambda"), lo + (hi - lo) * hi, rtol=1e-12)
    # with three or more values the measure moves with the data and the integral is NOT monotone:
    # adding a small third value lowers mu({a, b}) below 1 (hand check: 0.295 -> 0.257)
    before = choquet([0.349, 0.266, 0.0], "sugeno_lambda")
    after = choquet([0.349, 0.266, 0.083], "sugeno_lambda")
    assert before == pytest.approx(0.266 + (0.349 - 0.266) * 0.349, rel=1e-12)
    assert after < before - 0.03


def test_data_driven_lambda_choquet_by_count_of_nonzero_values():
    # vectors with 0 to 6 non-zero values in one call (the module groups them by that count and has
    # closed forms up to 3) against the measure's definition (Sugeno, 1974) with lambda from
    # scipy.optimize.brentq, through the generic (callable) path
    rng = np.random.default_rng(21)
    rows = []
    for k in range(7):
        for kind in range(5):
            for _ in range(40):
                v = np.zeros(6)
                v[rng.permutation(6)[:k]] = random_densities(rng, k, kind) if k else []
                rows.append(v)
    x = np.array(rows)
    x[5, :2] = [1.0, 0.3]  # a value 1 beside another: lam = -1
    x[6, :3] = [1.0, 0.2, 0.2]
    x[7, :3] = [0.4, 0.4, 0.4]  # ties
    x[8, :3] = [0.2, 0.3, 0.5]  # sum exactly 1: additive
    lam = np.zeros(len(x))
    for i, v in enumerate(x):
        g = v[v > 0]
        if len(g) >= 2 and (g == 1).any():
            lam[i] = -1.0
        elif len(g) >= 2 and abs(g.sum() - 1) > 1e-12:
            lam[i] = brentq_lambda(g)
    ref = choquet(x, lambda_measure(x, lam))
    got = choquet(x, "sugeno_lambda")
    solved = [(v > 0).sum() >= 2 and abs(v.sum() - 1) > 1e-12 for v in x]
    tol = np.array([1e-10 + (condition(v[v > 0]) if ok else 0.0) for v, ok in zip(x, solved)])
    assert np.all(np.abs(got - ref) <= tol * np.maximum(np.abs(ref), 1e-300) + 1e-15)
    two = np.sort(x[(x > 0).sum(axis=1) == 2], axis=1)[:, -2:]  # C = a + (b - a) b (hand algebra)
    np.testing.assert_allclose(choquet(two, "sugeno_lambda"), two[:, 0] + np.diff(two, axis=1)[:, 0] * two[:, 1],
                               rtol=1e-12, atol=1e-15)


def test_data_driven_lambda_choquet_on_mostly_single_values():
    # the fuzzy-reasoning case: most vectors have at most one firing rule (integral c * c, lam = 0);
    # oracle: the definition (Sugeno, 1974) with lambda from scipy.optimize.brentq, generic path
    rng = np.random.default_rng(22)
    x = np.zeros((600, 3, 4))
    x[..., 0] = rng.random((600, 3)) * (rng.random((600, 3)) < 0.7)
    x[::7, :, 1:] = rng.random((86, 3, 3))  # a few with 2 to 4 values
    flat = x.reshape(-1, 4)
    lam = np.array([brentq_lambda(v) if (v > 0).sum() >= 2 else 0.0 for v in flat])
    ref = choquet(flat, lambda_measure(flat, lam)).reshape(600, 3)
    np.testing.assert_allclose(choquet(x, "sugeno_lambda"), ref, rtol=1e-10, atol=1e-15)
    np.testing.assert_allclose(choquet(x[::7], "sugeno_lambda"), ref[::7], rtol=1e-10, atol=1e-15)
    for bad in (np.nan, 1.5, -0.1):  # bad values are refused whichever way the rows are sorted
        y = x.copy()
        y[3, 1, 2] = bad
        with pytest.raises(MeasureError):
            choquet(y, "sugeno_lambda")


# --- zeros, padding and n= -------------------------------------------------------------------


def test_zero_padding():
    rng = np.random.default_rng(14)
    x = rng.random((50, 4, 5)) * (rng.random((50, 4, 5)) < 0.7)
    pad = np.concatenate([np.zeros((50, 4, 3)), x], axis=-1)  # padded to width 8
    rev = pad[..., ::-1]  # padding position does not matter either
    for name, f in INTEGRALS.items():
        for measure, params, params_pad in (
            ("maximum", {}, {}),
            ("sugeno_lambda", {}, {}),
            ("sugeno_lambda", {"densities": [0.2, 0.1, 0.4, 0.3, 0.5]},
             {"densities": [0, 0, 0, 0.2, 0.1, 0.4, 0.3, 0.5]}),
            ("additive", {"weights": [0.2, 0.1, 0.4, 0.1, 0.2]}, {"weights": [0, 0, 0, 0.2, 0.1, 0.4, 0.1, 0.2]}),
            ("cardinality", {}, {"n": 5}),
            ("power", {"q": [0.5, 1, 2, 4]}, {"q": [0.5, 1, 2, 4], "n": 5}),
            ("minimum", {}, {"n": 5}),
        ):
            ref = f(x, measure, **params)
            # Lukasiewicz's a + b - 1 cancels: absolute tolerance
            np.testing.assert_allclose(f(pad, measure, **params_pad), ref, rtol=1e-12, atol=1e-13,
                                       err_msg=f"{name} {measure}")
            if "densities" not in params and "weights" not in params:
                np.testing.assert_allclose(f(rev, measure, **params_pad), ref, rtol=1e-12, atol=1e-13)
    # without n= the cardinality measure counts the padded zeros: the mean over 8, not 5
    np.testing.assert_allclose(choquet(pad, "cardinality"), x.sum(axis=-1) / 8, rtol=1e-13)


def test_n_per_class_and_left_out_zeros():
    # x of shape (examples, classes, width) with the true number of rules per class, some of whose
    # zeros are left out of the array (n > width): equal to the full vectors (common practice)
    rng = np.random.default_rng(15)
    counts = np.array([3, 6, 9])
    q = np.array([0.5, 2.0, 1.0])
    full = [rng.random((30, k)) * (rng.random((30, k)) < 0.4) for k in counts]
    width = 4
    cube = np.stack([np.sort(v, axis=1)[:, -width:] if v.shape[1] >= width
                     else np.pad(np.sort(v, axis=1), ((0, 0), (width - v.shape[1], 0))) for v in full], axis=1)
    cube[:, :, : width - 2] = 0.0  # the smallest ones must be zeros to be left out
    for c, v in enumerate(full):
        v.sort(axis=1)
        v[:, : v.shape[1] - 2] = 0.0
    for name, f in INTEGRALS.items():
        got = f(cube, "power", q=q, n=counts)
        for c, v in enumerate(full):
            np.testing.assert_allclose(got[:, c], f(v, "power", q=q[c]), rtol=1e-12, atol=1e-15, err_msg=name)


# --- input checking -----------------------------------------------------------------------


def test_bad_input_raises_measure_error():
    x = np.full((2, 3), 0.5)
    with pytest.raises(MeasureError, match="not known"):
        choquet(x, "cardinalty")
    with pytest.raises(MeasureError, match="needs the parameter q"):
        choquet(x, "power")
    with pytest.raises(MeasureError, match="q > 0"):
        choquet(x, "power", q=-1.0)
    with pytest.raises(MeasureError, match="broadcast"):
        choquet(x, "power", q=[1.0, 2.0, 3.0])
    with pytest.raises(MeasureError, match="no parameter 'weight'"):
        choquet(x, "additive", weight=[1, 0, 0])
    with pytest.raises(MeasureError, match="summing to 1"):
        choquet(x, "additive", weights=[0.5, 0.2, 0.2])
    with pytest.raises(MeasureError, match="tnorm"):
        generalized_choquet(x, "cardinality", "drastic")
    with pytest.raises(MeasureError, match=r"\[0, 1\]"):
        choquet([0.2, 1.2], "maximum")
    with pytest.raises(MeasureError, match=r"\[0, 1\]"):
        choquet([0.2, np.nan], "sugeno_lambda")
    with pytest.raises(MeasureError, match="n="):
        choquet(x, "cardinality", n=0)
    assert isinstance(MeasureError("m"), ValueError)
