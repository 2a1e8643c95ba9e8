"""The results store: atomic unit writes, the run lock, refusal of damaged or foreign files."""

from __future__ import annotations

import sqlite3

import pytest

from harness.errors import OutputError, StoreError
from harness.grid import SCHEMA_VERSION
from harness.schema import COLUMNS, FILLED_ON_UPGRADE, NAMES, READABLE_VERSIONS, SET_ASIDE_EXTRA
from harness.store import Store, export, read_results

from _runtools import store_rows


def _rows(n, status="ok"):
    return store_rows(n, status=status)


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
    with Store(tmp_path), pytest.raises(StoreError, match="another `levelfold run` is writing"):
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


def _store_with_rows_in_wal(out, n: int) -> None:
    """A store whose last ``n`` rows live only in its ``-wal`` file, as a killed writer leaves it."""
    with Store(out):
        pass  # created empty, schema committed
    live = sqlite3.connect(out / "results.sqlite", isolation_level=None)
    live.execute("PRAGMA wal_autocheckpoint=0")  # keep every row in the WAL
    live.executemany(
        "INSERT INTO cells (cell_id, schema_version, status) VALUES (?, ?, 'ok')",
        [(f"c{i}", SCHEMA_VERSION) for i in range(n)],
    )
    snapshot = {p.name: p.read_bytes() for p in out.glob("results.sqlite*")}
    live.close()  # checkpoints and removes the WAL ...
    for name, data in snapshot.items():  # ... so put back the files as the live writer had them
        (out / name).write_bytes(data)
    assert (out / "results.sqlite-wal").stat().st_size > 0


def test_every_fresh_keeps_the_earlier_store_numbered_with_its_wal(tmp_path):
    _store_with_rows_in_wal(tmp_path, 30)
    with Store(tmp_path, fresh=True) as store:
        assert store.done_ids() == set()
        store.write(_rows(2))
    with Store(tmp_path, fresh=True):  # a second --fresh never overwrites the first one's copy
        pass
    assert len(read_results(tmp_path / "kept-1")) == 30  # the rows that lived in the WAL
    assert len(read_results(tmp_path / "kept-2")) == 2
    assert len(read_results(tmp_path)) == 0


def test_a_fresh_killed_half_way_is_finished_by_the_next_writer(tmp_path):
    """The kill fell after the WAL moved into kept-1.partial/ but before the main file did."""
    _store_with_rows_in_wal(tmp_path, 30)
    partial = tmp_path / "kept-1.partial"
    partial.mkdir()
    (tmp_path / "results.sqlite-wal").rename(partial / "results.sqlite-wal")
    with Store(tmp_path) as store:  # a plain run: it completes the move first, then starts empty
        assert store.done_ids() == set()
    assert not partial.exists()
    assert len(read_results(tmp_path / "kept-1")) == 30  # no row lost


def test_creation_leaves_no_temporary_and_a_valid_empty_store(tmp_path):
    (tmp_path / ".results.sqlite.creating-99999").write_bytes(b"half a header")  # a killed creation
    with Store(tmp_path) as store:
        assert store.done_ids() == set()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["results.sqlite"]  # WAL checkpointed at close


def test_deleting_the_store_under_a_live_writer_stops_it(tmp_path):
    with Store(tmp_path) as store:
        store.write(_rows(1))
        for p in tmp_path.glob("results.sqlite*"):
            p.unlink()
        with pytest.raises(StoreError, match="was deleted or replaced while this run was writing"):
            store.write(_rows(2))


def test_the_lock_is_on_the_directory_not_on_a_deletable_file(tmp_path):
    with Store(tmp_path):
        for p in tmp_path.glob(".*"):
            p.unlink()  # whatever a user might take for a stale lock file
        with pytest.raises(StoreError, match="another `levelfold run` is writing"):
            Store(tmp_path)


def test_a_finished_run_leaves_no_lock_file(tmp_path):
    # the lock is the OS lock on the directory: nothing like `.run.lock` stays behind
    before = set()
    with Store(tmp_path) as store:
        store.write(_rows(2))
        before = {p.name for p in tmp_path.iterdir()}
    after = {p.name for p in tmp_path.iterdir()}
    assert not [n for n in before | after if "lock" in n]
    assert after <= {"results.sqlite", "results.sqlite-wal", "results.sqlite-shm"}
    with Store(tmp_path):  # and the next writer takes it at once
        pass


