"""The SQLite results store: tables of the current schema, writes, resume, one grid per store.

:class:`Store` is the one writer and reader of ``results.sqlite``; its file handling (the
run lock, atomic creation, ``kept-N/``) is in :mod:`harness._store_files`, the columns and
the schema version in :mod:`harness.schema`. Import it from :mod:`harness.store`.
"""

from __future__ import annotations

import json
import math
import sqlite3
from datetime import UTC, datetime
from pathlib import Path

import pandas as pd

from harness._outputs import is_disk_full
from harness._store_files import (
    STORE_NAME,
    connect_readonly,
    create_atomically,
    disk_full,
    file_identity,
    finish_keeping,
    keep_aside,
    lock_directory,
    make_dir,
    remove_creation_leftovers,
    unlock,
)
from harness.errors import StoreError
from harness.grid import changed_parts
from harness.schema import COLUMNS, FILLED_ON_UPGRADE, NAMES, READABLE_VERSIONS, SCHEMA_VERSION, SET_ASIDE_EXTRA

__all__ = ["Store", "create_tables"]

# grid: the cells of the config last run into the store (path, identity parts as JSON)
GRID_TABLE = "CREATE TABLE IF NOT EXISTS grid (cell_id TEXT PRIMARY KEY, path TEXT, identity TEXT)"
# what each identity part means, for the reason of a set-aside row
PART_REASONS = {
    "code": "computed by another harness version",
    "seed": "another experiment seed",
    "protocol": "another protocol (folds, repeats, stratification, grouping or metrics)",
    "dataset": "other dataset content or source settings",
    "encoder": "other encoder parameters",
    "model": "other model parameters",
    "regime": "other tuning settings or search space",
}


