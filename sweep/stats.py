"""Statistical comparison of configurations over several datasets.

Plain numpy/scipy functions on arrays; no pandas inside. The procedures are
the ones recommended by Demšar, "Statistical Comparisons of Classifiers over
Multiple Data Sets", JMLR 7 (2006) 1-30, and by García & Herrera, "An
Extension on 'Statistical Comparisons of Classifiers over Multiple Data Sets'
for all Pairwise Comparisons", JMLR 9 (2008) 2677-2694:

* two configurations over N datasets: :func:`signed_rank` (Wilcoxon) and
  :func:`sign_test`;
* k configurations over N datasets: :func:`friedman` (average ranks,
  chi-square and Iman-Davenport F), :func:`nemenyi_cd`;
* post-hoc z tests on average ranks: :func:`vs_control` (Holm, Finner, Li,
  Bonferroni-Dunn) and :func:`all_pairs` (Holm, Shaffer's static procedure);
* adjusted p-values: :func:`holm`, :func:`finner`, :func:`li`,
  :func:`shaffer`, :func:`bonferroni`;
* how far a test can go with N datasets: :func:`min_signed_rank_p`,
  :func:`small_n_warnings`;
* two configurations on one dataset over its folds: :func:`corrected_resampled_t`
  (Nadeau & Bengio, Machine Learning 52, 2003) and :func:`bayes_correlated_t`;
  across datasets, Bayesian: :func:`bayes_signed_rank` (both after Benavoli,
  Corani, Demšar & Zaffalon, "Time for a Change: a Tutorial for Comparing
  Multiple Classifiers Through Bayesian Analysis", JMLR 18 (2017) 1-36).

Scores are "higher is better" unless ``higher_is_better=False`` is given
(error, time, rule counts). Scores are rounded to :data:`DECIMALS` decimal
places before any comparison, so that values that are equal as printed
(0.768 - 0.763 and 0.936 - 0.931) tie, as they do in the published tables.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from typing import Literal

import numpy as np
from scipy import stats as _st

__all__ = [
    "DECIMALS",
    "SignedRankResult",
    "SignTestResult",
    "FriedmanResult",
    "PostHocResult",
    "signed_rank",
    "sign_test",
    "friedman",
    "friedman_from_ranks",
    "rank_rows",
    "nemenyi_q",
    "nemenyi_cd",
    "bonferroni",
    "holm",
    "finner",
    "li",
    "shaffer",
    "shaffer_max_true",
    "vs_control",
    "all_pairs",
    "min_signed_rank_p",
    "small_n_warnings",
    "CorrectedTResult",
    "corrected_resampled_t",
    "BayesResult",
    "bayes_signed_rank",
    "bayes_correlated_t",
]

#: Decimal places kept before ranking or comparing scores; rounding makes
#: floating-point noise (1e-16) never decide a win or break a tie.
DECIMALS = 12

ZeroMethod = Literal["demsar", "wilcox", "pratt"]
PMethod = Literal["auto", "exact", "approx"]


# --------------------------------------------------------------------------
# Wilcoxon signed-rank test
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class SignedRankResult:
    """Wilcoxon signed-rank test of configuration A against B over datasets."""

    #: Sum of ranks of datasets where A is better than B (with the zero share).
    r_plus: float
    #: Sum of ranks of datasets where B is better than A (with the zero share).
    r_minus: float
    #: T = min(R+, R-), the statistic of Demšar's Table 2 and of scipy.
    statistic: float
    #: Two-sided p-value.
    p_value: float
    #: Number of datasets that entered the ranking.
    n: int
    #: Zero-difference convention used: "demsar", "wilcox" or "pratt".
    zero_method: str
    #: How the p-value was computed: "exact" or "approx" (normal, no continuity correction).
    method: str
    #: Number of datasets with a zero difference (before any was dropped).
    zeros: int = 0


def _differences(a, b, higher_is_better: bool) -> np.ndarray:
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    if a.shape != b.shape or a.ndim != 1:
        raise ValueError(f"a and b must be 1-d arrays of the same length, got {a.shape} and {b.shape}")
    if not (np.isfinite(a).all() and np.isfinite(b).all()):
        raise ValueError("a and b must be finite: exclude datasets with missing cells before testing")
    d = np.round(a - b, DECIMALS)
    return d if higher_is_better else -d


def _signed_ranks(d: np.ndarray, zero_method: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return (ranks, signs, fixed) where fixed marks ranks that are not random under H0."""
    zero = d == 0
    if zero_method == "wilcox":
        d = d[~zero]
        zero = zero[~zero]
    elif zero_method == "demsar" and zero.sum() % 2 == 1:
        # Demšar (2006), Sec. 3.1.3: with an odd number of zeros one is ignored.
        drop = np.flatnonzero(zero)[0]
        d = np.delete(d, drop)
        zero = np.delete(zero, drop)
    elif zero_method not in ("demsar", "pratt"):
        raise ValueError(f"zero_method={zero_method!r} is not valid, expected 'demsar', 'wilcox' or 'pratt'")
    ranks = _st.rankdata(np.abs(d))
    return ranks, np.sign(d), zero


