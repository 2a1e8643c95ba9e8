"""Comparisons and aggregations of a score matrix: ranks, Friedman, Nemenyi, pairwise tests."""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
import pandas as pd
from scipy import stats as sps

from harness.errors import ConfigError
from harness.stats._common import AGGREGATIONS, _check_choice
from harness.stats._matrix import ScoreMatrix
from harness.stats._tests import (
    FriedmanResult,
    bayesian_signed_rank,
    critical_difference,
    friedman_from_ranks,
    friedman_permutation_p,
    holm,
)

# ------------------------------------------------------------------ ranks across datasets
#: fewest datasets at which the rank intervals reach their nominal coverage by simulation
#: (tests/stats/test_coverage.py: >= 92.5 % for a nominal 95 % from 8 datasets on)
RANK_CI_MIN_DATASETS = 8


def expanded_alpha(alpha: float, n: int) -> float:
    """Tail level of the expanded percentile bootstrap for a mean of ``n`` values.

    ``alpha' = 2 Phi(-sqrt(n/(n-1)) t_{1-alpha/2, n-1})``: the percentile interval is
    widened to make up for the narrowness of the bootstrap distribution at small n.

    References
    ----------
    Hesterberg, T. (2015). What teachers should know about the bootstrap. The American
    Statistician 69(4):371-386, Sec. 3.3 ("expanded percentile interval") [recalled].
    """
    return float(2 * sps.norm.sf(np.sqrt(n / (n - 1)) * sps.t.ppf(1 - alpha / 2, n - 1)))


def average_ranks(
    matrix: ScoreMatrix,
    *,
    n_boot: int = 2000,
    alpha: float = 0.05,
    seed: int = 0,
    min_datasets: int = RANK_CI_MIN_DATASETS,
) -> pd.DataFrame:
    """Average rank of each encoder with an expanded percentile bootstrap interval.

    Datasets (rows of the rank matrix) are resampled with replacement; a dataset's ranks
    do not depend on the other datasets, so they are not recomputed. Below
    ``min_datasets`` the interval is left out (NaN): simulated coverage falls short of
    nominal there (the plain percentile interval covers about 48 % at N = 2, 72 % at N = 3).

    Returns
    -------
    DataFrame
        Index ``encoder``; columns ``avg_rank, ci_low, ci_high, median_rank,
        n_datasets``, sorted by ``avg_rank``. All NaN when there is no dataset.

    References
    ----------
    Demšar (2006), JMLR 7, Sec. 3.2.2 (average ranks); Efron, B. & Tibshirani, R. (1993).
    An Introduction to the Bootstrap. Chapman & Hall, Ch. 13 (percentile interval);
    Hesterberg (2015), The American Statistician 69(4) (expansion).
    """
    r = matrix.ranks.to_numpy(dtype=float)
    n, k = r.shape
    out = pd.DataFrame(index=pd.Index(matrix.encoders, name="encoder"))
    out["avg_rank"] = r.mean(axis=0) if n else np.nan
    out["ci_low"] = out["ci_high"] = np.nan
    if n > 1 and n >= min_datasets and n_boot > 0:
        tail = expanded_alpha(alpha, n)
        idx = np.random.default_rng(seed).integers(0, n, size=(n_boot, n))
        boot = r[idx].mean(axis=1)
        out["ci_low"] = np.quantile(boot, tail / 2, axis=0)
        out["ci_high"] = np.quantile(boot, 1 - tail / 2, axis=0)
    out["median_rank"] = np.median(r, axis=0) if n else np.nan
    out["n_datasets"] = n
    return out.sort_values("avg_rank", kind="stable")


