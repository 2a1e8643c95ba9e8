"""Significance tests and intervals as pure functions of arrays (no DataFrames of results)."""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np
from scipy import stats as sps


# ------------------------------------------------------- corrected resampled t (1 data set)
@dataclass(frozen=True)
class CorrectedT:
    """Result of the corrected resampled t test / interval (see :func:`corrected_t`)."""

    mean: float
    std: float
    n: int
    test_train_ratio: float
    t: float
    df: int
    p_value: float
    ci_low: float
    ci_high: float


def cv_test_train_ratio(n_folds: int) -> float:
    """Return ``n_test / n_train = 1 / (k - 1)`` for k-fold cross-validation.

    References
    ----------
    Bouckaert, R. & Frank, E. (2004). Evaluating the replicability of significance
    tests for comparing learning algorithms. PAKDD.
    """
    return 1.0 / (n_folds - 1) if n_folds > 1 else np.nan


def _corrected_se(std, n, ratio):
    # Nadeau & Bengio: the resamples overlap, so the naive 1/J variance is too small.
    return np.sqrt(1.0 / n + ratio) * std


def corrected_t(diffs, test_train_ratio: float, *, alpha: float = 0.05) -> CorrectedT:
    """Corrected resampled t test of ``mean(diffs) == 0`` with its ``1 - alpha`` interval.

    ``t = mean(d) / sqrt((1/J + n_test/n_train) * s^2)`` with ``s^2`` the sample variance
    (ddof=1) of the J resampled values and ``J - 1`` degrees of freedom. Applied to raw
    scores instead of differences it gives the interval of a cross-validated mean.

    Parameters
    ----------
    diffs : array-like of shape (J,)
        One value per resample (for r x k-fold CV, J = r * k).
    test_train_ratio : float
        ``n_test / n_train``; ``1 / (k - 1)`` for k-fold CV (:func:`cv_test_train_ratio`).
    alpha : float
        Two-sided level of the interval.

    Returns
    -------
    CorrectedT
        NaN statistics when fewer than two finite values are given.

    References
    ----------
    Nadeau, C. & Bengio, Y. (2003). Inference for the generalization error. Machine
    Learning 52:239-281. Bouckaert, R. & Frank, E. (2004), PAKDD (J = k*r).
    """
    d = np.asarray(diffs, dtype=float)
    d = d[np.isfinite(d)]
    n = int(d.size)
    mean = float(d.mean()) if n else np.nan
    std = float(d.std(ddof=1)) if n > 1 else np.nan
    se = _corrected_se(std, n, test_train_ratio) if n else np.nan
    with np.errstate(divide="ignore", invalid="ignore"):
        t = mean / se if n > 1 else np.nan
    p = float(2 * sps.t.sf(abs(t), n - 1)) if n > 1 and not np.isnan(t) else np.nan
    half = float(sps.t.ppf(1 - alpha / 2, n - 1) * se) if n > 1 else np.nan
    return CorrectedT(mean, std, n, float(test_train_ratio), float(t), n - 1, p, mean - half, mean + half)


@dataclass(frozen=True)
class FriedmanResult:
    """Friedman statistic and the Iman-Davenport F (see :func:`friedman_from_ranks`)."""

    chi2: float
    p_value: float
    f_stat: float
    f_p_value: float
    df1: int
    df2: int
    n_datasets: int
    n_encoders: int
    perm_p: float = float("nan")
    perm_exact: bool = False

    @property
    def p(self) -> float:
        """The p-value to print: the permutation p when computed, else Iman-Davenport's.

        The asymptotic F p-value of a small, fully concordant table is 0 (F is infinite);
        the permutation p never is (N = 2, k = 3: 1/6).
        """
        return self.perm_p if np.isfinite(self.perm_p) else self.f_p_value


