"""The work of one encoding unit: encode a fold once, then train and score every model on it.

``run_unit`` is what a backend executes. It never raises for a cell's own failure: a
failing encoder or model becomes rows with status ``failed``, ``timeout`` or
``out-of-memory`` and the error text, so a sweep never stops on one bad cell.
"""

from __future__ import annotations

import inspect
import json
import time
import traceback
import warnings
from dataclasses import dataclass
from datetime import UTC, datetime

import numpy as np
import pandas as pd
import scipy.sparse as sp
from sklearn.dummy import DummyClassifier, DummyRegressor
from threadpoolctl import threadpool_limits

from harness import encoders as _encoders
from harness import metrics as _metrics
from harness import models as _models
from harness._resources import CellTimeout, memory_limit, peak_rss_mb, reset_peak_rss, time_limit
from harness.grid import Cell
from harness.schema import FAILED, NOT_APPLICABLE, OK, OUT_OF_MEMORY, SCHEMA_VERSION, SKIPPED, TIMEOUT
from harness.tuning import Tuning

__all__ = ["UnitJob", "run_unit", "base_row", "classify_failure"]

TARGET_TYPE = {"binary": "binary", "multiclass": "multiclass", "regression": "continuous"}


@dataclass(frozen=True)
class UnitJob:
    """Everything a worker needs for one unit, apart from the dataset itself."""

    cells: tuple[Cell, ...]
    train_idx: np.ndarray
    test_idx: np.ndarray
    seed: int
    classification_metric: str  # protocol.classification_metric
    regression_metric: str  # protocol.regression_metric
    metrics: tuple[str, ...]
    config_hash: str
    timeout_s: float | None = None
    memory_mb: int = 0
    stratify: bool = True  # inner folds of a search follow the protocol's stratification
    tuning: Tuning | None = None  # the [tuning] settings (tuned units only)
    score_train: bool = True  # False inside a search: only the validation score is read

    def task_metric(self, task: str) -> str:
        """The metric a dataset of ``task`` is scored on (the row's ``primary_metric``)."""
        return self.regression_metric if task == "regression" else self.classification_metric

    @property
    def fits_per_cell(self) -> int:
        """Model fits of one cell of the unit at most (1, or a search's fits and the refit)."""
        return self.tuning.fits_per_cell() if self.tuning is not None else 1


def base_row(cell: Cell, dataset, job: UnitJob, status: str, error: str = "") -> dict:
    """The identifying part of a results row."""
    task = dataset.task
    declared = _encoders.declaration(cell.encoder.kind, cell.encoder.params)
    return {
        "cell_id": cell.cell_id,
        "schema_version": SCHEMA_VERSION,
        "config_hash": job.config_hash,
        "dataset": cell.dataset,
        "encoder": cell.encoder.label,
        "model": cell.model.label,
        "repeat": cell.repeat,
        "fold": cell.fold,
        "regime": cell.regime,
        "status": status,
        "error": error,
        "task": task,
        "encoder_kind": cell.encoder.kind,
        "encoder_params": json.dumps(cell.encoder.params, sort_keys=True, default=str),
        # the encoder class's own declarations: readers never parse encoder_params for them
        "uses_target": declared.uses_target,
        "leaky": declared.leaky,
        "model_family": cell.model.family,
        "model_params": json.dumps(cell.model.params, sort_keys=True, default=str),
        "tuned_params": "{}",  # a tuned cell's chosen settings (harness._search)
        "tune_s": 0.0,
        "primary_metric": job.task_metric(task),
        "n_features_in": len(dataset.categorical) + len(dataset.numeric),
        "n_train": len(job.train_idx),
        "n_test": len(job.test_idx),
        "max_cardinality": dataset.max_cardinality,
        "finished_at": datetime.now(UTC).isoformat(timespec="seconds"),
    }


def run_unit(dataset, job: UnitJob) -> list[dict]:
    """Encode one outer fold with one encoder and fit/score every model of the unit.

    A tuned unit (``job.tuning`` set) first searches each cell's settings on inner folds of
    the outer training fold (:func:`harness._search.run_tuned_unit`).
    """
    if job.tuning is not None:
        from harness._search import run_tuned_unit

        return run_tuned_unit(dataset, job)
    with threadpool_limits(1), warnings.catch_warnings():
        # convergence and deprecation chatter from estimators would drown the progress
        # bar; a cell's outcome is in its row (status, error), not in warnings
        warnings.simplefilter("ignore")
        encoded = _encode(dataset, job)
        if isinstance(encoded, list):  # the encoder failed: one row per cell
            return encoded
        return [_model_cell(cell, dataset, job, encoded) for cell in job.cells]


