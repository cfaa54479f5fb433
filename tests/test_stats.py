"""sweep.stats against published worked examples and scipy as a reference implementation."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats as sst

from sweep import stats

# Demšar, "Statistical Comparisons of Classifiers over Multiple Data Sets",
# JMLR 7 (2006), Table 6: AUC of C4.5, C4.5+m, C4.5+cf, C4.5+m+cf on 14
# datasets. Typed as in scipy's own test of friedmanchisquare
# (scipy/stats/tests/test_stats.py, TestFriedmanChiSquare.x1), which breaks
# the table's tie on one dataset (0.9751 for C4.5+cf against 0.975).
DEMSAR_AUC = np.array(
    [
        [0.763, 0.599, 0.954, 0.628, 0.882, 0.936, 0.661, 0.583, 0.775, 1.0, 0.94, 0.619, 0.972, 0.957],
        [0.768, 0.591, 0.971, 0.661, 0.888, 0.931, 0.668, 0.583, 0.838, 1.0, 0.962, 0.666, 0.981, 0.978],
        [0.771, 0.590, 0.968, 0.654, 0.886, 0.916, 0.609, 0.563, 0.866, 1.0, 0.965, 0.614, 0.9751, 0.946],
        [0.798, 0.569, 0.967, 0.657, 0.898, 0.931, 0.685, 0.625, 0.875, 1.0, 0.962, 0.669, 0.975, 0.970],
    ]
).T
C45, C45_M, C45_CF, C45_M_CF = range(4)


# ---------------------------------------------------------------- Wilcoxon


def test_signed_rank_demsar_table2():
    # Demšar (2006), Table 2 and Sec. 3.1.3: C4.5+m vs C4.5, R+ = 93, R- = 12, T = 12.
    r = stats.signed_rank(DEMSAR_AUC[:, C45_M], DEMSAR_AUC[:, C45])
    assert (r.r_plus, r.r_minus, r.statistic, r.n) == (93.0, 12.0, 12.0, 14)
    assert r.zero_method == "demsar" and r.zeros == 2
    # Demšar (2006), Sec. 3.1.3: T = 12 is below the critical value 21 for N = 14, alpha = 0.05.
    assert r.statistic < 21
    assert r.p_value < 0.05


def test_wilcoxon_critical_value_for_n14_is_21():
    # Demšar (2006), Sec. 3.1.3 (from the standard Wilcoxon table): for N = 14 at
    # alpha = 0.05 two-sided the difference is significant iff T <= 21.
    ranks = np.arange(1.0, 15.0)
    p = lambda t: 2 * min(stats._exact_sf_cdf(ranks, t))  # noqa: E731
    assert p(21) <= 0.05 < p(22)


def test_signed_rank_direction_lower_is_better():
    # common practice: for an error, negating both series swaps R+ and R-.
    a, b = DEMSAR_AUC[:, C45_M], DEMSAR_AUC[:, C45]
    up = stats.signed_rank(a, b)
    down = stats.signed_rank(-a, -b, higher_is_better=False)
    assert (down.r_plus, down.r_minus, down.p_value) == (up.r_plus, up.r_minus, up.p_value)


@pytest.mark.parametrize("n", [6, 14, 30])
@pytest.mark.parametrize("ours, theirs", [("exact", "exact"), ("approx", "asymptotic")])
def test_signed_rank_equals_scipy_without_ties(n, ours, theirs):
    # Reference implementation: scipy.stats.wilcoxon on continuous data (no zeros, no ties).
    rng = np.random.default_rng(n)
    a, b = rng.normal(size=n), rng.normal(0.3, 1.0, size=n)
    r = stats.signed_rank(a, b, method=ours)
    ref = sst.wilcoxon(a, b, method=theirs)
    assert r.statistic == pytest.approx(ref.statistic)
    assert r.p_value == pytest.approx(ref.pvalue, rel=1e-10)
    assert r.r_plus + r.r_minus == n * (n + 1) / 2


@pytest.mark.parametrize("zero_method", ["wilcox", "pratt"])
def test_signed_rank_equals_scipy_with_zeros_and_ties(zero_method):
    # Reference implementation: scipy.stats.wilcoxon, normal approximation with tie correction.
    rng = np.random.default_rng(7)
    a, b = rng.integers(0, 6, size=25), rng.integers(0, 6, size=25)
    r = stats.signed_rank(a, b, zero_method=zero_method, method="approx")
    ref = sst.wilcoxon(a, b, zero_method=zero_method, method="asymptotic")
    assert r.statistic == pytest.approx(ref.statistic)
    assert r.p_value == pytest.approx(ref.pvalue, rel=1e-10)


def test_exact_with_ties_equals_full_enumeration():
    # common practice: the exact null distribution is the 2^n equally likely sign assignments.
    a = np.array([3.0, 5.0, 2.0, 7.0, 1.0, 4.0, 4.0, 6.0])
    b = np.array([1.0, 4.0, 3.0, 5.0, 2.0, 1.0, 3.0, 3.0])
    r = stats.signed_rank(a, b, method="exact")
    ranks = sst.rankdata(np.abs(a - b))
    signs = (np.arange(2**8)[:, None] >> np.arange(8)) & 1
    sums = (signs * ranks).sum(axis=1)
    p = 2 * min((sums >= r.r_plus).mean(), (sums <= r.r_plus).mean())
    assert r.p_value == pytest.approx(min(p, 1.0))


# --------------------------------------------------------------- sign test


def test_sign_test_demsar_example():
    # Demšar (2006), Sec. 3.1.4 (from memory): C4.5+m beats C4.5 on 11 of 14 datasets
    # counting one of the two ties.
    r = stats.sign_test(DEMSAR_AUC[:, C45_M], DEMSAR_AUC[:, C45])
    assert (r.wins, r.ties, r.losses) == (10, 2, 2)
    # Reference implementation: scipy.stats.binomtest, two-sided exact binomial.
    assert r.p_value == pytest.approx(sst.binomtest(11, 14, 0.5).pvalue)
    dropped = stats.sign_test(DEMSAR_AUC[:, C45_M], DEMSAR_AUC[:, C45], ties="drop")
    assert dropped.p_value == pytest.approx(sst.binomtest(10, 12, 0.5).pvalue)


# ---------------------------------------------------------------- Friedman


def test_friedman_demsar_table6():
    # Demšar (2006), Sec. 3.2.2 and Table 6: average ranks 3.143, 2.000, 2.893, 1.964,
    # chi2_F = 9.28, F_F = 3.69 (Demšar's formula, no tie correction).
    r = stats.friedman(DEMSAR_AUC)
    np.testing.assert_allclose(r.average_ranks, [3.143, 2.000, 2.893, 1.964], atol=5e-4)
    assert r.chi2 == pytest.approx(9.28, abs=5e-3)
    assert r.iman_davenport == pytest.approx(3.69, abs=5e-3)
    assert r.tie_correction is False and "Demšar" in r.formula
    # Demšar (2006), Sec. 3.2.2: F(3, 39) critical value at 0.05 is 2.85, so F_F rejects.
    assert sst.f.ppf(0.95, 3, 39) == pytest.approx(2.85, abs=5e-3)
    assert r.p_value_iman_davenport < 0.05


def test_friedman_tie_corrected_equals_scipy_on_demsar_table():
    # scipy/stats/tests/test_stats.py, TestFriedmanChiSquare.ref1: (10.2283464566929, 0.0167215803284414).
    r = stats.friedman(DEMSAR_AUC, tie_correction=True)
    assert r.chi2 == pytest.approx(10.2283464566929, rel=1e-10)
    assert r.p_value == pytest.approx(0.0167215803284414, rel=1e-8)
    assert r.tie_correction is True and "scipy" in r.formula


@pytest.mark.parametrize(
    "data, ref",
    [
        # scipy/stats/tests/test_stats.py TestFriedmanChiSquare.x2 ("Bioestadistica para las ciencias de la salud").
        (
            [
                [4, 3, 5, 3, 5, 3, 2, 5, 4, 4, 4, 3],
                [2, 2, 1, 2, 3, 1, 2, 3, 2, 1, 1, 3],
                [2, 4, 3, 3, 4, 3, 3, 4, 4, 1, 2, 1],
                [3, 5, 4, 3, 4, 4, 3, 3, 3, 4, 4, 4],
            ],
            18.9428571428571,
        ),
        # scipy/stats/tests/test_stats.py TestFriedmanChiSquare.x3 (Zar, Biostatistical Analysis, ex. 12.6).
        ([[7.0, 9.9, 8.5, 5.1, 10.3], [5.3, 5.7, 4.7, 3.5, 7.7], [4.9, 7.6, 5.5, 2.8, 8.4], [8.8, 8.9, 8.1, 3.3, 9.1]], 10.68),
    ],
)
def test_friedman_tie_corrected_scipy_references(data, ref):
    r = stats.friedman(np.array(data, dtype=float).T, tie_correction=True)
    assert r.chi2 == pytest.approx(ref, rel=1e-9)


@pytest.mark.parametrize("tie_correction", [False, True])
def test_friedman_equals_scipy_without_ties(tie_correction):
    # Reference implementation: scipy.stats.friedmanchisquare (both formulas agree without ties).
    rng = np.random.default_rng(3)
    x = rng.normal(size=(20, 5)) + np.arange(5) * 0.3
    r = stats.friedman(x, tie_correction=tie_correction)
    ref = sst.friedmanchisquare(*x.T)
    assert r.chi2 == pytest.approx(ref.statistic, rel=1e-10)
    assert r.p_value == pytest.approx(ref.pvalue, rel=1e-8)
    # common practice: ranks of an error are the ranks of its negation.
    low = stats.friedman(-x, higher_is_better=False)
    np.testing.assert_allclose(low.average_ranks, r.average_ranks)


def test_friedman_garcia_herrera_2008_ranks():
    # García & Herrera, JMLR 9 (2008), five classifiers on 30 datasets (from memory:
    # rank sums 63, 97.5, 66, 130, 93.5): chi2_F = 39.65, F_F = 14.31.
    r = stats.friedman_from_ranks(np.array([63, 97.5, 66, 130, 93.5]) / 30, 30)
    assert r.chi2 == pytest.approx(39.65, abs=0.01)
    assert r.iman_davenport == pytest.approx(14.31, abs=0.01)


# ----------------------------------------------------------------- Nemenyi

# Demšar (2006), Table 5(a), critical values q_0.05 and q_0.10 for k = 2..10 (from memory).
DEMSAR_Q05 = [1.960, 2.343, 2.569, 2.728, 2.850, 2.949, 3.031, 3.102, 3.164]
DEMSAR_Q10 = [1.645, 2.052, 2.291, 2.459, 2.589, 2.693, 2.780, 2.855, 2.920]


@pytest.mark.parametrize("alpha, table", [(0.05, DEMSAR_Q05), (0.10, DEMSAR_Q10)])
def test_nemenyi_q_against_demsar_table5(alpha, table):
    for k, printed in zip(range(2, 11), table):
        q = stats.nemenyi_q(k, alpha)
        # Demšar (2006), Sec. 3.2.2: q_alpha = studentized range statistic / sqrt(2).
        assert q == pytest.approx(sst.studentized_range.ppf(1 - alpha, k, np.inf) / np.sqrt(2), rel=1e-12)
        assert q == pytest.approx(printed, abs=1e-3)


def test_nemenyi_cd_demsar_example():
    # Demšar (2006), Sec. 3.2.2: CD = 2.569 sqrt(4*5 / (6*14)) = 1.25 for k = 4, N = 14, alpha = 0.05.
    assert stats.nemenyi_cd(4, 14) == pytest.approx(1.25, abs=5e-3)


# ---------------------------------------------------------------- post-hoc


def test_holm_vs_control_demsar_example():
    # Demšar (2006), Sec. 3.2.2: with C4.5 as control, Holm rejects C4.5+m+cf and C4.5+m,
    # and keeps C4.5+cf; SE = sqrt(4*5 / (6*14)) = 0.488.
    f = stats.friedman(DEMSAR_AUC)
    r = stats.vs_control(f.average_ranks, 14, C45, method="holm")
    verdict = {i: bool(rej) for (i, _), rej in zip(r.pairs, r.reject)}
    assert verdict == {C45_M: True, C45_CF: False, C45_M_CF: True}
    np.testing.assert_allclose(np.abs(r.z), np.abs(f.average_ranks[[1, 2, 3]] - f.average_ranks[0]) / 0.488, rtol=2e-3)


def _holm_rejects(p, alpha):
    # Holm (1979), step-down: reject while p_(i) <= alpha / (m - i + 1).
    out, m = np.zeros(p.size, bool), p.size
    for i, j in enumerate(np.argsort(p)):
        if p[j] > alpha / (m - i):
            break
        out[j] = True
    return out


def _finner_rejects(p, alpha):
    # Finner (1993), step-down: reject while p_(i) <= 1 - (1 - alpha)^(i / m).
    out, m = np.zeros(p.size, bool), p.size
    for i, j in enumerate(np.argsort(p), start=1):
        if p[j] > 1 - (1 - alpha) ** (i / m):
            break
        out[j] = True
    return out


def _li_rejects(p, alpha):
    # Li (2008), two-step: reject all if p_max <= alpha, else reject p_i <= (1 - p_max) / (1 - alpha) alpha.
    if p.max() <= alpha:
        return np.ones(p.size, bool)
    return (p <= (1 - p.max()) / (1 - alpha) * alpha) & (p != p.max())


@pytest.mark.parametrize(
    "adjust, rejects", [(stats.holm, _holm_rejects), (stats.finner, _finner_rejects), (stats.li, _li_rejects)]
)
def test_adjusted_p_values_agree_with_published_procedures(adjust, rejects):
    # García et al. (2010) Sec. 2 / García & Herrera (2008) Appendix: an adjusted p-value
    # is the smallest alpha at which the procedure rejects the hypothesis.
    rng = np.random.default_rng(11)
    for _ in range(50):
        p = np.sort(rng.uniform(0, 0.2, size=rng.integers(2, 9))) * rng.uniform(0.1, 1)
        rng.shuffle(p)
        adj = adjust(p)
        for alpha in (0.01, 0.05, 0.1):
            np.testing.assert_array_equal(adj <= alpha, rejects(p, alpha))


def test_holm_hand_example():
    # Holm (1979) definition worked by hand: sorted 0.01, 0.02, 0.03, 0.5 -> 0.04, 0.06, 0.06, 0.5.
    np.testing.assert_allclose(stats.holm([0.03, 0.5, 0.01, 0.02]), [0.06, 0.5, 0.04, 0.06])


def test_shaffer_true_hypothesis_counts():
    # Shaffer (1986) / García & Herrera (2008), Sec. 3.2 (from memory): S(4) = {0,1,2,3,6}, S(5) = {0,1,2,3,4,6,10}.
    assert sorted(stats._true_counts(4)) == [0, 1, 2, 3, 6]
    assert sorted(stats._true_counts(5)) == [0, 1, 2, 3, 4, 6, 10]
    np.testing.assert_array_equal(stats.shaffer_max_true(4), [6, 3, 3, 3, 2, 1])


def test_all_pairs_garcia_herrera_2008():
    # García & Herrera, JMLR 9 (2008), five classifiers on 30 datasets (from memory):
    # Holm rejects 5 of the 10 pairwise hypotheses at alpha = 0.05, Shaffer's static rejects 6.
    ranks = np.array([63, 97.5, 66, 130, 93.5]) / 30
    holm = stats.all_pairs(ranks, 30, method="holm")
    shaffer = stats.all_pairs(ranks, 30, method="shaffer")
    assert int(holm.reject.sum()) == 5
    assert int(shaffer.reject.sum()) == 6
    # common practice: Shaffer's static adjusted p-values never exceed Holm's.
    assert (shaffer.adjusted <= holm.adjusted + 1e-15).all()


def test_bad_input_raises():
    with pytest.raises(ValueError, match="finite"):
        stats.friedman([[1.0, np.nan], [2.0, 3.0]])
    with pytest.raises(ValueError, match="zero_method"):
        stats.signed_rank([1.0, 2.0], [0.0, 1.0], zero_method="nope")
    with pytest.raises(ValueError, match="k\\(k-1\\)/2"):
        stats.shaffer([0.1, 0.2], 3)


# ----------------------------------------------------- zeros, small N, folds, Bayesian


@pytest.mark.parametrize("seed, zeros", [(1, 8), (2, 8), (3, 4), (4, 6)])
def test_signed_rank_demsar_zeros_equal_scipy_zsplit(seed, zeros):
    # Reference implementation: scipy.stats.wilcoxon(zero_method="zsplit", method="approx"), which splits
    # the zeros' ranks as Demšar (2006, Sec. 3.1.3) does and keeps them in the variance. N = 13 with 8 zeros
    # is the case of issue 12 (the zeros' ranks used to be dropped from the variance). Even zero counts:
    # Demšar drops one zero of an odd count, scipy does not.
    rng = np.random.default_rng(seed)
    d = np.concatenate([np.zeros(zeros), rng.choice([-0.02, -0.01, 0.01, 0.02, 0.03], 13 - zeros)])  # with ties
    a, b = 0.8 + d, np.full(13, 0.8)
    ours = stats.signed_rank(a, b, method="approx")
    ref = sst.wilcoxon(np.round(a - b, 12), zero_method="zsplit", method="approx")
    assert ours.statistic == pytest.approx(ref.statistic)
    assert ours.p_value == pytest.approx(ref.pvalue, rel=1e-10)


def test_demsar_zeros_variance_counts_every_rank():
    # Demšar (2006), Sec. 3.1.3: z = (T - N(N+1)/4) / sd with all N datasets ranked, the zeros' ranks
    # split evenly; sd from the ranks actually assigned, sqrt(sum r^2 / 4) (the tie-corrected form of
    # sqrt(N(N+1)(2N+1)/24), common practice). 8 zeros (tied: rank 4.5 each) and 5 positive differences
    # (ranks 9-13): R- = 18, sum r^2 = 8 * 4.5^2 + 615 = 777, z = (18 - 45.5) / sqrt(777 / 4), by hand.
    a = np.array([0.0] * 8 + [1, 2, 3, 4, 5], dtype=float)
    r = stats.signed_rank(a, np.zeros(13), method="approx")
    z = (18 - 13 * 14 / 4) / np.sqrt(777 / 4)
    assert r.statistic == 18 and r.p_value == pytest.approx(2 * sst.norm.sf(abs(z)))


def test_min_signed_rank_p_is_the_exact_extreme():
    # common practice: all N differences of one sign is the most extreme of the 2^N equally likely
    # sign assignments, two-sided p = 2 / 2^N; checked against scipy's exact Wilcoxon.
    for n in (3, 5, 6):
        p = sst.wilcoxon(np.arange(1.0, n + 1), method="exact").pvalue
        assert stats.min_signed_rank_p(n) == pytest.approx(p)
    assert stats.small_n_warnings(3, 0.05) and "never be significant" in stats.small_n_warnings(3, 0.05)[0]
    # 2/2^6 = 0.03125 <= 0.05: six datasets can reach alpha = 0.05, five cannot (2/2^5 = 0.0625).
    assert not stats.small_n_warnings(6, 0.05) and stats.small_n_warnings(5, 0.05)
    assert any("normal approximation" in w for w in stats.small_n_warnings(10, 0.05, method="approx"))


def test_corrected_resampled_t_against_scipy_paired_t():
    # Nadeau & Bengio (Machine Learning 52, 2003), Eq. for the corrected resampled t: the variance of the
    # paired t-test, var/J, becomes var * (1/J + n_test/n_train). So t_corrected = t_paired *
    # sqrt((1/J) / (1/J + ratio)), with scipy.stats.ttest_rel as the reference paired t.
    rng = np.random.default_rng(0)
    a = rng.uniform(0.7, 0.9, 10)
    b = a - rng.normal(0.02, 0.02, 10)
    r = stats.corrected_resampled_t(a, b, test_train_ratio=1 / 9)
    paired = sst.ttest_rel(a, b)
    expected_t = paired.statistic * np.sqrt((1 / 10) / (1 / 10 + 1 / 9))
    assert r.df == 9 and r.statistic == pytest.approx(expected_t)
    assert r.p_value == pytest.approx(2 * sst.t.sf(abs(expected_t), 9))
    assert r.p_value > paired.pvalue  # the correction only ever widens


def test_corrected_resampled_t_matches_baycomp_variance():
    # Reference implementation: baycomp's CorrelatedTTest.compute_statistics applies the same Nadeau-Bengio
    # correction (1/n + 1/(k - 1)) to the variance of y - x, for 2 runs of 5-fold.
    baycomp = pytest.importorskip("baycomp")
    rng = np.random.default_rng(5)
    x, y = rng.uniform(0.6, 0.8, 10), rng.uniform(0.6, 0.8, 10)
    mean, var, df = baycomp.CorrelatedTTest.compute_statistics(x, y, runs=2)
    r = stats.corrected_resampled_t(y, x, test_train_ratio=1 / 4)
    assert r.df == df and r.statistic == pytest.approx(mean / np.sqrt(var))


@pytest.mark.parametrize("rope", [0.0, 0.01])
def test_bayes_signed_rank_equals_baycomp(rope):
    # Reference implementation: baycomp.SignedRankTest (Benavoli et al., JMLR 18, 2017), same seed, same draws.
    # baycomp's "left" is the first argument better (differences y - x below -rope).
    baycomp = pytest.importorskip("baycomp")
    rng = np.random.default_rng(0)
    x = rng.uniform(0.7, 0.9, 12)
    y = x + rng.normal(0.01, 0.02, 12)
    ours = stats.bayes_signed_rank(x, y, rope=rope, random_state=3)
    ref = baycomp.SignedRankTest.probs(x, y, rope=rope, random_state=3)
    if rope:
        assert (ours.p_a_better, ours.p_equivalent, ours.p_b_better) == pytest.approx(ref, abs=1e-12)
    else:
        assert (ours.p_a_better, ours.p_b_better) == pytest.approx(ref, abs=1e-12)
    # lower-is-better flips the sides
    flipped = stats.bayes_signed_rank(-x, -y, rope=rope, random_state=3, higher_is_better=False)
    assert flipped.p_a_better == pytest.approx(ours.p_a_better)


def test_bayes_correlated_t_equals_baycomp():
    # Reference implementation: baycomp.CorrelatedTTest (Benavoli et al., JMLR 18, 2017, Sec. 3), one run of
    # 10-fold: rho = 1/10, rho/(1-rho) = 1/9.
    baycomp = pytest.importorskip("baycomp")
    rng = np.random.default_rng(2)
    a = rng.uniform(0.7, 0.9, 10)
    b = a + rng.normal(0.01, 0.02, 10)
    ours = stats.bayes_correlated_t(a, b, rope=0.01, test_train_ratio=1 / 9)
    ref = baycomp.CorrelatedTTest.probs(a, b, rope=0.01, runs=1)
    assert (ours.p_a_better, ours.p_equivalent, ours.p_b_better) == pytest.approx(ref, rel=1e-10)
