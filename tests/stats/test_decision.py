"""The decision rule: verdicts, the choice with cost savings, invariances, one dataset."""

from __future__ import annotations

import numpy as np
import pytest

from harness import stats as S

from stats_tools import table

RULE = S.DecisionRule(reference="ref")
# invented per-dataset effects for 10 datasets (synthetic demo data)
CLOSE = np.array([0.004, -0.002, 0.003, 0.001, -0.001, 0.002, 0.0015, 0.0005, 0.0025, -0.0005])
WORSE = -0.04 + np.linspace(-0.005, 0.005, 10)
BETTER = 0.03 + np.linspace(-0.004, 0.004, 10)
NOISY = np.linspace(-0.05, 0.05, 10)


def _decide(df, rule=RULE, metric=S.POOLED):
    return S.decide(df, "m", metric, rule)


def test_verdicts_follow_the_one_sided_tests():
    d = _decide(table({"close": CLOSE, "worse": WORSE, "better": BETTER, "noisy": NOISY}))
    v = d.table["verdict"]
    assert v["close"] == "equivalent"
    assert v["better"] == "superior"
    assert v["worse"] == "inferior"
    assert v["noisy"] == "inconclusive"
    assert v["ref"] == "reference"
    # Holm across the 4 candidates: 10 positive shifted effects give p = 2^-10 each
    assert d.table.loc["close", "p_ni_holm"] == pytest.approx(4 * 2.0**-10)


def test_a_cheaper_noninferior_candidate_is_chosen_and_the_sentence_numbers_are_its_own():
    df = table({"cheap": CLOSE, "pricey": BETTER}, seconds={"ref": 3.0, "cheap": 1.0, "pricey": 6.0})
    d = _decide(df)
    assert d.choice == ("cheap",)
    row = d.table.loc["cheap"]
    assert row["cost_ratio"] == pytest.approx(2.0 / 4.0)  # (1 + 1 s) / (3 + 1 s) per dataset
    assert row["saving_s"] == pytest.approx(2.0)


def test_too_small_a_saving_keeps_the_reference():
    df = table({"cheap": CLOSE}, seconds={"ref": 1.2, "cheap": 1.0})  # 2.0 vs 2.2 s: 9 %
    d = _decide(df)
    assert d.choice == ("ref",) and not d.switch
    assert d.table.loc["cheap", "verdict"] == "equivalent"


def test_a_significantly_better_and_cheaper_candidate_is_not_excluded():
    # a two-sided 'significantly different' used to read as 'not equivalent'
    d = _decide(table({"better": BETTER}, seconds={"ref": 3.0, "better": 1.0}))
    assert d.choice == ("better",)
    assert d.table.loc["better", "verdict"] == "superior"


def test_leaky_settings_are_never_chosen():
    df = table({"leak": BETTER}, seconds={"ref": 3.0, "leak": 0.1}, leaky=("leak",))
    d = _decide(df)
    assert d.choice == ("ref",)
    assert not d.table.loc["leak", "eligible"]


def test_exact_cost_ties_go_to_quality_then_features_and_a_remaining_tie_is_stated():
    secs = {"ref": 3.0, "a": 1.0, "b": 1.0}
    d = _decide(table({"a": CLOSE, "b": CLOSE + 0.001}, seconds=secs))
    assert d.choice == ("b",)  # same cost: the larger effect wins, not config order
    d = _decide(table({"a": CLOSE, "b": CLOSE}, seconds=secs, features={"a": 5, "b": 9}))
    assert d.choice == ("a",)
    d = _decide(table({"a": CLOSE, "b": CLOSE}, seconds=secs))
    assert d.choice == ("a", "b") and any("tie" in n for n in d.notes)


def test_the_choice_does_not_depend_on_config_order():
    secs = {"ref": 3.0, "a": 1.0, "b": 1.0}
    one = _decide(table({"a": CLOSE, "b": CLOSE + 0.001}, seconds=secs))
    two = _decide(table({"b": CLOSE + 0.001, "a": CLOSE}, seconds=secs))
    assert one.choice == two.choice


