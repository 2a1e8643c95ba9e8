"""The results store: SQLite in WAL mode, one row per cell, keyed by the cell's content hash.

Each finished encoding unit's rows are committed in one transaction, so a crash loses at
most the unit in flight and never leaves half a unit. A lock on the output directory keeps
a second run off it. A new store appears only whole (built under a temporary name, then
renamed). Readers open the file read-only, refuse damaged files and unknown schema
versions, and never change them. Exports are written to a temporary file and renamed.

A store is bound to one experiment: the ``grid`` table holds the cell ids and identities
of the config last run into it, ``cells`` holds only rows of that grid, and rows of cells
no longer in it (a changed parameter, a removed encoder, replaced data, another harness
version) are moved to ``superseded`` with the reason (:meth:`Store.bind_grid`). They come
back if the config returns to them.
"""

from __future__ import annotations

import errno
import fcntl
import json
import math
import os
import shutil
import sqlite3
from pathlib import Path
from urllib.parse import quote

import pandas as pd

from harness._outputs import fsync_path, is_disk_full, temporary_beside
from harness.errors import DiskFullError, OutputError, StoreError
from harness.grid import SCHEMA_VERSION, changed_parts
from harness.metrics import METRICS

__all__ = ["COLUMNS", "STORE_NAME", "TABLE_NAME", "Store", "read_results", "read_set_aside",
           "describe_set_aside", "export", "table_only"]

STORE_NAME = "results.sqlite"
TABLE_NAME = "results.parquet"  # the exported table; read when a directory has no store
CREATING_PREFIX = ".results.sqlite.creating-"  # a store being built; renamed when complete
KEPT_PREFIX = "kept-"  # kept-1/, kept-2/ ...: earlier stores set aside by --fresh

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
    ("regime", "TEXT"),
    ("status", "TEXT"),
    ("error", "TEXT"),
    ("task", "TEXT"),
    ("encoder_kind", "TEXT"),
    ("encoder_params", "TEXT"),
    ("uses_target", "INTEGER"),
    ("leaky", "INTEGER"),
    ("model_family", "TEXT"),
    ("model_params", "TEXT"),
    ("tuned_params", "TEXT"),
    ("primary_metric", "TEXT"),
    *[(m, "REAL") for m in METRICS],
    *[(f"train_{m}", "REAL") for m in METRICS],
    ("encoder_fit_s", "REAL"),
    ("encoder_transform_s", "REAL"),
    ("model_fit_s", "REAL"),
    ("predict_s", "REAL"),
    ("score_s", "REAL"),
    ("tune_s", "REAL"),
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
READABLE_VERSIONS = (1, 2, 3, SCHEMA_VERSION)
# (4: regime, tuned_params, tune_s) what a row written before a column existed holds in it:
# every older cell ran with fixed hyperparameters
FILLED_ON_UPGRADE = {"regime": "defaults", "tuned_params": "{}", "tune_s": 0.0}
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
    "regime": "other tuning settings or search space",
}
#: INTEGER columns that hold a boolean (SQLite has no boolean type); read back as bool
BOOL_COLUMNS = ("uses_target", "leaky")


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
            _make_dir(self.out)
        elif not self.path.exists():
            raise self._missing()
        self._take_lock()
        try:
            _finish_keeping(self.out)  # roll forward a --fresh that was killed half-way
            _remove_creation_leftovers(self.out)
            if fresh and self.path.exists():
                _keep_aside(self.out)
            if not self.path.exists():
                _create(self.out, self.path)
            self.db = self._open(readonly=False)
            self._identity = _identity(self.path)
        except BaseException:
            self.close()
            raise

    # --- opening -------------------------------------------------------------------------
    def _missing(self) -> StoreError:
        return StoreError(f"no results store at {self.path}; run `levelfold run CONFIG --out {self.out}` first.")

    def _take_lock(self) -> None:
        """flock the output directory itself: no file a user could delete holds the lock."""
        try:
            fd = os.open(self.out, os.O_RDONLY | os.O_DIRECTORY)
        except OSError as exc:
            raise _output_error(self.out, exc) from None
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            os.close(fd)
            raise StoreError(
                f"another `levelfold run` is writing to {self.out} (it holds the lock on that directory). "
                "Wait for it to finish, or pass a different --out."
            ) from None
        self._lock_fd = fd
        _HELD_LOCK_FDS.add(fd)

    def _open(self, readonly: bool) -> sqlite3.Connection:
        db = None
        try:
            if readonly:
                db = _connect_readonly(self.path)
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
                raise _disk_full(self.out, "opening the results store") from None
            raise StoreError(
                f"the results store {self.path} is damaged ({exc}). Nothing was changed. Move it aside "
                "(or rerun with --fresh, which keeps it under kept-N/) to start over."
            ) from None
        version = self._check_schema(db)
        if not readonly and version != SCHEMA_VERSION:
            _create_tables(db)  # additive upgrade of an older store (a writer holds the lock)
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
                raise _disk_full(self.out, f"writing {len(rows)} result row(s)", need) from None
            raise

    def check_in_place(self) -> None:
        """Raise if the store file this writer opened is no longer at its path."""
        if self._identity is not None and _identity(self.path) != self._identity:
            raise StoreError(
                f"the results store {self.path} was deleted or replaced while this run was writing to it; "
                "the run stopped. Rows written since are lost with the deleted file. Rerun the same "
                "command to start a new store (or restore the file and rerun to resume)."
            )

    def frame(self) -> pd.DataFrame:
        return pd.read_sql_query("SELECT * FROM cells ORDER BY dataset, repeat, fold, encoder, model, regime", self.db)

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
    from datetime import datetime, timezone

    return datetime.now(timezone.utc).isoformat(timespec="seconds")


