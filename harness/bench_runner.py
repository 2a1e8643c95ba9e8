"""Runner benchmarks: each prints ratios measured in one process run (machines are noisy).

- ``overhead``: wall time of a ``--jobs 1`` run against the summed seconds of the work it
  exists to do (encoding, model fitting, prediction, scoring), on the quickstart config.
- ``speedup``: wall time of ``--jobs 1`` over ``--jobs 2`` on one config of >= 40 cells.
- ``scaling``: the same grid at 25 %, 50 % and 100 % of the rows; time ratios to 25 %.

Usage: ``harness bench runner [--config FILE]`` and ``harness bench scaling [--config FILE]``.
"""

from __future__ import annotations

import argparse
import dataclasses
import tempfile
import time
from pathlib import Path

import pandas as pd

from harness import datasets as _datasets
from harness.config import load_config, parse_config
from harness.runner import execute, plan
from harness.store import read_results

__all__ = ["overhead", "speedup", "scaling", "main"]

WORK_COLUMNS = ("model_fit_s", "predict_s", "score_s")


def _timed_run(config, jobs: int, backend: str = "local") -> tuple[float, pd.DataFrame]:
    with tempfile.TemporaryDirectory() as out:
        t0 = time.perf_counter()
        execute(plan(config), out, jobs=jobs, backend=backend, progress=False)
        wall = time.perf_counter() - t0
        return wall, read_results(out)


def work_seconds(df: pd.DataFrame) -> float:
    """Seconds of real work in a results table: encoding counted once per unit."""
    ok = df[df["status"].isin(["ok", "timeout", "failed"])]
    units = ok.drop_duplicates(["dataset", "repeat", "fold", "encoder"])
    encode = (units["encoder_fit_s"].fillna(0) + units["encoder_transform_s"].fillna(0)).sum()
    return float(encode + sum(ok[c].fillna(0).sum() for c in WORK_COLUMNS))


def overhead(config_path: str) -> dict:
    """Harness overhead as a share of wall time for ``--jobs 1``."""
    config = load_config(config_path)
    wall, df = _timed_run(config, jobs=1)
    work = work_seconds(df)
    return {"config": config_path, "cells": len(df), "wall_s": wall, "work_s": work, "overhead_share": 1 - work / wall}


def speedup(config_path: str) -> dict:
    """Wall-time ratio of ``--jobs 1`` to ``--jobs 2`` on the same grid."""
    config = load_config(config_path)
    one, df = _timed_run(config, jobs=1)
    two, _ = _timed_run(config, jobs=2)
    return {"config": config_path, "cells": len(df), "jobs1_s": one, "jobs2_s": two, "speedup": one / two}


def scaling(config_path: str, fractions=(0.25, 0.5, 1.0)) -> pd.DataFrame:
    """The same grid at fractions of each dataset's rows (via ``max_rows``)."""
    base = load_config(config_path)
    sizes = {d.label: _rows(base, d.label) for d in base.datasets}
    import tomllib

    raw = tomllib.loads(Path(config_path).read_text(encoding="utf-8"))
    rows = []
    for frac in fractions:
        datasets = {}
        for spec in base.datasets:
            params = dict(spec.params)
            # real sources subsample with max_rows; the synthetic source is sized by n_rows
            key = "max_rows" if "max_rows" in _datasets.params_of(spec.source) else "n_rows"
            params[key] = max(50, int(sizes[spec.label] * frac))
            datasets[spec.label] = {"source": spec.source, **params}
        config = parse_config({**raw, "datasets": datasets}, base.path)
        wall, df = _timed_run(config, jobs=1)
        used = sum(min(sizes[k], datasets[k].get("max_rows", datasets[k].get("n_rows"))) for k in sizes)
        rows.append({"fraction": frac, "rows": used, "wall_s": wall, "cells": len(df)})
    table = pd.DataFrame(rows)
    table["time_ratio_vs_first"] = table["wall_s"] / table["wall_s"].iloc[0]
    table["row_ratio_vs_first"] = table["rows"] / table["rows"].iloc[0]
    return table


def _rows(config, label: str) -> int:
    from harness.runner import load_datasets

    return len(load_datasets(dataclasses.replace(config, datasets=tuple(d for d in config.datasets if d.label == label)))[label].y)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(prog="harness bench")
    p.add_argument("what", choices=["runner", "scaling"])
    p.add_argument("--config", default=None, help="config to time (default: quickstart / bench-speedup)")
    p.add_argument("--out", default="results/bench", help="directory for the CSV")
    args = p.parse_args(argv)
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    if args.what == "runner":
        over = overhead(args.config or "configs/quickstart.toml")
        print(f"overhead on {over['config']} (--jobs 1, {over['cells']} cells): wall {over['wall_s']:.1f} s, "
              f"work {over['work_s']:.1f} s, harness overhead {100 * over['overhead_share']:.1f} % of wall time (target <= 10 %)")
        sp = speedup(args.config or "configs/bench-speedup.toml")
        print(f"speedup on {sp['config']} ({sp['cells']} cells): --jobs 1 {sp['jobs1_s']:.1f} s, --jobs 2 "
              f"{sp['jobs2_s']:.1f} s, ratio {sp['speedup']:.2f}x (target >= 1.7x)")
        pd.DataFrame([{**over, **{f"speedup_{k}": v for k, v in sp.items()}}]).to_csv(out / "runner.csv", index=False)
    else:
        table = scaling(args.config or "configs/bench-scaling.toml")
        print(table.to_string(index=False, float_format=lambda v: f"{v:.2f}"))
        table.to_csv(out / "scaling.csv", index=False)
    print(f"written to {out}")
    return 0
