"""Runner benchmarks: each prints ratios measured in one process run (machines are noisy).

- ``overhead``: wall time of a ``--jobs 1`` run against the summed seconds of the work it
  exists to do (encoding, model fitting, prediction, scoring), on the quickstart config.
- ``speedup``: wall time of ``--jobs 1`` over ``--jobs 2`` on one config of >= 40 cells.
- ``scaling``: the same grid at 25 %, 50 % and 100 % of the rows; time ratios to 25 %.
- ``hand_loop``: wall time of what a user would write by hand (one scikit-learn
  ``Pipeline`` of ``ColumnTransformer(encoder, median imputer)`` and the model per
  dataset x encoder x model x fold, on the same folds, seeds and metrics) against
  ``levelfold run --jobs 1``; the two tables' metrics are compared too.

- ``tuning``: the same grid run once per tuning regime; each regime's wall time against
  the untuned run, beside the bound ``budget x inner_folds + 1`` fits per cell.

Usage: ``levelfold bench runner|scaling|tuning [--config FILE]``.
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
from harness.schema import FAILED, OK, TIMEOUT
from harness.store import read_results

__all__ = ["overhead", "speedup", "scaling", "hand_loop", "tuning_cost", "main"]

WORK_COLUMNS = ("model_fit_s", "predict_s", "score_s")


def _timed_run(config, jobs: int, backend: str = "local") -> tuple[float, pd.DataFrame]:
    with tempfile.TemporaryDirectory() as out:
        t0 = time.perf_counter()
        execute(plan(config), out, jobs=jobs, backend=backend, progress=False)
        wall = time.perf_counter() - t0
        return wall, read_results(out)


def work_seconds(df: pd.DataFrame) -> float:
    """Seconds of real work in a results table: encoding counted once per unit."""
    ok = df[df["status"].isin([OK, TIMEOUT, FAILED])]
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
    """The same grid at fractions of each dataset's rows (via ``sample_rows``)."""
    base = load_config(config_path)
    sizes = {d.label: _rows(base, d.label) for d in base.datasets}
    import tomllib

    raw = tomllib.loads(Path(config_path).read_text(encoding="utf-8"))
    rows = []
    for frac in fractions:
        datasets = {}
        for spec in base.datasets:
            params = dict(spec.params)
            # real sources subsample with sample_rows; the synthetic source is sized by n_rows
            key = "sample_rows" if "sample_rows" in _datasets.params_of(spec.source) else "n_rows"
            params[key] = max(50, int(sizes[spec.label] * frac))
            datasets[spec.label] = {"source": spec.source, **params}
        config = parse_config({**raw, "datasets": datasets}, base.path)
        wall, df = _timed_run(config, jobs=1)
        used = sum(min(sizes[k], datasets[k].get("sample_rows", datasets[k].get("n_rows"))) for k in sizes)
        rows.append({"fraction": frac, "rows": used, "wall_s": wall, "cells": len(df)})
    table = pd.DataFrame(rows)
    table["time_ratio_vs_first"] = table["wall_s"] / table["wall_s"].iloc[0]
    table["row_ratio_vs_first"] = table["rows"] / table["rows"].iloc[0]
    return table


