"""Pure functions of the results table: intervals, ranks, tests, aggregations, advice.

Every public function takes the tidy results table (one row per dataset x encoder x
model x repeat x fold, see ``DEVELOPERS.md``) or an object derived from it, and keeps
only rows with ``status == "ok"``. Nothing here reads the store, draws or writes files.

Conventions
-----------
Orientation
    Scores become *oriented* scores (greater is better) through
    ``harness.metrics.GREATER_IS_BETTER``; ranks are 1 = best, ties get the average rank.
Missing cells
    A cell is a (dataset, encoder) pair of one model. A dataset on which no encoder has a
    value for the metric is *not applicable* (e.g. ROC AUC on a regression dataset) and
    left out silently. A dataset on which some but not all encoders have a value (an
    encoder failed, timed out or was skipped) is a *missing cell*. Every comparison is
    paired, so something must go: ``missing="drop_datasets"`` drops such datasets for
    that model, ``missing="drop_encoders"`` drops the incomplete encoders instead, and
    the default ``missing="auto"`` applies whichever keeps more complete cells. Either way the dropped names are kept on the :class:`ScoreMatrix` and
    reported as caveats.
Degenerate input
    Fewer than two datasets or encoders never raise: tests return NaN and a caveat says
    why. All-tied data give a Friedman statistic of 0 and p-values of 1.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats as sps

from harness.errors import ConfigError, DataError
from harness.metrics import GREATER_IS_BETTER

__all__ = [
    "STATUS_OK",
    "MISSING_POLICIES",
    "AGGREGATIONS",
    "CorrectedT",
    "FriedmanResult",
    "ScoreMatrix",
    "BayesSignedRank",
    "Comparison",
    "Recommendation",
    "RULE",
    "ok_rows",
    "orientation",
    "cv_test_train_ratio",
    "corrected_t",
    "summarize_cells",
    "paired_corrected_t",
    "score_matrix",
    "rank_rows",
    "average_ranks",
    "friedman_from_ranks",
    "friedman_test",
    "nemenyi_q",
    "critical_difference",
    "holm",
    "control_z_test",
    "wilcoxon_vs_control",
    "win_tie_loss",
    "bayesian_signed_rank",
    "compare_encoders",
    "aggregate_scores",
    "top_encoders",
    "cardinality_regime",
    "dataset_regimes",
    "verdict_robustness",
    "cost_table",
    "leakage_audit",
    "recommend",
]

STATUS_OK = "ok"
MISSING_POLICIES = ("auto", "drop_datasets", "drop_encoders")
#: aggregation name -> (column of :func:`aggregate_scores`, True when smaller is better)
AGGREGATIONS = {
    "mean_rank": ("mean_rank", True),
    "median_rank": ("median_rank", True),
    "mean_normalised": ("mean_normalised", False),
    "win_rate": ("win_rate", False),
}
_REQUIRED = ("dataset", "encoder", "model", "status")
_FAILED = ("failed", "timeout", "out-of-memory")


# ----------------------------------------------------------------------------- basics
POOLED = "primary"


def pool_primary(results: pd.DataFrame) -> pd.DataFrame:
    """Add the column ``primary``: each row's primary metric, oriented greater-is-better.

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
        raise ConfigError(
            f"unknown metric '{metric}'; allowed: {', '.join(sorted(GREATER_IS_BETTER))}."
        )
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


# ------------------------------------------------------- corrected resampled t (1 data set)
@dataclass(frozen=True)
class CorrectedT:
    """Result of the corrected resampled t test / interval (see :func:`corrected_t`)."""

    mean: float
    std: float
    n: int
    test_train_ratio: float
    t: float
    df: int
    p_value: float
    ci_low: float
    ci_high: float


def cv_test_train_ratio(n_folds: int) -> float:
    """Return ``n_test / n_train = 1 / (k - 1)`` for k-fold cross-validation.

    References
    ----------
    Bouckaert, R. & Frank, E. (2004). Evaluating the replicability of significance
    tests for comparing learning algorithms. PAKDD.
    """
    return 1.0 / (n_folds - 1) if n_folds > 1 else np.nan


def _corrected_se(std, n, ratio):
    # Nadeau & Bengio: the resamples overlap, so the naive 1/J variance is too small.
    return np.sqrt((1.0 / n + ratio)) * std


def corrected_t(diffs, test_train_ratio: float, *, alpha: float = 0.05) -> CorrectedT:
    """Corrected resampled t test of ``mean(diffs) == 0`` with its ``1 - alpha`` interval.

    ``t = mean(d) / sqrt((1/J + n_test/n_train) * s^2)`` with ``s^2`` the sample variance
    (ddof=1) of the J resampled values and ``J - 1`` degrees of freedom. Applied to raw
    scores instead of differences it gives the interval of a cross-validated mean.

    Parameters
    ----------
    diffs : array-like of shape (J,)
        One value per resample (for r x k-fold CV, J = r * k).
    test_train_ratio : float
        ``n_test / n_train``; ``1 / (k - 1)`` for k-fold CV (:func:`cv_test_train_ratio`).
    alpha : float
        Two-sided level of the interval.

    Returns
    -------
    CorrectedT
        NaN statistics when fewer than two finite values are given.

    References
    ----------
    Nadeau, C. & Bengio, Y. (2003). Inference for the generalization error. Machine
    Learning 52:239-281. Bouckaert, R. & Frank, E. (2004), PAKDD (J = k*r).
    """
    d = np.asarray(diffs, dtype=float)
    d = d[np.isfinite(d)]
    n = int(d.size)
    mean = float(d.mean()) if n else np.nan
    std = float(d.std(ddof=1)) if n > 1 else np.nan
    se = _corrected_se(std, n, test_train_ratio) if n else np.nan
    with np.errstate(divide="ignore", invalid="ignore"):
        t = mean / se if n > 1 else np.nan
    p = float(2 * sps.t.sf(abs(t), n - 1)) if n > 1 and not np.isnan(t) else np.nan
    half = float(sps.t.ppf(1 - alpha / 2, n - 1) * se) if n > 1 else np.nan
    return CorrectedT(mean, std, n, float(test_train_ratio), float(t), n - 1, p,
                      mean - half, mean + half)


