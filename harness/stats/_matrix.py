"""The score matrix (datasets x encoders of one model and metric) and per-cell summaries."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats as sps

from harness.stats._common import (
    MISSING_POLICIES,
    _check_choice,
    _metric_columns,
    _row_test_train_ratio,
    ok_rows,
    orientation,
)
from harness.stats._tests import CorrectedT, _corrected_se, corrected_t


def _interval_columns(g: pd.DataFrame, alpha: float) -> pd.DataFrame:
    """Add ``ci_low``/``ci_high`` to a frame with ``mean, std, n, ratio`` columns."""
    se = _corrected_se(g["std"], g["n"], g["ratio"])
    dof = (g["n"] - 1).where(g["n"] > 1)
    half = sps.t.ppf(1 - alpha / 2, dof) * se
    return g.assign(ci_low=g["mean"] - half, ci_high=g["mean"] + half)


def summarize_cells(
    results: pd.DataFrame, *, metrics=None, alpha: float = 0.05, model_column: str = "model"
) -> pd.DataFrame:
    """Mean of each metric over folds and repeats per dataset x encoder x model.

    Parameters
    ----------
    results : DataFrame
        The results table.
    metrics : list of str, optional
        Metric columns; by default every known metric column present.
    alpha : float
        Two-sided level of the interval.
    model_column : str
        ``"model"`` (config label) or ``"model_family"``.

    Returns
    -------
    DataFrame
        Columns ``dataset, encoder, <model_column>, metric, mean, std, n, ratio, ci_low,
        ci_high`` (long format, one row per cell and metric; ``ratio`` is the mean
        n_test/n_train used). NaN metric values (not applicable) are skipped.

    References
    ----------
    Nadeau & Bengio (2003), Machine Learning 52; Bouckaert & Frank (2004), PAKDD.
    """
    df = ok_rows(results)
    metrics = _metric_columns(df, metrics)
    keys = ["dataset", "encoder", model_column]
    df = df.assign(_ratio=_row_test_train_ratio(df))
    long = df.melt(id_vars=keys + ["_ratio"], value_vars=metrics, var_name="metric", value_name="value").dropna(
        subset=["value"]
    )
    g = (
        long.groupby(keys + ["metric"], sort=True)
        .agg(mean=("value", "mean"), std=("value", "std"), n=("value", "size"), ratio=("_ratio", "mean"))
        .reset_index()
    )
    return _interval_columns(g, alpha)


def paired_corrected_t(
    results: pd.DataFrame,
    *,
    dataset: str,
    model: str,
    encoder_a: str,
    encoder_b: str,
    metric: str,
    alpha: float = 0.05,
    model_column: str = "model",
) -> CorrectedT:
    """Corrected resampled t test between two encoders on one dataset and model.

    The differences ``d = oriented(a) - oriented(b)`` are paired by (repeat, fold), so a
    positive mean says encoder ``a`` is better whatever the metric's orientation.

    Returns
    -------
    CorrectedT
        NaN statistics when fewer than two paired folds exist.

    References
    ----------
    Nadeau & Bengio (2003), Machine Learning 52:239-281; Bouckaert & Frank (2004), PAKDD.
    """
    sign = orientation(metric)
    df = ok_rows(results)
    df = df.loc[(df["dataset"] == dataset) & (df[model_column] == model) & df["encoder"].isin([encoder_a, encoder_b])]
    wide = df.pivot_table(index=["repeat", "fold"], columns="encoder", values=metric, aggfunc="mean")
    if encoder_a not in wide or encoder_b not in wide:
        return corrected_t([], np.nan, alpha=alpha)
    d = sign * (wide[encoder_a] - wide[encoder_b])
    ratio = float(_row_test_train_ratio(df).mean()) if len(df) else np.nan
    return corrected_t(d.to_numpy(), ratio, alpha=alpha)


# ----------------------------------------------------------------------- score matrix
@dataclass(frozen=True)
class ScoreMatrix:
    """Datasets x encoders mean scores of one model and metric, and their ranks.

    Attributes
    ----------
    scores : DataFrame
        Mean metric (raw orientation) per dataset (index) and encoder (columns), complete.
    ranks : DataFrame
        Same shape; 1 = best, ties averaged.
    dropped_datasets, dropped_encoders : tuple of str
        Removed by the missing-cell policy.
    missing_cells : DataFrame
        Columns ``dataset, encoder``: the cells that were missing before the policy.
    not_applicable : tuple of str
        Datasets on which no encoder has a value for ``metric``.
    """

    model: str
    metric: str
    scores: pd.DataFrame
    ranks: pd.DataFrame
    dropped_datasets: tuple = ()
    dropped_encoders: tuple = ()
    missing_cells: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(columns=["dataset", "encoder"]))
    not_applicable: tuple = ()

    @property
    def oriented(self) -> pd.DataFrame:
        """Scores multiplied by the metric's orientation (greater is better)."""
        return self.scores * orientation(self.metric)

    @property
    def n_datasets(self) -> int:
        return int(self.scores.shape[0])

    @property
    def encoders(self) -> tuple:
        return tuple(self.scores.columns)