def friedman_from_ranks(avg_ranks, n_datasets: int, *, tie_factor: float = 1.0) -> FriedmanResult:
    """Friedman test with the Iman-Davenport correction from average ranks.

    ``chi2_F = 12N / (k(k+1)) * (sum R_j^2 - k(k+1)^2/4)``;
    ``F_F = (N-1) chi2_F / (N(k-1) - chi2_F)`` ~ F(k-1, (k-1)(N-1)).

    Parameters
    ----------
    avg_ranks : array-like of shape (k,)
        Average rank of each encoder over the N datasets.
    n_datasets : int
        N.
    tie_factor : float
        ``chi2_F`` is divided by it; 1 is Demšar's formula (see :func:`friedman_test`).

    Returns
    -------
    FriedmanResult
        NaN when N < 2 or k < 2. All-equal ranks give chi2 = F = 0 and p = 1.

    References
    ----------
    Demšar (2006), JMLR 7:1-30, Sec. 3.2.2; Iman, R. & Davenport, J. (1980).
    Communications in Statistics A 9:571-595.
    """
    r = np.asarray(avg_ranks, dtype=float)
    k, n = r.size, int(n_datasets)
    if n < 2 or k < 2:
        return FriedmanResult(np.nan, np.nan, np.nan, np.nan, k - 1, (k - 1) * (n - 1), n, k)
    chi2 = 12 * n / (k * (k + 1)) * (np.sum(r**2) - k * (k + 1) ** 2 / 4)
    chi2 = max(float(chi2), 0.0) / tie_factor  # rounding can make an all-tie sum -1e-15
    df1, df2 = k - 1, (k - 1) * (n - 1)
    room = n * (k - 1) - chi2  # 0 when every dataset ranks the encoders identically
    f = (n - 1) * chi2 / room if room > 1e-12 * n * k else np.inf
    return FriedmanResult(chi2, float(sps.chi2.sf(chi2, df1)), float(f), float(sps.f.sf(f, df1, df2)), df1, df2, n, k)


def nemenyi_q(k: int, alpha: float = 0.05) -> float:
    """Critical value q_alpha of the Nemenyi test for k encoders.

    ``q = studentized_range.ppf(1 - alpha, k, inf) / sqrt(2)``.

    References
    ----------
    Demšar (2006), JMLR 7, Table 5; Nemenyi, P. (1963). Distribution-free multiple
    comparisons. PhD thesis, Princeton University.
    """
    if k < 2:
        return np.nan
    return float(sps.studentized_range.ppf(1 - alpha, k, np.inf) / np.sqrt(2))


def critical_difference(k: int, n_datasets: int, alpha: float = 0.05) -> float:
    """Nemenyi critical difference ``CD = q_alpha sqrt(k(k+1) / (6N))``.

    References
    ----------
    Demšar (2006), JMLR 7, Sec. 3.2.2.
    """
    if k < 2 or n_datasets < 1:
        return np.nan
    return nemenyi_q(k, alpha) * float(np.sqrt(k * (k + 1) / (6 * n_datasets)))


def holm(p_values) -> np.ndarray:
    """Holm step-down adjusted p-values (same order as given; NaN kept as NaN).

    ``p_adj(i) = max_{j <= i} min(1, (m - j + 1) p_(j))`` over the sorted p-values.

    References
    ----------
    Holm, S. (1979). A simple sequentially rejective multiple test procedure.
    Scandinavian Journal of Statistics 6:65-70; Demšar (2006), JMLR 7, Sec. 3.2.2.
    """
    p = np.asarray(p_values, dtype=float)
    out = np.full(p.shape, np.nan)
    ok = np.flatnonzero(~np.isnan(p))
    order = ok[np.argsort(p[ok], kind="stable")]
    m = order.size
    adj = np.minimum(1.0, (m - np.arange(m)) * p[order])
    out[order] = np.maximum.accumulate(adj) if m else adj
    return out


@dataclass(frozen=True)
class BayesSignedRank:
    """Posterior probabilities of the Bayesian signed-rank test.

    ``p_left``/``p_rope``/``p_right`` are the fractions of Monte-Carlo draws in which
    the left / rope / right region has the largest probability mass; ``theta_mean`` is
    the Monte-Carlo mean of (theta_left, theta_rope, theta_right).
    """

    p_left: float
    p_rope: float
    p_right: float
    theta_mean: tuple