def _row_test_train_ratio(df: pd.DataFrame) -> pd.Series:
    """Each row's n_test/n_train, or 1/(k-1) from its dataset's fold count."""
    if {"n_test", "n_train"} <= set(df.columns):
        return df["n_test"].astype(float) / df["n_train"].astype(float)
    k = df.groupby("dataset")["fold"].transform("nunique").astype(float)
    return 1.0 / (k - 1.0).where(k > 1)


def _interval_columns(g: pd.DataFrame, alpha: float) -> pd.DataFrame:
    """Add ``ci_low``/``ci_high`` to a frame with ``mean, std, n, ratio`` columns."""
    se = _corrected_se(g["std"], g["n"], g["ratio"])
    dof = (g["n"] - 1).where(g["n"] > 1)
    half = sps.t.ppf(1 - alpha / 2, dof) * se
    return g.assign(ci_low=g["mean"] - half, ci_high=g["mean"] + half)


def summarize_cells(results: pd.DataFrame, *, metrics=None, alpha: float = 0.05,
                    model_column: str = "model") -> pd.DataFrame:
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
    long = df.melt(id_vars=keys + ["_ratio"], value_vars=metrics, var_name="metric",
                   value_name="value").dropna(subset=["value"])
    g = long.groupby(keys + ["metric"], sort=True).agg(
        mean=("value", "mean"), std=("value", "std"), n=("value", "size"),
        ratio=("_ratio", "mean")).reset_index()
    return _interval_columns(g, alpha)


def paired_corrected_t(results: pd.DataFrame, *, dataset: str, model: str,
                       encoder_a: str, encoder_b: str, metric: str, alpha: float = 0.05,
                       model_column: str = "model") -> CorrectedT:
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
    df = df.loc[(df["dataset"] == dataset) & (df[model_column] == model)
                & df["encoder"].isin([encoder_a, encoder_b])]
    wide = df.pivot_table(index=["repeat", "fold"], columns="encoder", values=metric,
                          aggfunc="mean")
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
    missing_cells: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(
        columns=["dataset", "encoder"]))
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


def _apply_missing_policy(wide: pd.DataFrame, missing: str):
    holes = wide.isna()
    cells = holes.stack()
    cells = cells[cells].reset_index().iloc[:, :2]
    cells.columns = ["dataset", "encoder"]
    if missing == "auto":
        # keep the larger complete block: an encoder that fails on many datasets (e.g.
        # native categoricals above a model's level limit) should not cost every dataset
        keep_ds = int((~holes.any(axis=1)).sum()) * wide.shape[1]
        keep_enc = int((~holes.any(axis=0)).sum()) * wide.shape[0]
        missing = "drop_datasets" if keep_ds >= keep_enc else "drop_encoders"
    if missing == "drop_datasets":
        bad = holes.any(axis=1)
        return wide.loc[~bad], tuple(wide.index[bad]), (), cells
    bad = holes.any(axis=0)
    return wide.loc[:, ~bad], (), tuple(wide.columns[bad]), cells


def score_matrix(results: pd.DataFrame, model: str, metric: str, *,
                 missing: str = "auto", datasets=None,
                 model_column: str = "model") -> ScoreMatrix:
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
        keeps more complete cells (ties: drop datasets).
    datasets : iterable of str, optional
        Restrict to these datasets (e.g. one cardinality regime).
    model_column : str
        ``"model"`` or ``"model_family"``.

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
    kept, d_ds, d_enc, cells = _apply_missing_policy(wide, missing)
    kept = kept.astype(float)
    return ScoreMatrix(model, metric, kept, rank_rows(sign * kept), d_ds, d_enc, cells, n_a)


# ------------------------------------------------------------------ ranks across datasets
def average_ranks(matrix: ScoreMatrix, *, n_boot: int = 2000, alpha: float = 0.05,
                  seed: int = 0) -> pd.DataFrame:
    """Average rank of each encoder with a percentile bootstrap interval over datasets.

    Datasets (rows of the rank matrix) are resampled with replacement; a dataset's ranks
    do not depend on the other datasets, so they are not recomputed.

    Returns
    -------
    DataFrame
        Index ``encoder``; columns ``avg_rank, ci_low, ci_high, median_rank,
        n_datasets``, sorted by ``avg_rank``. All NaN when there is no dataset.

    References
    ----------
    Demšar (2006), JMLR 7, Sec. 3.2.2 (average ranks); Efron, B. & Tibshirani, R. (1993).
    An Introduction to the Bootstrap. Chapman & Hall, Ch. 13 (percentile interval).
    """
    r = matrix.ranks.to_numpy(dtype=float)
    n, k = r.shape
    out = pd.DataFrame(index=pd.Index(matrix.encoders, name="encoder"))
    out["avg_rank"] = r.mean(axis=0) if n else np.nan
    out["ci_low"] = out["ci_high"] = np.nan
    if n > 1:
        idx = np.random.default_rng(seed).integers(0, n, size=(n_boot, n))
        boot = r[idx].mean(axis=1)
        out["ci_low"] = np.quantile(boot, alpha / 2, axis=0)
        out["ci_high"] = np.quantile(boot, 1 - alpha / 2, axis=0)
    out["median_rank"] = np.median(r, axis=0) if n else np.nan
    out["n_datasets"] = n
    return out.sort_values("avg_rank", kind="stable")


@dataclass(frozen=True)
class FriedmanResult:
    """Friedman statistic and the Iman-Davenport F (see :func:`friedman_from_ranks`)."""

    chi2: float
    p_value: float
    f_stat: float
    f_p_value: float
    df1: int
    df2: int
    n_datasets: int
    n_encoders: int


