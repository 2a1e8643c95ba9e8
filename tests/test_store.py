"""The results store: atomic unit writes, the run lock, refusal of damaged or foreign files."""

from __future__ import annotations

import sqlite3

import pytest

from harness.errors import StoreError
from harness.grid import SCHEMA_VERSION
from harness.store import Store, export, read_results


def _rows(n, status="ok"):
    return [
        {"cell_id": f"c{i}", "schema_version": SCHEMA_VERSION, "dataset": "d", "encoder": "e", "model": "m",
         "repeat": 0, "fold": i, "status": status, "roc_auc": 0.5 + i / 100, "error": ""}
        for i in range(n)
    ]


def test_write_resume_and_read(tmp_path):
    with Store(tmp_path) as store:
        store.write(_rows(3))
        assert store.done_ids() == {"c0", "c1", "c2"}
    with Store(tmp_path) as store:  # reopen: rows persist
        store.write(_rows(1, status="failed"))  # same cell id replaces, never duplicates
        assert len(store.frame()) == 3
    df = read_results(tmp_path)
    assert sorted(df["fold"]) == [0, 1, 2]
    assert df.loc[df["cell_id"] == "c0", "status"].item() == "failed"


def test_second_writer_is_refused(tmp_path):
    with Store(tmp_path):
        with pytest.raises(StoreError, match="another `harness run` is writing"):
            Store(tmp_path)
    Store(tmp_path).close()  # released on close


def test_damaged_file_is_refused_and_kept(tmp_path):
    path = tmp_path / "results.sqlite"
    with Store(tmp_path) as store:
        store.write(_rows(50))
    data = path.read_bytes()
    path.write_bytes(data[:1500] + b"\x00garbage" * 200)
    before = path.read_bytes()
    with pytest.raises(StoreError, match="is damaged .*Nothing was changed"):
        Store(tmp_path)
    assert path.read_bytes() == before


def test_truncated_file_is_refused(tmp_path):
    path = tmp_path / "results.sqlite"
    with Store(tmp_path) as store:
        store.write(_rows(200))
    path.write_bytes(path.read_bytes()[:3000])
    with pytest.raises(StoreError, match="damaged|schema version"):
        read_results(tmp_path)


def test_other_schema_version_is_refused(tmp_path):
    with Store(tmp_path) as store:
        store.write(_rows(1))
    db = sqlite3.connect(tmp_path / "results.sqlite")
    db.execute("UPDATE meta SET value='0' WHERE key='schema_version'")
    db.commit()
    db.close()
    with pytest.raises(StoreError, match=f"schema version 0, this harness reads version {SCHEMA_VERSION}"):
        Store(tmp_path)


def test_fresh_keeps_old_file_aside(tmp_path):
    with Store(tmp_path) as store:
        store.write(_rows(2))
    with Store(tmp_path, fresh=True) as store:
        assert store.done_ids() == set()
    assert (tmp_path / "results.sqlite.old").exists()


def test_missing_store_and_bad_export_suffix(tmp_path):
    with pytest.raises(StoreError, match="no results store"):
        read_results(tmp_path / "nothing")
    with Store(tmp_path) as store:
        store.write(_rows(1))
    with pytest.raises(StoreError, match="suffix must be .csv or .parquet"):
        export(read_results(tmp_path), tmp_path / "x.xlsx")
