"""Runs written before the config keys were renamed still report correctly.

The manifest the committed sample ``results/tuned-sample`` shipped before the renames
(``tests/old_manifests/tuned-sample.json``) holds the earlier names (``primary``,
``primary_regression``, ``cardinality_bands`` under ``protocol``; ``max_rows`` under
``config.datasets``); every reader takes the new name first, then the old one.
"""

from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import pytest

from harness import stats
from harness.reporting import write_report
from harness.reporting._analysis import analyse
from harness.reporting._run import RENAMED_PROTOCOL_KEYS, Run, protocol_setting

from reporting_fakes import fake_results

SAMPLE = Path(__file__).resolve().parents[2] / "results" / "tuned-sample"
OLD_MANIFEST = Path(__file__).resolve().parents[1] / "old_manifests" / "tuned-sample.json"


@pytest.fixture(scope="module")
def old_report(tmp_path_factory) -> tuple[dict, str]:
    """The committed tuned sample with its earlier manifest, reported: (manifest, report.md)."""
    out = tmp_path_factory.mktemp("old_names") / "tuned-sample"
    shutil.copytree(SAMPLE, out, ignore=shutil.ignore_patterns("report", "results.sqlite*", "results.csv"))
    shutil.copy(OLD_MANIFEST, out / "manifest.json")
    write_report(out)
    manifest = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
    return manifest, (out / "report" / "report.md").read_text(encoding="utf-8")


def test_the_committed_sample_holds_the_old_names(old_report):
    manifest, _ = old_report
    for block in (manifest["protocol"], manifest["config"]["protocol"]):
        assert set(RENAMED_PROTOCOL_KEYS.values()) <= set(block)
        assert not set(RENAMED_PROTOCOL_KEYS) & set(block)
    assert all("max_rows" in d for d in manifest["config"]["datasets"].values())


def test_the_report_of_old_names_states_the_medium_band(old_report):
    _, text = old_report
    assert (
        "Cardinality regimes, by each dataset's categorical column with the most levels: "
        "10 to 100 levels (inclusive) is medium, fewer is low, more is high."
    ) in text


def test_the_report_of_old_names_names_the_metrics(old_report):
    _, text = old_report
    flat = " ".join(text.split())
    assert "Each dataset was scored on the primary metric of its task: ROC AUC for classification" in flat
    assert "RMSE for regression" in flat
    # the headline is the pooled score: each dataset on its own metric, in the task order
    assert re.search(r"each dataset's own metric over 6 dataset\(s\) against the reference", flat)
    assert "primary metric (per dataset)" not in flat


@pytest.mark.parametrize(
    "key, default, value",
    [
        ("classification_metric", "roc_auc", "log_loss"),
        ("regression_metric", "rmse", "mae"),
        ("medium_levels", (10, 100), [12, 345]),
    ],
)
def test_protocol_settings_are_read_under_the_new_name_then_the_old(key, default, value):
    old = RENAMED_PROTOCOL_KEYS[key]
    assert protocol_setting({"protocol": {old: value}}, key, default) == value
    assert protocol_setting({"config": {"protocol": {old: value}}}, key, default) == value
    assert protocol_setting({"protocol": {key: value, old: default}}, key, default) == value
    assert protocol_setting({"protocol": {}}, key, default) == default
    assert protocol_setting({}, key, default) == default


@pytest.mark.parametrize(
    "protocol",
    [{"cardinality_bands": [12, 345]}, {"medium_levels": [12, 345], "cardinality_bands": [10, 100]}],
    ids=["old name", "new name first"],
)
def test_the_analysis_takes_the_medium_band_of_either_name(rng, tmp_path, protocol):
    df = fake_results(rng)
    run = Run(
        directory=tmp_path,
        results=stats.pool_task_score(df),
        manifest={"protocol": {"folds": 3, "repeats": 1, **protocol}},
    )
    a = analyse(run, n_boot=20)
    assert a.medium_levels == (12, 345)
    regimes = stats.dataset_regimes(df, low=12, high=345)
    assert a.regimes.equals(regimes)