def friedman_from_ranks(avg_ranks, n_datasets: int, *, tie_factor: float = 1.0
                        ) -> FriedmanResult:
    """Friedman test with the Iman-Davenport correction from average ranks.

    ``chi2_F = 12N / (k(k+1)) * (sum R_j^2 - k(k+1)^2/4)``;
    ``F_F = (N-1) chi2_F / (N(k-1) - chi2_F)`` ~ F(k-1, (k-1)(N-1)).

    Parameters
    ----------
    avg_ranks : array-like of shape (k,)
        Average rank of each encoder over the N datasets.
    n_datasets : int
        N.
    tie_factor : float
        ``chi2_F`` is divided by it; 1 is Demšar's formula (see :func:`friedman_test`).

    Returns
    -------
    FriedmanResult
        NaN when N < 2 or k < 2. All-equal ranks give chi2 = F = 0 and p = 1.

    References
    ----------
    Demšar (2006), JMLR 7:1-30, Sec. 3.2.2; Iman, R. & Davenport, J. (1980).
    Communications in Statistics A 9:571-595.
    """
    r = np.asarray(avg_ranks, dtype=float)
    k, n = r.size, int(n_datasets)
    if n < 2 or k < 2:
        return FriedmanResult(np.nan, np.nan, np.nan, np.nan, k - 1, (k - 1) * (n - 1), n, k)
    chi2 = 12 * n / (k * (k + 1)) * (np.sum(r**2) - k * (k + 1) ** 2 / 4)
    chi2 = max(float(chi2), 0.0) / tie_factor  # rounding can make an all-tie sum -1e-15
    df1, df2 = k - 1, (k - 1) * (n - 1)
    room = n * (k - 1) - chi2  # 0 when every dataset ranks the encoders identically
    f = (n - 1) * chi2 / room if room > 1e-12 * n * k else np.inf
    return FriedmanResult(chi2, float(sps.chi2.sf(chi2, df1)), float(f),
                          float(sps.f.sf(f, df1, df2)), df1, df2, n, k)


def friedman_test(ranks: pd.DataFrame, *, tie_correction: bool = False) -> FriedmanResult:
    """Friedman / Iman-Davenport test on a datasets x encoders rank matrix.

    Parameters
    ----------
    ranks : DataFrame
        ``ScoreMatrix.ranks``.
    tie_correction : bool
        Divide chi2 by ``1 - sum(t^3 - t) / (N k (k^2 - 1))`` as
        ``scipy.stats.friedmanchisquare`` does; Demšar's formula has none (False).

    References
    ----------
    Demšar (2006), JMLR 7, Sec. 3.2.2; Hollander, M. & Wolfe, D. (1999). Nonparametric
    Statistical Methods, 2nd ed., Wiley, Sec. 7.1 (tie correction).
    """
    r = ranks.to_numpy(dtype=float)
    n, k = r.shape
    factor = 1.0
    if tie_correction and n and k > 1:
        # one count per (row, distinct rank): size t of each tie group
        counts = pd.DataFrame(r).stack().groupby(level=0).value_counts().to_numpy()
        factor = 1.0 - np.sum(counts**3 - counts) / (n * k * (k * k - 1))
        factor = factor if factor > 0 else np.nan  # every row fully tied
    avg = r.mean(axis=0) if n else np.full(k, np.nan)
    return friedman_from_ranks(avg, n, tie_factor=factor)


def nemenyi_q(k: int, alpha: float = 0.05) -> float:
    """Critical value q_alpha of the Nemenyi test for k encoders.

    ``q = studentized_range.ppf(1 - alpha, k, inf) / sqrt(2)``.

    References
    ----------
    Demšar (2006), JMLR 7, Table 5; Nemenyi, P. (1963). Distribution-free multiple
    comparisons. PhD thesis, Princeton University.
    """
    if k < 2:
        return np.nan
    return float(sps.studentized_range.ppf(1 - alpha, k, np.inf) / np.sqrt(2))


def critical_difference(k: int, n_datasets: int, alpha: float = 0.05) -> float:
    """Nemenyi critical difference ``CD = q_alpha sqrt(k(k+1) / (6N))``.

    References
    ----------
    Demšar (2006), JMLR 7, Sec. 3.2.2.
    """
    if k < 2 or n_datasets < 1:
        return np.nan
    return nemenyi_q(k, alpha) * float(np.sqrt(k * (k + 1) / (6 * n_datasets)))


def holm(p_values) -> np.ndarray:
    """Holm step-down adjusted p-values (same order as given; NaN kept as NaN).

    ``p_adj(i) = max_{j <= i} min(1, (m - j + 1) p_(j))`` over the sorted p-values.

    References
    ----------
    Holm, S. (1979). A simple sequentially rejective multiple test procedure.
    Scandinavian Journal of Statistics 6:65-70; Demšar (2006), JMLR 7, Sec. 3.2.2.
    """
    p = np.asarray(p_values, dtype=float)
    out = np.full(p.shape, np.nan)
    ok = np.flatnonzero(~np.isnan(p))
    order = ok[np.argsort(p[ok], kind="stable")]
    m = order.size
    adj = np.minimum(1.0, (m - np.arange(m)) * p[order])
    out[order] = np.maximum.accumulate(adj) if m else adj
    return out


def control_z_test(avg_ranks: pd.Series, n_datasets: int, control: str) -> pd.DataFrame:
    """Compare every encoder with a control by the rank z statistic, Holm-adjusted.

    ``z = (R_i - R_control) / sqrt(k(k+1) / (6N))``: positive z means encoder i ranks
    worse than the control. Two-sided normal p-values.

    Returns
    -------
    DataFrame
        Index ``encoder`` (control excluded); columns ``avg_rank, z, p_value, p_holm``.

    Raises
    ------
    ConfigError
        If ``control`` is not among the encoders.

    References
    ----------
    Demšar (2006), JMLR 7, Sec. 3.2.2 (comparison with a control, Holm's procedure).
    """
    if control not in avg_ranks.index:
        raise ConfigError(f"control encoder '{control}' is not among the encoders; "
                          f"allowed: {', '.join(map(str, avg_ranks.index))}.")
    k = len(avg_ranks)
    se = np.sqrt(k * (k + 1) / (6 * n_datasets)) if n_datasets > 0 else np.nan
    others = avg_ranks.drop(control).astype(float)
    z = (others - float(avg_ranks[control])) / se
    p = 2 * sps.norm.sf(np.abs(z.to_numpy()))
    out = pd.DataFrame({"avg_rank": others, "z": z, "p_value": p, "p_holm": holm(p)})
    out.index.name = "encoder"
    return out


def wilcoxon_vs_control(matrix: ScoreMatrix, control: str) -> pd.DataFrame:
    """Wilcoxon signed-rank test of each encoder against a control over datasets.

    Differences are oriented per dataset (``encoder - control``, greater is better);
    zero differences are split between the two sums (``zero_method="zsplit"``, as
    Demšar recommends). Holm-adjusted across the comparisons.

    Returns
    -------
    DataFrame
        Index ``encoder`` (control excluded); columns ``statistic, p_value, p_holm``.
        NaN when fewer than two datasets.

    References
    ----------
    Wilcoxon, F. (1945). Biometrics Bulletin 1:80-83; Demšar (2006), JMLR 7, Sec. 3.1.3;
    Holm (1979).
    """
    o = matrix.oriented
    others = [e for e in o.columns if e != control]
    stat, p = np.full(len(others), np.nan), np.full(len(others), np.nan)
    if matrix.n_datasets >= 2 and control in o:
        for i, enc in enumerate(others):  # loop over encoders, not rows
            d = (o[enc] - o[control]).to_numpy()
            if np.all(d == 0):
                stat[i], p[i] = 0.0, 1.0  # scipy warns on all-zero input; the answer is p=1
                continue
            res = sps.wilcoxon(d, zero_method="zsplit")
            stat[i], p[i] = res.statistic, res.pvalue
    out = pd.DataFrame({"statistic": stat, "p_value": p, "p_holm": holm(p)},
                       index=pd.Index(others, name="encoder"))
    return out


