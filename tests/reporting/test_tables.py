"""Tables: numbers recomputed from the results, formatting, LaTeX export, scrubbing."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps

from harness import stats
from harness.reporting import tables

from reporting_fakes import fake_results


def test_dataset_means_match_a_direct_corrected_t(results):
    long = tables.dataset_means_table(results, "roc_auc")
    row = long.query("dataset == 'd1' and encoder == 'te' and model == 'lin'").iloc[0]
    x = results.query("dataset == 'd1' and encoder == 'te'")["roc_auc"].to_numpy()
    # Nadeau & Bengio (2003), Machine Learning 52: se = sqrt(1/J + n_test/n_train) * s;
    # Bouckaert & Frank (2004), PAKDD: J = k*r; here n_test/n_train = 100/200
    half = sps.t.ppf(0.975, x.size - 1) * np.sqrt(1 / x.size + 0.5) * x.std(ddof=1)
    assert row["mean"] == pytest.approx(x.mean())
    assert row["ci_low"] == pytest.approx(x.mean() - half)
    assert row["ci_high"] == pytest.approx(x.mean() + half)
    assert row["n"] == 3


def test_means_wide_orders_encoders_and_formats_intervals(results):
    long = tables.dataset_means_table(results, "roc_auc")
    wide = tables.means_wide(long, "lin", encoder_order=["te", "onehot", "codes"])
    assert list(wide.columns) == ["dataset", "te", "onehot", "codes"]
    assert wide["te"].str.fullmatch(r"\d\.\d{3} \[\d\.\d{3}, \d\.\d{3}\]").all()


@pytest.mark.parametrize(
    "mean, low, high, expected",
    [(0.8123, 0.79, 0.834, "0.812 [0.790, 0.834]"), (0.5, np.nan, np.nan, "0.500"), (np.nan, np.nan, np.nan, "n/a")],
)
def test_fmt_interval(mean, low, high, expected):
    assert tables.fmt_interval(mean, low, high) == expected


def test_rank_table_marks_reference_and_choice(results):
    comp = stats.compare_encoders(stats.score_matrix(results, "lin", "roc_auc"), n_boot=200)
    dec = stats.decide(results, "lin", "roc_auc")
    t = tables.rank_table([comp], {("lin", "roc_auc"): dec})
    assert t.loc[t["chosen"], "encoder"].tolist() == list(dec.choice)
    assert t.loc[t["reference"], "encoder"].item() == dec.reference
    # te has the largest planted skill: rank 1 on every dataset (Demšar 2006, Sec. 3.2.2)
    assert t.set_index("encoder").loc["te", "avg_rank"] == 1.0


def test_pooled_means_are_in_each_dataset_own_units(rng):
    cls = fake_results(rng, n_datasets=2)
    reg = fake_results(rng, n_datasets=2, task="regression").assign(
        dataset=lambda d: d["dataset"].str.replace("d", "r")
    )
    df = stats.pool_task_score(pd.concat([cls, reg], ignore_index=True))
    long = tables.dataset_means_table(df, stats.POOLED)
    rmse = long.loc[long["dataset"].str.startswith("r")]
    assert (rmse["mean"] > 0).all() and set(rmse["metric"]) == {"rmse"}  # not negated
    wide = tables.means_wide(long, "lin", excluded=["codes"])
    assert "codes (excluded)" in wide.columns


def test_status_table_groups_and_scrubs(rng):
    df = fake_results(rng, n_datasets=2)
    bad = df["encoder"] == "codes"
    df.loc[bad, "status"] = "failed"
    df.loc[bad, "error"] = "EncoderInputError: unseen level 'SECRET_VALUE' in column c"
    table = tables.status_table(df, private=["d0"])
    assert set(table["cells"]) == {3}
    text = table.to_string()
    assert "SECRET_VALUE" in table.loc[table["datasets"] == "d1", "reason"].item()
    hidden = table.loc[table["datasets"] == "d0", "reason"].item()
    assert hidden == "EncoderInputError (message withheld: private dataset)"
    assert "d0" in text


def test_scrub_keeps_templated_messages():
    error = pd.Series(["cell exceeded the time limit of 1 s (cell_timeout_s)", "boom 'x'"])
    status = pd.Series(["timeout", "failed"])
    out = tables.scrub_error(error, status, pd.Series([True, True]))
    assert out[0] == error[0]
    assert out[1] == "error (message withheld: private dataset)"


def test_latex_is_booktabs_and_escaped():
    frame = pd.DataFrame(
        {"encoder": ["te_none", "a&b"], "gap": [0.12345, np.nan], "n": [3.0, 4.0], "flag": [True, False]}
    )
    tex = tables.to_latex(frame, "Gap 50% (≠)", "tab:x")
    assert r"\toprule" in tex and r"\midrule" in tex and r"\bottomrule" in tex
    assert r"\begin{tabular}{lrrl}" in tex
    assert r"te\_none" in tex and r"a\&b" in tex and r"50\%" in tex and r"$\neq$" in tex
    assert "0.123" in tex and " 3 " in tex and "yes" in tex


def test_write_table_writes_both(tmp_path, results):
    csv, tex = tables.write_table(tables.cost_summary(results), tmp_path, "cost", caption="c")
    back = pd.read_csv(csv)
    assert len(back) == 3 and tex.read_text().startswith(r"\begin{table}")


def test_cost_summary_sorted_by_total(results):
    c = tables.cost_summary(results)
    assert c["total_s"].is_monotonic_increasing


def test_cost_columns_add_up_and_feature_counts_are_whole(rng):
    df = fake_results(rng, n_datasets=1, encoders=("a", "b"), folds=4)
    # skewed timings: the median of each fold's sum is not the sum of the medians
    df["encoder_fit_s"], df["encoder_transform_s"] = [1, 2, 3, 100] * 2, 0.0
    df["model_fit_s"] = [100, 3, 2, 1] * 2
    df["n_features_out"] = [10, 11, 12, 13] * 2  # median 11.5: not a count any fold had
    df.loc[df.index[-1], "status"] = "failed"  # b: three scored cells
    c = tables.cost_summary(df).set_index("encoder")
    assert c.loc["a", "total_s"] == pytest.approx(c.loc["a", "encoder_s"] + c.loc["a", "model_fit_s"])
    assert c.loc["a", ["encoder_s", "model_fit_s", "total_s"]].tolist() == [2.5, 2.5, 5.0]
    assert c.loc["a", "n_features_out"] == 11 and pd.api.types.is_integer_dtype(c["n_features_out"])
    assert c["n_cells"].to_dict() == {"a": 4, "b": 3} and "n_rows" not in c
    shown = tables.display(c.reset_index())
    assert shown["n_features_out"].tolist() == ["11", "11"]
