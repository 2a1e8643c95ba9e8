"""Tests of harness.stats: published worked examples, scipy cross-checks, tiny synthetic tables."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps

from harness import stats as S
from harness.errors import ConfigError, DataError

# Demšar (2006), JMLR 7, Section 3.2.2 / Table 6: published average ranks of 4 variants
# of a decision-tree learner over N = 14 data sets (as fractions of rank sums).
DEMSAR_RANKS = np.array([44.0, 28.0, 40.5, 27.5]) / 14
DEMSAR_N = 14


@pytest.fixture
def rng():
    return np.random.default_rng(20240611)


def make_results(
    means: pd.DataFrame,
    *,
    metric="roc_auc",
    model="lr",
    n_folds=5,
    n_repeats=2,
    noise=0.0,
    rng=None,
    seconds=None,
    features=None,
    cardinality=None,
    train_gap=0.05,
    kinds=None,
    params=None,
):
    """Tiny synthetic results table: ``means`` is datasets x encoders, NaN = failed cell."""
    cells = (
        means.rename_axis(index="dataset", columns="encoder")
        .reset_index()
        .melt(id_vars="dataset", var_name="encoder", value_name="mu")
    )
    folds = pd.MultiIndex.from_product([range(n_repeats), range(n_folds)], names=["repeat", "fold"]).to_frame(
        index=False
    )
    df = cells.merge(folds, how="cross")
    eps = rng.standard_normal(len(df)) * noise if noise else 0.0
    gap = pd.Series(train_gap, index=means.columns) if np.isscalar(train_gap) else train_gap
    df["status"] = np.where(df["mu"].notna(), "ok", "failed")
    df[metric] = df["mu"] + eps
    df["train_" + metric] = df[metric] + S.orientation(metric) * df["encoder"].map(gap)
    df["model"] = model
    df["model_family"] = model + "_family"
    df["primary_metric"] = metric
    df["n_train"], df["n_test"] = 400 * (n_folds - 1), 400
    secs = seconds or {e: 1.0 for e in means.columns}
    df["encoder_fit_s"] = df["encoder"].map(secs) * 0.75
    df["encoder_transform_s"] = df["encoder"].map(secs) * 0.25
    df["model_fit_s"] = 2.0
    df["n_features_out"] = df["encoder"].map(features or {e: 10 for e in means.columns})
    df["encoded_mb"] = df["n_features_out"] * 0.1
    card = cardinality or {d: 5 for d in means.index}
    df["max_cardinality"] = df["dataset"].map(card)
    df["encoder_kind"] = df["encoder"].map(kinds or {e: e for e in means.columns})
    if params is not None:
        df["encoder_params"] = df["encoder"].map(params)
    return df.drop(columns="mu")


def frame(values, datasets=None, encoders=None):
    values = np.asarray(values, dtype=float)
    datasets = datasets or [f"d{i}" for i in range(values.shape[0])]
    encoders = encoders or [f"e{j}" for j in range(values.shape[1])]
    return pd.DataFrame(values, index=datasets, columns=encoders)


# ------------------------------------------------------------------- published examples
def test_demsar_friedman_iman_davenport_worked_example():
    # Demšar (2006), JMLR 7, Sec. 3.2.2 (Table 6 example): chi2_F = 9.28, F_F = 3.69.
    res = S.friedman_from_ranks(DEMSAR_RANKS, DEMSAR_N)
    assert res.chi2 == pytest.approx(9.28, abs=5e-3)
    assert res.f_stat == pytest.approx(3.69, abs=5e-3)
    assert (res.df1, res.df2) == (3, 39)
    # Same source: critical value of F(3, 39) at alpha 0.05 is 2.85.
    assert sps.f.ppf(0.95, res.df1, res.df2) == pytest.approx(2.85, abs=5e-3)
    assert res.f_p_value < 0.05 < res.p_value * 2  # rejects; p-values are consistent


def test_demsar_nemenyi_cd_worked_example():
    # Demšar (2006), JMLR 7, Sec. 3.2.2: CD = 2.569 * sqrt(4*5/(6*14)) = 1.25 at alpha 0.05.
    assert S.critical_difference(4, DEMSAR_N, 0.05) == pytest.approx(1.25, abs=5e-3)


def test_demsar_holm_vs_control_worked_example():
    # Demšar (2006), JMLR 7, Sec. 3.2.2: z vs the first variant 2.415, 2.342, 0.512.
    ranks = pd.Series(DEMSAR_RANKS, index=["c4.5", "c4.5+m", "c4.5+cf", "c4.5+m+cf"])
    out = S.control_z_test(ranks, DEMSAR_N, "c4.5")
    z = out["z"].abs().sort_values(ascending=False).to_numpy()
    np.testing.assert_allclose(z, [2.415, 2.342, 0.512], atol=6e-4)
    # Holm (1979) step-down by hand: compare sorted p with alpha/(m - i).
    p = np.sort(out["p_value"].to_numpy())
    by_hand = p < 0.05 / np.array([3, 2, 1])
    reject = np.logical_and.accumulate(by_hand)
    assert list(np.sort(out["p_holm"].to_numpy()) < 0.05) == list(reject)


@pytest.mark.parametrize("k", range(2, 11))
@pytest.mark.parametrize(
    "alpha, table",
    [
        # Demšar (2006), JMLR 7, Table 5 (a), Nemenyi q at alpha 0.05 and 0.10, k = 2..10.
        (0.05, [1.960, 2.343, 2.569, 2.728, 2.850, 2.949, 3.031, 3.102, 3.164]),
        (0.10, [1.645, 2.052, 2.291, 2.459, 2.589, 2.693, 2.780, 2.855, 2.920]),
    ],
)
def test_nemenyi_q_matches_demsar_table5(k, alpha, table):
    # atol 1.1e-3: some printed entries of Table 5 are not correctly rounded (checked against scipy).
    assert S.nemenyi_q(k, alpha) == pytest.approx(table[k - 2], abs=1.1e-3)


def test_nadeau_bengio_corrected_t():
    # Nadeau & Bengio (2003), Machine Learning 52; 10-fold CV so n_test/n_train = 1/9
    # (Bouckaert & Frank 2004, PAKDD). Check values: the corrected t of Nadeau & Bengio (2003),
    # Machine Learning 52, Sec. 5, recomputed here by hand; the naive paired t from scipy.
    d = np.array([0.02, 0.01, 0.03, -0.01, 0.02, 0, 0.04, 0.01, 0.02, 0.01])
    res = S.corrected_t(d, S.cv_test_train_ratio(10))
    assert res.t == pytest.approx(2.2770, abs=5e-5)
    assert res.p_value == pytest.approx(0.0488, abs=5e-5)
    assert res.df == 9
    naive = sps.ttest_1samp(d, 0.0)
    assert naive.statistic == pytest.approx(3.3085, abs=5e-5)
    # The interval excludes 0 exactly when p < alpha.
    assert res.ci_low > 0


# ---------------------------------------------------------------------- scipy crosschecks
@pytest.mark.parametrize("shape", [(6, 3), (12, 5)])
def test_friedman_matches_scipy_without_ties(shape, rng):
    means = frame(rng.random(shape))  # continuous draws: no ties
    m = S.score_matrix(make_results(means, n_folds=2, n_repeats=1), "lr", "roc_auc")
    ours = S.friedman_test(m.ranks)
    ref = sps.friedmanchisquare(*m.scores.to_numpy().T)  # scipy, tie correction inert here
    assert ours.chi2 == pytest.approx(ref.statistic, rel=1e-12)
    assert ours.p_value == pytest.approx(ref.pvalue, rel=1e-10)


def test_friedman_tie_correction_matches_scipy(rng):
    values = np.round(rng.random((8, 4)), 1)
    values[0, :2] = values[1, 1:] = 0.5  # force ties
    m = S.score_matrix(make_results(frame(values), n_folds=2, n_repeats=1), "lr", "roc_auc")
    ours = S.friedman_test(m.ranks, tie_correction=True)
    ref = sps.friedmanchisquare(*m.scores.to_numpy().T)  # scipy applies the tie correction
    assert ours.chi2 == pytest.approx(ref.statistic, rel=1e-12)
    assert S.friedman_test(m.ranks).chi2 < ours.chi2  # Demšar's formula has no correction


def test_wilcoxon_matches_scipy(rng):
    means = frame(rng.random((10, 3)))
    m = S.score_matrix(make_results(means, n_folds=2, n_repeats=1), "lr", "roc_auc")
    out = S.wilcoxon_vs_control(m, "e0")
    for enc in ("e1", "e2"):
        ref = sps.wilcoxon(m.scores[enc] - m.scores["e0"], zero_method="zsplit")
        assert out.loc[enc, "p_value"] == pytest.approx(ref.pvalue, rel=1e-12)
    np.testing.assert_allclose(out["p_holm"], S.holm(out["p_value"]))


def test_holm_by_hand():
    # Holm (1979), Scand. J. Statistics 6: sorted p .01, .03, .04 -> .03, .06, .06 (m = 3).
    np.testing.assert_allclose(S.holm([0.01, 0.04, 0.03, np.nan]), [0.03, 0.06, 0.06, np.nan])


# --------------------------------------------------------------------- Bayesian signed-rank
def test_bayes_signed_rank_expectation_matches_dirichlet_moments():
    # Benavoli et al. (2017), JMLR 18(77); E[w_i w_j] = a_i a_j / (A(A+1)) for i != j and
    # a_i (a_i + 1) / (A(A+1)) for i = j (moments of the Dirichlet distribution, standard result;
    # used by Benavoli et al. 2017, JMLR 18(77), Sec. 5).
    z = np.array([0.03, -0.02, 0.015, 0.0, 0.05, -0.005])
    rope, s = 0.01, 0.5
    res = S.bayesian_signed_rank(z, rope, prior_strength=s, n_samples=100_000, seed=1)
    zz = np.concatenate(([0.0], z))
    a = np.concatenate(([s], np.ones(z.size)))
    big_a = a.sum()
    moments = np.outer(a, a) / (big_a * (big_a + 1))
    moments[np.diag_indices_from(moments)] = a * (a + 1) / (big_a * (big_a + 1))
    pair = zz[:, None] + zz[None, :]
    exact_left = np.sum(moments * (pair < -2 * rope))
    exact_right = np.sum(moments * (pair > 2 * rope))
    np.testing.assert_allclose(res.theta_mean, [exact_left, 1 - exact_left - exact_right, exact_right], atol=3e-3)
    assert res.p_left + res.p_rope + res.p_right == pytest.approx(1.0)


@pytest.mark.parametrize("sign, field", [(1, "p_right"), (-1, "p_left")])
def test_bayes_signed_rank_clear_difference(sign, field, rng):
    z = sign * (0.05 + 0.01 * rng.random(20))  # every dataset favours one side by 5 ropes
    res = S.bayesian_signed_rank(z, 0.01, seed=2)
    assert getattr(res, field) > 0.99


def test_bayes_signed_rank_all_inside_rope():
    res = S.bayesian_signed_rank(np.full(15, 0.001), 0.01, seed=3)
    assert res.p_rope > 0.99
    assert np.isnan(S.bayesian_signed_rank([], 0.01).p_rope)


# ---------------------------------------------------------------- intervals on the table
def test_summarize_cells_uses_corrected_interval(rng):
    means = frame([[0.8, 0.7]])
    df = make_results(means, n_folds=5, n_repeats=2, noise=0.02, rng=rng)
    out = S.summarize_cells(df, metrics=["roc_auc"])
    row = out.loc[out["encoder"] == "e0"].iloc[0]
    vals = df.loc[df["encoder"] == "e0", "roc_auc"].to_numpy()
    # Bouckaert & Frank (2004), PAKDD: n_test/n_train = 400/1600 = 1/(k-1) for k = 5.
    ref = S.corrected_t(vals, 1 / 4)
    assert (row["n"], row["mean"]) == (10, pytest.approx(ref.mean))
    assert (row["ci_low"], row["ci_high"]) == (pytest.approx(ref.ci_low), pytest.approx(ref.ci_high))


def test_summarize_cells_without_size_columns_uses_fold_count(rng):
    df = make_results(frame([[0.8]]), n_folds=4, noise=0.02, rng=rng)
    a = S.summarize_cells(df, metrics=["roc_auc"])
    b = S.summarize_cells(df.drop(columns=["n_train", "n_test"]), metrics=["roc_auc"])
    assert b["ratio"].iloc[0] == pytest.approx(1 / 3) == a["ratio"].iloc[0]


def test_paired_corrected_t_on_table(rng):
    df = make_results(frame([[0.8, 0.78]]), metric="rmse", noise=0.01, rng=rng)
    res = S.paired_corrected_t(df, dataset="d0", model="lr", encoder_a="e0", encoder_b="e1", metric="rmse")
    wide = df.pivot_table(index=["repeat", "fold"], columns="encoder", values="rmse")
    ref = S.corrected_t(-(wide["e0"] - wide["e1"]), 1 / 4)  # rmse: smaller is better
    assert res.t == pytest.approx(ref.t) and res.n == 10
    assert np.isnan(
        S.paired_corrected_t(df, dataset="d0", model="lr", encoder_a="e0", encoder_b="nope", metric="rmse").t
    )


# ------------------------------------------------------------------------- score matrix
@pytest.mark.parametrize("metric, best", [("roc_auc", "e2"), ("rmse", "e0")])
def test_score_matrix_ranks_orientation_and_ties(metric, best):
    means = frame([[0.5, 0.7, 0.9], [0.6, 0.6, 0.8]])
    m = S.score_matrix(make_results(means, metric=metric), "lr", metric)
    assert m.ranks.loc["d0"].idxmin() == best
    # Demšar (2006), Sec. 3.2.2: tied encoders share the average of their ranks.
    tied = m.ranks.loc["d1", ["e0", "e1"]].to_numpy()
    np.testing.assert_allclose(tied, [2.5, 2.5] if metric == "roc_auc" else [1.5, 1.5])
    np.testing.assert_allclose(m.ranks.sum(axis=1), 6.0)


@pytest.mark.parametrize(
    "policy, n_datasets, encoders, dropped",
    [("drop_datasets", 2, ("e0", "e1", "e2"), ("d1",)), ("drop_encoders", 3, ("e0", "e2"), ("e1",))],
)
def test_missing_cell_policy(policy, n_datasets, encoders, dropped):
    means = frame([[0.5, 0.7, 0.9], [0.6, np.nan, 0.8], [0.7, 0.6, 0.5]])
    m = S.score_matrix(make_results(means), "lr", "roc_auc", missing=policy)
    assert m.n_datasets == n_datasets and m.encoders == encoders
    assert (m.dropped_datasets or m.dropped_encoders) == dropped
    assert m.missing_cells.to_dict("records") == [{"dataset": "d1", "encoder": "e1"}]


@pytest.mark.parametrize(
    "holes, kept_datasets, kept_encoders",
    [
        # one hole: dropping d1 keeps 2x3 = 6 cells, dropping e1 keeps 3x2 = 6: tie -> datasets
        ([(1, 1)], 2, 3),
        # e1 fails on two of three datasets: dropping e1 keeps 3x2 = 6 cells, datasets 1x3 = 3
        ([(0, 1), (1, 1)], 3, 2),
    ],
)
def test_auto_missing_policy_keeps_the_larger_complete_block(holes, kept_datasets, kept_encoders):
    values = np.array([[0.5, 0.7, 0.9], [0.6, 0.65, 0.8], [0.7, 0.6, 0.5]])
    for i, j in holes:
        values[i, j] = np.nan
    m = S.score_matrix(make_results(frame(values)), "lr", "roc_auc")  # default: auto
    assert (m.n_datasets, len(m.encoders)) == (kept_datasets, kept_encoders)


def test_not_applicable_metric_is_not_a_missing_cell():
    clf = make_results(frame([[0.5, 0.7]], datasets=["clf"]))
    reg = make_results(frame([[1.0, 2.0]], datasets=["reg"]), metric="rmse")
    m = S.score_matrix(pd.concat([clf, reg], ignore_index=True), "lr", "roc_auc")
    assert m.not_applicable == ("reg",) and m.dropped_datasets == () and m.n_datasets == 1


def test_unknown_missing_policy_and_metric_raise():
    df = make_results(frame([[0.5, 0.7]]))
    with pytest.raises(ConfigError, match="`missing` must be one of"):
        S.score_matrix(df, "lr", "roc_auc", missing="impute")
    with pytest.raises(ConfigError, match="unknown metric 'auc'; allowed:"):
        S.score_matrix(df, "lr", "auc")


def test_missing_required_column_raises():
    with pytest.raises(DataError, match=r"lacks column\(s\) \['status'\]"):
        S.ok_rows(pd.DataFrame({"dataset": [], "encoder": [], "model": []}))


# ---------------------------------------------------------------- comparisons and ranks
def test_average_ranks_bootstrap_is_seeded_and_brackets_mean(rng):
    m = S.score_matrix(make_results(frame(rng.random((12, 4)))), "lr", "roc_auc")
    a = S.average_ranks(m, n_boot=500, seed=7)
    b = S.average_ranks(m, n_boot=500, seed=7)
    pd.testing.assert_frame_equal(a, b)
    assert ((a["ci_low"] <= a["avg_rank"]) & (a["avg_rank"] <= a["ci_high"])).all()
    assert a["avg_rank"].is_monotonic_increasing


def test_compare_encoders_all_ties():
    m = S.score_matrix(make_results(frame(np.full((6, 3), 0.7))), "lr", "roc_auc")
    comp = S.compare_encoders(m, n_boot=100, rope=0.01)
    assert comp.friedman.chi2 == 0.0 and comp.friedman.f_p_value == 1.0
    np.testing.assert_allclose(comp.ranks["avg_rank"], 2.0)
    assert (comp.pairwise["wilcoxon_p"] == 1.0).all()
    assert (comp.pairwise["ties"] == 6).all() and (comp.pairwise["p_rope"] > 0.99).all()
    agg = S.aggregate_scores(m)
    assert (agg["mean_normalised"] == 1.0).all() and (agg["win_rate"] == 1.0).all()


@pytest.mark.parametrize("n_datasets", [0, 1])
def test_compare_encoders_too_few_datasets_returns_nan(n_datasets):
    means = frame([[0.6, 0.7]] * max(n_datasets, 1))
    df = make_results(means)
    if n_datasets == 0:
        df["status"] = "failed"
    m = S.score_matrix(df, "lr", "roc_auc")
    comp = S.compare_encoders(m, n_boot=50)
    assert np.isnan(comp.friedman.chi2) and np.isnan(comp.critical_difference)
    assert any("tests need at least 2" in c for c in comp.caveats)


def test_compare_encoders_pairwise_columns_and_cd(rng):
    base = rng.random((10, 1)) * 0.1 + 0.7
    means = frame(np.hstack([base + 0.05, base, base - 0.05]))
    comp = S.compare_encoders(S.score_matrix(make_results(means), "lr", "roc_auc"), n_boot=200)
    assert comp.best == "e0"
    assert comp.pairwise.loc["e2", "losses"] == 10 and comp.pairwise.loc["e2", "beyond_cd"]
    # Demšar (2006): rank difference 2 vs CD q_.05(3) sqrt(3*4/(6*10)).
    assert comp.critical_difference == pytest.approx(S.nemenyi_q(3) * np.sqrt(12 / 60))
    with pytest.raises(ConfigError, match="control encoder 'zz' is not among"):
        S.control_z_test(comp.ranks["avg_rank"], 10, "zz")


def test_win_tie_loss_tolerance():
    means = frame([[0.80, 0.805, 0.70], [0.80, 0.795, 0.90]])
    m = S.score_matrix(make_results(means), "lr", "roc_auc")
    out = S.win_tie_loss(m, "e0", tol=0.01)
    assert out.loc["e1"].tolist() == [0, 2, 0] and out.loc["e2"].tolist() == [1, 0, 1]


# ----------------------------------------------------------------------- aggregations
def test_aggregations_and_top_encoders():
    means = frame([[0.9, 0.8, 0.5], [0.6, 0.7, 0.5], [0.9, 0.9, 0.1]])
    agg = S.aggregate_scores(S.score_matrix(make_results(means), "lr", "roc_auc"))
    # d0: (0.9-0.5)/(0.9-0.5)=1, (0.8-0.5)/0.4=0.75; d1: 0.5, 1; d2: 1, 1.
    np.testing.assert_allclose(agg["mean_normalised"], [2.5 / 3, 2.75 / 3, 0.0])
    np.testing.assert_allclose(agg["win_rate"], [2 / 3, 2 / 3, 0.0])
    assert S.top_encoders(agg, "mean_normalised") == ("e1",)
    assert S.top_encoders(agg, "win_rate") == ("e0", "e1")
    with pytest.raises(ConfigError, match="`aggregation` must be one of"):
        S.top_encoders(agg, "best")


@pytest.mark.parametrize(
    "card, regime", [(9, "low"), (10, "medium"), (100, "medium"), (101, "high"), (np.nan, "unknown")]
)
def test_cardinality_regime_bounds(card, regime):
    assert S.cardinality_regime([card]).tolist() == [regime]


def test_cardinality_regime_rejects_bad_thresholds():
    with pytest.raises(ConfigError, match="low <= high; got low=50, high=20"):
        S.cardinality_regime([3], low=50, high=20)


# -------------------------------------------------------------------------------- cost
def test_cost_table_relative_to_reference():
    df = make_results(frame([[0.7, 0.8]]), seconds={"e0": 1.0, "e1": 3.0}, features={"e0": 10, "e1": 40})
    out = S.cost_table(df, reference="e0").set_index("encoder")
    assert out.loc["e1", "encoder_s"] == pytest.approx(3.0)
    assert out.loc["e1", "encoder_s_rel"] == pytest.approx(3.0)
    assert out.loc["e1", "total_s_rel"] == pytest.approx(5.0 / 3.0)
    assert out.loc["e1", "n_features_out_rel"] == pytest.approx(4.0)
    assert out.loc["e0", "encoded_mb_rel"] == pytest.approx(1.0)
    with pytest.raises(ConfigError, match="reference encoder 'zz' is not in the results"):
        S.cost_table(df, reference="zz")