class Store:
    """Open (or create) ``<out>/results.sqlite``.

    A writer (``lock=True``) holds an OS-level lock on the output directory for as long
    as it lives; the kernel releases it when the process dies. A new store is built under
    a temporary name with its schema committed, then renamed into place, so a kill during
    creation leaves either no store or a valid empty one. A reader (``lock=False``) opens
    the file read-only (``mode=ro``): it never switches the journal mode nor writes the
    database, and works on a read-only mount.

    Parameters
    ----------
    out : path
        Output directory.
    lock : bool
        Take the run lock and open read-write (writers); readers pass False.
    fresh : bool
        Keep an existing store aside as ``kept-N/`` (numbered, never overwritten, with its
        WAL) and start empty.
    create : bool
        Create the directory and the store when missing (writers).

    Raises
    ------
    StoreError
        Damaged file, unknown schema version, or another run holds the lock.
    OutputError
        The output directory cannot be created or written.
    DiskFullError
        No space left to create the store.
    """

    def __init__(self, out, *, lock: bool = True, fresh: bool = False, create: bool = True):
        self.out = Path(out)
        self.path = self.out / STORE_NAME
        self._lock_fd = None
        self._identity = None
        self.db = None
        if not lock:
            if not self.path.is_file():
                raise self._missing()
            self.db = self._open(readonly=True)
            return
        if create:
            make_dir(self.out)
        elif not self.path.exists():
            raise self._missing()
        self._lock_fd = lock_directory(self.out)
        try:
            finish_keeping(self.out)  # roll forward a --fresh that was killed half-way
            remove_creation_leftovers(self.out)
            if fresh and self.path.exists():
                keep_aside(self.out)
            if not self.path.exists():
                create_atomically(self.out, self.path, create_tables)
            self.db = self._open(readonly=False)
            self._identity = file_identity(self.path)
        except BaseException:
            self.close()
            raise

    # --- opening -------------------------------------------------------------------------
    def _missing(self) -> StoreError:
        return StoreError(f"no results store at {self.path}; run `levelfold run CONFIG --out {self.out}` first.")

    def _open(self, readonly: bool) -> sqlite3.Connection:
        db = None
        try:
            if readonly:
                db = connect_readonly(self.path)
            else:
                db = sqlite3.connect(self.path, timeout=30, isolation_level=None)
                db.execute("PRAGMA journal_mode=WAL")
                db.execute("PRAGMA synchronous=NORMAL")
            ok = db.execute("PRAGMA quick_check").fetchone()[0]
            if ok != "ok":
                raise sqlite3.DatabaseError(ok)
        except sqlite3.DatabaseError as exc:
            if db is not None:
                db.close()
            self.close()
            if is_disk_full(exc):
                raise disk_full(self.out, "opening the results store") from None
            raise StoreError(
                f"the results store {self.path} is damaged ({exc}). Nothing was changed. Move it aside "
                "(or rerun with --fresh, which keeps it under kept-N/) to start over."
            ) from None
        version = self._check_schema(db)
        if not readonly and version != SCHEMA_VERSION:
            create_tables(db)  # additive upgrade of an older store (a writer holds the lock)
        return db

    def _check_schema(self, db) -> int | None:
        """The store's schema version; raises for an unknown one or missing columns."""
        try:
            row = db.execute("SELECT value FROM meta WHERE key='schema_version'").fetchone()
        except sqlite3.DatabaseError:
            row = None
        version = int(row[0]) if row else None
        if version not in READABLE_VERSIONS:
            db.close()
            self.close()
            raise StoreError(
                f"the results store {self.path} has schema version {version}, this harness reads "
                f"version {SCHEMA_VERSION}. Nothing was changed. Export it with the harness version that "
                "wrote it, or rerun with --fresh (the old file is kept under kept-N/)."
            )
        have = {r[1] for r in db.execute("PRAGMA table_info(cells)")}
        missing = [c for c in NAMES if c not in have]
        if missing and version == SCHEMA_VERSION:  # older versions are upgraded by a writer
            db.close()
            self.close()
            raise StoreError(
                f"the results store {self.path} lacks the column(s) {', '.join(missing)} of schema version "
                f"{SCHEMA_VERSION}; it was changed by hand or by another program. Nothing was changed. "
                "Rerun with --fresh (the old file is kept under kept-N/) to start over."
            )
        return version

    # --- writing and reading -------------------------------------------------------------
    def done_ids(self, retry: tuple[str, ...] = ()) -> set[str]:
        """Cell ids already recorded, except those whose status is in ``retry``."""
        rows = self.db.execute("SELECT cell_id, status FROM cells")
        return {cid for cid, status in rows if status not in retry}

    def write(self, rows: list[dict]) -> None:
        """Insert rows in one transaction (replacing rows of the same cell).

        Raises
        ------
        StoreError
            The store file was deleted or replaced since it was opened.
        DiskFullError
            No space left: nothing of this transaction is written, every earlier row stays.
        """
        if not rows:
            return
        self.check_in_place()
        marks = ", ".join("?" for _ in NAMES)
        cols = ", ".join(f'"{c}"' for c in NAMES)
        values = [tuple(_sql(row.get(c)) for c in NAMES) for row in rows]
        try:
            self.db.execute("BEGIN IMMEDIATE")
            try:
                self.db.executemany(f"INSERT OR REPLACE INTO cells ({cols}) VALUES ({marks})", values)
                self.db.execute("COMMIT")
            except BaseException:
                # SQLite may have rolled back already (a full disk does): a second ROLLBACK
                # would raise "no transaction is active" and hide the real error
                if self.db.in_transaction:
                    self.db.execute("ROLLBACK")
                raise
        except sqlite3.OperationalError as exc:
            if is_disk_full(exc):
                need = sum(len(str(v)) for row in values for v in row if v is not None)
                raise disk_full(self.out, f"writing {len(rows)} result row(s)", need) from None
            raise

    def check_in_place(self) -> None:
        """Raise if the store file this writer opened is no longer at its path."""
        if self._identity is not None and file_identity(self.path) != self._identity:
            raise StoreError(
                f"the results store {self.path} was deleted or replaced while this run was writing to it; "
                "the run stopped. Rows written since are lost with the deleted file. Rerun the same "
                "command to start a new store (or restore the file and rerun to resume)."
            )

    def frame(self) -> pd.DataFrame:
        """Every row of ``cells`` in grid order (a reader of an older store gets its columns only)."""
        have = {r[1] for r in self.db.execute("PRAGMA table_info(cells)")}
        order = ", ".join(c for c in ("dataset", "repeat", "fold", "encoder", "model", "regime") if c in have)
        return pd.read_sql_query(f"SELECT * FROM cells ORDER BY {order}", self.db)

    # --- one experiment per store ----------------------------------------------------------
    def _has(self, table: str) -> bool:
        query = "SELECT 1 FROM sqlite_master WHERE type='table' AND name=?"
        return self.db.execute(query, (table,)).fetchone() is not None

    def grid(self) -> dict:
        """``{cell_id: (path, identity parts)}`` of the config last run into the store."""
        if not self._has("grid"):
            return {}
        return {cid: (path, json.loads(ident)) for cid, path, ident in self.db.execute("SELECT * FROM grid")}

    def bind_grid(self, cells) -> dict:
        """Make ``cells`` (the whole grid of the config being run) the store's experiment.

        Rows of cells not in the grid move to ``superseded`` with their reason; rows of
        grid cells found there move back (the config returned to them). One transaction.

        Returns
        -------
        dict
            ``{reason: number of rows}`` set aside by this call.
        """
        old = self.grid()
        new = {c.cell_id: c for c in cells}
        at_path = {c.path: c for c in cells}
        labels = {
            "dataset": {c.dataset for c in cells},
            "encoder": {c.encoder.label for c in cells},
            "model": {c.model.label for c in cells},
        }
        stale = [r for r in self._rows("cells") if r["cell_id"] not in new]
        moved: dict[str, int] = {}
        for row in stale:
            row["reason"] = _reason(row, old.get(row["cell_id"]), at_path, labels)
            moved[row["reason"]] = moved.get(row["reason"], 0) + 1
        back = [r for r in self._rows("superseded") if r["cell_id"] in new]
        now = _utc_now()
        self.db.execute("BEGIN IMMEDIATE")
        try:
            self._move(stale, "cells", "superseded", now)
            self._move(back, "superseded", "cells", now)
            self.db.execute("DELETE FROM grid")
            self.db.executemany(
                "INSERT INTO grid VALUES (?, ?, ?)",
                [(c.cell_id, c.path, json.dumps(c.identity, sort_keys=True)) for c in cells],
            )
            self.db.execute("COMMIT")
        except BaseException:
            self.db.execute("ROLLBACK")
            raise
        return moved

    def _rows(self, table: str) -> list[dict]:
        if not self._has(table):
            return []
        cur = self.db.execute(f"SELECT * FROM {table}")
        names = [d[0] for d in cur.description]
        return [dict(zip(names, values)) for values in cur]

    def _move(self, rows: list[dict], source: str, target: str, now: str) -> None:
        if not rows:
            return
        names = NAMES + ([c for c, _ in SET_ASIDE_EXTRA] if target == "superseded" else [])
        for row in rows:
            row.setdefault("superseded_at", now)
        cols = ", ".join(f'"{c}"' for c in names)
        marks = ", ".join("?" for _ in names)
        self.db.executemany(
            f"INSERT OR REPLACE INTO {target} ({cols}) VALUES ({marks})",
            [tuple(row.get(c) for c in names) for row in rows],
        )
        self.db.executemany(f"DELETE FROM {source} WHERE cell_id = ?", [(row["cell_id"],) for row in rows])

    def set_aside(self) -> dict:
        """``{reason: rows}`` of the rows set aside as superseded, most rows first."""
        if not self._has("superseded"):
            return {}
        query = "SELECT reason, COUNT(*) FROM superseded GROUP BY reason ORDER BY COUNT(*) DESC, reason"
        return {reason: int(n) for reason, n in self.db.execute(query)}

    def close(self) -> None:
        db = getattr(self, "db", None)
        if db is not None:
            db.close()
            self.db = None
        if self._lock_fd is not None:
            unlock(self._lock_fd)
            self._lock_fd = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def create_tables(db) -> None:
    """Create the tables of the current schema, or add what an older store lacks (in place)."""
    cols = ", ".join(f'"{c}" {t}' for c, t in COLUMNS)
    aside = ", ".join(f'"{c}" {t}' for c, t in COLUMNS + SET_ASIDE_EXTRA)
    db.execute(f"CREATE TABLE IF NOT EXISTS cells ({cols})")
    db.execute(f"CREATE TABLE IF NOT EXISTS superseded ({aside})")
    db.execute(GRID_TABLE)
    db.execute("CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT)")
    for table, columns in (("cells", COLUMNS), ("superseded", COLUMNS + SET_ASIDE_EXTRA)):
        have = {r[1] for r in db.execute(f"PRAGMA table_info({table})")}
        for col, typ in columns:  # additive upgrade of an older store: new columns hold NULL
            if col not in have:
                fill = FILLED_ON_UPGRADE.get(col)
                default = "" if fill is None else f" DEFAULT {_sql_literal(fill)}"
                db.execute(f'ALTER TABLE {table} ADD COLUMN "{col}" {typ}{default}')
    db.execute("INSERT OR REPLACE INTO meta VALUES ('schema_version', ?)", (str(SCHEMA_VERSION),))