def rank_rows(oriented: pd.DataFrame) -> pd.DataFrame:
    """Rank each row, 1 = greatest oriented score, ties averaged (Demšar 2006, Sec. 3.2.2)."""
    return (-oriented).rank(axis=1, method="average")


def _apply_missing_policy(wide: pd.DataFrame, missing: str, keep=(), sign: float = 1.0):
    holes = wide.isna()
    cells = holes.stack()
    cells = cells[cells].reset_index().iloc[:, :2]
    cells.columns = ["dataset", "encoder"]
    if missing == "auto":
        # keep the larger complete block: an encoder that fails on many datasets (e.g.
        # native categoricals above a model's level limit) should not cost every dataset
        keep_ds = int((~holes.any(axis=1)).sum()) * wide.shape[1]
        keep_enc = int((~holes.any(axis=0)).sum()) * wide.shape[0]
        # the best encoder on the cells it has (mean within-dataset rank) is never dropped
        best = (sign * wide).rank(axis=1, ascending=False).mean().idxmin() if wide.size else None
        protected = bool((set(keep) | {best}) & set(wide.columns[holes.any(axis=0)]))
        missing = "drop_datasets" if keep_ds >= keep_enc or protected else "drop_encoders"
    if missing == "drop_datasets":
        bad = holes.any(axis=1)
        return wide.loc[~bad], tuple(wide.index[bad]), (), cells
    bad = holes.any(axis=0)
    return wide.loc[:, ~bad], (), tuple(wide.columns[bad]), cells


def score_matrix(
    results: pd.DataFrame,
    model: str,
    metric: str,
    *,
    missing: str = "auto",
    datasets=None,
    model_column: str = "model",
    keep=(),
) -> ScoreMatrix:
    """Build the datasets x encoders matrix of mean scores and per-dataset ranks.

    Parameters
    ----------
    results : DataFrame
        The results table.
    model : str
        Value of ``model_column`` to keep.
    metric : str
        Metric column (orientation from ``GREATER_IS_BETTER``).
    missing : {"auto", "drop_datasets", "drop_encoders"}
        Missing-cell policy (module docstring); ``"auto"`` applies whichever of the two
        keeps more complete cells (ties: drop datasets), except that it never drops an
        encoder named in ``keep``.
    datasets : iterable of str, optional
        Restrict to these datasets (e.g. one cardinality regime).
    model_column : str
        ``"model"`` or ``"model_family"``.
    keep : iterable of str
        Encoders the ``"auto"`` policy must not drop (the reference and the choice).

    Returns
    -------
    ScoreMatrix

    Raises
    ------
    ConfigError
        Unknown ``missing`` policy or metric.

    References
    ----------
    Demšar, J. (2006). Statistical comparisons of classifiers over multiple data sets.
    JMLR 7:1-30, Sec. 3.2.2 (ranks, ties averaged).
    """
    _check_choice("missing", missing, MISSING_POLICIES)
    sign = orientation(metric)
    df = ok_rows(results)
    df = df.loc[df[model_column] == model]
    if datasets is not None:
        df = df.loc[df["dataset"].isin(list(datasets))]
    wide = df.groupby(["dataset", "encoder"])[metric].mean().unstack("encoder")
    empty = wide.isna().all(axis=1)
    n_a, wide = tuple(wide.index[empty]), wide.loc[~empty]
    kept, d_ds, d_enc, cells = _apply_missing_policy(wide, missing, keep, sign)
    kept = kept.astype(float)
    return ScoreMatrix(model, metric, kept, rank_rows(sign * kept), d_ds, d_enc, cells, n_a)
