"""One config and seed give bit-identical numbers however they are run: in the driver
(--jobs 1), in forked workers (--jobs 2), on a local Dask cluster (2 spawned worker
processes, each with its own string-hash seed), and again after --fresh."""

from __future__ import annotations

import numpy as np
import pytest

from harness.cli import main
from harness.config import parse_config
from harness.runner import execute, plan

from _runtools import RESULT_COLUMNS, assert_same_results, results_by_cell, write_config


def _raw(seed: int = 11) -> dict:
    return {
        "experiment": {"name": "determinism", "seed": seed},
        "protocol": {"folds": 2, "repeats": 1},
        "datasets": {
            # invented scenarios: a churn flag and a basket value
            "churn": {
                "source": "synthetic",
                "n_rows": 500,
                "cardinalities": [6, 80],
                "task": "binary",
                "noise_column": 30,
                "seed": 3,
            },
            "basket": {
                "source": "synthetic",
                "n_rows": 400,
                "cardinalities": [5, 40],
                "task": "multiclass",
                "n_classes": 3,
                "seed": 4,
            },
        },
        "encoders": {
            "integer": {"kind": "integer"},
            "onehot": {"kind": "onehot"},
            "hashing": {"kind": "hashing", "width": 32},
            "frequency": {"kind": "frequency"},
            "target": {"kind": "target", "crossfit": "kfold"},  # seeded inner folds
            "drop": {"kind": "drop"},
            "native": {"kind": "native"},
        },
        "models": {
            "lin": {"family": "linear"},
            "gb": {"family": "boosting", "max_iter": 20},
            "lgbm": {"family": "lightgbm", "n_estimators": 20},
            "forest": {"family": "forest", "n_estimators": 20},  # seeded bootstrap and splits
        },
    }


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    out = tmp_path_factory.mktemp("jobs1")
    execute(plan(parse_config(_raw())), out, jobs=1, progress=False)
    return out, results_by_cell(out)


def test_the_reference_has_numbers_to_compare(reference):
    out, df = reference
    assert len(df) == 2 * 7 * 4 * 2
    assert set(df["status"]) == {"ok", "not-applicable"}
    assert df.loc[df["status"] == "ok", "log_loss"].notna().all()


@pytest.mark.slow
def test_two_forked_workers_match_the_driver(reference, tmp_path):
    execute(plan(parse_config(_raw())), tmp_path, jobs=2, progress=False)
    assert_same_results(results_by_cell(tmp_path), reference[1])


@pytest.mark.slow
def test_local_dask_cluster_matches_the_driver(reference, tmp_path):
    summary = execute(plan(parse_config(_raw())), tmp_path, jobs=2, backend="dask", progress=False)
    assert summary.computed == len(reference[1])
    assert_same_results(results_by_cell(tmp_path), reference[1])


def test_rerun_after_fresh_matches(reference, tmp_path, capsys):
    out, df = reference
    config = write_config(tmp_path / "determinism.toml", _raw())
    assert main(["run", str(config), "--out", str(out), "--quiet", "--fresh"]) == 0
    assert f"({len(df)} computed, 0 reused)" in capsys.readouterr().out
    assert (out / "kept-1" / "results.sqlite").exists()
    assert_same_results(results_by_cell(out), df)


def test_another_seed_changes_the_numbers(reference, tmp_path):
    """Otherwise 'identical' would prove nothing: the seed reaches splits, encoders, models."""
    execute(plan(parse_config(_raw(seed=12))), tmp_path, progress=False)
    other, df = results_by_cell(tmp_path), reference[1]
    ok = df["status"] == "ok"
    a = df.loc[ok].set_index(["dataset", "encoder", "model"])["roc_auc"].sort_index()
    b = other.loc[other["status"] == "ok"].set_index(["dataset", "encoder", "model"])["roc_auc"].sort_index()
    assert not np.array_equal(a.to_numpy(), b.to_numpy())
    assert set(RESULT_COLUMNS) <= set(df.columns)