def win_tie_loss(matrix: ScoreMatrix, control: str, *, tol: float = 0.0) -> pd.DataFrame:
    """Count datasets where each encoder beats, ties (within ``tol``) or loses to a control.

    Returns
    -------
    DataFrame
        Index ``encoder`` (control excluded); integer columns ``wins, ties, losses``.

    References
    ----------
    Common practice, no source (Demšar 2006, Sec. 3.1.4 discusses the sign test on them).
    """
    o = matrix.oriented
    d = o.drop(columns=[control]).sub(o[control], axis=0)
    out = pd.DataFrame({"wins": (d > tol).sum(), "ties": (d.abs() <= tol).sum(),
                        "losses": (d < -tol).sum()}).astype(int)
    out.index.name = "encoder"
    return out


@dataclass(frozen=True)
class BayesSignedRank:
    """Posterior probabilities of the Bayesian signed-rank test.

    ``p_left``/``p_rope``/``p_right`` are the fractions of Monte-Carlo draws in which
    the left / rope / right region has the largest probability mass; ``theta_mean`` is
    the Monte-Carlo mean of (theta_left, theta_rope, theta_right).
    """

    p_left: float
    p_rope: float
    p_right: float
    theta_mean: tuple


def bayesian_signed_rank(diffs, rope: float = 0.01, *, prior_strength: float = 0.5,
                         n_samples: int = 20000, seed: int = 0) -> BayesSignedRank:
    """Bayesian signed-rank test with a region of practical equivalence.

    A pseudo-observation 0 is prepended to ``z``; weights ``w ~ Dirichlet(s, 1, ..., 1)``;
    ``theta_left = sum_ij w_i w_j 1{z_i + z_j < -2 rope}``, ``theta_right`` likewise with
    ``> 2 rope``, ``theta_rope`` the rest (all i, j including i = j).

    Parameters
    ----------
    diffs : array-like of shape (N,)
        Per-dataset differences, oriented so that positive favours the first method
        ("right").
    rope : float
        Half-width of the region of practical equivalence, in metric units.
    prior_strength : float
        Dirichlet weight s of the pseudo-observation.
    n_samples : int
        Monte-Carlo draws.
    seed : int
        Seed of ``numpy.random.default_rng``.

    Returns
    -------
    BayesSignedRank
        NaN when ``diffs`` is empty.

    References
    ----------
    Benavoli, A., Corani, G., Demšar, J., Zaffalon, M. (2017). Time for a change: a
    tutorial for comparing multiple classifiers through Bayesian analysis. JMLR 18(77).
    """
    z = np.asarray(diffs, dtype=float)
    z = z[np.isfinite(z)]
    if z.size == 0:
        return BayesSignedRank(np.nan, np.nan, np.nan, (np.nan, np.nan, np.nan))
    z = np.concatenate(([0.0], z))
    alpha = np.concatenate(([prior_strength], np.ones(z.size - 1)))
    w = np.random.default_rng(seed).dirichlet(alpha, size=n_samples)
    pair = z[:, None] + z[None, :]
    left = np.einsum("si,ij,sj->s", w, (pair < -2 * rope).astype(float), w)
    right = np.einsum("si,ij,sj->s", w, (pair > 2 * rope).astype(float), w)
    theta = np.column_stack([left, 1.0 - left - right, right])
    winner = np.bincount(theta.argmax(axis=1), minlength=3) / n_samples
    return BayesSignedRank(float(winner[0]), float(winner[1]), float(winner[2]),
                           tuple(float(v) for v in theta.mean(axis=0)))


@dataclass(frozen=True)
class Comparison:
    """Everything :func:`compare_encoders` computes for one model and metric.

    ``pairwise`` has index ``encoder`` (every encoder but ``best``) and columns
    ``avg_rank, z, z_p, z_p_holm, wilcoxon_stat, wilcoxon_p, wilcoxon_p_holm,
    rank_diff, beyond_cd, wins, ties, losses`` and, when a rope is given,
    ``p_left, p_rope, p_right`` (left = the best encoder is practically better).
    """

    matrix: ScoreMatrix
    ranks: pd.DataFrame
    friedman: FriedmanResult
    critical_difference: float
    best: str | None
    pairwise: pd.DataFrame
    caveats: tuple


def _bayes_columns(matrix: ScoreMatrix, best: str, rope: float, seed: int) -> pd.DataFrame:
    o = matrix.oriented
    rows = {enc: bayesian_signed_rank((o[enc] - o[best]).to_numpy(), rope, seed=seed)
            for enc in o.columns if enc != best}  # loop over encoders
    return pd.DataFrame({"p_left": [r.p_left for r in rows.values()],
                         "p_rope": [r.p_rope for r in rows.values()],
                         "p_right": [r.p_right for r in rows.values()]},
                        index=pd.Index(list(rows), name="encoder"))


def _matrix_caveats(matrix: ScoreMatrix, min_datasets: int) -> list[str]:
    notes = []
    n, k = matrix.scores.shape
    if n < 2 or k < 2:
        notes.append(f"{n} complete dataset(s) and {k} encoder(s): tests need at least 2 "
                     "of each, statistics are NaN.")
    elif n < min_datasets:
        notes.append(f"only {n} datasets (< {min_datasets}): the rank tests have little "
                     "power; 'not significantly different' is weak evidence.")
    if matrix.dropped_datasets:
        notes.append(f"{len(matrix.dropped_datasets)} dataset(s) dropped for missing "
                     f"cells: {', '.join(map(str, matrix.dropped_datasets))}.")
    if matrix.dropped_encoders:
        notes.append(f"encoder(s) dropped for missing cells: "
                     f"{', '.join(map(str, matrix.dropped_encoders))}.")
    return notes


