"""The `openml` source, offline: the test builds a cache in the client's own layout.

There is no network here, and the tests make sure none is used: the client's two
download functions and socket connections are replaced by ones that fail. The cache
layout and the XML shapes below follow what openml-python 0.15 reads (its
``datasets/functions.py``, ``datasets/dataset.py``, ``tasks/functions.py`` and
``tasks/split.py``): ``<root>/org/openml/www/datasets/<id>/description.xml``,
``features.xml``, ``qualities.xml``, ``dataset_<id>.pq`` or ``dataset.arff``, and
``<root>/org/openml/www/tasks/<id>/task.xml`` with ``datasplits.arff``.
"""

import contextlib
import csv
import os
import socket
from pathlib import Path
from xml.sax.saxutils import escape

import numpy as np
import openml
import openml._api_calls
import pandas as pd
import pytest
import requests
from sklearn.model_selection import RepeatedStratifiedKFold

from harness.datasets import load, params_of
from harness.datasets._openml import kept_cache, load_openml
from harness.errors import ConfigError, DataError

NS = 'xmlns:oml="http://openml.org/openml"'
NOMINAL = ("checking_status", "purpose", "class")
DATASET_PQ, DATASET_ARFF, TASK, CLUSTER_TASK = 990001, 990002, 990101, 990102


@pytest.fixture
def credit(seed):
    """Invented credit applications shaped like a small OpenML classification dataset."""
    rng = np.random.default_rng(seed)
    n = 90
    checking = rng.choice(["<0", "0<=X<200", ">=200", "no checking"], n)
    purpose = rng.choice(
        ["radio/tv", "new car", "used car", "furniture/equipment", "business", "education", "repairs", "retraining"], n
    )
    duration = rng.integers(6, 60, n)
    score = (checking == "<0") + duration / 30 + rng.normal(0, 1, n)
    frame = pd.DataFrame(
        {
            "id": np.arange(n),
            "checking_status": checking,
            "purpose": purpose,
            "credit_amount": rng.gamma(2.0, 1500.0, n).round(0),
            "duration": duration,
            "class": np.where(score > np.median(score), "bad", "good"),
        }
    )
    frame.loc[5, "purpose"] = None
    return frame


# --- the cache, written as the client would have left it ---------------------------------


def _www(root: Path) -> Path:
    return root / "org" / "openml" / "www"  # the default server's host, reversed


def _description(did: int, target: str | None, parquet: bool) -> str:
    pq = (
        f"<oml:parquet_url>http://minio.openml.invalid/datasets/{did}/dataset_{did}.pq</oml:parquet_url>"
        if parquet
        else ""
    )
    default = f"<oml:default_target_attribute>{target}</oml:default_target_attribute>" if target else ""
    return f"""<oml:data_set_description {NS}>
  <oml:id>{did}</oml:id>
  <oml:name>credit-mini</oml:name>
  <oml:version>1</oml:version>
  <oml:description>Invented credit applications for an offline test.</oml:description>
  <oml:format>ARFF</oml:format>
  <oml:upload_date>2024-01-01T00:00:00</oml:upload_date>
  <oml:licence>Public</oml:licence>
  <oml:url>https://api.openml.invalid/data/v1/download/{did}/credit-mini.arff</oml:url>
  {pq}
  {default}
  <oml:row_id_attribute>id</oml:row_id_attribute>
  <oml:visibility>public</oml:visibility>
  <oml:status>active</oml:status>
</oml:data_set_description>
"""


def _features(frame: pd.DataFrame) -> str:
    parts = []
    for i, column in enumerate(frame.columns):
        kind = "nominal" if column in NOMINAL else "numeric"
        levels = sorted(frame[column].dropna().unique()) if kind == "nominal" else []
        values = "".join(f"<oml:nominal_value>{escape(str(v))}</oml:nominal_value>" for v in levels)
        parts.append(
            f"<oml:feature><oml:index>{i}</oml:index><oml:name>{column}</oml:name>"
            f"<oml:data_type>{kind}</oml:data_type>{values}"
            f"<oml:is_target>{str(column == 'class').lower()}</oml:is_target><oml:is_ignore>false</oml:is_ignore>"
            f"<oml:is_row_identifier>{str(column == 'id').lower()}</oml:is_row_identifier>"
            f"<oml:number_of_missing_values>{int(frame[column].isna().sum())}</oml:number_of_missing_values></oml:feature>"
        )
    return f"<oml:data_features {NS}>\n" + "\n".join(parts) + "\n</oml:data_features>\n"


def _qualities(frame: pd.DataFrame) -> str:
    values = {
        "NumberOfInstances": len(frame),
        "NumberOfFeatures": frame.shape[1],
        "NumberOfClasses": frame["class"].nunique(),
    }
    body = "".join(
        f"<oml:quality><oml:name>{k}</oml:name><oml:value>{v}</oml:value></oml:quality>" for k, v in values.items()
    )
    return f"<oml:data_qualities {NS}>{body}</oml:data_qualities>\n"