def _exact_sf_cdf(ranks: np.ndarray, r_plus: float) -> tuple[float, float]:
    """P(R+ >= r) and P(R+ <= r) over the 2^n sign assignments of the given ranks.

    Average ranks of ties are multiples of 1/2, so doubled ranks are integers
    and the distribution is a small dynamic programme (a subset-sum count).
    """
    twice = np.rint(2 * ranks).astype(np.int64)
    total = int(twice.sum())
    counts = np.zeros(total + 1, dtype=float)
    counts[0] = 1.0
    for r in twice:
        counts[r:] = counts[r:] + counts[: total + 1 - r].copy()
    probs = counts / counts.sum()
    k = int(round(2 * r_plus))
    return float(probs[k:].sum()), float(probs[: k + 1].sum())


def signed_rank(
    a,
    b,
    *,
    higher_is_better: bool = True,
    zero_method: ZeroMethod = "demsar",
    method: PMethod = "auto",
) -> SignedRankResult:
    """Wilcoxon signed-rank test over datasets, after Demšar (2006), Sec. 3.1.3.

    Parameters
    ----------
    a, b : array_like of shape (n_datasets,)
        Scores of configurations A and B, paired by dataset.
    higher_is_better : bool, default=True
        Direction of the metric; with False (error, time) the differences are negated.
    zero_method : {"demsar", "wilcox", "pratt"}, default="demsar"
        Zero differences: "demsar" ranks them and splits their ranks evenly
        between R+ and R- (one is ignored if their count is odd); "wilcox"
        drops them before ranking; "pratt" ranks them and then leaves their
        ranks out of both sums (scipy's conventions of the same names).
    method : {"auto", "exact", "approx"}, default="auto"
        "exact" enumerates all sign assignments of the ranks (ties and
        zero shares included); "approx" is the normal approximation with
        the variance of the actual ranks (which is the usual tie
        correction), without continuity correction; "auto" is exact for
        n <= 50 without ties or zeros, as in scipy.

    Returns
    -------
    SignedRankResult

    Examples
    --------
    >>> r = signed_rank([0.8, 0.9, 0.7, 0.95], [0.7, 0.85, 0.72, 0.9])
    >>> r.r_plus, r.r_minus, r.statistic
    (9.0, 1.0, 1.0)
    """
    d = _differences(a, b, higher_is_better)
    zeros = int((d == 0).sum())
    ranks, signs, fixed = _signed_ranks(d, zero_method)
    n = ranks.size
    if n == 0:
        raise ValueError("signed_rank needs at least one dataset with a non-zero difference")
    share = 0.5 * ranks[fixed].sum() if zero_method == "demsar" else 0.0
    r_plus = float(ranks[signs > 0].sum() + share)
    r_minus = float(ranks[signs < 0].sum() + share)
    random = ranks[~fixed]
    has_ties = np.unique(random).size < random.size
    if method == "auto":
        method = "exact" if n <= 50 and not has_ties and not fixed.any() else "approx"
    if method == "exact":
        sf, cdf = _exact_sf_cdf(random, r_plus - share)
        p = min(1.0, 2.0 * min(sf, cdf))
    elif method == "approx":
        # Under H0, R+ has mean sum(ranks)/2 (a zero's rank counts half to each side) and, as in
        # Demšar's normal approximation, the variance sum(r^2)/4 over all the ranks actually assigned
        # in general (Demšar 2006, Sec. 3.1.3; scipy's zero_method="zsplit"). The zeros' ranks stay in
        # the variance: leaving them out understated it (p = 0.157 instead of 0.221, N = 13, 8 zeros).
        pool = ranks if zero_method == "demsar" else random
        mean = share + random.sum() / 2.0
        sd = math.sqrt((pool**2).sum() / 4.0)
        p = 1.0 if sd == 0 else float(2.0 * _st.norm.sf(abs(r_plus - mean) / sd))
    else:
        raise ValueError(f"method={method!r} is not valid, expected 'auto', 'exact' or 'approx'")
    return SignedRankResult(
        r_plus=r_plus,
        r_minus=r_minus,
        statistic=min(r_plus, r_minus),
        p_value=p,
        n=n,
        zero_method=zero_method,
        method=method,
        zeros=zeros,
    )


