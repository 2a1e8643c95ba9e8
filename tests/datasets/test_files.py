"""The `file` source: CSV and Parquet by suffix, private, alias as the shown name."""

import numpy as np
import pandas as pd
import pytest

from harness.datasets import load, params_of
from harness.datasets._files import load_file
from harness.errors import ConfigError, DataError


@pytest.fixture
def table(seed):
    """Tiny invented table; `code` mixes integers and strings, as CSV exports often do."""
    rng = np.random.default_rng(seed)
    n = 40
    return pd.DataFrame(
        {
            "id": np.arange(n),
            "shop": rng.choice(["north", "south", "east"], n),
            "code": pd.Series(rng.choice([10, 20, "A7"], n).tolist(), dtype=object),
            "spend": rng.gamma(2.0, 10.0, n).round(2),
            "churned": rng.choice(["yes", "no"], n),
        }
    )


def _write(table, tmp_path, suffix):
    path = tmp_path / f"customers{suffix}"
    if suffix == ".csv":
        table.to_csv(path, index=False)
    else:
        table.astype({"code": str}).to_parquet(path, index=False)
    return path


@pytest.mark.parametrize("suffix", [".csv", ".parquet", ".pq"])
def test_reads_by_suffix_and_marks_private(table, tmp_path, suffix):
    path = _write(table, tmp_path, suffix)
    ds = load("file", "my_customers", path=str(path), target="churned", drop=["id"])
    assert ds.private is True
    assert ds.name == "my_customers"
    assert ds.source == f"file:customers{suffix}"
    assert ds.categorical == ("shop", "code") and ds.numeric == ("spend",)
    assert ds.task == "binary" and len(ds.X) == 40
    assert set(map(type, ds.X["code"])) == {str}  # mixed ints/strings read back as one type
    assert set(ds.fingerprint["class_counts"]) == {"class_0", "class_1"}  # no raw labels


def test_csv_and_parquet_give_the_same_content(table, tmp_path):
    a = load_file(path=str(_write(table, tmp_path, ".csv")), target="churned", drop=["id"])
    b = load_file(path=str(_write(table, tmp_path, ".parquet")), target="churned", drop=["id"])
    assert a.fingerprint["checksum"] == b.fingerprint["checksum"]


def test_alias_replaces_the_file_name(table, tmp_path):
    path = _write(table, tmp_path, ".csv")
    ds = load("file", "label", path=str(path), target="churned", alias="client A")
    assert ds.name == "client A" and ds.source == "file"
    assert load_file(path=str(path), target="churned").name == "customers"


def test_unreadable_path_names_path_and_key(tmp_path):
    missing = tmp_path / "nope.csv"
    with pytest.raises(
        DataError, match=r"dataset 'x' \(source 'file'\): cannot read the file at `path` = '.*nope.csv'"
    ):
        load("file", "x", path=str(missing), target="y")


def test_unknown_suffix_lists_the_allowed_ones(tmp_path):
    with pytest.raises(ConfigError, match=r"`path` must end in one of .csv, .parquet, .pq.*got '.*data.xlsx'"):
        load_file(path=str(tmp_path / "data.xlsx"), target="y")


def test_missing_target_lists_columns(table, tmp_path):
    path = _write(table, tmp_path, ".csv")
    with pytest.raises(
        DataError, match=r"`target` names column\(s\) 'churn' .*Available columns: id, shop, code, spend, churned"
    ):
        load("file", "x", path=str(path), target="churn")


def test_keys_are_the_shared_table_keys():
    keys = params_of("file")
    assert list(keys) == [
        "path",
        "delimiter",
        "target",
        "categorical",
        "numeric",
        "drop",
        "task",
        "group",
        "sample_rows",
        "seed",
        "alias",
    ]
    assert keys["path"].default is keys["target"].default  # both required (empty)
    assert keys["seed"].default == 0 and keys["seed"].annotation is int