def bayesian_signed_rank(
    diffs, rope: float = 0.01, *, prior_strength: float = 0.5, n_samples: int = 20000, seed: int = 0
) -> BayesSignedRank:
    """Bayesian signed-rank test with a region of practical equivalence.

    A pseudo-observation 0 is prepended to ``z``; weights ``w ~ Dirichlet(s, 1, ..., 1)``;
    ``theta_left = sum_ij w_i w_j 1{z_i + z_j < -2 rope}``, ``theta_right`` likewise with
    ``> 2 rope``, ``theta_rope`` the rest (all i, j including i = j).

    Parameters
    ----------
    diffs : array-like of shape (N,)
        Per-dataset differences, oriented so that positive favours the first method
        ("right").
    rope : float
        Half-width of the region of practical equivalence, in metric units.
    prior_strength : float
        Dirichlet weight s of the pseudo-observation.
    n_samples : int
        Monte-Carlo draws.
    seed : int
        Seed of ``numpy.random.default_rng``.

    Returns
    -------
    BayesSignedRank
        NaN when ``diffs`` is empty.

    References
    ----------
    Benavoli, A., Corani, G., Demšar, J., Zaffalon, M. (2017). Time for a change: a
    tutorial for comparing multiple classifiers through Bayesian analysis. JMLR 18(77).
    """
    z = np.asarray(diffs, dtype=float)
    z = z[np.isfinite(z)]
    if z.size == 0:
        return BayesSignedRank(np.nan, np.nan, np.nan, (np.nan, np.nan, np.nan))
    z = np.concatenate(([0.0], z))
    alpha = np.concatenate(([prior_strength], np.ones(z.size - 1)))
    w = np.random.default_rng(seed).dirichlet(alpha, size=n_samples)
    pair = z[:, None] + z[None, :]
    left = np.einsum("si,ij,sj->s", w, (pair < -2 * rope).astype(float), w)
    right = np.einsum("si,ij,sj->s", w, (pair > 2 * rope).astype(float), w)
    theta = np.column_stack([left, 1.0 - left - right, right])
    winner = np.bincount(theta.argmax(axis=1), minlength=3) / n_samples
    return BayesSignedRank(
        float(winner[0]), float(winner[1]), float(winner[2]), tuple(float(v) for v in theta.mean(axis=0))
    )


# ------------------------------------------------------------------ signed-rank, one-sided
_EXACT_MAX_N = 200  # above this the normal approximation is used (error far below 1e-3)


def _signed_rank_parts(x):
    """Nonzero values, their doubled mid-ranks of |x| (integers) and the observed 2*W+."""
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x) & (x != 0)]  # zeros dropped (Wilcoxon 1945; scipy's "wilcox")
    r2 = (2 * sps.rankdata(np.abs(x))).round().astype(np.int64)
    return x, r2, int(r2[x > 0].sum())


def _null_counts(r2: np.ndarray) -> np.ndarray:
    """Null distribution of 2*W+ over the 2^n sign patterns, as probabilities.

    Dynamic programming over the (doubled, hence integer) ranks: each rank joins the
    positive sum with probability 1/2. Exact with tied mid-ranks too.
    """
    dist = np.zeros(int(r2.sum()) + 1)
    dist[0] = 1.0
    for r in r2:  # loop over observations (n <= _EXACT_MAX_N), not over sign patterns
        shifted = np.zeros_like(dist)
        shifted[r:] = dist[: dist.size - r]
        dist = 0.5 * (dist + shifted)
    return dist


