"""The results store: SQLite in WAL mode, one row per cell, keyed by the cell's content hash.

Each finished encoding unit's rows are committed in one transaction, so a crash loses at
most the unit in flight and never leaves half a unit.

A store is bound to one experiment: the ``grid`` table holds the cell ids and identities
of the config last run into it, ``cells`` holds only rows of that grid, and rows of cells
no longer in it (a changed parameter, a removed encoder, replaced data, another harness
version) are moved to ``superseded`` with the reason (:meth:`Store.bind_grid`). They come
back if the config returns to them. A lock file keeps a second run off
the same directory. Readers refuse damaged files and unknown schema versions, and never
overwrite them.
"""

from __future__ import annotations

import fcntl
import json
import math
import os
import sqlite3
from pathlib import Path

import pandas as pd

from harness.errors import StoreError
from harness.grid import SCHEMA_VERSION, changed_parts
from harness.metrics import METRICS

__all__ = ["COLUMNS", "Store", "read_results", "read_set_aside", "describe_set_aside", "export"]

STORE_NAME = "results.sqlite"
LOCK_NAME = ".run.lock"

# Run-lock descriptors held by this process. A forked pool worker inherits them, and flock
# locks belong to the shared open file description: a worker orphaned by a SIGKILL of the
# driver kept the lock alive and every resume was refused. The child drops its copies
# (closing a duplicate never releases the parent's lock; only the last close does).
_HELD_LOCK_FDS: set[int] = set()


def _drop_inherited_locks() -> None:
    for fd in _HELD_LOCK_FDS:
        try:
            os.close(fd)
        except OSError:
            pass
    _HELD_LOCK_FDS.clear()


os.register_at_fork(after_in_child=_drop_inherited_locks)

# (column, SQL type); order is the export order
COLUMNS = [
    ("cell_id", "TEXT PRIMARY KEY"),
    ("schema_version", "INTEGER"),
    ("config_hash", "TEXT"),
    ("dataset", "TEXT"),
    ("encoder", "TEXT"),
    ("model", "TEXT"),
    ("repeat", "INTEGER"),
    ("fold", "INTEGER"),
    ("status", "TEXT"),
    ("error", "TEXT"),
    ("task", "TEXT"),
    ("encoder_kind", "TEXT"),
    ("encoder_params", "TEXT"),
    ("uses_target", "INTEGER"),
    ("leaky", "INTEGER"),
    ("model_family", "TEXT"),
    ("model_params", "TEXT"),
    ("primary_metric", "TEXT"),
    *[(m, "REAL") for m in METRICS],
    *[(f"train_{m}", "REAL") for m in METRICS],
    ("encoder_fit_s", "REAL"),
    ("encoder_transform_s", "REAL"),
    ("model_fit_s", "REAL"),
    ("predict_s", "REAL"),
    ("score_s", "REAL"),
    ("n_features_in", "INTEGER"),
    ("n_features_out", "INTEGER"),
    ("encoded_mb", "REAL"),
    ("peak_rss_mb", "REAL"),
    ("n_train", "INTEGER"),
    ("n_test", "INTEGER"),
    ("max_cardinality", "INTEGER"),
    ("finished_at", "TEXT"),
]
NAMES = [c for c, _ in COLUMNS]
# schema versions this harness opens; older ones are upgraded in place by a writer
# (1: no grid or superseded table; 2: no uses_target/leaky columns)
READABLE_VERSIONS = (1, 2, SCHEMA_VERSION)
# grid: the cells of the config last run into the store (path, identity parts as JSON)
GRID_TABLE = "CREATE TABLE IF NOT EXISTS grid (cell_id TEXT PRIMARY KEY, path TEXT, identity TEXT)"
SET_ASIDE_EXTRA = [("superseded_at", "TEXT"), ("reason", "TEXT")]
# what each identity part means, for the reason of a set-aside row
PART_REASONS = {
    "code": "computed by another harness version",
    "seed": "another experiment seed",
    "protocol": "another protocol (folds, repeats, stratification, grouping or metrics)",
    "dataset": "other dataset content or source settings",
    "encoder": "other encoder parameters",
    "model": "other model parameters",
}
#: INTEGER columns that hold a boolean (SQLite has no boolean type); read back as bool
BOOL_COLUMNS = ("uses_target", "leaky")


