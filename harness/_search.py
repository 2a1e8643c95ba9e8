"""The nested search of one tuned unit: inner folds of the outer training fold, candidates,
the winner refitted on the whole outer training fold and scored on the outer test fold.

Leak-free by construction: every candidate is scored by :func:`harness.cellwork.run_unit`
on an inner split, which fits the encoder *and* the model on the inner training rows
only, so a target encoder never sees the targets of the inner validation rows, and the
outer test rows are never part of any inner split. Candidates that share encoder settings
share one encoding per inner split (a ``tuned-model`` search encodes once per split).
"""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np

from harness import metrics as _metrics
from harness import models as _models
from harness import tuning as _tuning
from harness._splits import kfold_indices
from harness.config import digest
from harness.schema import FAILED, OK

__all__ = ["run_tuned_unit", "inner_splits", "search_points", "n_rounds_of"]


def search_points(cell, tuning: _tuning.Tuning) -> list[dict]:
    """The candidates of one tuned cell: ``[{"model": {...}, "encoder": {...}}, ...]``.

    Drawn from ``tuning.seed`` and the cell's dataset, encoder, model and regime only, so
    every outer fold (and every backend) searches the same candidates.
    """
    dims = [dataclasses.replace(d, name=f"model.{d.name}") for d in cell.model.search]
    if cell.regime == "tuned-both":
        dims += [dataclasses.replace(d, name=f"encoder.{d.name}") for d in cell.encoder.search]
    # an encoder without a space makes tuned-both the same search as tuned-model: same draws
    joint = cell.regime == "tuned-both" and bool(cell.encoder.search)
    seed = int(digest([tuning.seed, cell.dataset, cell.encoder.label, cell.model.label, joint], 8), 16)
    out = []
    for point in _tuning.candidates(tuple(dims), tuning.budget, seed):
        parts = {"model": {}, "encoder": {}}
        for key, value in point.items():
            side, name = key.split(".", 1)
            parts[side][name] = value.item() if isinstance(value, np.generic) else value
        out.append(parts)
    return out


def inner_splits(dataset, job) -> list:
    """Inner K-fold of the outer training fold, as dataset row positions (train, validation)."""
    tr = np.asarray(job.train_idx)
    groups = None if dataset.groups is None else dataset.groups.iloc[tr]
    first = job.cells[0]
    seed = (job.tuning.seed * 1000 + first.repeat * 101 + first.fold) % 2**32
    parts = kfold_indices(dataset.y.iloc[tr], groups, dataset.task, job.tuning.inner_folds, job.stratify, seed)
    return [(tr[a], tr[b]) for a, b in parts]


def run_tuned_unit(dataset, job) -> list[dict]:
    """Search, refit and score every cell of a tuned unit (one row per cell, never raises)."""
    from harness.cellwork import base_row, classify_failure

    try:
        splits = inner_splits(dataset, job)
    except ValueError as exc:  # too few rows or groups of a class for the inner folds
        _, message = classify_failure(exc, dataset.private)
        why = (
            f"the inner folds of the search cannot be built ({message}); lower tuning.inner_folds "
            f"(now {job.tuning.inner_folds}) or leave this dataset out of the tuned regimes"
        )
        return [base_row(c, dataset, job, FAILED, why) for c in job.cells]
    points = {c.cell_id: search_points(c, job.tuning) for c in job.cells}
    scores, spent = _search(dataset, job, splits, points)
    finals, rows = [], []
    for cell in job.cells:
        best = _best(scores[cell.cell_id])
        if best is None:
            why = (
                "every candidate of the search failed on the inner folds; "
                "see the model's own failures in the defaults regime"
            )
            rows.append(dict(base_row(cell, dataset, job, FAILED, why), tune_s=spent.get(cell.cell_id, 0.0)))
            continue
        finals.append((cell, points[cell.cell_id][best]))
    for cell, row in _refit(dataset, job, finals):
        tuned = dict(next(p for c, p in finals if c.cell_id == cell.cell_id))
        # record what took effect: a parameter of the other task's estimator does not
        tuned["model"] = _models.role_params(cell.model.family, dataset.task, tuned["model"])
        row.update(
            cell_id=cell.cell_id,
            regime=cell.regime,
            tune_s=spent.get(cell.cell_id, 0.0),
            tuned_params=json.dumps(tuned, sort_keys=True, default=str),
        )
        rows.append(row)
    order = {c.cell_id: i for i, c in enumerate(job.cells)}
    rows.sort(key=lambda r: order[r["cell_id"]])
    return rows


# ----------------------------------------------------------------------------- internals
def _candidate_cell(cell, point: dict, tag: str):
    """A plain (``defaults``) cell that runs ``cell`` with the candidate's settings."""
    enc = dataclasses.replace(cell.encoder, params={**cell.encoder.params, **point["encoder"]})
    model = dataclasses.replace(cell.model, params={**cell.model.params, **point["model"]})
    return dataclasses.replace(cell, encoder=enc, model=model, cell_id=tag, regime=_tuning.DEFAULT_REGIME)


def _by_encoding(cells: list) -> list[list]:
    """Cells grouped by encoder settings: each group is encoded once per split."""
    groups: dict[str, list] = {}
    for c in cells:
        groups.setdefault(json.dumps([c.encoder.kind, c.encoder.params], sort_keys=True, default=str), []).append(c)
    return list(groups.values())