def test_irrelevant_alternatives_do_not_change_the_choice():
    base = {"cheap": CLOSE, "worse": WORSE, "noisy": NOISY, "better": BETTER}
    secs = {"ref": 3.0, "cheap": 1.0, "worse": 0.5, "noisy": 0.7, "better": 4.0, "extra": 9.0}
    full = _decide(table(base, seconds=secs))
    assert full.choice == ("cheap",)
    for gone in ("worse", "noisy", "better"):  # neither the reference nor the choice
        rest = {k: v for k, v in base.items() if k != gone}
        assert _decide(table(rest, seconds=secs)).choice == ("cheap",), gone
    added = _decide(table({**base, "extra": CLOSE - 0.002}, seconds=secs))
    assert added.choice == ("cheap",)


def test_candidates_that_cannot_save_enough_cost_never_move_the_choice():
    # a cost-saving candidate close to the margin: its Holm p must not grow when encoders
    # that cannot replace the reference on cost (slower, or saving < 20 %) join the run
    borderline = np.array([0.003, -0.012, 0.002, 0.004, -0.009, 0.001, 0.003, 0.002, -0.011, 0.005])
    secs = {"ref": 3.0, "cheap": 1.0}
    alone = _decide(table({"cheap": borderline}, seconds=secs))
    row = alone.table.loc["cheap"]
    for k in range(1, 6):  # up to five slower, noisy encoders
        extra = {f"slow{i}": NOISY + 0.001 * i for i in range(k)}
        secs_k = {**secs, **{f"slow{i}": 5.0 + i for i in range(k)}}
        d = _decide(table({"cheap": borderline, **extra}, seconds=secs_k))
        assert d.choice == alone.choice, k
        assert d.table.loc["cheap", "p_ni_holm"] == row["p_ni_holm"], k
        assert d.table.loc["cheap", "lower"] == row["lower"], k
        assert set(d.table.loc[list(extra), "family"]) == {"other"}
    assert alone.table.loc["cheap", "family"] == "switch"


def _write_decision(df, path):
    d = S.decide(df, "m", S.POOLED, RULE)
    S.decision_table([d]).to_csv(path, index=False, float_format="%.10g")
    return path.read_bytes()


def test_rescaling_a_regression_target_gives_an_identical_decision_csv(tmp_path):
    # two of the ten datasets are regression (RMSE); multiplying their target by 1000
    # multiplies every RMSE by 1000, which must change nothing in the decision
    df = table({"cheap": CLOSE, "noisy": NOISY}, seconds={"ref": 3.0, "cheap": 1.0}, regression=("d1", "d4"))
    scaled = df.copy()
    rows = scaled["primary_metric"] == "rmse"
    scaled.loc[rows, "rmse"] *= 1000.0
    scaled = S.pool_task_score(scaled)
    a = _write_decision(df, tmp_path / "a.csv")
    b = _write_decision(scaled, tmp_path / "b.csv")
    assert a == b
    # the old pooled raw-difference test ranked RMSE differences in their own units
    raw = S.score_matrix(df, "m", S.POOLED).oriented
    raw_scaled = S.score_matrix(scaled, "m", S.POOLED).oriented
    assert not np.allclose((raw["noisy"] - raw["ref"]).rank(), (raw_scaled["noisy"] - raw_scaled["ref"]).rank())


def test_one_dataset_uses_fold_pairs_and_reproduces_nadeau_bengio():
    # fold effects equal to the Nadeau & Bengio (2003) differences; 10 folds, ratio 1/9
    nb = np.array([0.02, 0.01, 0.03, -0.01, 0.02, 0, 0.04, 0.01, 0.02, 0.01])
    noise = {"ref": [np.zeros(10)], "cand": [nb]}
    df = table({"cand": [0.0]}, n_folds=10, fold_noise=noise)
    d = S.decide(df, "m", S.POOLED, S.DecisionRule(reference="ref", margin=0.005))
    row = d.table.loc["cand"]
    assert d.method == "folds" and row["n_folds"] == 10
    assert row["p_sup_holm"] == pytest.approx(0.0488 / 2, abs=5e-5)  # one-sided corrected t
    # Corani & Benavoli (2015): P(delta < -0.005) = 1 - 0.992946
    assert row["prob_worse"] == pytest.approx(1 - 0.992946, abs=1e-6)
    assert row["effect"] == pytest.approx(nb.mean())


