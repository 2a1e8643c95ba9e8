"""Invented results tables and run directories for the reporting tests.

``fake_results`` builds a table with the store's columns directly (fast, any shape);
``write_fake_run`` stores one as a run directory; :data:`SWEEP` is the small config the
real-pipeline tests run once per session.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd

from harness.grid import SCHEMA_VERSION
from harness.store import NAMES


def fake_results(
    rng,
    *,
    n_datasets=4,
    encoders=("onehot", "codes", "te"),
    models=("lin",),
    folds=3,
    task="binary",
    skill=None,
    leaky=(),
) -> pd.DataFrame:
    """An invented results table with the store's columns (tiny synthetic test data).

    ``skill`` maps an encoder to its true mean ROC AUC shift; ``leaky`` encoders get a
    large train-minus-test gap and ``crossfit="none"``.
    """
    skill = skill or {}
    keys = pd.MultiIndex.from_product(
        [[f"d{i}" for i in range(n_datasets)], list(encoders), list(models), range(folds)],
        names=["dataset", "encoder", "model", "fold"],
    ).to_frame(index=False)
    n = len(keys)
    df = pd.DataFrame({c: np.nan for c in NAMES}, index=range(n))
    df[["dataset", "encoder", "model", "fold"]] = keys
    df["repeat"] = 0
    df["cell_id"] = [f"c{i:05d}" for i in range(n)]
    df["schema_version"], df["config_hash"], df["status"], df["error"] = SCHEMA_VERSION, "h", "ok", ""
    df["task"] = task
    is_target = keys["encoder"].str.contains(r"(?:^|_)te", regex=True) | keys["encoder"].isin(list(leaky))
    df["encoder_kind"] = np.where(is_target, "target", keys["encoder"])
    df["encoder_params"] = np.where(
        keys["encoder"].isin(list(leaky)), '{"crossfit": "none"}', np.where(is_target, '{"crossfit": "kfold"}', "{}")
    )
    # the encoder declarations, as the runner records them
    df["uses_target"] = is_target.to_numpy()
    df["leaky"] = keys["encoder"].isin(list(leaky)).to_numpy()
    df["model_family"] = keys["model"]
    df["model_params"] = "{}"
    shift = keys["encoder"].map(lambda e: skill.get(e, 0.0)).to_numpy(float)
    level = 0.6 + 0.05 * keys["dataset"].str.slice(1).astype(int).to_numpy()
    if task == "regression":
        df["primary_metric"] = "rmse"
        df["rmse"] = 1.0 - shift + rng.normal(0, 0.01, n)
        df["train_rmse"] = df["rmse"] - 0.05 - np.where(keys["encoder"].isin(list(leaky)), 0.4, 0)
    else:
        df["primary_metric"] = "roc_auc"
        df["roc_auc"] = np.clip(level + shift + rng.normal(0, 0.01, n), 0, 1)
        df["log_loss"] = 0.7 - df["roc_auc"] / 2
        df["accuracy"] = df["roc_auc"] - 0.05
        df["balanced_accuracy"] = df["roc_auc"] - 0.06
        gap = 0.02 + np.where(keys["encoder"].isin(list(leaky)), 0.25, 0.0)
        df["train_roc_auc"] = np.clip(df["roc_auc"] + gap + rng.normal(0, 0.005, n), 0, 1)
    cost = 1.0 + np.arange(len(encoders))[pd.factorize(keys["encoder"])[0]]
    df["encoder_fit_s"] = 0.01 * cost
    df["encoder_transform_s"] = 0.002 * cost
    df["model_fit_s"] = 0.05 * cost
    df["predict_s"] = 0.001
    df["n_features_in"], df["n_features_out"] = 3, 3 * cost
    df["encoded_mb"], df["peak_rss_mb"] = 0.1 * cost, 200.0
    df["n_train"], df["n_test"] = 200, 100
    card = np.array([5, 40, 150, 12, 80, 300, 7, 20, 500, 60])
    df["max_cardinality"] = card[keys["dataset"].str.slice(1).astype(int).to_numpy() % 10]
    df["finished_at"] = "2026-01-01T00:00:00+00:00"
    return df


SWEEP = {
    "experiment": {"name": "reporting-sweep", "seed": 3, "description": "small sweep for the report tests"},
    "protocol": {"folds": 3, "repeats": 1},
    "datasets": {
        # invented synthetic data: three cardinality regimes and one regression target
        "few": {
            "source": "synthetic",
            "n_rows": 240,
            "cardinalities": [4, 6],
            "task": "binary",
            "seed": 1,
            "n_numeric": 1,
        },
        "some": {
            "source": "synthetic",
            "n_rows": 240,
            "cardinalities": [30],
            "task": "binary",
            "seed": 2,
            "n_numeric": 1,
        },
        "many": {
            "source": "synthetic",
            "n_rows": 300,
            "cardinalities": [160],
            "task": "binary",
            "seed": 3,
            "n_numeric": 1,
        },
        "amount": {
            "source": "synthetic",
            "n_rows": 240,
            "cardinalities": [25],
            "task": "regression",
            "seed": 4,
            "n_numeric": 1,
        },
    },
    "encoders": {
        "onehot": {"kind": "onehot"},
        "codes": {"kind": "integer"},
        "freq": {"kind": "frequency"},
        "te_kfold": {"kind": "target", "crossfit": "kfold"},
        "te_none": {"kind": "target", "crossfit": "none"},
    },
    "models": {"lin": {"family": "linear"}, "gb": {"family": "boosting", "max_iter": 15}},
}


def run_sweep(raw: dict, out) -> None:
    """Run a config dict through the real runner into ``out``."""
    from harness.config import parse_config
    from harness.runner import execute, plan

    execute(plan(parse_config(raw)), out, progress=False)


def write_fake_run(df: pd.DataFrame, out, *, private=(), aliases=None) -> None:
    """Store ``df`` as a run directory with a minimal manifest (no runner involved)."""
    from harness.store import Store

    aliases = aliases or {}
    with Store(out) as store:
        store.write(df.to_dict("records"))
    datasets = {
        d: {
            "source": "synthetic",
            "task": str(g["task"].iloc[0]),
            "private": d in private,
            "notes": [],
            "categorical": ["c"],
            "numeric": [],
            "fingerprint": {
                "rows": 300,
                "cardinality": {"c": int(g["max_cardinality"].max())},
                "max_cardinality": int(g["max_cardinality"].max()),
            },
        }
        for d, g in df.groupby("dataset")
    }
    manifest = {
        "experiment": "fake",
        "config_hash": "h",
        "seed": 0,
        "started": "s",
        "finished": "f",
        "config": {"datasets": {d: ({"alias": aliases[d]} if d in aliases else {}) for d in datasets}},
        "packages": {"python": "3"},
        "machine": {"cpus": 1},
        "datasets": datasets,
        "encoders": {e: {"kind": k} for e, k in zip(df["encoder"], df["encoder_kind"])},
        "models": {m: {"family": f} for m, f in zip(df["model"], df["model_family"])},
        "protocol": {"folds": 3, "repeats": 1, "medium_levels": [10, 100]},
    }
    (out / "manifest.json").write_text(json.dumps(manifest))