# --------------------------------------------------------------------------
# Sign test
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class SignTestResult:
    """Counts of wins, ties and losses of A against B, with an exact binomial p-value."""

    wins: int
    ties: int
    losses: int
    #: Two-sided exact binomial p-value (p = 1/2) on the counted wins and losses.
    p_value: float
    #: How ties were counted: "split" (Demšar) or "drop".
    ties_method: str


def sign_test(a, b, *, higher_is_better: bool = True, ties: Literal["split", "drop"] = "split") -> SignTestResult:
    """Sign test over datasets (Demšar 2006, Sec. 3.1.4).

    Parameters
    ----------
    a, b : array_like of shape (n_datasets,)
        Scores of configurations A and B, paired by dataset.
    higher_is_better : bool, default=True
        Direction of the metric.
    ties : {"split", "drop"}, default="split"
        "split" adds half of the ties to each side (one is ignored if their
        count is odd), as Demšar recommends; "drop" leaves them out.
        The reported ``wins``/``ties``/``losses`` are always the raw counts.
    """
    d = _differences(a, b, higher_is_better)
    wins, losses, n_ties = int((d > 0).sum()), int((d < 0).sum()), int((d == 0).sum())
    if ties not in ("split", "drop"):
        raise ValueError(f"ties={ties!r} is not valid, expected 'split' or 'drop'")
    half = n_ties // 2 if ties == "split" else 0
    k, n = wins + half, wins + losses + 2 * half
    p = 1.0 if n == 0 else float(_st.binomtest(k, n, 0.5).pvalue)
    return SignTestResult(wins=wins, ties=n_ties, losses=losses, p_value=p, ties_method=ties)


# --------------------------------------------------------------------------
# Friedman test and Nemenyi critical difference
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class FriedmanResult:
    """Friedman test of k configurations over N datasets."""

    #: Average rank of each configuration (1 = best), ties get average ranks.
    average_ranks: np.ndarray
    #: Friedman chi-square statistic chi2_F.
    chi2: float
    #: p-value of chi2_F against chi-square with k - 1 degrees of freedom.
    p_value: float
    #: Iman-Davenport statistic F_F.
    iman_davenport: float
    #: p-value of F_F against F with (k - 1, (k - 1)(N - 1)) degrees of freedom.
    p_value_iman_davenport: float
    #: Number of datasets N.
    n: int
    #: Number of configurations k.
    k: int
    #: Whether chi2_F was divided by the tie correction (as scipy does).
    tie_correction: bool
    #: Human-readable name of the chi2_F formula used.
    formula: str