def compare_encoders(matrix: ScoreMatrix, *, alpha: float = 0.05, control=None,
                     tie_tol: float = 0.0, rope: float | None = None, n_boot: int = 2000,
                     seed: int = 0, min_datasets: int = 5) -> Comparison:
    """Average ranks, Friedman/Iman-Davenport, Nemenyi CD and pairwise tests vs the best.

    Parameters
    ----------
    matrix : ScoreMatrix
        From :func:`score_matrix`.
    alpha : float
        Level of the bootstrap interval and of the critical difference.
    control : str, optional
        Encoder to compare against; default the one with the best (lowest) average rank.
    tie_tol : float
        Tolerance of a tie in :func:`win_tie_loss`.
    rope : float, optional
        When given, add the Bayesian signed-rank probabilities with this rope.
    n_boot, seed : int
        Bootstrap draws and seed (also the Monte-Carlo seed).
    min_datasets : int
        Below this many datasets a caveat warns about power.

    Returns
    -------
    Comparison

    References
    ----------
    Demšar (2006), JMLR 7:1-30; Benavoli et al. (2017), JMLR 18(77); Holm (1979).
    """
    ranks = average_ranks(matrix, n_boot=n_boot, alpha=alpha, seed=seed)
    n, k = matrix.scores.shape
    fried = friedman_test(matrix.ranks)
    cd = critical_difference(k, n, alpha) if n >= 2 else np.nan
    best = control if control is not None else (ranks.index[0] if k else None)
    if k < 1 or best is None:
        return Comparison(matrix, ranks, fried, cd, None, pd.DataFrame(),
                          tuple(_matrix_caveats(matrix, min_datasets)))
    z = control_z_test(ranks["avg_rank"], n, best)
    w = wilcoxon_vs_control(matrix, best).rename(columns={
        "statistic": "wilcoxon_stat", "p_value": "wilcoxon_p", "p_holm": "wilcoxon_p_holm"})
    pair = z.rename(columns={"p_value": "z_p", "p_holm": "z_p_holm"}).join(w)
    pair["rank_diff"] = pair["avg_rank"] - float(ranks.loc[best, "avg_rank"])
    pair["beyond_cd"] = pair["rank_diff"].abs() > cd
    pair = pair.join(win_tie_loss(matrix, best, tol=tie_tol))
    if rope is not None:
        pair = pair.join(_bayes_columns(matrix, best, rope, seed))
    notes = _matrix_caveats(matrix, min_datasets)
    if n >= 2 and k >= 2 and not fried.f_p_value < alpha:
        notes.append(f"Friedman/Iman-Davenport p = {fried.f_p_value:.3g} >= {alpha}: no "
                     "evidence that the encoders differ at all.")
    return Comparison(matrix, ranks, fried, cd, best, pair, tuple(notes))


# -------------------------------------------------------------------------- aggregations
def aggregate_scores(matrix: ScoreMatrix, *, tie_tol: float = 0.0) -> pd.DataFrame:
    """Several aggregations of one score matrix side by side.

    ``mean_normalised`` rescales each dataset to ``(score - worst) / (best - worst)``
    in oriented scores (1 = best; a dataset where all encoders tie gives 1 to all);
    ``win_rate`` is the fraction of datasets where the encoder is best or within
    ``tie_tol`` of the best.

    Returns
    -------
    DataFrame
        Index ``encoder``; columns ``mean_rank, median_rank, mean_normalised, win_rate,
        n_datasets``. NaN columns when the matrix has no dataset.

    References
    ----------
    Demšar (2006), JMLR 7 (ranks); normalised score and win rate: common practice, no
    source.
    """
    o = matrix.oriented
    best, worst = o.max(axis=1), o.min(axis=1)
    span = (best - worst).where(best > worst)
    norm = o.sub(worst, axis=0).div(span, axis=0).fillna(1.0)
    out = pd.DataFrame({
        "mean_rank": matrix.ranks.mean(),
        "median_rank": matrix.ranks.median(),
        "mean_normalised": norm.mean(),
        "win_rate": o.ge(best - tie_tol, axis=0).mean() if len(o) else np.nan,
    }, index=pd.Index(matrix.encoders, name="encoder"))
    out["n_datasets"] = matrix.n_datasets
    return out


def top_encoders(table: pd.DataFrame, aggregation: str) -> tuple:
    """Encoders that are best (tied best included) under one aggregation.

    Raises
    ------
    ConfigError
        Unknown aggregation.
    """
    _check_choice("aggregation", aggregation, AGGREGATIONS)
    col, smaller = AGGREGATIONS[aggregation]
    v = table[col].dropna()
    if v.empty:
        return ()
    target = v.min() if smaller else v.max()
    return tuple(v.index[np.isclose(v.to_numpy(), target, rtol=0, atol=1e-12)])


# -------------------------------------------------------------------- cardinality regimes
def cardinality_regime(max_cardinality, *, low: int = 10, high: int = 100) -> np.ndarray:
    """Map a dataset's largest categorical cardinality to ``low``/``medium``/``high``.

    ``low`` if < ``low``, ``high`` if > ``high``, ``medium`` otherwise (inclusive
    bounds); NaN cardinality gives ``"unknown"``.

    Raises
    ------
    ConfigError
        If ``low > high``.

    References
    ----------
    Thresholds: common practice, no source (defaults of this project).
    """
    if low > high:
        raise ConfigError(f"cardinality thresholds must satisfy low <= high; got low={low}, "
                          f"high={high}.")
    c = np.asarray(max_cardinality, dtype=float)
    return np.select([np.isnan(c), c < low, c > high], ["unknown", "low", "high"],
                     default="medium")


def dataset_regimes(results: pd.DataFrame, *, low: int = 10, high: int = 100) -> pd.Series:
    """Cardinality regime of each dataset, from its ``max_cardinality`` column (max over rows).

    Returns
    -------
    Series
        Index ``dataset``, values ``low/medium/high/unknown``; ``unknown`` for every
        dataset when the column is absent.
    """
    if "max_cardinality" not in results.columns:
        ds = pd.Index(results["dataset"].unique(), name="dataset")
        return pd.Series("unknown", index=ds, name="regime")
    card = results.groupby("dataset")["max_cardinality"].max()
    return pd.Series(cardinality_regime(card.to_numpy(), low=low, high=high),
                     index=card.index, name="regime")


