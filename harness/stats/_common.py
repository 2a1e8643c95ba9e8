"""Shared conventions of the statistics package: row filters, orientation, pooling.

Scores become *oriented* scores (greater is better) through
``harness.metrics.GREATER_IS_BETTER``; ranks are 1 = best, ties get the average rank.
Only rows with ``status == "ok"`` enter any statistic.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness.errors import ConfigError, DataError
from harness.metrics import GREATER_IS_BETTER
from harness.schema import OK as STATUS_OK

MISSING_POLICIES = ("auto", "drop_datasets", "drop_encoders")
#: aggregation name -> (column of :func:`aggregate_scores`, True when smaller is better)
AGGREGATIONS = {
    "mean_rank": ("mean_rank", True),
    "median_rank": ("median_rank", True),
    "mean_normalised": ("mean_normalised", False),
    "win_rate": ("win_rate", False),
}
_REQUIRED = ("dataset", "encoder", "model", "status")

# ----------------------------------------------------------------------------- basics
#: the pooled score column: each row's own metric (named in its ``primary_metric`` column),
#: oriented greater-is-better; shown as "each dataset's own metric"
POOLED = "task_score"


def pool_task_score(results: pd.DataFrame) -> pd.DataFrame:
    """Add the column ``task_score``: the value of each row's ``primary_metric``, oriented
    greater-is-better.

    Encoders are ranked within each dataset, so a ranking across datasets may mix
    classification datasets judged on ROC AUC with regression datasets judged on RMSE
    (Demšar 2006, JMLR 7, Sec. 3: ranks make performance measures on different scales
    comparable). The sign flip keeps "greater is better" for error metrics.
    """
    out = results.copy()
    out[POOLED] = np.nan
    if "primary_metric" not in out:
        return out
    for metric in pd.unique(out["primary_metric"].dropna()):  # loop over metric names
        rows = out["primary_metric"] == metric
        if metric in out:
            out.loc[rows, POOLED] = orientation(metric) * out.loc[rows, metric]
    return out


def ok_rows(results: pd.DataFrame) -> pd.DataFrame:
    """Return the rows of ``results`` with ``status == "ok"``.

    Raises
    ------
    DataError
        If a column every statistic needs is absent.
    """
    absent = [c for c in _REQUIRED if c not in results.columns]
    if absent:
        raise DataError(
            f"results table lacks column(s) {absent}; required: {list(_REQUIRED)}; "
            f"got columns {sorted(map(str, results.columns))}. Read it with harness.store."
        )
    return results.loc[results["status"] == STATUS_OK]


def orientation(metric: str) -> float:
    """Return +1.0 when greater ``metric`` is better, -1.0 when smaller is better.

    Raises
    ------
    ConfigError
        If ``metric`` is not in ``harness.metrics.GREATER_IS_BETTER``.
    """
    if metric not in GREATER_IS_BETTER:
        raise ConfigError(f"unknown metric '{metric}'; allowed: {', '.join(sorted(GREATER_IS_BETTER))}.")
    return 1.0 if GREATER_IS_BETTER[metric] else -1.0


def _check_choice(name: str, value, allowed) -> None:
    if value not in allowed:
        raise ConfigError(f"`{name}` must be one of {list(allowed)}; got {value!r}.")


def _metric_columns(df: pd.DataFrame, metrics) -> list[str]:
    if metrics is None:
        return [m for m in GREATER_IS_BETTER if m in df.columns]
    for m in metrics:
        orientation(m)
    return list(metrics)


def _row_test_train_ratio(df: pd.DataFrame) -> pd.Series:
    """Each row's n_test/n_train, or 1/(k-1) from its dataset's fold count."""
    if {"n_test", "n_train"} <= set(df.columns):
        return df["n_test"].astype(float) / df["n_train"].astype(float)
    k = df.groupby("dataset")["fold"].transform("nunique").astype(float)
    return 1.0 / (k - 1.0).where(k > 1)


def metric_values(df: pd.DataFrame, metric: str) -> tuple[pd.Series, pd.Series]:
    """Each row's raw value of ``metric`` and whether greater is better for it.

    For the pooled column :data:`POOLED` the value is the row's own primary metric in
    its own units (not negated), so unit-free effects can be formed per dataset.
    """
    if metric != POOLED:
        sign = orientation(metric) > 0
        values = df[metric].astype(float) if metric in df else pd.Series(np.nan, df.index)
        return values, pd.Series(sign, index=df.index)
    values = pd.Series(np.nan, index=df.index)
    gib = pd.Series(True, index=df.index)
    if "primary_metric" not in df:
        return values, gib
    for name in pd.unique(df["primary_metric"].dropna()):  # loop over metric names
        rows = df["primary_metric"] == name
        if name in df:
            values[rows] = df.loc[rows, name].astype(float)
            gib[rows] = orientation(name) > 0
    return values, gib


def unit_free_delta(candidate, reference, greater_is_better) -> np.ndarray:
    """Unit-free effect of a candidate against the reference; positive = better.

    ``(s - s_ref) / |s_ref|`` for a greater-is-better score, ``log(e_ref / e)`` for an
    error. Rescaling the target (errors times c) leaves both unchanged.

    References
    ----------
    Common practice, no source; Demšar (2006), JMLR 7, Sec. 3.1.3 asks for commensurable
    differences before a signed-rank test across datasets.
    """
    c = np.asarray(candidate, dtype=float)
    r = np.asarray(reference, dtype=float)
    g = np.broadcast_to(np.asarray(greater_is_better, dtype=bool), c.shape)
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = (c - r) / np.abs(r)
        ratio = np.log(r / c)
    out = np.where(g, rel, ratio)
    # rounded to 12 decimals: rescaled inputs may differ in the last bit, which would
    # otherwise split ties of the signed-rank test (a rescaling must change nothing)
    return np.where(np.isfinite(out), np.round(out, 12), np.nan)