def rank_rows(scores, *, higher_is_better: bool = True) -> np.ndarray:
    """Rank the configurations within each dataset (row): 1 = best, ties averaged."""
    x = np.round(np.asarray(scores, dtype=float), DECIMALS)
    return _st.rankdata(-x if higher_is_better else x, axis=1)


def friedman(scores, *, higher_is_better: bool = True, tie_correction: bool = False) -> FriedmanResult:
    """Friedman test with the Iman-Davenport correction (Demšar 2006, Sec. 3.2.2).

    Parameters
    ----------
    scores : array_like of shape (n_datasets, n_configurations)
        One row per dataset, no missing values (exclude incomplete datasets first).
    higher_is_better : bool, default=True
        Direction of the metric.
    tie_correction : bool, default=False
        False gives Demšar's published formula
        chi2_F = 12N / (k(k+1)) * (sum_j R_j^2 - k(k+1)^2 / 4);
        True divides it by 1 - sum(t^3 - t) / (N k (k^2 - 1)) over tie groups,
        as ``scipy.stats.friedmanchisquare`` does.

    Returns
    -------
    FriedmanResult
    """
    x = np.asarray(scores, dtype=float)
    if x.ndim != 2 or x.shape[0] < 2 or x.shape[1] < 2:
        raise ValueError(f"scores must be a 2-d array with at least 2 datasets and 2 configurations, got shape {x.shape}")
    if not np.isfinite(x).all():
        raise ValueError("scores must be finite: exclude datasets with missing cells before testing")
    n, k = x.shape
    ranks = rank_rows(x, higher_is_better=higher_is_better)
    factor = _tie_factor(ranks, n, k) if tie_correction else None
    return friedman_from_ranks(ranks.mean(axis=0), n, tie_factor=factor)


def friedman_from_ranks(average_ranks, n: int, *, tie_factor: float | None = None) -> FriedmanResult:
    """Friedman and Iman-Davenport statistics from published average ranks.

    Parameters
    ----------
    average_ranks : array_like of shape (k,)
        Average rank of each configuration over ``n`` datasets.
    n : int
        Number of datasets.
    tie_factor : float or None, default=None
        Divisor of chi2_F for the tie correction; None is Demšar's formula.
    """
    avg = np.asarray(average_ranks, dtype=float)
    k = avg.size
    chi2 = 12.0 * n / (k * (k + 1)) * (float((avg**2).sum()) - k * (k + 1) ** 2 / 4.0)
    corrected = tie_factor is not None
    chi2 = max(chi2 / (tie_factor if tie_factor is not None else 1.0), 0.0)
    denom = n * (k - 1) - chi2
    ff = math.inf if denom <= 0 else (n - 1) * chi2 / denom
    return FriedmanResult(
        average_ranks=avg,
        chi2=chi2,
        p_value=float(_st.chi2.sf(chi2, k - 1)),
        iman_davenport=ff,
        p_value_iman_davenport=float(_st.f.sf(ff, k - 1, (k - 1) * (n - 1))) if math.isfinite(ff) else 0.0,
        n=n,
        k=k,
        tie_correction=corrected,
        formula="tie-corrected, as scipy.stats.friedmanchisquare" if corrected else "Demšar (2006), no tie correction",
    )


def _tie_factor(ranks: np.ndarray, n: int, k: int) -> float:
    ties = 0.0
    for row in ranks:
        _, t = np.unique(row, return_counts=True)
        ties += float((t**3 - t).sum())
    factor = 1.0 - ties / (n * k * (k * k - 1))
    return factor if factor > 0 else 1.0


@lru_cache(maxsize=128)
def nemenyi_q(k: int, alpha: float = 0.05) -> float:
    """Critical value q_alpha of the Nemenyi test: studentized range at df = inf over sqrt(2)."""
    if k < 2:
        raise ValueError(f"k must be at least 2, got {k}")
    return float(_st.studentized_range.ppf(1.0 - alpha, k, np.inf) / math.sqrt(2.0))


