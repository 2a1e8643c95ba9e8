"""The results store: SQLite in WAL mode, one row per cell, keyed by the cell's content hash.

Each finished encoding unit's rows are committed in one transaction, so a crash loses at
most the unit in flight and never leaves half a unit. A lock file keeps a second run off
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
from harness.grid import SCHEMA_VERSION
from harness.metrics import METRICS

__all__ = ["COLUMNS", "Store", "read_results", "export"]

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
            self._check_schema(db)
        else:
            cols = ", ".join(f'"{c}" {t}' for c, t in COLUMNS)
            db.execute(f"CREATE TABLE IF NOT EXISTS cells ({cols})")
            db.execute("CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT)")
            db.execute("INSERT OR REPLACE INTO meta VALUES ('schema_version', ?)", (str(SCHEMA_VERSION),))
        return db

    def _check_schema(self, db) -> None:
        try:
            row = db.execute("SELECT value FROM meta WHERE key='schema_version'").fetchone()
        except sqlite3.DatabaseError:
            row = None
        version = int(row[0]) if row else None
        if version is not None and version < SCHEMA_VERSION:
            db.close()
            self.close()
            raise StoreError(
                f"the results store {self.path} has schema version {version}, this harness reads "
                f"version {SCHEMA_VERSION}, which records each encoder's declarations (uses_target, "
                "leaky) in every row and identifies cells by the new version, so its cells would all "
                "be computed again anyway. Nothing was changed. Rerun with --fresh (the old file is "
                "kept as results.sqlite.old), or export it with the harness version that wrote it."
            )
        if version != SCHEMA_VERSION:
            db.close()
            self.close()
            raise StoreError(
                f"the results store {self.path} has schema version {version}, this harness reads "
                f"version {SCHEMA_VERSION}. Nothing was changed. Export it with the harness version that "
                "wrote it, or rerun with --fresh (the old file is kept as results.sqlite.old)."
            )

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
        df[col] = df[col].fillna(0).astype(bool)
    return df


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