def _arff(frame: pd.DataFrame) -> str:
    header = ["@RELATION credit-mini", ""]
    for column in frame.columns:
        if column in NOMINAL:
            levels = ",".join(f"'{v}'" for v in sorted(frame[column].dropna().unique()))
            header.append(f"@ATTRIBUTE '{column}' {{{levels}}}")
        else:
            header.append(f"@ATTRIBUTE '{column}' NUMERIC")
    body = frame.astype(object)
    for column in NOMINAL:
        body[column] = ("'" + body[column].astype(str) + "'").where(frame[column].notna(), "?")
    text = body.to_csv(header=False, index=False, quoting=csv.QUOTE_NONE, escapechar="\\")
    return "\n".join(header + ["", "@DATA"]) + "\n" + text


def write_dataset(
    root: Path, did: int, frame: pd.DataFrame, *, parquet: bool, data: bool = True, target="class"
) -> Path:
    folder = _www(root) / "datasets" / str(did)
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "description.xml").write_text(_description(did, target, parquet))
    (folder / "features.xml").write_text(_features(frame))
    (folder / "qualities.xml").write_text(_qualities(frame))
    if data and parquet:
        frame.astype({c: "category" for c in NOMINAL}).to_parquet(folder / f"dataset_{did}.pq", index=False)
    elif data:
        (folder / "dataset.arff").write_text(_arff(frame))
    return folder


def _task_xml(tid: int, did: int, repeats: int, folds: int) -> str:
    # shape of a supervised classification task description (value recalled from memory of
    # the server's task XML, checked against what tasks/functions.py parses)
    return f"""<oml:task {NS}>
  <oml:task_id>{tid}</oml:task_id>
  <oml:task_type_id>1</oml:task_type_id>
  <oml:task_type>Supervised Classification</oml:task_type>
  <oml:input name="source_data">
    <oml:data_set><oml:data_set_id>{did}</oml:data_set_id><oml:target_feature>class</oml:target_feature></oml:data_set>
  </oml:input>
  <oml:input name="estimation_procedure">
    <oml:estimation_procedure>
      <oml:id>1</oml:id>
      <oml:type>crossvalidation</oml:type>
      <oml:data_splits_url>https://api.openml.invalid/api_splits/get/{tid}/Task_{tid}_splits.arff</oml:data_splits_url>
      <oml:parameter name="number_repeats">{repeats}</oml:parameter>
      <oml:parameter name="number_folds">{folds}</oml:parameter>
      <oml:parameter name="percentage"></oml:parameter>
      <oml:parameter name="stratified_sampling">true</oml:parameter>
    </oml:estimation_procedure>
  </oml:input>
  <oml:input name="evaluation_measures">
    <oml:evaluation_measures><oml:evaluation_measure>predictive_accuracy</oml:evaluation_measure></oml:evaluation_measures>
  </oml:input>
</oml:task>
"""


def _splits_arff(pairs: list) -> str:
    """``type, rowid, repeat, fold`` lines, as the server's datasplits file has them."""
    frames = [
        pd.DataFrame({"type": kind, "rowid": rows, "repeat": repeat, "fold": fold})
        for repeat, fold, train, test in pairs
        for kind, rows in (("TRAIN", train), ("TEST", test))
    ]
    header = "@RELATION splits\n\n@ATTRIBUTE type {TRAIN,TEST}\n@ATTRIBUTE rowid INTEGER\n"
    header += "@ATTRIBUTE repeat INTEGER\n@ATTRIBUTE fold INTEGER\n\n@DATA\n"
    return header + pd.concat(frames).to_csv(header=False, index=False)