def _sql_literal(value) -> str:
    return f"'{value}'" if isinstance(value, str) else repr(value)


def _reason(row: dict, old, at_path: dict, labels: dict) -> str:
    """Why a stored row is not a cell of the new grid (one phrase, shared by like rows)."""
    for part in ("dataset", "encoder", "model"):
        if row[part] not in labels[part]:
            return f"{part} '{row[part]}' is no longer in the config"
    regime = row.get("regime") or "defaults"
    tuned = "" if regime == "defaults" else f"{regime}/"
    path = f"{row['dataset']}/{row['encoder']}/{row['model']}/{tuned}r{row['repeat']}f{row['fold']}"
    if path not in at_path:
        if not any(p.endswith(f"/{tuned}r{row['repeat']}f{row['fold']}") for p in at_path):
            return "repeat or fold no longer in the protocol"
        return f"tuning regime '{regime}' no longer run for this model (tuning.regimes, search tables)"
    if old is None:
        return "recorded under a cell identity this harness cannot compare (older store)"
    parts = changed_parts(old[1], at_path[path].identity)
    return "; ".join(PART_REASONS.get(p, p) for p in parts) or "another cell identity"


def _utc_now() -> str:
    return datetime.now(UTC).isoformat(timespec="seconds")


def _sql(value):
    if value is None:
        return None
    if isinstance(value, float) and math.isnan(value):
        return None
    if isinstance(value, (dict, list, tuple)):
        return json.dumps(value, sort_keys=True, default=str)
    if hasattr(value, "item"):  # numpy scalars
        return value.item()
    return value