def signed_rank_greater(x) -> tuple[float, float]:
    """One-sided Wilcoxon signed-rank test of H0: median(x) <= 0 against > 0.

    Returns ``(W+, p)``: the sum of the ranks of the positive values and
    ``P(W+ >= observed)`` under H0. Zeros are dropped; tied absolute values get mid-ranks.
    Exact (by dynamic programming over the sign patterns) for up to 200 nonzero values,
    normal approximation with tie correction above. No value: ``(nan, nan)``.

    References
    ----------
    Wilcoxon, F. (1945). Individual comparisons by ranking methods. Biometrics Bulletin
    1(6):80-83; Hollander, M. & Wolfe, D. (1999). Nonparametric Statistical Methods,
    2nd ed., Wiley, Sec. 3.1 (exact null distribution, ties).
    """
    x, r2, w2 = _signed_rank_parts(x)
    n = x.size
    if n == 0:
        return np.nan, np.nan
    if n <= _EXACT_MAX_N:
        dist = _null_counts(r2)
        return w2 / 2.0, float(min(1.0, dist[w2:].sum()))
    mean = r2.sum() / 4.0
    var = float(np.sum(r2.astype(float) ** 2)) / 16.0
    z = (w2 / 2.0 - mean - 0.5) / np.sqrt(var)  # continuity correction toward the null
    return w2 / 2.0, float(sps.norm.sf(z))


def signed_rank_less(x) -> tuple[float, float]:
    """One-sided Wilcoxon signed-rank test of H0: median(x) >= 0 against < 0 (see
    :func:`signed_rank_greater`); the statistic returned is W+ of ``x``."""
    w_neg, p = signed_rank_greater(-np.asarray(x, dtype=float))
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x) & (x != 0)]
    total = x.size * (x.size + 1) / 2.0
    return (total - w_neg if np.isfinite(w_neg) else np.nan), p


def _walsh(x: np.ndarray) -> np.ndarray:
    i, j = np.triu_indices(x.size)
    return np.sort((x[i] + x[j]) / 2.0)


def _upper_critical(n: int, alpha: float) -> int | None:
    """Smallest t with P(T+ >= t) <= alpha for n untied observations; None if none."""
    dist = _null_counts(2 * np.arange(1, n + 1))[::2]  # doubled ranks: even sums only
    tail = np.cumsum(dist[::-1])[::-1]  # tail[t] = P(T+ >= t)
    ok = np.flatnonzero(tail <= alpha + 1e-12)
    return int(ok[0]) if ok.size else None


@dataclass(frozen=True)
class HodgesLehmann:
    """Hodges-Lehmann estimate of a location shift with one-sided confidence bounds."""

    estimate: float
    lower: float
    upper: float
    n: int
    alpha: float


def hodges_lehmann(x, alpha: float = 0.05) -> HodgesLehmann:
    """Median of the Walsh averages and its one-sided ``1 - alpha`` bounds.

    ``lower`` is the Walsh average of order ``M + 1 - t`` (``M = n(n+1)/2``, ``t`` the
    smallest value with ``P(T+ >= t) <= alpha``), the largest value that the one-sided
    signed-rank test of H0: location <= value still rejects below; ``upper`` mirrors it.
    Together they form a ``1 - 2 alpha`` two-sided interval (the one TOST uses). When
    ``n`` is too small for any exact test to reach ``alpha`` the bounds are infinite.

    References
    ----------
    Hodges, J. & Lehmann, E. (1963). Estimates of location based on rank tests. Annals
    of Mathematical Statistics 34:598-611; Hollander & Wolfe (1999), Sec. 3.3 (bounds
    from the Walsh averages at the signed-rank critical values) [formula recalled].
    """
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    n = x.size
    if n == 0:
        return HodgesLehmann(np.nan, np.nan, np.nan, 0, alpha)
    w = _walsh(x)
    est = float(np.median(w))
    t = _upper_critical(n, alpha) if n <= _EXACT_MAX_N else None
    if t is None and n > _EXACT_MAX_N:
        m = w.size
        half = sps.norm.ppf(1 - alpha) * np.sqrt(n * (n + 1) * (2 * n + 1) / 24.0)
        t = int(np.ceil(m / 2.0 + half + 0.5))
    if t is None or t > w.size:
        return HodgesLehmann(est, -np.inf, np.inf, n, alpha)
    k = w.size - t  # 0-based order statistic M + 1 - t
    return HodgesLehmann(est, float(w[k]), float(w[w.size - 1 - k]), n, alpha)