def friedman_test(
    ranks: pd.DataFrame, *, tie_correction: bool = False, permutation: bool = True, seed: int = 0
) -> FriedmanResult:
    """Friedman / Iman-Davenport test on a datasets x encoders rank matrix.

    Parameters
    ----------
    ranks : DataFrame
        ``ScoreMatrix.ranks``.
    tie_correction : bool
        Divide chi2 by ``1 - sum(t^3 - t) / (N k (k^2 - 1))`` as
        ``scipy.stats.friedmanchisquare`` does; Demšar's formula has none (False).
    permutation : bool
        Add the permutation p-value (exact for small N x k, :func:`friedman_permutation_p`).

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
    res = friedman_from_ranks(avg, n, tie_factor=factor)
    if n >= 2 and k >= 2 and permutation:
        p, exact = friedman_permutation_p(r, seed=seed)
        res = replace(res, perm_p=p, perm_exact=exact)
    return res


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
        raise ConfigError(
            f"control encoder '{control}' is not among the encoders; allowed: {', '.join(map(str, avg_ranks.index))}."
        )
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
    out = pd.DataFrame({"statistic": stat, "p_value": p, "p_holm": holm(p)}, index=pd.Index(others, name="encoder"))
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
    out = pd.DataFrame({"wins": (d > tol).sum(), "ties": (d.abs() <= tol).sum(), "losses": (d < -tol).sum()}).astype(
        int
    )
    out.index.name = "encoder"
    return out


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
    rows = {
        enc: bayesian_signed_rank((o[enc] - o[best]).to_numpy(), rope, seed=seed) for enc in o.columns if enc != best
    }  # loop over encoders
    return pd.DataFrame(
        {
            "p_left": [r.p_left for r in rows.values()],
            "p_rope": [r.p_rope for r in rows.values()],
            "p_right": [r.p_right for r in rows.values()],
        },
        index=pd.Index(list(rows), name="encoder"),
    )


def _matrix_caveats(matrix: ScoreMatrix, min_datasets: int) -> list[str]:
    notes = []
    n, k = matrix.scores.shape
    if n < 2 or k < 2:
        notes.append(f"{n} complete dataset(s) and {k} encoder(s): tests need at least 2 of each, statistics are NaN.")
    elif n < min_datasets:
        notes.append(
            f"only {n} datasets (< {min_datasets}): the rank tests have little "
            "power; 'not significantly different' is weak evidence."
        )
    if matrix.dropped_datasets:
        notes.append(
            f"{len(matrix.dropped_datasets)} dataset(s) dropped for missing "
            f"cells: {', '.join(map(str, matrix.dropped_datasets))}."
        )
    if matrix.dropped_encoders:
        notes.append(f"encoder(s) dropped for missing cells: {', '.join(map(str, matrix.dropped_encoders))}.")
    return notes


def compare_encoders(
    matrix: ScoreMatrix,
    *,
    alpha: float = 0.05,
    control=None,
    tie_tol: float = 0.0,
    rope: float | None = None,
    n_boot: int = 2000,
    seed: int = 0,
    min_datasets: int = 5,
) -> Comparison:
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
        return Comparison(matrix, ranks, fried, cd, None, pd.DataFrame(), tuple(_matrix_caveats(matrix, min_datasets)))
    pair = _pairs_vs_control(matrix, ranks, best, cd, tie_tol=tie_tol, rope=rope, seed=seed)
    notes = _matrix_caveats(matrix, min_datasets)
    if n >= 2 and k >= 2 and not fried.p < alpha:
        notes.append(
            f"Friedman/Iman-Davenport p = {fried.p:.3g} >= {alpha}: no evidence that the encoders differ at all."
        )
    return Comparison(matrix, ranks, fried, cd, best, pair, tuple(notes))


def _pairs_vs_control(matrix, ranks, best, cd, *, tie_tol, rope, seed) -> pd.DataFrame:
    """One row per encoder against ``best``: z and Wilcoxon (Holm), rank gap, win/tie/loss, Bayes."""
    n = matrix.scores.shape[0]
    z = control_z_test(ranks["avg_rank"], n, best)
    w = wilcoxon_vs_control(matrix, best).rename(
        columns={"statistic": "wilcoxon_stat", "p_value": "wilcoxon_p", "p_holm": "wilcoxon_p_holm"}
    )
    pair = z.rename(columns={"p_value": "z_p", "p_holm": "z_p_holm"}).join(w)
    pair["rank_diff"] = pair["avg_rank"] - float(ranks.loc[best, "avg_rank"])
    pair["beyond_cd"] = pair["rank_diff"].abs() > cd
    pair = pair.join(win_tie_loss(matrix, best, tol=tie_tol))
    if rope is not None:
        pair = pair.join(_bayes_columns(matrix, best, rope, seed))
    return pair


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
    out = pd.DataFrame(
        {
            "mean_rank": matrix.ranks.mean(),
            "median_rank": matrix.ranks.median(),
            "mean_normalised": norm.mean(),
            "win_rate": o.ge(best - tie_tol, axis=0).mean() if len(o) else np.nan,
        },
        index=pd.Index(matrix.encoders, name="encoder"),
    )
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