def test_a_store_missing_a_column_is_refused(tmp_path):
    with Store(tmp_path) as store:
        store.write(_rows(1))
    db = sqlite3.connect(tmp_path / "results.sqlite")
    db.execute("ALTER TABLE cells DROP COLUMN peak_rss_mb")
    db.commit()
    db.close()
    with pytest.raises(StoreError, match="lacks the column.s. peak_rss_mb .*--fresh"):
        read_results(tmp_path)


def test_missing_store_and_bad_export_suffix(tmp_path):
    with pytest.raises(StoreError, match="no results store"):
        read_results(tmp_path / "nothing")
    with Store(tmp_path) as store:
        store.write(_rows(1))
    with pytest.raises(OutputError, match="suffix must be .csv or .parquet"):
        export(read_results(tmp_path), tmp_path / "x.xlsx")


def _version_3_store(out) -> None:
    """A store as schema version 3 wrote it: no tuning columns, one finished row."""
    old = [(c, t) for c, t in COLUMNS if c not in FILLED_ON_UPGRADE]
    db = sqlite3.connect(out / "results.sqlite")
    db.execute(f"CREATE TABLE cells ({', '.join(f'{c!r} {t}' for c, t in old)})")
    db.execute(f"CREATE TABLE superseded ({', '.join(f'{c!r} {t}' for c, t in old + SET_ASIDE_EXTRA)})")
    db.execute("CREATE TABLE grid (cell_id TEXT PRIMARY KEY, path TEXT, identity TEXT)")
    db.execute("CREATE TABLE meta (key TEXT PRIMARY KEY, value TEXT)")
    db.execute("INSERT INTO meta VALUES ('schema_version', '3')")
    row = {**_rows(1)[0], "schema_version": 3, "uses_target": 0, "leaky": 0}
    db.execute(f"INSERT INTO cells ({', '.join(row)}) VALUES ({', '.join('?' for _ in row)})", tuple(row.values()))
    db.commit()
    db.close()


def _layout(out) -> tuple[str, set, set]:
    db = sqlite3.connect(out / "results.sqlite")
    try:
        version = db.execute("SELECT value FROM meta WHERE key='schema_version'").fetchone()[0]
        return (
            version,
            {r[1] for r in db.execute("PRAGMA table_info(cells)")},
            {r[1] for r in db.execute("PRAGMA table_info(superseded)")},
        )
    finally:
        db.close()


def test_version_3_store_is_read_as_untuned_and_upgraded_in_place_by_a_writer(tmp_path):
    _version_3_store(tmp_path)
    assert 3 in READABLE_VERSIONS and SCHEMA_VERSION > 3
    before = _layout(tmp_path)
    df = read_results(tmp_path)  # a reader fills the defaults in memory and changes nothing
    assert df[list(FILLED_ON_UPGRADE)].to_dict("records") == [
        {"regime": "defaults", "tuned_params": "{}", "tune_s": 0.0}
    ]
    assert df["roc_auc"].item() == 0.5 and df["uses_target"].item() is False
    assert _layout(tmp_path) == before and not set(FILLED_ON_UPGRADE) & before[1]
    with Store(tmp_path) as store:  # a writer upgrades the file in place, keeping its row
        version, cells, aside = _layout(tmp_path)
        assert version == str(SCHEMA_VERSION) and set(NAMES) <= cells and set(FILLED_ON_UPGRADE) <= aside
        assert store.done_ids() == {"c0"}
        store.write([{**_rows(2)[1], "regime": "tuned-model", "tuned_params": {"model": {"C": 2.0}}, "tune_s": 1.5}])
    stored = sqlite3.connect(tmp_path / "results.sqlite")
    try:  # the old row holds the upgrade's values in the file itself, not NULL
        assert stored.execute("SELECT regime, tuned_params, tune_s FROM cells WHERE cell_id='c0'").fetchone() == (
            "defaults",
            "{}",
            0.0,
        )
    finally:
        stored.close()
    df = read_results(tmp_path).set_index("cell_id")
    assert df.loc["c0", "regime"] == "defaults" and df.loc["c1", "regime"] == "tuned-model"
    assert df.loc["c1", "tuned_params"] == '{"model": {"C": 2.0}}' and df.loc["c1", "tune_s"] == 1.5