def hand_loop(config_path: str, repeats: int = 2) -> dict:
    """The harness against a hand-written ``Pipeline`` loop over the same cells.

    Both run single-threaded in this process, load the data themselves and compute every
    metric of the config on the test fold and the primary metric on the training fold.
    The two are timed alternately ``repeats`` times and the best of each is kept, so a
    burst of load on a shared machine does not fall on one side only. Returns the two
    wall times, their ratio (hand loop / harness) and the largest absolute difference
    between the two tables' test-fold metrics.
    """
    config = load_config(config_path)
    harness_s = hand_s = float("inf")
    for _ in range(repeats):
        wall, df = _timed_run(config, jobs=1)
        harness_s = min(harness_s, wall)
        t0 = time.perf_counter()
        hand = _hand_written(config)
        hand_s = min(hand_s, time.perf_counter() - t0)
    keys = ["dataset", "encoder", "model", "repeat", "fold"]
    both = df.merge(hand, on=keys, suffixes=("", "_hand"))
    # test-fold metrics only: a Pipeline predicts its training fold through
    # ``transform`` (full-data target statistics), the harness through the cross-fitted
    # training encodings, so the training-fold scores of target encoders differ by design
    metrics = [c for c in hand.columns if c not in keys and not c.startswith("train_")]
    diff = max(float((both[m] - both[f"{m}_hand"]).abs().max()) for m in metrics)
    return {
        "config": config_path,
        "cells": len(df),
        "matched": len(both),
        "harness_s": harness_s,
        "hand_s": hand_s,
        "ratio": hand_s / harness_s,
        "max_metric_diff": diff,
    }


def _hand_written(config) -> pd.DataFrame:
    """The loop a user writes without the harness (no sharing across models or folds)."""
    import numpy as np
    from threadpoolctl import threadpool_limits

    from harness import metrics as _metrics
    from harness.runner import load_datasets, outer_splits

    p = config.protocol
    rows = []
    with threadpool_limits(1):
        for label, ds in load_datasets(config).items():
            own = p.regression_metric if ds.task == "regression" else p.classification_metric
            classes = None if ds.task == "regression" else np.unique(ds.y.to_numpy())
            splits = outer_splits(ds, p.folds, p.repeats, p.stratify, config.seed)
            for (repeat, fold), (tr, te) in splits.items():
                X_tr, X_te = ds.X.iloc[tr], ds.X.iloc[te]
                y_tr, y_te = ds.y.iloc[tr].to_numpy(), ds.y.iloc[te].to_numpy()
                for enc in config.encoders:
                    for model in config.models:
                        pipe = _hand_pipeline(config, ds, enc, model, repeat, fold).fit(X_tr, y_tr)
                        if ds.task == "regression":
                            pred_te, pred_tr = pipe.predict(X_te), pipe.predict(X_tr)
                        else:
                            pred_te, pred_tr = pipe.predict_proba(X_te), pipe.predict_proba(X_tr)
                        row = {"dataset": label, "encoder": enc.label, "model": model.label}
                        row.update(repeat=repeat, fold=fold)
                        for name in p.metrics:
                            if name in _metrics.metrics_for(ds.task):
                                row[name] = _metrics.score(name, ds.task, y_te, pred_te, classes)
                        row[f"train_{own}"] = _metrics.score(own, ds.task, y_tr, pred_tr, classes)
                        rows.append(row)
    return pd.DataFrame(rows)


def _hand_pipeline(config, ds, enc, model, repeat: int, fold: int):
    """One scikit-learn pipeline (encoder and imputer side by side, then the model), unfitted."""
    from sklearn.compose import ColumnTransformer
    from sklearn.impute import SimpleImputer
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import FunctionTransformer

    from harness import models as _models
    from harness.encoders import build

    target_types = {"binary": "binary", "multiclass": "multiclass", "regression": "continuous"}
    cat, num = list(ds.categorical), list(ds.numeric)
    encoder = build(enc.kind, **enc.params)
    if "random_state" in encoder.get_params() and "random_state" not in enc.params:
        encoder.set_params(random_state=(config.seed * 10_007 + repeat * 101 + fold) % (2**31 - 1))
    if encoder.get_params().get("target_type") == "auto":
        encoder.set_params(target_type=target_types[ds.task])
    sparse = enc.kind == "hashing" or (enc.kind == "onehot" and enc.params.get("sparse", True))
    steps = [
        ColumnTransformer([("cat", encoder, cat), ("num", SimpleImputer(strategy="median"), num)], sparse_threshold=1.0)
    ]
    if sparse and not _models.FAMILIES[model.family].sparse:
        steps.append(FunctionTransformer(lambda m: m.toarray(), accept_sparse=True))
    seed = (config.seed + repeat) % 2**31
    steps.append(_models.build_model(model.family, ds.task, seed=seed, params=dict(model.params), n_numeric=len(num)))
    return make_pipeline(*steps)