def verdict_robustness(results: pd.DataFrame, headline, *, models=None, metrics=None,
                       low: int = 10, high: int = 100, missing: str = "auto",
                       tie_tol: float = 0.0, model_column: str = "model") -> pd.DataFrame:
    """Top encoder under each aggregation x metric x model x cardinality regime.

    Parameters
    ----------
    results : DataFrame
        The results table.
    headline : str or mapping of model -> str
        The headline choice to check against (e.g. ``Recommendation.choice``).
    models, metrics : list of str, optional
        Default: every model label and every metric column with values.
    low, high : int
        Cardinality thresholds (:func:`cardinality_regime`).
    missing, tie_tol, model_column
        As in :func:`score_matrix` and :func:`aggregate_scores`.

    Returns
    -------
    DataFrame
        Columns ``model, metric, regime, aggregation, top_encoder, n_datasets,
        headline, agrees``; ``regime`` is ``all`` or a regime name; ``top_encoder``
        joins tied winners with ``" | "``; ``agrees`` is True when the headline is among
        them, NaN when the slice has no dataset.
    """
    ok = ok_rows(results)
    models = list(pd.unique(ok[model_column])) if models is None else list(models)
    metrics = [m for m in _metric_columns(ok, metrics) if ok[m].notna().any()]
    regimes = dataset_regimes(ok, low=low, high=high)
    slices = [("all", None)] + [(r, regimes.index[regimes == r])
                                for r in ("low", "medium", "high") if (regimes == r).any()]
    rows = []
    for model in models:  # loops over models, metrics, regimes and aggregations only
        head = headline.get(model) if isinstance(headline, Mapping) else headline
        for metric in metrics:
            for regime, ds in slices:
                m = score_matrix(ok, model, metric, missing=missing, datasets=ds,
                                 model_column=model_column)
                table = aggregate_scores(m, tie_tol=tie_tol)
                for agg in AGGREGATIONS:
                    top = top_encoders(table, agg) if m.n_datasets else ()
                    rows.append((model, metric, regime, agg, " | ".join(map(str, top)),
                                 m.n_datasets, head, (head in top) if top else np.nan))
    return pd.DataFrame(rows, columns=["model", "metric", "regime", "aggregation",
                                       "top_encoder", "n_datasets", "headline", "agrees"])


# ---------------------------------------------------------------------------------- cost
def cost_table(results: pd.DataFrame, *, reference: str | None = None,
               model_column: str = "model") -> pd.DataFrame:
    """Median cost per encoder and model, and each cost relative to a reference encoder.

    ``encoder_s = encoder_fit_s + encoder_transform_s``; ``total_s = encoder_s +
    model_fit_s``. Medians are over all ok rows (folds, repeats, datasets); the relative
    columns divide by the reference encoder's median under the same model. An absent
    cost column gives NaN.

    Returns
    -------
    DataFrame
        Columns ``encoder, <model_column>, encoder_s, model_fit_s, total_s,
        n_features_out, encoded_mb, n_rows`` and, with a reference, the same cost columns
        suffixed ``_rel``.

    Raises
    ------
    ConfigError
        If ``reference`` is not an encoder of the table.
    """
    df = ok_rows(results)
    cols = {c: (df[c].astype(float) if c in df.columns else pd.Series(np.nan, df.index))
            for c in ("encoder_fit_s", "encoder_transform_s", "model_fit_s",
                      "n_features_out", "encoded_mb")}
    enc_s = cols["encoder_fit_s"] + cols["encoder_transform_s"]
    work = pd.DataFrame({"encoder": df["encoder"], model_column: df[model_column],
                         "encoder_s": enc_s, "model_fit_s": cols["model_fit_s"],
                         "total_s": enc_s + cols["model_fit_s"],
                         "n_features_out": cols["n_features_out"],
                         "encoded_mb": cols["encoded_mb"]})
    keys = ["encoder", model_column]
    out = work.groupby(keys).median()
    out["n_rows"] = work.groupby(keys).size()
    if reference is not None:
        if reference not in out.index.get_level_values("encoder"):
            raise ConfigError(f"reference encoder '{reference}' is not in the results; "
                              f"allowed: {', '.join(sorted(map(str, df['encoder'].unique())))}.")
        ref = out.xs(reference, level="encoder")
        measures = ["encoder_s", "model_fit_s", "total_s", "n_features_out", "encoded_mb"]
        rel = out[measures].div(ref[measures], level=model_column)
        out = out.join(rel.add_suffix("_rel"))
    return out.reset_index()


# ------------------------------------------------------------------------- leakage audit
def _crossfit_scheme(params: pd.Series, key: str, default: str) -> pd.Series:
    """Parse the cross-fitting scheme from JSON ``encoder_params`` (one parse per value).

    A JSON object without ``key`` gets ``default`` (the encoder's own default); text that
    is not a JSON object gets ``""`` (unknown).
    """
    def parse(text):
        try:
            value = json.loads(text) if isinstance(text, str) and text else None
        except json.JSONDecodeError:
            return ""
        if not isinstance(value, dict):
            return ""
        value = value.get(key, default)
        return "" if value is None else str(value)
    uniq = pd.Series(params.unique())
    table = dict(zip(uniq, uniq.map(parse)))  # loop over distinct settings only
    return params.map(table).fillna("")


def _row_gaps(df: pd.DataFrame) -> pd.Series:
    """Optimism of each row's primary metric on its training fold, positive = optimistic.

    Scores that grow with quality (ROC AUC, accuracy, R²) live on bounded, comparable
    scales: the gap is train minus test. Errors (RMSE, MAE, log loss) are in the target's
    own units, which differ by orders of magnitude between datasets: the gap is relative,
    (test - train) / test, the share of the test error that the training fold hides.
    """
    gap = pd.Series(np.nan, index=df.index)
    for metric in pd.unique(df["primary_metric"]):  # loop over metric names
        rows = df["primary_metric"] == metric
        train = f"train_{metric}"
        if metric in df.columns and train in df.columns:
            diff = orientation(metric) * (df.loc[rows, train] - df.loc[rows, metric])
            if orientation(metric) < 0:
                diff = diff / df.loc[rows, metric].abs().replace(0.0, np.nan)
            gap[rows] = diff
    return gap