# ------------------------------------------------------------------ one dataset, Bayesian
@dataclass(frozen=True)
class CorrelatedT:
    """Posterior of the mean difference on one dataset (Bayesian correlated t-test)."""

    mean: float
    scale: float
    df: int
    prob_above: float  # P(delta > -margin)
    prob_below: float  # P(delta < -margin): practically worse
    prob_rope: float  # P(|delta| < margin)
    prob_positive: float  # P(delta > 0)


def correlated_t(diffs, test_fraction: float, margin: float) -> CorrelatedT:
    """Bayesian correlated t-test of fold-paired differences on one dataset.

    The posterior of the mean difference is Student t with ``n - 1`` degrees of freedom,
    location ``mean(d)`` and scale ``sqrt((1/n + rho/(1 - rho)) s^2)``, ``rho`` the test
    fraction of each split (``1/k`` for k-fold CV), ``s^2`` with ddof=1.

    References
    ----------
    Corani, G. & Benavoli, A. (2015). A Bayesian approach for comparing cross-validated
    algorithms on multiple data sets. Machine Learning 100:285-304.
    """
    d = np.asarray(diffs, dtype=float)
    d = d[np.isfinite(d)]
    n = d.size
    if n < 2 or not 0 < test_fraction < 1:
        return CorrelatedT(np.nan, np.nan, max(n - 1, 0), np.nan, np.nan, np.nan, np.nan)
    mean, s = float(d.mean()), float(d.std(ddof=1))
    scale = float(np.sqrt(1.0 / n + test_fraction / (1 - test_fraction)) * s)
    if scale == 0:
        cdf = lambda v: float(mean > v)  # noqa: E731 - a point mass at the mean
    else:
        cdf = lambda v: float(sps.t.cdf((v - mean) / scale, n - 1))  # noqa: E731
    below = cdf(-margin)
    return CorrelatedT(mean, scale, n - 1, 1 - below, below, cdf(margin) - below, 1 - cdf(0.0))


def corrected_t_greater(diffs, test_train_ratio: float, shift: float = 0.0) -> float:
    """One-sided corrected resampled t p-value of H0: mean(diffs) <= -shift.

    References
    ----------
    Nadeau & Bengio (2003), Machine Learning 52:239-281; Bouckaert & Frank (2004), PAKDD.
    """
    d = np.asarray(diffs, dtype=float)
    d = d[np.isfinite(d)]
    n = d.size
    if n < 2:
        return np.nan
    se = float(_corrected_se(d.std(ddof=1), n, test_train_ratio))
    if se == 0:
        return 0.0 if d.mean() + shift > 0 else 1.0
    return float(sps.t.sf((d.mean() + shift) / se, n - 1))


# ------------------------------------------------------------------------ Friedman, exact
def _rank_sum_stat(ranks: np.ndarray) -> np.ndarray:
    return np.sum(ranks.sum(axis=-2) ** 2, axis=-1)


def friedman_permutation_p(
    ranks, *, max_exact: int = 200_000, n_perm: int = 20_000, seed: int = 0
) -> tuple[float, bool]:
    """Permutation p-value of the Friedman statistic, exact when N x k is small.

    Under H0 every within-dataset ordering of the ranks is equally likely. The statistic
    is ``sum_j R_j^2`` (column rank sums), a monotone function of chi2_F and of the
    Iman-Davenport F for fixed N and k, so the p-value serves both. The first dataset is
    held fixed (relabelling the encoders leaves the statistic unchanged), so the exact
    enumeration has ``(k!)^(N-1)`` terms; above ``max_exact`` a Monte-Carlo estimate
    ``(1 + #{S* >= S}) / (1 + n_perm)`` is returned, which is never 0.

    Returns
    -------
    (float, bool)
        The p-value and whether it is exact.

    References
    ----------
    Friedman, M. (1937). JASA 32:675-701 (the exact null distribution by enumeration);
    Demšar (2006), JMLR 7, Sec. 3.2.2; Monte-Carlo p with the +1: Phipson, B. & Smyth, G.
    (2010). Statistical Applications in Genetics and Molecular Biology 9(1).
    """
    r = np.asarray(ranks, dtype=float)
    n, k = r.shape
    if n < 2 or k < 2:
        return np.nan, False
    observed = float(_rank_sum_stat(r)) - 1e-9 * n * k
    rows = (
        [np.unique(np.array(list(itertools.permutations(row))), axis=0) for row in r[1:]]
        if math.factorial(k) <= max_exact
        else None
    )
    size = math.prod(len(p) for p in rows) if rows is not None else max_exact + 1
    if size <= max_exact:
        sums = r[:1].copy()
        for perms in rows:  # loop over datasets: sums of every combination so far
            sums = (sums[:, None, :] + perms[None, :, :]).reshape(-1, k)
        stat = np.sum(sums**2, axis=1)
        return float(np.mean(stat >= observed)), True
    rng = np.random.default_rng(seed)
    keys = rng.random((n_perm, n, k))
    shuffled = np.take_along_axis(np.broadcast_to(r, keys.shape), keys.argsort(axis=2), axis=2)
    hits = int(np.sum(_rank_sum_stat(shuffled) >= observed))
    return (1 + hits) / (1 + n_perm), False


