"""The results format: status words and the typed, versioned manifest (``harness.schema``)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from harness.errors import StoreError
from harness.schema import (
    MANIFEST_VERSION,
    NOT_RUN,
    OK,
    RENAMED_PROTOCOL_KEYS,
    RETRY_STATUSES,
    SCHEMA_VERSION,
    STATUSES,
    TEMPLATED_STATUSES,
    Manifest,
    ProtocolRecord,
)
from harness.tuning import DEFAULT_REGIME

#: manifests the committed samples shipped before the manifest recorded its version (taken
#: from the repository's history when the samples were regenerated with versioned ones)
OLD_MANIFESTS = Path(__file__).resolve().parent / "old_manifests"


def test_status_words_are_one_set():
    assert STATUSES == (OK, "failed", "timeout", "out-of-memory", "skipped", "not-applicable")
    assert set(NOT_RUN) == set(STATUSES) - {OK}
    assert set(RETRY_STATUSES) <= set(NOT_RUN) and set(TEMPLATED_STATUSES) <= set(NOT_RUN)


@pytest.mark.parametrize(
    "sample, regimes, n_datasets",
    [("team-default", (DEFAULT_REGIME,), 15), ("tuned-sample", (DEFAULT_REGIME, "tuned-model"), 6)],
)
def test_the_committed_manifests_without_a_version_are_read(sample, regimes, n_datasets):
    raw = json.loads((OLD_MANIFESTS / f"{sample}.json").read_text(encoding="utf-8"))
    assert "manifest_version" not in raw  # written before the version was recorded
    man = Manifest.from_dict(raw)
    assert man.version == 1 and man.experiment == sample and man.config_hash == raw["config_hash"]
    assert man.protocol.classification_metric == "roc_auc" and man.protocol.regression_metric == "rmse"
    assert man.protocol.medium_levels == (10, 100) and man.protocol.folds == 5
    assert man.regimes == regimes and len(man.datasets) == n_datasets
    assert man.decision["reference"] == "onehot" and man.grouping_recorded
    assert list(man.models) == list(raw["models"]) and man.packages == raw["packages"]
    assert all(d.rows and d.task for d in man.datasets.values())


@pytest.mark.parametrize("where", ["protocol", "config"])
def test_protocol_keys_are_read_under_the_new_name_then_the_old(where):
    old = {
        RENAMED_PROTOCOL_KEYS[k]: v
        for k, v in {
            "classification_metric": "log_loss",
            "regression_metric": "mae",
            "medium_levels": [12, 345],
        }.items()
    }
    raw = {"protocol": old} if where == "protocol" else {"config": {"protocol": old}}
    assert Manifest.from_dict(raw).protocol == ProtocolRecord(
        classification_metric="log_loss", regression_metric="mae", medium_levels=(12, 345)
    )
    both = {"protocol": {**old, "medium_levels": [20, 30]}, "manifest_version": MANIFEST_VERSION}
    assert Manifest.from_dict(both).protocol.medium_levels == (20, 30)


def test_a_manifest_missing_sections_reads_as_unrecorded():
    man = Manifest.from_dict({"datasets": {"a": {"task": "binary"}}})
    assert man.protocol == ProtocolRecord() and man.seed is None and man.cpus is None
    assert not man.grouping_recorded and man.datasets["a"].rows is None
    assert man.regimes == (DEFAULT_REGIME,) and man.decision == {} and man.search_spaces("models") == {}


def test_aliases_private_datasets_and_renaming():
    man = Manifest.from_dict(
        {"datasets": {"mine": {"private": True}, "open": {}}, "config": {"datasets": {"mine": {"alias": "clinic"}}}}
    )
    assert man.aliases == {"mine": "clinic", "open": "open"} and man.private_datasets == ("mine",)
    renamed = man.with_dataset_names(man.aliases)
    assert list(renamed.datasets) == ["clinic", "open"] and renamed.datasets["clinic"].private


@pytest.mark.parametrize(
    "raw, match",
    [
        (
            {"manifest_version": MANIFEST_VERSION + 1},
            f"manifest version {MANIFEST_VERSION + 1}, which this harness does not read",
        ),
        ({"manifest_version": "2"}, "manifest version '2'"),
        ([1, 2], "not a JSON object .got list."),
    ],
)
def test_unknown_versions_and_non_objects_are_refused(raw, match):
    with pytest.raises(StoreError, match=match):
        Manifest.from_dict(raw)


def test_the_report_refuses_a_manifest_of_a_newer_version(tmp_path):
    from harness.reporting import load_run
    from harness.store import Store

    with Store(tmp_path) as store:
        store.write(
            [
                {
                    "cell_id": "c",
                    "schema_version": SCHEMA_VERSION,
                    "dataset": "d",
                    "encoder": "e",
                    "model": "m",
                    "repeat": 0,
                    "fold": 0,
                    "status": OK,
                    "error": "",
                }
            ]
        )
    (tmp_path / "manifest.json").write_text(json.dumps({"manifest_version": MANIFEST_VERSION + 1}))
    with pytest.raises(StoreError, match=rf"the manifest .*manifest.json: manifest version {MANIFEST_VERSION + 1}"):
        load_run(tmp_path)