# --------------------------------------------------------------------------- encoding
@dataclass
class _Encoded:
    train: object
    test: object
    fit_s: float
    transform_s: float
    n_out: int
    mb: float
    peak_mb: float
    y_train: np.ndarray = None
    y_test: np.ndarray = None
    classes: np.ndarray | None = None  # every class of the dataset (classification only)


def _encoder_seed(job: UnitJob, cell: Cell) -> int:
    return int(job.seed * 10_007 + cell.repeat * 101 + cell.fold) % (2**31 - 1)


def _encode(dataset, job: UnitJob):
    cell = job.cells[0]
    cat, num = list(dataset.categorical), list(dataset.numeric)
    X_train, X_test = dataset.X.iloc[job.train_idx], dataset.X.iloc[job.test_idx]
    y_train = dataset.y.iloc[job.train_idx].to_numpy()
    params = dict(cell.encoder.params)
    try:
        reset_peak_rss()
        with memory_limit(job.memory_mb), time_limit(job.timeout_s):
            enc = _encoders.build(cell.encoder.kind, **params)
            if "random_state" in enc.get_params() and "random_state" not in params:
                enc.set_params(random_state=_encoder_seed(job, cell))
            if enc.get_params().get("target_type") == "auto":
                # the dataset knows its task; guessing from y would call integer-valued
                # regression targets multiclass
                enc.set_params(target_type=TARGET_TYPE[dataset.task])
            fit_args = {}
            if dataset.groups is not None and "groups" in inspect.signature(enc.fit_transform).parameters:
                # grouped outer folds: the encoder's inner folds keep each group whole too
                fit_args["groups"] = dataset.groups.iloc[job.train_idx].to_numpy()
            t0 = time.perf_counter()
            cat_train = enc.fit_transform(X_train[cat], y_train, **fit_args) if cat else None
            t1 = time.perf_counter()
            cat_test = enc.transform(X_test[cat]) if cat else None
            t2 = time.perf_counter()
            train, test = _with_numeric(cat_train, cat_test, X_train[num], X_test[num])
    except Exception as exc:  # noqa: BLE001 - every failure becomes rows
        status, message = classify_failure(exc, dataset.private)
        return [base_row(c, dataset, job, status, message) for c in job.cells]
    # targets and the class list once per unit, shared by every model of the unit
    classes = None if dataset.task == "regression" else np.unique(dataset.y.to_numpy())
    return _Encoded(
        train,
        test,
        t1 - t0,
        t2 - t1,
        train.shape[1],
        _megabytes(train),
        peak_rss_mb(),
        y_train,
        dataset.y.iloc[job.test_idx].to_numpy(),
        classes,
    )


def _with_numeric(cat_train, cat_test, num_train: pd.DataFrame, num_test: pd.DataFrame):
    """Append numeric columns (median-imputed on the training fold) to the encoded block."""
    # infinities count as missing: no model family accepts them
    num_train = num_train.replace([np.inf, -np.inf], np.nan)
    num_test = num_test.replace([np.inf, -np.inf], np.nan)
    medians = num_train.median(numeric_only=True).fillna(0.0)
    n_tr = num_train.fillna(medians).to_numpy(dtype=float)
    n_te = num_test.fillna(medians).to_numpy(dtype=float)
    if cat_train is None:
        return n_tr, n_te
    if isinstance(cat_train, pd.DataFrame):  # native categoricals stay a frame
        return _native_frame(cat_train, n_tr), _native_frame(cat_test, n_te)
    if sp.issparse(cat_train):
        return (
            sp.hstack([cat_train, sp.csr_matrix(n_tr)], format="csr"),
            sp.hstack([cat_test, sp.csr_matrix(n_te)], format="csr"),
        )
    return np.hstack([np.asarray(cat_train, dtype=float), n_tr]), np.hstack([np.asarray(cat_test, dtype=float), n_te])


def _native_frame(cat: pd.DataFrame, num: np.ndarray) -> pd.DataFrame:
    """Categorical columns then numeric ones, under positional names ``f0, f1, ...``.

    Raw names broke models: a categorical column named like a prefixed numeric one
    ("num__age" next to "age") duplicated a name, and LightGBM refuses names holding
    JSON specials ("price [USD]"). Models take the columns by dtype, never by name.
    """
    out = pd.concat([cat, pd.DataFrame(num, index=cat.index)], axis=1)
    out.columns = [f"f{i}" for i in range(out.shape[1])]
    return out


def _megabytes(matrix) -> float:
    if sp.issparse(matrix):
        return (matrix.data.nbytes + matrix.indices.nbytes + matrix.indptr.nbytes) / 2**20
    if isinstance(matrix, pd.DataFrame):
        return float(matrix.memory_usage(deep=False, index=False).sum()) / 2**20
    return matrix.nbytes / 2**20