# ----------------------------------------------------------------------------------- power
def datasets_needed(deltas, margin: float, alpha: float = 0.05, power: float = 0.8) -> float:
    """Datasets the observed spread of ``deltas`` would need for the non-inferiority test.

    Normal approximation for the t test, ``N = ((z_{1-alpha} + z_power) s / (d + margin))^2``
    with ``d`` the Hodges-Lehmann estimate and ``s`` the standard deviation of the deltas,
    divided by the asymptotic relative efficiency 3/pi of the signed-rank test; never
    fewer than the smallest N at which an exact one-sided signed-rank p can reach alpha
    (``2^-N <= alpha``). Infinite when the estimate is not above ``-margin``.

    References
    ----------
    Lehmann, E. (1975). Nonparametrics: Statistical Methods Based on Ranks. Holden-Day,
    Ch. 2 (sample size by the ARE of 3/pi) [recalled]; power 0.8: common practice, no
    source.
    """
    d = np.asarray(deltas, dtype=float)
    d = d[np.isfinite(d)]
    floor = int(np.ceil(np.log2(1.0 / alpha)))
    if d.size < 2:
        return np.nan
    shift = float(np.median(_walsh(d))) + margin
    if shift <= 0:
        return np.inf
    s = float(d.std(ddof=1))
    if s == 0:
        return float(floor)
    need = ((sps.norm.ppf(1 - alpha) + sps.norm.ppf(power)) * s / shift) ** 2 / (3 / np.pi)
    return float(max(floor, int(np.ceil(need))))


def repeats_needed(diffs, margin: float, n_folds: int, alpha: float = 0.05, power: float = 0.8) -> float:
    """Repeats of k-fold CV the observed fold spread would need on one dataset.

    The corrected variance ``(1/J + 1/(k-1)) s^2`` does not fall below ``s^2/(k-1)``
    however many repeats are run, so a shift that is small against that floor can never
    be shown: the answer is infinite. Otherwise ``J`` solves
    ``(d + margin) / sqrt((1/J + 1/(k-1)) s^2) = z_{1-alpha} + z_power`` and the repeats
    are ``ceil(J / k)``.

    References
    ----------
    Nadeau & Bengio (2003), Machine Learning 52:239-281 (the variance correction);
    Bouckaert & Frank (2004), PAKDD (J = k r); power 0.8: common practice, no source.
    """
    d = np.asarray(diffs, dtype=float)
    d = d[np.isfinite(d)]
    if d.size < 2 or n_folds < 2:
        return np.nan
    shift, s = float(d.mean()) + margin, float(d.std(ddof=1))
    if shift <= 0:
        return np.inf
    if s == 0:
        return 1.0
    c = sps.norm.ppf(1 - alpha) + sps.norm.ppf(power)
    room = (shift / (c * s)) ** 2 - 1.0 / (n_folds - 1)
    if room <= 0:
        return np.inf
    return float(max(1, int(np.ceil(1.0 / room / n_folds))))
