"""The significance tests of ``harness.stats._tests`` against published numbers and scipy."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from scipy import stats as sps

from harness import stats as S

# Nadeau & Bengio (2003), Machine Learning 52:239-281, with J = 10 folds of one 10-fold CV
# (Bouckaert & Frank 2004, PAKDD: n_test/n_train = 1/(k-1)); values in ../shared/REFERENCES.md
NB_DIFFS = np.array([0.02, 0.01, 0.03, -0.01, 0.02, 0, 0.04, 0.01, 0.02, 0.01])
# REFERENCES.md, "Deciding by non-inferiority": the Wilcoxon non-inferiority example
NI_DELTA = np.array([0.004, -0.002, 0.010, 0.001, -0.006, 0.003, 0.008, 0.000, 0.002])


# ------------------------------------------------------------- corrected resampled t
def test_corrected_t_reproduces_nadeau_bengio_numbers():
    ratio = S.cv_test_train_ratio(10)  # Bouckaert & Frank (2004): 1/(k-1)
    res = S.corrected_t(NB_DIFFS, ratio)
    # recomputed from the formula t = mean / sqrt((1/J + ratio) s^2), df = J - 1
    t = NB_DIFFS.mean() / np.sqrt((1 / 10 + 1 / 9) * NB_DIFFS.var(ddof=1))
    assert res.t == pytest.approx(t) and res.t == pytest.approx(2.2770, abs=5e-5)
    assert res.p_value == pytest.approx(0.0488, abs=5e-5)
    naive = sps.ttest_1samp(NB_DIFFS, 0.0)  # the uncorrected paired t of the same example
    assert naive.statistic == pytest.approx(3.3085, abs=5e-5)
    # one-sided version used by the decision: half the two-sided p
    assert S.corrected_t_greater(NB_DIFFS, ratio) == pytest.approx(res.p_value / 2)


def test_correlated_t_matches_corani_benavoli_check_values():
    # Corani & Benavoli (2015), Machine Learning 100:285-304: posterior Student t, n-1 df,
    # scale^2 = (1/n + rho/(1-rho)) s^2, rho = 1/k = 0.1
    post = S.correlated_t(NB_DIFFS, 0.1, 0.005)
    p_two = S.corrected_t(NB_DIFFS, S.cv_test_train_ratio(10)).p_value
    assert post.prob_positive == pytest.approx(1 - p_two / 2, abs=1e-9)
    assert post.prob_positive == pytest.approx(0.975601, abs=1e-6)
    assert post.prob_above == pytest.approx(0.992946, abs=1e-6)
    assert post.prob_rope == pytest.approx(0.074607, abs=1e-6)
    assert post.prob_below == pytest.approx(1 - 0.992946, abs=1e-6)


# ------------------------------------------------------------------- signed-rank tests
def test_wilcoxon_noninferiority_reference_example():
    # REFERENCES.md: wilcoxon(delta + 0.01, alternative="greater") -> W = 45, p = 1/512
    w, p = S.signed_rank_greater(NI_DELTA + 0.01)
    ref = sps.wilcoxon(NI_DELTA + 0.01, alternative="greater")
    assert w == 45 == ref.statistic
    assert p == pytest.approx(1 / 512) and p == pytest.approx(ref.pvalue)


@pytest.mark.parametrize("n", [1, 4, 9, 17, 30])
def test_signed_rank_matches_scipy_exact_without_ties(n, rng):
    for _ in range(5):  # a few random draws per size
        x = rng.normal(0.3, 1.0, n)
        for ours, alt in ((S.signed_rank_greater, "greater"), (S.signed_rank_less, "less")):
            ref = sps.wilcoxon(x, alternative=alt, method="exact")
            w, p = ours(x)
            assert w == pytest.approx(ref.statistic)
            assert p == pytest.approx(ref.pvalue, rel=1e-9)


def _brute_force_greater(x):
    """P(W+ >= observed) by listing all 2^n sign patterns (mid-ranks for ties)."""
    x = x[x != 0]
    r = sps.rankdata(np.abs(x))
    obs = r[x > 0].sum()
    sums = np.array([np.dot(s, r) for s in itertools.product([0, 1], repeat=len(x))])
    return np.mean(sums >= obs - 1e-9)


def test_signed_rank_with_ties_and_zeros_matches_enumeration():
    x = np.array([0.5, -0.5, 1.0, 1.0, 2.0, 0.0, -1.0, 3.0, 0.5, 2.0])
    assert S.signed_rank_greater(x)[1] == pytest.approx(_brute_force_greater(x))


def test_signed_rank_large_n_uses_the_normal_approximation(rng):
    x = rng.normal(0.1, 1, 400)
    ref = sps.wilcoxon(x, alternative="greater", method="approx", correction=True)
    assert S.signed_rank_greater(x)[1] == pytest.approx(ref.pvalue, rel=1e-6)


# --------------------------------------------------------------------- Hodges-Lehmann
def test_hodges_lehmann_estimate_reference_example():
    # REFERENCES.md: median of the Walsh averages of the same delta -> 0.002
    assert S.hodges_lehmann(NI_DELTA).estimate == pytest.approx(0.002)


def _exact_p(x, theta):
    return _brute_force_greater(x - theta)


@pytest.mark.parametrize("n", [6, 9, 11])
def test_hodges_lehmann_bounds_invert_the_exact_test(n, rng):
    # Hollander & Wolfe (1999), Sec. 3.3: the lower bound is the smallest theta that the
    # exact one-sided test of H0: location <= theta no longer rejects; checked by listing
    # every sign pattern just below and just above the bound
    x = rng.normal(0.2, 1.0, n)
    hl = S.hodges_lehmann(x, 0.05)
    eps = 1e-9
    assert _exact_p(x, hl.lower - eps) <= 0.05
    assert _exact_p(x, hl.lower + eps) > 0.05
    assert _brute_force_greater(-(x - (hl.upper + eps))) <= 0.05  # mirror for the upper bound
    assert _brute_force_greater(-(x - (hl.upper - eps))) > 0.05


def test_hodges_lehmann_bounds_unbounded_when_no_test_can_reject():
    hl = S.hodges_lehmann([0.1, 0.2, 0.3, 0.4], 0.05)  # 2^-4 = 0.0625 > 0.05
    assert hl.lower == -np.inf and hl.upper == np.inf


# ------------------------------------------------------------------------------ TOST
@pytest.mark.parametrize("shift, spread", [(0.0, 0.002), (0.004, 0.004), (0.02, 0.003), (-0.02, 0.003), (0.0, 0.02)])
def test_tost_verdict_matches_two_one_sided_scipy_tests(shift, spread, rng):
    # Schuirmann (1987): equivalent only when H0: theta <= -m and H0: theta >= +m both
    # reject; one candidate, so Holm changes nothing
    from stats_tools import decide_on_deltas

    d = shift + spread * rng.standard_normal(12)
    m = 0.01
    lower = sps.wilcoxon(d + m, alternative="greater").pvalue < 0.05
    upper = sps.wilcoxon(d - m, alternative="less").pvalue < 0.05
    better = sps.wilcoxon(d, alternative="greater").pvalue < 0.05
    verdict = decide_on_deltas(d, margin=m)
    assert (verdict == "equivalent") == (lower and upper and not better)
    assert (verdict in S.SHOWN_NOT_WORSE) == lower


# ------------------------------------------------------------- Bayesian signed-rank
def test_bayesian_signed_rank_matches_the_exact_expectation():
    # Benavoli et al. (2017), JMLR 18(77): theta_left = sum_ij w_i w_j 1{z_i + z_j < -2r};
    # E[w_i w_j] = a_i a_j / (A(A+1)) (i != j), a_i (a_i + 1) / (A(A+1)) (i = j)
    z = np.array([0.0, -0.03, -0.01, 0.02, -0.025, 0.004])  # pseudo-observation 0 first
    alpha = np.array([0.5, 1, 1, 1, 1, 1])
    a_sum = alpha.sum()
    e = np.outer(alpha, alpha) / (a_sum * (a_sum + 1))
    e[np.diag_indices_from(e)] = alpha * (alpha + 1) / (a_sum * (a_sum + 1))
    rope = 0.01
    pair = z[:, None] + z[None, :]
    exact_left = float(np.sum(e * (pair < -2 * rope)))
    exact_right = float(np.sum(e * (pair > 2 * rope)))
    res = S.bayesian_signed_rank(z[1:], rope, n_samples=200_000, seed=1)
    assert res.theta_mean[0] == pytest.approx(exact_left, abs=2e-3)
    assert res.theta_mean[2] == pytest.approx(exact_right, abs=2e-3)


# --------------------------------------------------------------------- Friedman exact
def test_friedman_exact_p_is_one_sixth_for_two_concordant_datasets():
    ranks = np.array([[1.0, 2.0, 3.0], [1.0, 2.0, 3.0]])
    p, exact = S.friedman_permutation_p(ranks)
    assert exact and p == pytest.approx(1 / 6)  # 6 orderings of the second row, 1 as extreme
    asym = S.friedman_from_ranks(ranks.mean(axis=0), 2)
    assert asym.f_p_value == 0.0  # the asymptotic F p that the report must never print


def test_friedman_exact_matches_full_enumeration_with_ties():
    ranks = np.array([[1, 2, 3], [1.5, 1.5, 3], [2, 1, 3]], dtype=float)
    stat = lambda r: np.sum(r.sum(axis=0) ** 2)  # noqa: E731
    rows = [list(itertools.permutations(row)) for row in ranks]
    allstats = [stat(np.array(c)) for c in itertools.product(*rows)]  # every dataset permuted
    expected = np.mean(np.array(allstats) >= stat(ranks) - 1e-9)
    assert S.friedman_permutation_p(ranks)[0] == pytest.approx(expected)


def test_friedman_monte_carlo_is_close_to_exact_and_never_zero(rng):
    ranks = np.array([sps.rankdata(rng.normal(np.arange(5) * 0.5, 1)) for _ in range(3)])
    exact, is_exact = S.friedman_permutation_p(ranks, max_exact=10**9)
    approx, is_mc = S.friedman_permutation_p(ranks, max_exact=10, n_perm=20000)
    assert is_exact and not is_mc
    assert approx == pytest.approx(exact, abs=0.01)
    concordant = np.tile(np.arange(1.0, 6.0), (8, 1))
    assert S.friedman_permutation_p(concordant, max_exact=10, n_perm=500)[0] == 1 / 501


# -------------------------------------------------------------------------------- power
def test_datasets_needed_reaches_the_target_power_by_simulation(rng):
    # the approximation (Lehmann 1975, ARE 3/pi) checked against a simulation of the exact
    # one-sided signed-rank test at the N it returns
    shift, sd, m = 0.0, 0.02, 0.01
    pilot = shift + sd * rng.standard_normal(400)
    n = int(S.datasets_needed(pilot, m, 0.05, 0.8))
    hits = [S.signed_rank_greater(shift + sd * rng.standard_normal(n) + m)[1] < 0.05 for _ in range(400)]
    assert 0.72 <= np.mean(hits) <= 0.92


def test_repeats_needed_is_infinite_when_the_variance_floor_is_too_high():
    # corrected variance (1/J + 1/(k-1)) s^2 never falls below s^2/(k-1) (Nadeau & Bengio)
    d = np.array([0.0, 0.05, -0.05, 0.04, -0.04])
    assert S.repeats_needed(d, 0.01, 5) == np.inf
    assert np.isfinite(S.repeats_needed(d * 0.01, 0.01, 5))