def nemenyi_cd(k: int, n: int, alpha: float = 0.05) -> float:
    """Nemenyi critical difference CD = q_alpha sqrt(k(k+1) / (6N)) (Demšar 2006, Sec. 3.2.2).

    Two configurations whose average ranks differ by less than CD are not
    significantly different at level ``alpha``.
    """
    return nemenyi_q(k, alpha) * _rank_se(k, n)


def _rank_se(k: int, n: int) -> float:
    return math.sqrt(k * (k + 1) / (6.0 * n))


# --------------------------------------------------------------------------
# Adjusted p-values (García & Herrera 2008, Sec. 3 and Appendix)
# --------------------------------------------------------------------------


def _sorted(p_values) -> tuple[np.ndarray, np.ndarray]:
    p = np.asarray(p_values, dtype=float)
    if p.ndim != 1:
        raise ValueError("p_values must be a 1-d array")
    order = np.argsort(p, kind="stable")
    return p, order


def _step_down(p_values, factors) -> np.ndarray:
    """Adjusted p-values min(1, max_{j<=i} f_j(p_(j))) mapped back to input order."""
    p, order = _sorted(p_values)
    ps = p[order]
    adj = np.minimum(1.0, np.maximum.accumulate(factors(ps)))
    out = np.empty_like(p)
    out[order] = adj
    return out


def bonferroni(p_values) -> np.ndarray:
    """Bonferroni(-Dunn) adjusted p-values: min(1, m p)."""
    p = np.asarray(p_values, dtype=float)
    return np.minimum(1.0, p * p.size)


def holm(p_values) -> np.ndarray:
    """Holm's step-down adjusted p-values: max_{j<=i} min(1, (m - j + 1) p_(j))."""
    return _step_down(p_values, lambda ps: (ps.size - np.arange(ps.size)) * ps)


def finner(p_values) -> np.ndarray:
    """Finner's step-down adjusted p-values: max_{j<=i} 1 - (1 - p_(j))^(m / j)."""
    m = np.asarray(p_values).size
    return _step_down(p_values, lambda ps: 1.0 - (1.0 - ps) ** (m / np.arange(1, m + 1)))


def li(p_values) -> np.ndarray:
    """Li's two-step adjusted p-values: p_i / (p_i + 1 - p_max), and p_max itself."""
    p = np.asarray(p_values, dtype=float)
    if p.size == 0:
        return p.copy()
    p_max = p.max()
    with np.errstate(invalid="ignore", divide="ignore"):
        adj = np.where(p == p_max, p_max, p / (p + 1.0 - p_max))
    return np.minimum(1.0, np.nan_to_num(adj, nan=1.0))


@lru_cache(maxsize=64)
def _true_counts(k: int) -> frozenset[int]:
    """Shaffer's S(k): the possible numbers of true hypotheses among all k(k-1)/2 pairs."""
    if k <= 1:
        return frozenset({0})
    out: set[int] = set()
    for j in range(1, k + 1):
        out |= {math.comb(j, 2) + x for x in _true_counts(k - j)}
    return frozenset(out)


def shaffer_max_true(k: int) -> np.ndarray:
    """t_i for i = 1..m: the most hypotheses that can be true when i - 1 are false."""
    m = k * (k - 1) // 2
    counts = sorted(_true_counts(k))
    return np.array([max(c for c in counts if c <= m - i) for i in range(m)], dtype=float)


def shaffer(p_values, k: int) -> np.ndarray:
    """Shaffer's static adjusted p-values for all k(k-1)/2 pairwise hypotheses.

    Like Holm's, but the i-th smallest p-value is multiplied by t_i, the
    largest number of hypotheses that can still be true given that i - 1
    are false (García & Herrera 2008, Sec. 3.2 and Appendix).
    """
    m = np.asarray(p_values).size
    if m != k * (k - 1) // 2:
        raise ValueError(f"shaffer needs k(k-1)/2 = {k * (k - 1) // 2} p-values for k = {k}, got {m}")
    t = shaffer_max_true(k)
    return _step_down(p_values, lambda ps: t * ps)