def tuning_cost(config_path: str) -> pd.DataFrame:
    """Wall time of the config's grid under each of its regimes alone (``--jobs 1``), and the
    ratio to the ``defaults`` regime (the cost multiplier of tuning)."""
    base = load_config(config_path)
    rows = []
    for regime in base.tuning.regimes:
        config = dataclasses.replace(base, tuning=dataclasses.replace(base.tuning, regimes=(regime,)))
        wall, df = _timed_run(config, jobs=1)
        rows.append(
            {
                "regime": regime,
                "cells": len(df),
                "ok": int((df["status"] == OK).sum()),
                "wall_s": wall,
                "tune_s": float(df["tune_s"].fillna(0).sum()),
                "fits_per_cell_bound": 1 if regime == "defaults" else base.tuning.fits_per_cell(),
            }
        )
    table = pd.DataFrame(rows)
    ref = table.loc[table["regime"] == "defaults", "wall_s"]
    table["multiplier"] = table["wall_s"] / float(ref.iloc[0]) if len(ref) else float("nan")
    return table


def _rows(config, label: str) -> int:
    from harness.runner import load_datasets

    return len(
        load_datasets(dataclasses.replace(config, datasets=tuple(d for d in config.datasets if d.label == label)))[
            label
        ].y
    )


def main(argv=None) -> int:
    p = argparse.ArgumentParser(prog="levelfold bench")
    p.add_argument("what", choices=["runner", "scaling", "tuning"])
    p.add_argument("--config", default=None, help="config to time (default: quickstart / bench-speedup)")
    p.add_argument("--out", default="results/bench", help="directory for the CSV")
    args = p.parse_args(argv)
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    if args.what == "runner":
        over = overhead(args.config or "configs/quickstart.toml")
        print(
            f"overhead on {over['config']} (--jobs 1, {over['cells']} cells): wall {over['wall_s']:.1f} s, "
            f"work {over['work_s']:.1f} s, harness overhead {100 * over['overhead_share']:.1f} % of wall time "
            "(target <= 10 %)"
        )
        sp = speedup(args.config or "configs/bench-speedup.toml")
        print(
            f"speedup on {sp['config']} ({sp['cells']} cells): --jobs 1 {sp['jobs1_s']:.1f} s, --jobs 2 "
            f"{sp['jobs2_s']:.1f} s, ratio {sp['speedup']:.2f}x (target >= 1.7x)"
        )
        hand = hand_loop(args.config or "configs/quickstart.toml")
        print(
            f"hand-written Pipeline loop on {hand['config']} ({hand['matched']} of {hand['cells']} cells matched, "
            f"largest metric difference {hand['max_metric_diff']:.2g}): loop {hand['hand_s']:.1f} s, harness "
            f"--jobs 1 {hand['harness_s']:.1f} s, ratio {hand['ratio']:.2f}x (loop / harness)"
        )
        pd.DataFrame(
            [{**over, **{f"speedup_{k}": v for k, v in sp.items()}, **{f"hand_{k}": v for k, v in hand.items()}}]
        ).to_csv(out / "runner.csv", index=False)
    elif args.what == "tuning":
        table = tuning_cost(args.config or "configs/bench-tuning.toml")
        print(table.to_string(index=False, float_format=lambda v: f"{v:.2f}"))
        table.to_csv(out / "tuning.csv", index=False)
    else:
        table = scaling(args.config or "configs/bench-scaling.toml")
        print(table.to_string(index=False, float_format=lambda v: f"{v:.2f}"))
        table.to_csv(out / "scaling.csv", index=False)
    print(f"written to {out}")
    return 0