def _run(dataset, job, cells: list, train_idx, test_idx, inner: bool) -> list[dict]:
    from harness.cellwork import run_unit

    rows = []
    for group in _by_encoding(cells):
        sub = dataclasses.replace(
            job,
            cells=tuple(group),
            train_idx=train_idx,
            test_idx=test_idx,
            tuning=None,
            metrics=(job.task_metric(dataset.task),) if inner else job.metrics,
            score_train=not inner,
        )
        rows += run_unit(dataset, sub)
    return rows


def _search(dataset, job, splits: list, points: dict) -> tuple[dict, dict]:
    """Inner scores ``{cell_id: [mean score per candidate, or None if out]}`` and time spent per cell.

    Random search scores every candidate on every inner split. Successive halving scores
    all candidates on a share of each inner training split, keeps the best
    1/``HALVING_FACTOR`` and repeats on a larger share, the last round on the whole split.
    """
    alive = {cid: list(range(len(p))) for cid, p in points.items()}
    n_rounds = n_rounds_of(job.tuning)
    scores = {cid: [None] * len(p) for cid, p in points.items()}
    spent: dict[str, float] = {}
    cells = {c.cell_id: c for c in job.cells}
    for rnd in range(n_rounds):
        share = float(_tuning.HALVING_FACTOR) ** (rnd - (n_rounds - 1))
        tags = {f"{cid}:{i}": (cid, i) for cid, idx in alive.items() for i in idx}
        sums = {t: [] for t in tags}
        for s, (tr, va) in enumerate(splits):
            cand = [_candidate_cell(cells[cid], points[cid][i], tag) for tag, (cid, i) in tags.items()]
            for row in _run(dataset, job, cand, _subsample(tr, share, s, job), va, inner=True):
                sums[row["cell_id"]].append(_oriented(row, job.task_metric(dataset.task)))
                spent[tags[row["cell_id"]][0]] = spent.get(tags[row["cell_id"]][0], 0.0) + _time_of(row, cand)
        for tag, (cid, i) in tags.items():
            vals = sums[tag]
            scores[cid][i] = float(np.mean(vals)) if vals and all(np.isfinite(vals)) else -math.inf
        if rnd < n_rounds - 1:
            alive = {cid: _keep(scores[cid], idx) for cid, idx in alive.items()}
    for cid, idx in alive.items():  # a candidate dropped in an earlier round cannot win
        scores[cid] = [scores[cid][i] if i in idx else None for i in range(len(scores[cid]))]
    return scores, spent


def n_rounds_of(tuning) -> int:
    """Rounds of the search: 1 for random search; for halving, one round per cut by
    ``HALVING_FACTOR`` until at most that many candidates are left for the last round."""
    rounds, left = 1, tuning.budget
    while tuning.method == "halving" and left > _tuning.HALVING_FACTOR:
        left = math.ceil(left / _tuning.HALVING_FACTOR)
        rounds += 1
    return rounds


def _keep(cell_scores: list, idx: list) -> list:
    """The best ``ceil(n / factor)`` of the live candidates, ties to the earlier draw."""
    k = max(1, math.ceil(len(idx) / _tuning.HALVING_FACTOR))
    return sorted(sorted(idx, key=lambda i: -cell_scores[i])[:k])


def _subsample(tr: np.ndarray, share: float, split: int, job) -> np.ndarray:
    """The first ``share`` of a fixed shuffle of an inner training split (all of it at share 1)."""
    if share >= 1:
        return tr
    rng = np.random.default_rng((job.tuning.seed, split, job.cells[0].repeat, job.cells[0].fold))
    n = min(len(tr), max(20, math.ceil(share * len(tr))))
    return np.sort(rng.permutation(tr)[:n])


def _oriented(row: dict, metric: str) -> float:
    """The row's score on ``metric``, greater is better; a failed candidate scores -inf."""
    value = row.get(metric)
    if row.get("status") != OK or value is None or not np.isfinite(value):
        return -math.inf
    return float(value) if _metrics.GREATER_IS_BETTER[metric] else -float(value)


def _time_of(row: dict, cells: list) -> float:
    """A candidate's share of the search time: its model's fit, prediction and scoring, and
    its share of the one encoding made for all candidates of the same encoder settings."""
    mine = next(c for c in cells if c.cell_id == row["cell_id"])
    n_shared = sum(1 for c in cells if c.encoder.params == mine.encoder.params)
    enc = (row.get("encoder_fit_s") or 0.0) + (row.get("encoder_transform_s") or 0.0)
    return sum(row.get(k) or 0.0 for k in ("model_fit_s", "predict_s", "score_s")) + enc / n_shared


def _best(cell_scores: list) -> int | None:
    live = [(s, -i) for i, s in enumerate(cell_scores) if s is not None and s > -math.inf]
    return -max(live)[1] if live else None


def _refit(dataset, job, finals: list) -> list[tuple]:
    """Each cell's winning candidate, fitted on the outer training fold and scored on its test fold."""
    cand = [_candidate_cell(cell, point, cell.cell_id) for cell, point in finals]
    rows = _run(dataset, job, cand, job.train_idx, job.test_idx, inner=False) if cand else []
    by_id = {c.cell_id: c for c, _ in finals}
    return [(by_id[r["cell_id"]], r) for r in rows]
