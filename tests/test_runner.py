"""End to end: a small config through the runner, the store, resume and the exports."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from harness.cli import main
from harness.config import parse_config
from harness.runner import execute, plan
from harness.schema import MANIFEST_VERSION, Manifest
from harness.store import read_results

from _runtools import tiny_config


def _raw(**extra_encoders):
    # invented scenario for a demo of every status: a loyalty-card signup table
    return {
        "experiment": {"name": "e2e", "seed": 1},
        "protocol": {"folds": 3, "repeats": 1},
        "datasets": {
            "signup": {
                "source": "synthetic",
                "n_rows": 300,
                "cardinalities": [4, 30],
                "task": "binary",
                "n_numeric": 1,
                "seed": 5,
            },
            "spend": {"source": "synthetic", "n_rows": 240, "cardinalities": [6], "task": "regression", "seed": 6},
        },
        "encoders": {
            "codes": {"kind": "integer"},
            "te": {"kind": "target", "crossfit": "kfold"},
            "native": {"kind": "native"},
            # weight of evidence needs a binary target: fails on the regression dataset by construction
            "woe": {"kind": "target", "statistic": "woe"},
            **extra_encoders,
        },
        "models": {
            "lin": {"family": "linear"},
            "gb": {"family": "boosting", "max_iter": 20},
            # skip_above_rows below the training-fold size: skipped by construction
            "svm": {"family": "svm", "skip_above_rows": 50},
            # an impossible time budget: timeout by construction
            "slow": {"family": "forest", "n_estimators": 400, "cell_timeout_s": 0.02},
        },
    }


@pytest.fixture
def ran(tmp_path):
    cfg = parse_config(_raw())
    summary = execute(plan(cfg), tmp_path, progress=False)
    return cfg, summary, tmp_path


def test_every_status_appears(ran):
    cfg, summary, out = ran
    df = read_results(out)
    assert len(df) == 2 * 4 * 4 * 3
    assert set(df["status"]) == {"ok", "failed", "timeout", "skipped", "not-applicable"}
    na = df[df["status"] == "not-applicable"]
    assert set(na["encoder"]) == {"native"} and set(na["model"]) == {"lin", "svm", "slow"}
    failed = df[df["status"] == "failed"]
    assert set(failed["dataset"]) == {"spend"} and set(failed["encoder"]) == {"woe"}
    assert (df.loc[df["status"] == "skipped", "model"] == "svm").all()
    assert (df.loc[df["status"] == "timeout", "model"] == "slow").all()


def test_rows_carry_metrics_costs_and_provenance(ran):
    cfg, summary, out = ran
    df = read_results(out)
    ok = df[df["status"] == "ok"]
    clf = ok[ok["task"] == "binary"]
    reg = ok[ok["task"] == "regression"]
    assert clf["roc_auc"].between(0, 1).all() and clf["train_roc_auc"].notna().all()
    assert reg["rmse"].gt(0).all() and reg["train_rmse"].notna().all() and reg["roc_auc"].isna().all()
    for col in (
        "encoder_fit_s",
        "encoder_transform_s",
        "model_fit_s",
        "predict_s",
        "n_features_out",
        "encoded_mb",
        "peak_rss_mb",
    ):
        assert ok[col].notna().all(), col
    assert (df["config_hash"] == cfg.hash).all()
    assert df["cell_id"].is_unique
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["config_hash"] == cfg.hash
    assert manifest["datasets"]["signup"]["fingerprint"]["rows"] == 300
    assert manifest["packages"]["scikit-learn"]
    assert manifest["manifest_version"] == MANIFEST_VERSION
    man = Manifest.from_dict(manifest)  # the typed record the report reads
    assert man.datasets["signup"].rows == 300
    assert man.protocol.classification_metric == cfg.protocol.classification_metric
    assert (out / "results.parquet").exists() and len(pd.read_csv(out / "results.csv")) == len(df)


def test_rerun_computes_nothing_and_new_encoder_only_new_cells(ran):
    cfg, summary, out = ran
    again = execute(plan(cfg), out, progress=False)
    assert again.computed == 0 and again.reused == summary.total
    bigger = parse_config(_raw(freq={"kind": "frequency"}))
    more = execute(plan(bigger), out, progress=False)
    assert more.computed == 2 * 4 * 3  # one encoder x 2 datasets x 4 models x 3 folds
    assert len(read_results(out)) == summary.total + more.computed


def test_same_config_and_seed_give_identical_metrics(ran, tmp_path_factory):
    cfg, summary, out = ran
    other = tmp_path_factory.mktemp("again")
    execute(plan(cfg), other, progress=False)
    a, b = (read_results(d).set_index("cell_id").sort_index() for d in (out, other))
    ok = a["status"] == "ok"
    for col in ("roc_auc", "log_loss", "rmse", "train_roc_auc", "n_features_out"):
        np.testing.assert_array_equal(a.loc[ok, col].to_numpy(), b.loc[ok, col].to_numpy())


def test_encode_once_per_unit(monkeypatch, tmp_path):
    """Every model of a unit trains on one encoding: count encoder fits."""
    from harness import cellwork

    calls = []
    real = cellwork._encode
    monkeypatch.setattr(cellwork, "_encode", lambda ds, job: calls.append(job.cells[0].unit) or real(ds, job))
    raw = _raw()
    raw["encoders"] = {"codes": {"kind": "integer"}, "te": {"kind": "target"}}
    summary = execute(plan(parse_config(raw)), tmp_path, progress=False)
    assert summary.computed == 2 * 2 * 4 * 3
    assert len(calls) == len(set(calls)) == 2 * 2 * 3  # datasets x encoders x folds, not x models


def test_cli_run_dry_run_status_export(tmp_path, capsys):
    cfg = tiny_config(tmp_path / "tiny.toml", n_rows=120, cardinalities=(5,))
    out = tmp_path / "out"
    assert main(["run", str(cfg), "--out", str(out), "--dry-run"]) == 0
    assert "1 dataset x 1 encoder x 1 model x 1 repeat x 2 folds = 2 cells; 2 to compute" in capsys.readouterr().out
    assert main(["run", str(cfg), "--out", str(out), "--quiet"]) == 0
    assert "2 cells (2 computed, 0 reused)" in capsys.readouterr().out
    assert main(["status", str(out)]) == 0
    assert "ok" in capsys.readouterr().out
    assert main(["export", str(out), "--to", str(tmp_path / "t.parquet")]) == 0
    assert len(pd.read_parquet(tmp_path / "t.parquet")) == 2


def test_drop_without_numeric_columns_scores_the_constant_baseline(tmp_path):
    raw = _raw()
    raw["datasets"] = {
        "spend": {
            "source": "synthetic",
            "n_rows": 120,
            "cardinalities": [6],
            "task": "regression",
            "n_numeric": 0,
            "seed": 6,
        }
    }
    raw["encoders"] = {"drop": {"kind": "drop"}}
    raw["models"] = {"lin": {"family": "linear"}, "gb": {"family": "boosting", "max_iter": 10}}
    execute(plan(parse_config(raw)), tmp_path, progress=False)
    df = read_results(tmp_path)
    assert (df["status"] == "ok").all() and (df["n_features_out"] == 0).all()
    assert df["r2"].le(0.05).all()  # a constant prediction explains (almost) nothing out of sample


def test_retry_failed_reruns_only_failed_cells(ran):
    cfg, summary, out = ran
    failed = (read_results(out)["status"].isin(["failed", "timeout"])).sum()
    again = execute(plan(cfg), out, progress=False, retry_failed=True)
    assert again.computed == failed
    assert len(read_results(out)) == summary.total


def test_rows_carry_the_encoder_declarations(ran):
    """``uses_target``/``leaky`` come from the encoder class, on every row (failed ones too)."""
    _, _, out = ran
    df = read_results(out)
    assert df["uses_target"].dtype == bool and df["leaky"].dtype == bool
    by_encoder = df.groupby("encoder")[["uses_target", "leaky"]].agg(["min", "max"])
    assert (by_encoder.xs("min", axis=1, level=1) == by_encoder.xs("max", axis=1, level=1)).all().all()
    flags = df.groupby("encoder")[["uses_target", "leaky"]].first().to_dict("index")
    assert flags == {
        "codes": {"uses_target": False, "leaky": False},
        "te": {"uses_target": True, "leaky": False},
        "native": {"uses_target": False, "leaky": False},
        "woe": {"uses_target": True, "leaky": False},
    }


def test_in_sample_target_statistics_are_recorded_leaky(tmp_path):
    raw = _raw(insample={"kind": "target", "crossfit": "none"}, loo={"kind": "target", "crossfit": "loo"})
    raw["encoders"] = {k: raw["encoders"][k] for k in ("codes", "insample", "loo")}
    raw["models"] = {"lin": {"family": "linear"}}
    raw["datasets"] = {"signup": raw["datasets"]["signup"]}
    execute(plan(parse_config(raw)), tmp_path, progress=False)
    df = read_results(tmp_path)
    assert df.groupby("encoder")["leaky"].all().to_dict() == {"codes": False, "insample": True, "loo": True}