# --------------------------------------------------------------------------
# Post-hoc tests on average ranks
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class PostHocResult:
    """Post-hoc z tests on average ranks, one row per hypothesis."""

    #: Index pairs (i, j) of configurations compared; for vs_control j is the control.
    pairs: list[tuple[int, int]]
    #: z = (R_i - R_j) / sqrt(k(k+1) / (6N)).
    z: np.ndarray
    #: Unadjusted two-sided p-values.
    p_values: np.ndarray
    #: Adjusted p-values under ``method``.
    adjusted: np.ndarray
    #: Adjustment used: "holm", "finner", "li", "bonferroni" or "shaffer".
    method: str
    alpha: float

    @property
    def reject(self) -> np.ndarray:
        """Which hypotheses are rejected at ``alpha`` (adjusted p <= alpha)."""
        return self.adjusted <= self.alpha


_ADJUST = {"holm": holm, "finner": finner, "li": li, "bonferroni": bonferroni}


def _z_test(avg: np.ndarray, n: int, pairs: list[tuple[int, int]]) -> tuple[np.ndarray, np.ndarray]:
    se = _rank_se(avg.size, n)
    idx = np.asarray(pairs, dtype=np.intp).reshape(-1, 2)
    z = (avg[idx[:, 0]] - avg[idx[:, 1]]) / se
    return z, 2.0 * _st.norm.sf(np.abs(z))


def vs_control(
    average_ranks, n: int, control: int, *, method: str = "holm", alpha: float = 0.05
) -> PostHocResult:
    """Compare every configuration with a control on average ranks (Demšar 2006, Sec. 3.2.2).

    Parameters
    ----------
    average_ranks : array_like of shape (k,)
    n : int
        Number of datasets the ranks were averaged over.
    control : int
        Index of the control configuration.
    method : {"holm", "finner", "li", "bonferroni"}, default="holm"
    """
    avg = np.asarray(average_ranks, dtype=float)
    if method not in _ADJUST:
        raise ValueError(f"method={method!r} is not valid, expected one of {sorted(_ADJUST)}")
    pairs = [(i, control) for i in range(avg.size) if i != control]
    z, p = _z_test(avg, n, pairs)
    return PostHocResult(pairs, z, p, _ADJUST[method](p), method, alpha)


def all_pairs(average_ranks, n: int, *, method: str = "shaffer", alpha: float = 0.05) -> PostHocResult:
    """All k(k-1)/2 pairwise comparisons on average ranks (García & Herrera 2008).

    Parameters
    ----------
    average_ranks : array_like of shape (k,)
    n : int
        Number of datasets.
    method : {"shaffer", "holm", "bonferroni"}, default="shaffer"
    """
    avg = np.asarray(average_ranks, dtype=float)
    k = avg.size
    rows, cols = np.triu_indices(k, 1)
    pairs = list(zip(rows.tolist(), cols.tolist()))
    z, p = _z_test(avg, n, pairs)
    if method == "shaffer":
        adj = shaffer(p, k)
    elif method in ("holm", "bonferroni"):
        adj = _ADJUST[method](p)
    else:
        raise ValueError(f"method={method!r} is not valid, expected 'shaffer', 'holm' or 'bonferroni'")
    return PostHocResult(pairs, z, p, adj, method, alpha)


# --------------------------------------------------------------------------
# What N datasets allow
# --------------------------------------------------------------------------

#: Below this many non-zero differences the normal approximation of the
#: signed-rank statistic is flagged (Demšar 2006, Sec. 3.1.3: "for N up to 25
#: ... exact critical values"; common practice puts the limit at 20-25).
NORMAL_APPROX_MIN_N = 25


def min_signed_rank_p(n: int) -> float:
    """Smallest two-sided p-value an exact signed-rank test can reach with ``n`` datasets: 2 / 2^n
    (every difference of one sign: one assignment of 2^n at each extreme)."""
    return 1.0 if n < 1 else min(1.0, 2.0 / 2.0**n)