def classify_failure(exc: BaseException, private: bool = False) -> tuple[str, str]:
    """Status and error text of a failed cell.

    For a private dataset only the exception type is kept: library messages may quote
    raw values (an unseen category, a column's contents), which must not leave the run.
    """
    if isinstance(exc, CellTimeout):
        return TIMEOUT, str(exc)
    if isinstance(exc, MemoryError):
        return OUT_OF_MEMORY, "MemoryError: the cell exceeded its memory limit (execution.cell_memory_mb)"
    if private:
        return FAILED, f"{type(exc).__name__} (message withheld: private dataset)"
    last = traceback.format_exception_only(type(exc), exc)[-1].strip()
    return FAILED, last[:2000]


# --------------------------------------------------------------------------- models
def _model_cell(cell: Cell, dataset, job: UnitJob, enc: _Encoded) -> dict:
    family = _models.FAMILIES[cell.model.family]
    row = base_row(cell, dataset, job, OK)
    row.update(
        encoder_fit_s=enc.fit_s, encoder_transform_s=enc.transform_s, n_features_out=enc.n_out, encoded_mb=enc.mb
    )
    native = isinstance(enc.train, pd.DataFrame)
    if native and not family.native_categorical:
        row.update(status=NOT_APPLICABLE, error=f"model family '{family.name}' cannot take native categorical columns")
        return row
    limit_rows = cell.model.skip_above_rows
    if limit_rows is not None and len(job.train_idx) > limit_rows:
        row.update(
            status=SKIPPED,
            error=f"{len(job.train_idx)} training rows exceed models.{cell.model.label}.skip_above_rows = {limit_rows}",
        )
        return row
    limit = cell.model.cell_timeout_s or job.timeout_s
    # name the key that set the limit: a per-model limit is not execution.cell_timeout_s
    key = f"models.{cell.model.label}.cell_timeout_s" if cell.model.cell_timeout_s else "execution.cell_timeout_s"
    try:
        reset_peak_rss()
        with memory_limit(job.memory_mb), time_limit(limit, key):
            train, test = enc.train, enc.test
            if sp.issparse(train) and not family.sparse:
                train, test = train.toarray(), test.toarray()
            row.update(_fit_and_score(cell, dataset, job, train, test, enc))
        row["peak_rss_mb"] = max(peak_rss_mb(), enc.peak_mb)
    except Exception as exc:  # noqa: BLE001
        status, message = classify_failure(exc, dataset.private)
        row.update(status=status, error=message)
    if limit and row["status"] == OK and row.get("model_fit_s", 0) + row.get("predict_s", 0) > limit:
        # backends without SIGALRM (Dask threads) check the limit after the fact
        row.update(status=TIMEOUT, error=f"cell exceeded the time limit of {limit:g} s ({key})")
    return row


def _fit_and_score(cell: Cell, dataset, job: UnitJob, train, test, enc: _Encoded) -> dict:
    task = dataset.task
    y_train, y_test = enc.y_train, enc.y_test
    if train.shape[1] == 0:
        # nothing left to learn from (e.g. `drop` on a table without numeric columns):
        # the honest baseline is a constant prediction, the training prior or mean
        model = DummyRegressor() if task == "regression" else DummyClassifier(strategy="prior")
    else:
        model = _models.build_model(
            cell.model.family,
            task,
            seed=(job.seed + cell.repeat) % 2**31,
            params=dict(cell.model.params),
            n_numeric=len(dataset.numeric),
        )
    t0 = time.perf_counter()
    model.fit(train, y_train)
    t1 = time.perf_counter()
    pred_test = _predict(model, test, task)
    t2 = time.perf_counter()
    out = {"model_fit_s": t1 - t0, "predict_s": t2 - t1}
    classes = enc.classes
    if task != "regression":
        # a class missing from the training fold still counts in the test fold's metrics
        pred_test = _align(pred_test, model.classes_, classes)
    for name in job.metrics:
        if name in _metrics.metrics_for(task):
            out[name] = _metrics.score(name, task, y_test, pred_test, classes)
    if job.score_train:  # the training-fold score of the overfitting figure
        pred_train = _predict(model, train, task)
        if task != "regression":
            pred_train = _align(pred_train, model.classes_, classes)
        own = job.task_metric(task)
        out[f"train_{own}"] = _metrics.score(own, task, y_train, pred_train, classes)
    out["score_s"] = time.perf_counter() - t2  # training-fold prediction and every metric
    return out


def _align(proba: np.ndarray, seen, classes: np.ndarray) -> np.ndarray:
    if len(seen) == len(classes):
        return proba
    full = np.zeros((proba.shape[0], len(classes)))
    full[:, np.searchsorted(classes, seen)] = proba
    return full


def _predict(model, X, task: str):
    return model.predict(X) if task == "regression" else model.predict_proba(X)
