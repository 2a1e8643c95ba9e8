"""Metrics per task type, their orientation, and one function that scores a fold.

Names follow scikit-learn's scorer names without the ``neg_`` prefix; orientation is
recorded in ``GREATER_IS_BETTER`` so that every consumer ranks in the right direction.
"""

from __future__ import annotations

import numpy as np
from sklearn import metrics as skm

__all__ = ["GREATER_IS_BETTER", "CLASSIFICATION_METRICS", "REGRESSION_METRICS", "METRICS", "metrics_for", "score"]

GREATER_IS_BETTER = {
    "roc_auc": True,
    "log_loss": False,
    "accuracy": True,
    "balanced_accuracy": True,
    "rmse": False,
    "mae": False,
    "r2": True,
    # the pooled score (harness.stats.POOLED): every row's own metric (its `primary_metric`),
    # oriented so that greater is better (see harness.stats.pool_task_score): lets one
    # ranking span classification and regression datasets, since ranks are computed within
    # each dataset
    "task_score": True,
}

CLASSIFICATION_METRICS = ("roc_auc", "log_loss", "accuracy", "balanced_accuracy")
REGRESSION_METRICS = ("rmse", "mae", "r2")
METRICS = CLASSIFICATION_METRICS + REGRESSION_METRICS


def metrics_for(task: str) -> tuple[str, ...]:
    """Metric names that apply to ``task`` ("binary", "multiclass" or "regression")."""
    return REGRESSION_METRICS if task == "regression" else CLASSIFICATION_METRICS


def score(name: str, task: str, y_true, pred, classes=None) -> float:
    """Score one prediction.

    Parameters
    ----------
    name : str
        A key of ``GREATER_IS_BETTER``.
    task : str
        "binary", "multiclass" or "regression".
    y_true : array-like
        True targets.
    pred : ndarray
        Regression: predictions. Classification: class-probability matrix with columns
        in the order of ``classes``.
    classes : array-like, optional
        Class labels in the column order of ``pred``.

    Returns
    -------
    float
        The metric; NaN when it is undefined on this fold (e.g. one class in the fold).

    Notes
    -----
    Multiclass ROC AUC is the macro average of one-vs-rest AUCs (Provost & Domingos 2000
    via scikit-learn's ``multi_class="ovr"``); common practice, no single source.
    """
    y_true = np.asarray(y_true)
    if task == "regression":
        pred = np.asarray(pred, dtype=float)
        if name == "rmse":
            return float(np.sqrt(skm.mean_squared_error(y_true, pred)))
        if name == "mae":
            return float(skm.mean_absolute_error(y_true, pred))
        if name == "r2":
            return float(skm.r2_score(y_true, pred)) if len(y_true) > 1 else float("nan")
        raise ValueError(f"metric {name!r} does not apply to regression")
    classes = np.asarray(classes)
    proba = np.clip(np.asarray(pred, dtype=float), 1e-15, 1.0)
    if name == "accuracy":
        return float(skm.accuracy_score(y_true, classes[proba.argmax(axis=1)]))
    if name == "balanced_accuracy":
        return float(skm.balanced_accuracy_score(y_true, classes[proba.argmax(axis=1)]))
    if name == "log_loss":
        proba = proba / proba.sum(axis=1, keepdims=True)
        return float(skm.log_loss(y_true, proba, labels=classes))
    if name == "roc_auc":
        return _roc_auc(y_true, proba, classes)
    raise ValueError(f"metric {name!r} does not apply to classification")


def _roc_auc(y_true, proba, classes) -> float:
    present = np.unique(y_true)
    if len(present) < 2:
        return float("nan")
    if len(classes) == 2:
        return float(skm.roc_auc_score(y_true == classes[1], proba[:, 1]))
    # macro one-vs-rest over the classes present in this fold
    aucs = [
        skm.roc_auc_score(y_true == c, proba[:, j])
        for j, c in enumerate(classes)
        if c in present and (y_true != c).any()
    ]
    return float(np.mean(aucs)) if aucs else float("nan")