def small_n_warnings(n: int, alpha: float, *, method: str | None = None) -> list[str]:
    """Plain-words warnings for a signed-rank test over ``n`` datasets at level ``alpha``."""
    out = []
    floor = min_signed_rank_p(n)
    if floor > alpha:
        out.append(f"N = {n} datasets: the smallest p-value a Wilcoxon test can reach is 2/2^{n} = {floor:.3g} "
                   f"> alpha = {alpha:g}; it can never be significant (at least {_needed(alpha)} datasets needed)")
    if method == "approx" and n < NORMAL_APPROX_MIN_N:
        out.append(f"normal approximation used with N = {n} < {NORMAL_APPROX_MIN_N} (ties or zeros rule out "
                   "the exact distribution here); read its p-value as rough")
    return out


def _needed(alpha: float) -> int:
    n = 1
    while min_signed_rank_p(n) > alpha:
        n += 1
    return n


# --------------------------------------------------------------------------
# One dataset, paired folds
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class CorrectedTResult:
    """Corrected resampled t-test of A against B on one dataset."""

    #: t statistic (positive: A better).
    statistic: float
    #: Two-sided p-value against Student's t with ``df`` degrees of freedom.
    p_value: float
    #: Degrees of freedom: J - 1 for J paired fold results.
    df: int
    #: Mean difference A - B (sign as given: not flipped for lower-is-better metrics).
    mean: float


def _paired(a, b) -> np.ndarray:
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    if a.shape != b.shape or a.ndim != 1 or a.size < 2:
        raise ValueError(f"a and b must be 1-d arrays of the same length >= 2, got {a.shape} and {b.shape}")
    if not (np.isfinite(a).all() and np.isfinite(b).all()):
        raise ValueError("a and b must be finite")
    return a - b


def corrected_resampled_t(a, b, *, test_train_ratio: float) -> CorrectedTResult:
    """Nadeau and Bengio's corrected resampled t-test (Machine Learning 52, 2003, 239-281).

    Parameters
    ----------
    a, b : array_like of shape (J,)
        Scores of A and B on the same J train/test splits of one dataset
        (e.g. the k x r folds of a repeated k-fold cross-validation).
    test_train_ratio : float
        n_test / n_train of a split (1 / (k - 1) for k-fold).

    Returns
    -------
    CorrectedTResult
        t = mean(d) / sqrt((1/J + n_test/n_train) var(d)), var with ddof=1,
        df = J - 1. The plain paired t-test divides by J alone, which
        ignores that overlapping training sets make the results correlated.
    """
    d = _paired(a, b)
    if not test_train_ratio > 0:
        raise ValueError(f"test_train_ratio must be > 0, got {test_train_ratio!r}")
    j = d.size
    mean = float(d.mean())
    var = float(d.var(ddof=1)) * (1.0 / j + test_train_ratio)
    if var == 0:
        t = 0.0 if mean == 0 else math.copysign(math.inf, mean)
        p = 1.0 if mean == 0 else 0.0
    else:
        t = mean / math.sqrt(var)
        p = float(2.0 * _st.t.sf(abs(t), j - 1))
    return CorrectedTResult(statistic=t, p_value=p, df=j - 1, mean=mean)


@dataclass(frozen=True)
class BayesResult:
    """Posterior probabilities that A is better, that both are practically equivalent, that B is better."""

    p_a_better: float
    p_equivalent: float
    p_b_better: float
    #: Region of practical equivalence (half-width, in the metric's units).
    rope: float

    def verdict(self, threshold: float = 0.95) -> str:
        """Which of the three has posterior probability >= ``threshold``, or "undecided"."""
        for name, p in (("A better", self.p_a_better), ("equivalent", self.p_equivalent),
                        ("B better", self.p_b_better)):
            if p >= threshold:
                return name
        return "undecided"


