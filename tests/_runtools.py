"""Helpers shared by the fault, awkward-data, determinism and scale tests.

They start ``python -m harness`` as a real process (signals and kills need one), read a
store without taking its lock, and write configs as TOML text.
"""

from __future__ import annotations

import json
import os
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

from harness.metrics import METRICS

ROOT = Path(__file__).resolve().parents[1]
CONFIGS = Path(__file__).parent / "_fault_configs"
# every number a cell reports that must not depend on how or when it was computed
RESULT_COLUMNS = ["status", *METRICS, *[f"train_{m}" for m in METRICS], "n_features_out", "n_train", "n_test"]


def toml_text(raw: dict) -> str:
    """Serialise a two-level config dict (sections of tables of scalars/lists) as TOML."""
    lines = []

    def value(v):
        if isinstance(v, bool):
            return "true" if v else "false"
        if isinstance(v, (list, tuple)):
            return "[" + ", ".join(value(x) for x in v) + "]"
        if isinstance(v, str):
            return json.dumps(v)  # a JSON string is a valid TOML basic string
        return repr(v)

    def table(name, body):
        lines.append(f"[{name}]")
        nested = {k: v for k, v in body.items() if isinstance(v, dict)}
        lines.extend(f"{json.dumps(k)} = {value(v)}" for k, v in body.items() if k not in nested)
        for key, sub in nested.items():
            table(f"{name}.{json.dumps(key)}", sub)

    for section, body in raw.items():
        table(section, body)
    return "\n".join(lines) + "\n"


def write_config(path: Path, raw: dict) -> Path:
    path.write_text(toml_text(raw), encoding="utf-8")
    return path


def tiny_config(
    path: Path,
    *,
    name: str = "tiny",
    folds: int = 2,
    repeats: int | None = None,
    n_rows: int = 60,
    cardinalities=(4,),
    encoders=None,
    models=None,
) -> Path:
    """Write the tiny config the CLI, store and fault tests run, and return its path.

    One invented synthetic binary dataset ``toy`` (``n_rows`` rows, one categorical column
    per entry of ``cardinalities``), ``folds``-fold cross-validation, ``encoders`` as
    ``{label: kind}`` (default ``codes`` = integer) and ``models`` as ``{label: {family,
    params...}}`` (default ``lin`` = linear). ``repeats`` is written only when given.
    """
    protocol = {"folds": folds} if repeats is None else {"folds": folds, "repeats": repeats}
    raw = {
        "experiment": {"name": name},
        "protocol": protocol,
        "datasets": {
            "toy": {"source": "synthetic", "n_rows": n_rows, "cardinalities": list(cardinalities), "task": "binary"}
        },
        "encoders": {label: {"kind": kind} for label, kind in (encoders or {"codes": "integer"}).items()},
        "models": models or {"lin": {"family": "linear"}},
    }
    return write_config(Path(path), raw)


def store_rows(n: int, *, status: str = "ok", error: str = "", score=lambda i: 0.5 + i / 100) -> list[dict]:
    """``n`` bare store rows of one dataset/encoder/model, one per fold (for store tests)."""
    from harness.schema import SCHEMA_VERSION

    base = {"schema_version": SCHEMA_VERSION, "dataset": "d", "encoder": "e", "model": "m", "repeat": 0}
    return [
        {**base, "cell_id": f"c{i}", "fold": i, "status": status, "roc_auc": score(i), "error": error} for i in range(n)
    ]


def harness_cmd(*args) -> list[str]:
    return [sys.executable, "-m", "harness", *map(str, args)]


def start(*args, group: bool = False) -> subprocess.Popen:
    """Start ``python -m harness ARGS`` with piped text output (own session if ``group``)."""
    env = {**os.environ, "PYTHONUNBUFFERED": "1"}
    return subprocess.Popen(
        harness_cmd(*args),
        cwd=ROOT,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        start_new_session=group,
    )


def run(*args, timeout: float = 300) -> subprocess.CompletedProcess:
    return subprocess.run(harness_cmd(*args), cwd=ROOT, capture_output=True, text=True, timeout=timeout)


def count_rows(out: Path) -> int:
    """Rows in ``out/results.sqlite`` read without the lock; -1 if not readable yet."""
    path = Path(out) / "results.sqlite"
    if not path.exists():
        return -1
    try:
        db = sqlite3.connect(f"file:{path}?mode=ro", uri=True, timeout=5)
        try:
            return db.execute("SELECT count(*) FROM cells").fetchone()[0]
        finally:
            db.close()
    except sqlite3.Error:
        return -1


def wait_for_rows(out: Path, at_least: int, proc: subprocess.Popen, timeout: float = 180) -> int:
    """Poll until the store holds ``at_least`` rows; the number, or -1 if ``proc`` ended first."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        n = count_rows(out)
        if n >= at_least:
            return n
        if proc.poll() is not None:
            return -1
        time.sleep(0.05)
    raise AssertionError(f"no {at_least} rows in {out} after {timeout} s")


def integrity(out: Path) -> str:
    db = sqlite3.connect(Path(out) / "results.sqlite")
    try:
        return db.execute("PRAGMA integrity_check").fetchone()[0]
    finally:
        db.close()


def results_by_cell(out: Path) -> pd.DataFrame:
    from harness.store import read_results

    return read_results(out).set_index("cell_id").sort_index()


def assert_same_results(a: pd.DataFrame, b: pd.DataFrame) -> None:
    """Same cells, same status, bit-identical metrics (NaN equal to NaN)."""
    assert list(a.index) == list(b.index)
    for col in RESULT_COLUMNS:
        left, right = a[col].to_numpy(), b[col].to_numpy()
        if left.dtype.kind == "f" or right.dtype.kind == "f":
            left, right = left.astype(float), right.astype(float)
            differ = ~((left == right) | (np.isnan(left) & np.isnan(right)))
        else:
            differ = left != right
        where = a.loc[differ, ["dataset", "encoder", "model", "repeat", "fold"]]
        assert not differ.any(), f"{col} differs in {where.to_string()}\n{left[differ]} != {right[differ]}"


def assert_clean_refusal(proc, code: int | None = None) -> str:
    """A non-zero exit, a one-paragraph message, no traceback, no internal error."""
    err = proc.stderr
    assert proc.returncode != 0, err
    if code is not None:
        assert proc.returncode == code, (proc.returncode, err)
    assert "Traceback" not in err and "internal error" not in err, err
    assert err.startswith("error: "), err
    return " ".join(err.split())