class Store:
    """Open (or create) ``<out>/results.sqlite``.

    Parameters
    ----------
    out : path
        Output directory.
    lock : bool
        Take the run lock (writers); readers pass False.
    fresh : bool
        Move an existing store aside (``results.sqlite.old``) and start empty.

    Raises
    ------
    StoreError
        Damaged file, unknown schema version, or another run holds the lock.
    """

    def __init__(self, out, *, lock: bool = True, fresh: bool = False, create: bool = True):
        self.out = Path(out)
        self.path = self.out / STORE_NAME
        self._lock_fd = None
        if create:
            self.out.mkdir(parents=True, exist_ok=True)
        elif not self.path.exists():
            raise StoreError(f"no results store at {self.path}; run `harness run CONFIG --out {self.out}` first.")
        if lock:
            self._take_lock()
        if fresh and self.path.exists():
            for suffix in ("", "-wal", "-shm"):
                old = Path(str(self.path) + suffix)
                if old.exists():
                    old.replace(str(self.path) + ".old" + suffix)
        self.db = self._connect()

    # --- opening -------------------------------------------------------------------------
    def _take_lock(self) -> None:
        fd = os.open(self.out / LOCK_NAME, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            os.close(fd)
            raise StoreError(
                f"another `harness run` is writing to {self.out} (lock file {self.out / LOCK_NAME} is held). "
                "Wait for it to finish, or pass a different --out."
            ) from None
        os.ftruncate(fd, 0)
        os.write(fd, str(os.getpid()).encode())
        self._lock_fd = fd
        _HELD_LOCK_FDS.add(fd)

    def _connect(self) -> sqlite3.Connection:
        existed = self.path.exists() and self.path.stat().st_size > 0
        try:
            db = sqlite3.connect(self.path, timeout=30, isolation_level=None)
            db.execute("PRAGMA journal_mode=WAL")
            db.execute("PRAGMA synchronous=NORMAL")
            if existed:
                ok = db.execute("PRAGMA quick_check").fetchone()[0]
                if ok != "ok":
                    raise sqlite3.DatabaseError(ok)
        except sqlite3.DatabaseError as exc:
            self.close()
            raise StoreError(
                f"the results store {self.path} is damaged ({exc}). Nothing was changed. Move it aside "
                "(or rerun with --fresh, which keeps it as results.sqlite.old) to start over."
            ) from None
        if existed:
            version = self._check_schema(db)
            if version != SCHEMA_VERSION and self._lock_fd is not None:
                _create_tables(db)  # additive upgrade: version 1 had no grid or superseded table
        else:
            _create_tables(db)
        return db

    def _check_schema(self, db) -> None:
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
                "wrote it, or rerun with --fresh (the old file is kept as results.sqlite.old)."
            )
        return version

    # --- writing and reading -------------------------------------------------------------
    def done_ids(self, retry: tuple[str, ...] = ()) -> set[str]:
        """Cell ids already recorded, except those whose status is in ``retry``."""
        rows = self.db.execute("SELECT cell_id, status FROM cells")
        return {cid for cid, status in rows if status not in retry}

    def write(self, rows: list[dict]) -> None:
        """Insert rows in one transaction (replacing rows of the same cell)."""
        if not rows:
            return
        marks = ", ".join("?" for _ in NAMES)
        cols = ", ".join(f'"{c}"' for c in NAMES)
        values = [tuple(_sql(row.get(c)) for c in NAMES) for row in rows]
        self.db.execute("BEGIN IMMEDIATE")
        try:
            self.db.executemany(f"INSERT OR REPLACE INTO cells ({cols}) VALUES ({marks})", values)
            self.db.execute("COMMIT")
        except BaseException:
            self.db.execute("ROLLBACK")
            raise

    def frame(self) -> pd.DataFrame:
        return pd.read_sql_query("SELECT * FROM cells ORDER BY dataset, repeat, fold, encoder, model", self.db)

    # --- one experiment per store ----------------------------------------------------------
    def _has(self, table: str) -> bool:
        return self.db.execute("SELECT 1 FROM sqlite_master WHERE type='table' AND name=?", (table,)).fetchone() is not None

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
        labels = {"dataset": {c.dataset for c in cells}, "encoder": {c.encoder.label for c in cells},
                  "model": {c.model.label for c in cells}}
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
            self.db.executemany("INSERT INTO grid VALUES (?, ?, ?)",
                                [(c.cell_id, c.path, json.dumps(c.identity, sort_keys=True)) for c in cells])
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
        self.db.executemany(f"INSERT OR REPLACE INTO {target} ({cols}) VALUES ({marks})",
                            [tuple(row.get(c) for c in names) for row in rows])
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
            _HELD_LOCK_FDS.discard(self._lock_fd)
            fcntl.flock(self._lock_fd, fcntl.LOCK_UN)
            os.close(self._lock_fd)
            self._lock_fd = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def _create_tables(db) -> None:
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
                db.execute(f'ALTER TABLE {table} ADD COLUMN "{col}" {typ}')
    db.execute("INSERT OR REPLACE INTO meta VALUES ('schema_version', ?)", (str(SCHEMA_VERSION),))