def bayes_correlated_t(a, b, *, rope: float, test_train_ratio: float,
                       higher_is_better: bool = True) -> BayesResult:
    """Bayesian correlated t-test on one dataset's paired fold results (Benavoli et al. 2017, Sec. 3;
    Corani and Benavoli, Machine Learning 100, 2015).

    The posterior of the mean difference is Student's t with J - 1 degrees of
    freedom, location mean(d) and scale sqrt((1/J + rho/(1 - rho)) var(d)) with
    rho = n_test / n (so rho/(1-rho) = ``test_train_ratio``); the probabilities are
    its mass below -rope, inside [-rope, rope] and above rope.
    """
    d = _paired(a, b)
    if not higher_is_better:
        d = -d
    if rope < 0:
        raise ValueError(f"rope must be >= 0, got {rope!r}")
    j = d.size
    mean = float(d.mean())
    var = float(d.var(ddof=1)) * (1.0 / j + test_train_ratio)
    if var == 0:
        above, below = float(mean > rope), float(mean < -rope)
    else:
        scale = math.sqrt(var)
        above = float(_st.t.sf(rope, j - 1, loc=mean, scale=scale))
        below = float(_st.t.cdf(-rope, j - 1, loc=mean, scale=scale))
    return BayesResult(p_a_better=above, p_equivalent=max(0.0, 1.0 - above - below), p_b_better=below, rope=rope)


# --------------------------------------------------------------------------
# Bayesian signed-rank test across datasets
# --------------------------------------------------------------------------


def bayes_signed_rank(a, b, *, rope: float, higher_is_better: bool = True, random_state=None,
                      nsamples: int = 50000, prior: float = 0.5) -> BayesResult:
    """Bayesian signed-rank test over datasets (Benavoli et al., ICML 2014; JMLR 18, 2017, Sec. 4).

    The distribution of the differences gets a Dirichlet process prior with
    one pseudo-observation of weight ``prior`` at 0. For each of ``nsamples``
    draws of weights w ~ Dirichlet(prior, 1, ..., 1) over (0, d_1, ..., d_N), the
    probability that A is better is the weighted share of pairs (i, j) with
    d_i + d_j > 2 rope (a pair on the boundary counts half); B better likewise
    with < -2 rope. A posterior probability is the share of draws in which its
    region has the largest weight.

    Parameters
    ----------
    a, b : array_like of shape (n_datasets,)
        Per-dataset scores of A and B.
    rope : float
        Half-width of the region of practical equivalence (0.01 = one point of accuracy).
    random_state : int or None
        Seed of the Monte Carlo draws (numpy's legacy RandomState, as baycomp uses).
    """
    d = _differences(a, b, higher_is_better)
    if rope < 0:
        raise ValueError(f"rope must be >= 0, got {rope!r}")
    if d.size < 1:
        raise ValueError("bayes_signed_rank needs at least one dataset")
    diff = np.concatenate(([0.0], d))
    sums = diff[:, None] + diff[None, :]
    above = (sums > 2 * rope) + 0.5 * (sums == 2 * rope)
    below = (-sums > 2 * rope) + 0.5 * (-sums == 2 * rope)
    weights = np.ones(diff.size)
    weights[0] = prior
    w = np.random.RandomState(random_state).dirichlet(weights, nsamples)
    p_above = ((w @ above) * w).sum(axis=1)  # w_s' A w_s for every draw s, as one matrix product
    if rope > 0:
        p_below = ((w @ below) * w).sum(axis=1)
        cube = np.stack([p_above, 1.0 - p_above - p_below, p_below], axis=1)
    else:  # without a rope there is no equivalence region: A or B
        cube = np.stack([p_above, np.full(nsamples, -1.0), 1.0 - p_above], axis=1)
    counts = np.bincount(np.argmax(cube, axis=1), minlength=3) / nsamples
    return BayesResult(p_a_better=float(counts[0]), p_equivalent=float(counts[1]), p_b_better=float(counts[2]),
                       rope=rope)