def write_task(root: Path, tid: int, did: int, frame: pd.DataFrame, seed: int, repeats=2, folds=3) -> list:
    cv = RepeatedStratifiedKFold(n_splits=folds, n_repeats=repeats, random_state=seed)
    pairs = [(i // folds, i % folds, tr, te) for i, (tr, te) in enumerate(cv.split(frame, frame["class"]))]
    folder = _www(root) / "tasks" / str(tid)
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "task.xml").write_text(_task_xml(tid, did, repeats, folds))
    (folder / "datasplits.arff").write_text(_splits_arff(pairs))
    return pairs


@contextlib.contextmanager
def _client_root(root: Path):
    previous = openml.config.get_config_as_dict()["cachedir"]
    openml.config.set_root_cache_directory(root)
    try:
        yield
    finally:
        openml.config.set_root_cache_directory(previous)


def _snapshot(folder: Path) -> dict:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


# --- no network ----------------------------------------------------------------------------


@pytest.fixture
def offline(monkeypatch):
    """Fail every way the client could reach a server, at once and without retries."""

    def unreachable(*args, **kwargs):
        raise requests.exceptions.ConnectionError("network disabled in tests")

    monkeypatch.setattr(openml._api_calls, "_send_request", unreachable)
    monkeypatch.setattr(openml._api_calls, "_download_minio_file", unreachable)
    monkeypatch.setattr(socket.socket, "connect", unreachable)
    return unreachable


@pytest.fixture
def cache(tmp_path, credit, seed):
    write_dataset(tmp_path, DATASET_PQ, credit, parquet=True)
    write_dataset(tmp_path, DATASET_ARFF, credit, parquet=False)
    pairs = write_task(tmp_path, TASK, DATASET_PQ, credit, seed)
    return tmp_path, pairs


# --- tests ---------------------------------------------------------------------------------


@pytest.mark.parametrize("did", [DATASET_PQ, DATASET_ARFF], ids=["parquet", "arff"])
def test_dataset_id_loads_from_cache_offline(cache, credit, offline, did):
    root, _ = cache
    before = openml.config.get_config_as_dict()["cachedir"]
    ds = load("openml", "credit", dataset_id=did, cache_dir=str(root))
    assert ds.name == "credit" and ds.source == f"openml:{did}" and ds.splits is None
    assert ds.categorical == ("checking_status", "purpose") and ds.numeric == ("credit_amount", "duration")
    assert "id" not in ds.X.columns  # the row-id attribute is left out by the client
    assert ds.task == "binary"
    assert ds.fingerprint["class_counts"] == credit["class"].value_counts().sort_index().to_dict()
    assert ds.X["purpose"].isna().sum() == 1
    assert openml.config.get_config_as_dict()["cachedir"] == before  # the client's setting is restored


def test_parquet_and_arff_give_the_same_content(cache, offline):
    root, _ = cache
    a = load_openml(dataset_id=DATASET_PQ, cache_dir=str(root))
    b = load_openml(dataset_id=DATASET_ARFF, cache_dir=str(root))
    assert a.fingerprint == b.fingerprint


def test_task_id_uses_the_task_splits(cache, credit, offline):
    root, pairs = cache
    ds = load("openml", "credit_task", task_id=TASK, cache_dir=str(root))
    assert ds.source == f"openml:task/{TASK}" and ds.task == "binary"
    assert len(ds.splits) == len(pairs) == 6  # 2 repeats x 3 folds, in repeat-major order
    for (train, test), (_, _, want_train, want_test) in zip(ds.splits, pairs):
        np.testing.assert_array_equal(np.sort(train), want_train)
        np.testing.assert_array_equal(np.sort(test), want_test)
    assert ds.fingerprint == load_openml(dataset_id=DATASET_PQ, cache_dir=str(root)).fingerprint


def test_task_splits_follow_dropped_rows(cache, credit, offline):
    root, pairs = cache
    ds = load("openml", "credit_task", task_id=TASK, cache_dir=str(root), sample_rows=60, seed=1)
    assert len(ds.X) == 60
    covered = np.sort(np.concatenate([test for _, test in ds.splits[:3]]))  # one repeat's test folds
    np.testing.assert_array_equal(covered, np.arange(60))
    assert "predefined splits were restricted to the rows that remain" in ds.notes


def test_network_failure_keeps_the_cache(tmp_path, credit, offline):
    # description and features are cached, the data file is not: the client tries to
    # download it, fails, and (unguarded) deletes the whole folder
    folder = write_dataset(tmp_path, DATASET_PQ, credit, parquet=True, data=False)
    before = _snapshot(folder)
    with pytest.raises(
        DataError,
        match=r"dataset 'c' \(source 'openml'\): the OpenML server could not be reached while loading "
        r"dataset 990001 .*The local cache was kept",
    ):
        load("openml", "c", dataset_id=DATASET_PQ, cache_dir=str(tmp_path))
    assert _snapshot(folder) == before
    assert not [p for p in _www(tmp_path).iterdir() if p.name.startswith(".harness-kept-")]


def test_network_failure_keeps_task_and_dataset_cache(tmp_path, credit, offline, seed):
    folder = write_dataset(tmp_path, DATASET_PQ, credit, parquet=False, data=False)
    write_task(tmp_path, TASK, DATASET_PQ, credit, seed)
    task_folder = _www(tmp_path) / "tasks" / str(TASK)
    before = (_snapshot(folder), _snapshot(task_folder))
    with pytest.raises(DataError, match=r"could not be reached while loading task 990101"):
        load_openml(task_id=TASK, cache_dir=str(tmp_path))
    assert (_snapshot(folder), _snapshot(task_folder)) == before


def test_unguarded_client_would_have_wiped_it(tmp_path, credit, offline):
    """The hazard the guard exists for, shown on the client itself."""
    folder = write_dataset(tmp_path, DATASET_PQ, credit, parquet=True, data=False)
    with _client_root(tmp_path), pytest.raises(requests.exceptions.ConnectionError):
        openml.datasets.get_dataset(DATASET_PQ, download_data=True)
    assert not folder.exists()


def test_kept_cache_restores_and_cleans_up(tmp_path):
    with _client_root(tmp_path):
        folder = Path(openml.config.get_cache_directory()) / "datasets" / "1"
        folder.mkdir(parents=True)
        (folder / "description.xml").write_text("kept")
        with pytest.raises(RuntimeError, match="boom"), kept_cache(folder):
            (folder / "description.xml").unlink()
            raise RuntimeError("boom")
        assert (folder / "description.xml").read_text() == "kept"
        with kept_cache(folder):
            (folder / "new.xml").write_text("added")
        assert sorted(os.listdir(folder)) == ["description.xml", "new.xml"]
        assert sorted(os.listdir(folder.parent.parent)) == ["datasets"]  # no stash left behind


def test_server_refusal_is_reported(tmp_path, monkeypatch):
    def refuse(*args, **kwargs):
        raise openml.exceptions.OpenMLServerException("Unknown dataset", code=111)

    monkeypatch.setattr(openml._api_calls, "_send_request", refuse)
    with pytest.raises(DataError, match=r"OpenML refused dataset 424242: .*Unknown dataset.* \(code 111\)"):
        load_openml(dataset_id=424242, cache_dir=str(tmp_path))


def test_corrupt_data_file_is_a_client_failure(tmp_path, credit, offline):
    folder = write_dataset(tmp_path, DATASET_PQ, credit, parquet=True, data=False)
    (folder / f"dataset_{DATASET_PQ}.pq").write_bytes(b"not parquet")
    with pytest.raises(
        DataError, match=r"the OpenML client failed while loading dataset 990001: .*The local cache was kept"
    ):
        load_openml(dataset_id=DATASET_PQ, cache_dir=str(tmp_path))
    assert (folder / f"dataset_{DATASET_PQ}.pq").read_bytes() == b"not parquet"


def test_non_supervised_task_is_refused(cache, offline):
    root, _ = cache
    folder = _www(root) / "tasks" / str(CLUSTER_TASK)
    folder.mkdir(parents=True)
    (folder / "task.xml").write_text(
        f"""<oml:task {NS}><oml:task_id>{CLUSTER_TASK}</oml:task_id><oml:task_type_id>5</oml:task_type_id>
  <oml:task_type>Clustering</oml:task_type>
  <oml:input name="source_data"><oml:data_set><oml:data_set_id>{DATASET_PQ}</oml:data_set_id></oml:data_set></oml:input>
</oml:task>"""
    )
    with pytest.raises(DataError, match=r"OpenML task 990102 is a .*Clustering task; only supervised"):
        load_openml(task_id=CLUSTER_TASK, cache_dir=str(root))


@pytest.mark.parametrize(
    ("keys", "pattern"),
    [
        ({}, r"needs exactly one of `dataset_id` and `task_id`; got dataset_id=None, task_id=None"),
        ({"dataset_id": DATASET_PQ, "task_id": TASK}, r"needs exactly one of `dataset_id` and `task_id`"),
        ({"task_id": TASK, "target": "purpose"}, r"OpenML task 990101 predicts 'class' but `target` is 'purpose'"),
    ],
)
def test_id_and_target_rules(cache, offline, keys, pattern):
    root, _ = cache
    with pytest.raises(ConfigError, match=pattern):
        load_openml(cache_dir=str(root), **keys)


@pytest.mark.parametrize(
    ("default", "pattern"),
    [(None, "no default target"), ("class,purpose", r"several default targets \(class,purpose\)")],
)
def test_default_target_must_be_one_column(tmp_path, credit, offline, default, pattern):
    write_dataset(tmp_path, DATASET_PQ, credit, parquet=True, target=default)
    with pytest.raises(ConfigError, match=rf"OpenML dataset 990001 \('credit-mini'\) has {pattern}; set `target`"):
        load_openml(dataset_id=DATASET_PQ, cache_dir=str(tmp_path))
    assert load_openml(dataset_id=DATASET_PQ, cache_dir=str(tmp_path), target="class").task == "binary"


def test_other_target_by_dataset_id(cache, offline):
    root, _ = cache
    ds = load_openml(dataset_id=DATASET_PQ, cache_dir=str(root), target="checking_status")
    assert ds.task == "multiclass" and "class" in ds.categorical


def test_keys():
    keys = params_of("openml")
    assert list(keys)[:4] == ["dataset_id", "task_id", "cache_dir", "target"]
    assert keys["target"].default is None and "alias" in keys