def _reason(row: dict, old, at_path: dict, labels: dict) -> str:
    """Why a stored row is not a cell of the new grid (one phrase, shared by like rows)."""
    for part in ("dataset", "encoder", "model"):
        if row[part] not in labels[part]:
            return f"{part} '{row[part]}' is no longer in the config"
    path = f"{row['dataset']}/{row['encoder']}/{row['model']}/r{row['repeat']}f{row['fold']}"
    if path not in at_path:
        return "repeat or fold no longer in the protocol"
    if old is None:
        return "recorded under a cell identity this harness cannot compare (older store)"
    parts = changed_parts(old[1], at_path[path].identity)
    return "; ".join(PART_REASONS.get(p, p) for p in parts) or "another cell identity"


def _utc_now() -> str:
    from datetime import datetime, timezone

    return datetime.now(timezone.utc).isoformat(timespec="seconds")


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


def read_results(out) -> pd.DataFrame:
    """Read the results table of a run directory (no lock; refuses damaged or foreign stores)."""
    with Store(out, lock=False, create=False) as store:
        df = store.frame()
    for col, typ in COLUMNS:
        if typ == "REAL":
            df[col] = pd.to_numeric(df[col], errors="coerce").astype(float)
    df["error"] = df["error"].fillna("")
    for col in BOOL_COLUMNS:
        if col not in df or df[col].isna().any():
            # rows of an older store hold NULL: drop the column so readers fall back to
            # what the older store records, instead of reading NULL as False
            df = df.drop(columns=col, errors="ignore")
        else:
            df[col] = df[col].astype(bool)
    return df


def read_set_aside(out) -> dict:
    """``{reason: rows}`` of the rows a run directory set aside as superseded."""
    with Store(out, lock=False, create=False) as store:
        return store.set_aside()


def describe_set_aside(aside: dict) -> str:
    """One sentence: how many rows were set aside and why (empty when none)."""
    if not aside:
        return ""
    why = "; ".join(f"{reason}: {n}" for reason, n in aside.items())
    return (f"{sum(aside.values())} row(s) of cells no longer in the current config were set aside "
            f"as superseded and are not used ({why}).")


def export(df: pd.DataFrame, path) -> Path:
    """Write the results table to ``.csv`` or ``.parquet`` (by suffix)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    if path.suffix == ".csv":
        df.to_csv(path, index=False)
    elif path.suffix == ".parquet":
        df.to_parquet(path, index=False)
    else:
        raise StoreError(f"cannot export to {path}: the suffix must be .csv or .parquet; got '{path.suffix}'.")
    return path
