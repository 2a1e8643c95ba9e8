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

This module is the public entry: reading a run directory (store or committed table),
exporting, describing what was set aside. The :class:`Store` itself (tables, writes,
upgrade of older stores) is in :mod:`harness._store_db`, its file handling (run lock,
atomic creation, ``kept-N/``, read-only opening) in :mod:`harness._store_files`, and the
columns, status words and schema version in :mod:`harness.schema`.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from harness._outputs import is_disk_full, temporary_beside
from harness._store_db import Store
from harness._store_files import STORE_NAME, disk_full
from harness.errors import OutputError, StoreError
from harness.schema import (
    BOOL_COLUMNS,
    COLUMNS,
    FILLED_ON_UPGRADE,
    NAMES,
    READABLE_VERSIONS,
    SCHEMA_VERSION,
    SET_ASIDE_EXTRA,
)

__all__ = [
    "STORE_NAME",
    "TABLE_NAME",
    "Store",
    "read_results",
    "read_set_aside",
    "describe_set_aside",
    "export",
    "table_only",
    # the results format (harness.schema), importable from here as before
    "COLUMNS",
    "NAMES",
    "BOOL_COLUMNS",
    "FILLED_ON_UPGRADE",
    "READABLE_VERSIONS",
    "SCHEMA_VERSION",
    "SET_ASIDE_EXTRA",
]

TABLE_NAME = "results.parquet"  # the exported table; read when a directory has no store


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
        except Exception as exc:  # noqa: BLE001  pyarrow raises several types for a damaged file
            raise StoreError(
                f"the results table {table} cannot be read ({exc}); restore it "
                "from version control or rerun the config that made it."
            ) from None
        df = df.assign(**{k: v for k, v in FILLED_ON_UPGRADE.items() if k not in df})
        missing = [col for col, _ in COLUMNS if col not in df and col not in BOOL_COLUMNS]
        if missing:
            raise StoreError(
                f"the results table {table} lacks the column(s) "
                f"{', '.join(missing)}; it was not written by `levelfold export`. "
                "Rerun the config that made it."
            )
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
    return (
        f"{sum(aside.values())} row(s) of cells no longer in the current config were set aside "
        f"as superseded and are not used ({why})."
    )


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
            raise disk_full(path.parent, f"writing {path.name}", len(df) * 512) from None
        raise OutputError(
            f"cannot write the export {path} ({exc.strerror or exc}). Pass a path in a directory you can write to."
        ) from None
    return path