def leakage_audit(results: pd.DataFrame, *, alpha: float = 0.05,
                  target_kinds=("target",), leaky_schemes=("none", "loo"),
                  crossfit_key: str = "crossfit", default_scheme: str = "kfold",
                  model_column: str = "model") -> pd.DataFrame:
    """Optimism gap (train minus test primary metric) per encoder setting and model.

    The gap is oriented so that positive means the training score looks better than the
    test score. Its mean gets a corrected resampled t interval over all ok rows of the
    setting (folds of all datasets; folds of different datasets are independent, so the
    overlap correction is conservative there).

    Flag rule: settings are *reference* when their encoder kind does not use the target
    (not in ``target_kinds``) or when it does and ``encoder_params[crossfit_key]`` names
    a scheme not in ``leaky_schemes`` (``"none"`` fits and encodes the same rows;
    ``"loo"`` leaks each row's own target, Prokhorenkova et al. 2018); a JSON object
    without the key means ``default_scheme`` (``TargetStatistics``' default). A
    non-reference setting is flagged when the lower bound of its gap interval lies above
    the largest upper bound among the reference settings of the same model and primary
    metric. Without an ``encoder_params`` column every target-kind setting is
    non-reference; with no reference setting nothing is flagged.

    Returns
    -------
    DataFrame
        Columns ``encoder, <model_column>, primary_metric, encoder_kind, crossfit,
        reference, gap_mean, gap_std, n, ci_low, ci_high, reference_max, flagged``.

    References
    ----------
    Prokhorenkova, L. et al. (2018). CatBoost: unbiased boosting with categorical
    features. NeurIPS (target leakage); Nadeau & Bengio (2003), Machine Learning 52
    (interval).
    """
    df = ok_rows(results)
    kind = df["encoder_kind"] if "encoder_kind" in df.columns else pd.Series("", df.index)
    scheme = pd.Series("", df.index)
    if "encoder_params" in df.columns:
        scheme = _crossfit_scheme(df["encoder_params"].astype(object), crossfit_key,
                                  default_scheme)
    work = pd.DataFrame({"encoder": df["encoder"], model_column: df[model_column],
                         "primary_metric": df["primary_metric"], "encoder_kind": kind,
                         "crossfit": scheme, "gap": _row_gaps(df),
                         "ratio": _row_test_train_ratio(df)}).dropna(subset=["gap"])
    keys = ["encoder", model_column, "primary_metric"]
    g = work.groupby(keys).agg(encoder_kind=("encoder_kind", "first"),
                               crossfit=("crossfit", "first"), mean=("gap", "mean"),
                               std=("gap", "std"), n=("gap", "size"),
                               ratio=("ratio", "mean")).reset_index()
    g = _interval_columns(g, alpha).rename(columns={"mean": "gap_mean", "std": "gap_std"})
    uses_y = g["encoder_kind"].isin(list(target_kinds))
    g["crossfit"] = g["crossfit"].where(uses_y, "")  # a scheme means nothing without y
    crossfit = ~g["crossfit"].isin(list(leaky_schemes)) & (g["crossfit"] != "")
    g["reference"] = ~uses_y | crossfit
    ref_hi = g["ci_high"].where(g["reference"])
    g["reference_max"] = ref_hi.groupby([g[model_column], g["primary_metric"]]).transform("max")
    g["flagged"] = ~g["reference"] & (g["ci_low"] > g["reference_max"])
    return g.drop(columns=["ratio"])


# ------------------------------------------------------------------------ recommendation
@dataclass(frozen=True)
class Recommendation:
    """The advised encoder for one model and metric, with its evidence and caveats.

    ``evidence`` has index ``encoder`` and columns ``avg_rank, ci_low, ci_high,
    wilcoxon_p_holm, median_time_s, median_features, median_shortfall, equivalent``.
    ``comparison`` is the full comparison of the eligible encoders the choice rests on;
    ``provisional`` is True when no test could reject at this number of datasets.
    """

    model: str
    metric: str
    choice: str | None
    best_by_rank: str | None
    equivalent: tuple
    evidence: pd.DataFrame
    n_datasets: int
    friedman: FriedmanResult
    rule: str
    caveats: tuple
    comparison: "Comparison | None" = None
    provisional: bool = False


RULE = ("Settings that fit target statistics on the rows they encode (cross-fitting 'none' "
        "or 'loo') are never recommended. An encoder is equivalent to the best-ranked "
        "remaining encoder when its Holm-corrected Wilcoxon signed-rank p-value against it "
        "is >= alpha (not significantly worse) and its median relative shortfall from it "
        "over datasets is at most 1 % (practically close). Among the equivalents, pick the "
        "cheapest: the lowest median encoder+model seconds, timings within 10 % of the "
        "fastest counting as tied; within that tier the fewest median output features, then "
        "the best average rank. When the datasets "
        "are too few for any Holm-corrected Wilcoxon test to reach alpha ((k-1)*2^(1-N) >= "
        "alpha), no comparison can separate the encoders and the best average rank is "
        "recommended, marked provisional.")


def eligible_rows(results: pd.DataFrame) -> tuple[pd.DataFrame, set[str]]:
    """The rows of settings that may be ranked and recommended, and the leaky labels.

    When every setting is leaky, all rows are kept (there is nothing else to rank).
    """
    leaky = leaky_settings(results)
    if not leaky:
        return results, leaky
    keep = ~results["encoder"].isin(leaky)
    return (results.loc[keep], leaky) if keep.any() else (results, set())


def wilcoxon_floor(n_datasets: int, n_encoders: int) -> float:
    """Smallest Holm-corrected two-sided exact Wilcoxon p-value reachable over N datasets.

    The exact two-sided signed-rank p-value is at least ``2 * 2**-N`` (all differences of
    one sign); Holm multiplies the smallest of ``k - 1`` p-values by ``k - 1``.

    References
    ----------
    Wilcoxon (1945), Biometrics Bulletin 1(6); Holm (1979), Scand. J. Statistics 6(2).
    """
    if n_datasets < 1 or n_encoders < 2:
        return 1.0
    return float(min(1.0, (n_encoders - 1) * 2.0 ** (1 - n_datasets)))


def leaky_settings(results: pd.DataFrame, *, target_kinds=("target",), leaky_schemes=("none", "loo"),
                   crossfit_key: str = "crossfit", default_scheme: str = "kfold") -> set[str]:
    """Encoder labels that fit target statistics on the rows they encode.

    References
    ----------
    Prokhorenkova et al. (2018), NeurIPS: in-sample and leave-one-out target statistics
    shift the training distribution (target leakage).
    """
    if "encoder_params" not in results or "encoder_kind" not in results:
        return set()
    rows = results.drop_duplicates("encoder")
    rows = rows.loc[rows["encoder_kind"].isin(list(target_kinds))]
    scheme = _crossfit_scheme(rows["encoder_params"].astype(object), crossfit_key, default_scheme)
    return set(rows.loc[scheme.isin(list(leaky_schemes)), "encoder"].astype(str))