# --------------------------------------------------------------------------- file handling
def _identity(path: Path):
    try:
        st = path.stat()
    except FileNotFoundError:
        return None
    return st.st_dev, st.st_ino


def _connect_readonly(path: Path) -> sqlite3.Connection:
    """Open read-only; as immutable where SQLite cannot create its ``-shm`` file.

    That happens on a read-only mount or a full disk. ``immutable=1`` is safe then: an
    absent or empty ``-wal`` file means the main file holds every committed row, and no writer is live
    (a live writer keeps the ``-shm`` file in place, so the first open succeeds).
    """
    uri = f"file:{quote(str(path.resolve()))}?mode=ro"
    db = sqlite3.connect(uri, uri=True, timeout=30, isolation_level=None)
    try:
        db.execute("SELECT count(*) FROM sqlite_master").fetchone()
        return db
    except sqlite3.OperationalError as exc:
        db.close()
        wal = Path(str(path) + "-wal")
        cannot_share = any(m in str(exc) for m in ("unable to open", "disk I/O error"))
        wal_rows = wal.exists() and wal.stat().st_size > 0  # an empty -wal may be our own failed open's
        if not cannot_share or (wal_rows and os.access(path.parent, os.W_OK)):
            raise
    return sqlite3.connect(uri + "&immutable=1", uri=True, isolation_level=None)


def _create(out: Path, path: Path) -> None:
    """Build an empty store under a temporary name, commit its schema, rename it into place."""
    tmp = out / f"{CREATING_PREFIX}{os.getpid()}"
    try:
        db = sqlite3.connect(tmp, isolation_level=None)
        try:
            db.execute("BEGIN")
            _create_tables(db)
            db.execute("COMMIT")
            db.execute("PRAGMA journal_mode=WAL")  # recorded in the header; no -wal left at close
        finally:
            db.close()
        fsync_path(tmp)
        os.rename(tmp, path)
        fsync_path(out)
    except (sqlite3.Error, OSError) as exc:
        _remove_creation_leftovers(out)
        if is_disk_full(exc):
            raise _disk_full(out, "creating the results store") from None
        if isinstance(exc, OSError):
            raise _output_error(out, exc) from None
        raise


def _remove_creation_leftovers(out: Path) -> None:
    """Remove temporaries of a creation that was killed (only a lock holder calls this)."""
    for leftover in out.glob(CREATING_PREFIX + "*"):
        leftover.unlink(missing_ok=True)


def _kept_dirs(out: Path) -> list[Path]:
    return [p for p in out.glob(KEPT_PREFIX + "*") if p.name[len(KEPT_PREFIX):].split(".")[0].isdigit()]


def _keep_aside(out: Path) -> Path:
    """Move the store with its ``-wal`` and ``-shm`` into a new ``kept-N/``.

    The files go into ``kept-N.partial/`` first, which is then renamed: a kill half-way
    leaves the ``.partial`` directory, and the next writer finishes the move before it
    touches anything (:func:`_finish_keeping`), so a WAL is never separated from its file.
    """
    numbers = [int(p.name[len(KEPT_PREFIX):].split(".")[0]) for p in _kept_dirs(out)]
    partial = out / f"{KEPT_PREFIX}{max(numbers, default=0) + 1}.partial"
    try:
        partial.mkdir()
        fsync_path(out)
    except OSError as exc:
        raise _output_error(out, exc) from None
    return _finish_keeping(out)