def test_reference_from_the_data_is_the_best_average_rank_and_said_so():
    d = S.decide(table({"better": BETTER, "worse": WORSE}), "m", S.POOLED, S.DecisionRule())
    assert d.reference == "better" and d.reference_from_data


def test_configured_reference_without_scores_falls_back_with_a_note():
    df = table({"a": CLOSE})
    d = S.decide(df, "m", S.POOLED, S.DecisionRule(reference="native"))
    assert d.reference in ("a", "ref") and any("native" in n for n in d.notes)


def test_missing_cells_never_drop_the_reference_or_the_choice():
    df = table({"cheap": CLOSE, "full": CLOSE}, seconds={"ref": 3.0, "cheap": 1.0})
    df.loc[(df["encoder"] == "ref") & (df["dataset"] == "d0"), "status"] = "failed"
    df.loc[(df["encoder"] == "cheap") & (df["dataset"] == "d1"), "status"] = "failed"
    d = _decide(df)
    assert d.table.loc["cheap", "n_datasets"] == 8  # paired with the reference on 8
    m = S.score_matrix(S.eligible_rows(df)[0], "m", S.POOLED, keep=("ref", "cheap"))
    assert {"ref", "cheap"} <= set(m.encoders) and set(m.dropped_datasets) == {"d0", "d1"}


def test_rule_text_is_generated_from_its_numbers():
    text = S.DecisionRule(margin=0.02, alpha=0.1, min_saving=0.3, min_saving_s=0.5).describe()
    for piece in (
        "−2 %",
        "α = 0.1",
        "at least 30 %",
        "0.5 s per fold",
        "Holm-adjusted within its family",
        "never changes the choice",
    ):
        assert piece in text


def test_missing_cell_policy_never_drops_the_best_encoder():
    # the best encoder fails on one dataset: dropping it would keep more cells, but the
    # policy drops that dataset instead (and says so)
    df = table({"best": BETTER, "a": CLOSE, "b": WORSE})
    gone = (df["encoder"] == "best") & df["dataset"].isin(["d3", "d5", "d7"])
    df.loc[gone, "status"] = "failed"
    # 7 complete datasets x 4 encoders = 28 cells < 10 datasets x 3 encoders = 30 cells
    m = S.score_matrix(df, "m", S.POOLED)
    assert "best" in m.encoders and m.dropped_datasets == ("d3", "d5", "d7")
    other = table({"best": BETTER, "a": CLOSE, "b": WORSE})  # a weak encoder may go
    other.loc[(other["encoder"] == "b") & other["dataset"].isin(["d3", "d5", "d7"]), "status"] = "failed"
    assert S.score_matrix(other, "m", S.POOLED).dropped_encoders == ("b",)


def test_a_lower_bound_above_the_margin_always_means_noninferior(rng):
    # the bounds are simultaneous (alpha / m): lower > -margin implies raw p <= alpha / m,
    # hence a Holm-adjusted p <= alpha (Holm 1979); checked over random invented studies
    for _ in range(8):  # loop over simulated studies
        effects = {f"c{j}": rng.normal(rng.uniform(-0.02, 0.02), 0.01, 12) for j in range(4)}
        t = _decide(table(effects)).table.drop(index="ref")
        above = t["lower"] > -RULE.margin
        assert t.loc[above, "verdict"].isin(S.SHOWN_NOT_WORSE).all()
        assert (t.loc[above, "p_ni_holm"] < RULE.alpha).all()