def _failure_caveats(results: pd.DataFrame, model: str, model_column: str) -> list[str]:
    df = results.loc[(results[model_column] == model) & results["status"].isin(_FAILED)]
    per = df.groupby("encoder")["dataset"].unique()
    return [f"encoder '{enc}' failed or timed out on {len(ds)} dataset(s): "
            f"{', '.join(map(str, sorted(ds)))}." for enc, ds in per.items()]


def _regime_caveats(results, datasets, low, high) -> list[str]:
    regimes = dataset_regimes(results, low=low, high=high)
    seen = set(regimes.reindex(list(datasets)).dropna())
    return [f"no complete dataset in the '{r}' cardinality regime: the advice does not "
            "cover it." for r in ("low", "medium", "high") if r not in seen]


def median_shortfall(matrix: ScoreMatrix, control: str) -> pd.Series:
    """Median over datasets of each encoder's relative shortfall from ``control``.

    Per dataset, ``(control - encoder) / |control|`` on oriented scores (positive = the
    encoder is worse). Relative, so that datasets whose scores live on different scales
    (AUC near 0.9, RMSE in thousands) count alike. Common practice, no source.
    """
    o = matrix.oriented
    if control not in o or o.empty:
        return pd.Series(np.nan, index=pd.Index(matrix.encoders, name="encoder"))
    ref = o[control]
    rel = (ref.to_numpy()[:, None] - o.to_numpy()) / np.abs(ref.to_numpy())[:, None]
    return pd.Series(np.nanmedian(rel, axis=0), index=pd.Index(o.columns, name="encoder"))


def _evidence(comp: Comparison, results, model, model_column, alpha, tolerance) -> pd.DataFrame:
    m = comp.matrix
    ok = ok_rows(results)
    ok = ok.loc[(ok[model_column] == model) & ok["dataset"].isin(list(m.scores.index))]
    cost = cost_table(ok, model_column=model_column).set_index("encoder")
    ev = comp.ranks[["avg_rank", "ci_low", "ci_high"]].copy()
    p = comp.pairwise["wilcoxon_p_holm"] if len(comp.pairwise) else pd.Series(dtype=float)
    ev["wilcoxon_p_holm"] = p.reindex(ev.index)
    ev["median_time_s"] = cost["total_s"].reindex(ev.index)
    ev["median_features"] = cost["n_features_out"].reindex(ev.index)
    ev["median_shortfall"] = median_shortfall(m, comp.best).reindex(ev.index)
    not_worse = ~(ev["wilcoxon_p_holm"] < alpha)  # NaN (untestable) -> not shown worse
    ev["equivalent"] = not_worse & ~(ev["median_shortfall"] > tolerance)
    return ev


def recommend(results: pd.DataFrame, model: str, metric: str, *, alpha: float = 0.05,
              min_datasets: int = 5, missing: str = "auto", low: int = 10,
              high: int = 100, n_boot: int = 2000, seed: int = 0,
              model_column: str = "model", tolerance: float = 0.01) -> Recommendation:
    """Recommend one encoder for a model by the explicit rule in ``RULE``.

    Parameters
    ----------
    results : DataFrame
        The results table (all statuses: failures feed the caveats).
    model, metric : str
        The model label (or family, see ``model_column``) and the metric to judge on.
    alpha : float
        Level of the Holm-corrected Wilcoxon tests.
    min_datasets : int
        Fewer complete datasets than this add a caveat on the tests' power.
    tolerance : float
        Largest median relative shortfall from the best-ranked encoder that still counts
        as practically equivalent (0.01 = 1 %).
    missing, low, high, n_boot, seed, model_column
        As in :func:`score_matrix`, :func:`cardinality_regime`, :func:`compare_encoders`.

    Returns
    -------
    Recommendation
        ``choice`` is None when no complete dataset exists.

    References
    ----------
    Demšar (2006), JMLR 7:1-30 (Wilcoxon signed-rank over datasets); Holm (1979).
    """
    eligible, leaky = eligible_rows(results)
    m = score_matrix(eligible, model, metric, missing=missing, model_column=model_column)
    comp = compare_encoders(m, alpha=alpha, n_boot=n_boot, seed=seed,
                            min_datasets=min_datasets)
    notes = list(comp.caveats) + _failure_caveats(eligible, model, model_column)
    if leaky:
        notes.append("not eligible (target statistics fitted on the rows they encode): "
                     + ", ".join(sorted(leaky)) + ".")
    if m.n_datasets == 0 or not m.encoders:
        notes.append(f"no complete dataset for model '{model}' and metric '{metric}'.")
        return Recommendation(model, metric, None, None, (), pd.DataFrame(), 0,
                              comp.friedman, RULE, tuple(notes), comp)
    notes += _regime_caveats(results, m.scores.index, low, high)
    ev = _evidence(comp, eligible, model, model_column, alpha, tolerance)
    floor = wilcoxon_floor(m.n_datasets, len(m.encoders))
    pool = ev.loc[ev["equivalent"]].sort_values(
        ["median_time_s", "median_features", "avg_rank"], kind="stable", na_position="last")
    # timings within 10 % of the fastest are one cost tier: differences that small are
    # noise of a shared machine, so features and then rank decide inside the tier
    fastest = pool["median_time_s"].min()
    if np.isfinite(fastest):
        tier = pool.loc[~(pool["median_time_s"] > 1.1 * fastest)]
        pool = pd.concat([tier.sort_values(["median_features", "avg_rank"], kind="stable"),
                          pool.drop(tier.index)])
    choice = str(pool.index[0])
    if floor >= alpha:
        choice = str(comp.best)
        notes.append(f"provisional: with {m.n_datasets} dataset(s) and {len(m.encoders)} encoders "
                     f"no Holm-corrected Wilcoxon test can reach p < {alpha:g} (smallest "
                     f"reachable p = {floor:.3g}); the best average rank is recommended.")
    return Recommendation(model, metric, choice, comp.best,
                          tuple(pool.index), ev, m.n_datasets, comp.friedman, RULE,
                          tuple(notes), comp, bool(floor >= alpha))