def _finish_keeping(out: Path) -> Path | None:
    done = None
    for partial in sorted(p for p in _kept_dirs(out) if p.name.endswith(".partial")):
        try:
            # the WAL first: the main file must never sit alone beside a new store's name
            for suffix in ("-wal", "-shm", ""):
                src = out / (STORE_NAME + suffix)
                if src.exists():
                    os.rename(src, partial / src.name)
            fsync_path(partial)
            done = partial.with_name(partial.name[: -len(".partial")])
            os.rename(partial, done)
            fsync_path(out)
        except OSError as exc:
            raise _output_error(out, exc) from None
    return done


def _make_dir(out: Path) -> None:
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise _output_error(out, exc) from None
    if not os.access(out, os.W_OK | os.X_OK):
        raise _output_error(out, PermissionError(errno.EACCES, "not writable"))


def _disk_full(where: Path, doing: str, need_bytes: int = 0) -> DiskFullError:
    """The one message for a full disk: the directory, the free space, the space wanted."""
    where = Path(where)
    probe = where if where.exists() else where.parent
    try:
        free = shutil.disk_usage(probe).free
    except OSError:
        free = 0
    store = where / STORE_NAME if where.is_dir() else where
    size = sum(p.stat().st_size for p in (store, Path(f"{store}-wal")) if p.is_file())
    # the exports and the manifest take about as much again as the store itself
    need = max(need_bytes + 2 * size, 1 << 20)
    return DiskFullError(
        f"no space left on the device of {where} while {doing} ({_mb(free)} free; this run needs at least "
        f"about {_mb(need)} more). Every row committed before is kept. Free some space (or pass --out on "
        "another disk) and rerun the same command to resume."
    )


def _mb(n: int) -> str:
    return f"{n / 2**20:.1f} MB"


def _output_error(where: Path, exc: OSError) -> OutputError:
    if is_disk_full(exc):
        return _disk_full(where, "writing")
    reason = exc.strerror or str(exc)
    return OutputError(
        f"cannot write to the output directory {where} ({reason}). It must be a directory you can "
        "write to, not a file or a path under a file; pass --out (or set experiment.output) to "
        "another directory."
    )


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


def table_only(out) -> Path | None:
    """``<out>/results.parquet`` when the directory holds that table but no store.

    A committed sample ships its exported table (the current grid's rows) instead of the
    SQLite store; ``status``, ``export`` and ``report`` read it as they read a store.
    """
    out = Path(out)
    table = out / TABLE_NAME
    if (out / STORE_NAME).exists() or not table.is_file():
        return None
    return table


def read_results(out) -> pd.DataFrame:
    """Read the results table of a run directory (no lock; refuses damaged or foreign stores).

    A directory with ``results.parquet`` and no store (a committed sample) is read from
    that table.
    """
    table = table_only(out)
    if table is not None:
        try:
            df = pd.read_parquet(table)
        except Exception as exc:  # pyarrow raises several types for a damaged file
            raise StoreError(f"the results table {table} cannot be read ({exc}); restore it "
                             "from version control or rerun the config that made it.") from None
        df = df.assign(**{k: v for k, v in FILLED_ON_UPGRADE.items() if k not in df})
        missing = [col for col, _ in COLUMNS if col not in df and col not in BOOL_COLUMNS]
        if missing:
            raise StoreError(f"the results table {table} lacks the column(s) "
                             f"{', '.join(missing)}; it was not written by `levelfold export`. "
                             "Rerun the config that made it.")
    else:
        with Store(out, lock=False, create=False) as store:
            df = store.frame()
        df = df.assign(**{k: v for k, v in FILLED_ON_UPGRADE.items() if k not in df})  # read-only, older
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
    if table_only(out) is not None:
        return {}  # an exported table holds the current grid only
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
    """Write the results table to ``.csv`` or ``.parquet`` (by suffix), atomically.

    The table goes to a temporary file beside ``path`` that is renamed over it when
    complete: a kill or a full disk leaves the previous file or none, never half a file.

    Raises
    ------
    OutputError
        Unknown suffix, or a path that cannot be written.
    DiskFullError
        No space left for the file.
    """
    path = Path(path)
    if path.suffix not in (".csv", ".parquet"):
        raise OutputError(
            f"cannot export to {path}: the suffix must be .csv or .parquet; got '{path.suffix}'. "
            "Pass --to FILE.csv or --to FILE.parquet."
        )
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        with temporary_beside(path) as tmp:
            if path.suffix == ".csv":
                df.to_csv(tmp, index=False)
            else:
                df.to_parquet(tmp, index=False)
    except OSError as exc:
        if is_disk_full(exc):
            raise _disk_full(path.parent, f"writing {path.name}", len(df) * 512) from None
        raise OutputError(
            f"cannot write the export {path} ({exc.strerror or exc}). Pass a path in a directory you "
            "can write to."
        ) from None
    return path
