"""Cross-fitting schemes: which training rows feed the statistics of each training row.

Every scheme returns a :class:`CellStats`: a small table of *cells*, each holding the
sufficient statistics of a set of rows (count, sum of targets, sum of squared deviations
from their mean) with the prior and target variance of the rows it was fitted on, and an
``index`` mapping every training row to the one cell it may use. ``_target.py`` smooths
the cells and takes them back to rows with ``np.take``, so every scheme works with every
smoothing rule and target type, and smoothing runs once per cell, not once per row.

- in-sample: one cell per level (all rows, own row included);
- k-fold / holdout: one cell per (fold, level), fitted on the other folds;
- leave-one-out / ordered: one cell per row.

With *groups* (rows of one cluster: one patient, one country, one incident) every scheme
keeps a row's group out of its statistics, as the outer folds keep a group out of the
test fold: folds and the holdout part are unions of whole groups (``group_folds``,
``group_holdout``), the ordered permutation orders whole groups and a row uses only
rows of earlier groups, and leave-one-out becomes leave-one-group-out
(``leave_one_group_out``). Otherwise the rows of its own cluster in the other inner folds
carry the row's outcome into its "cross-fitted" statistic.

Which fold each row is in comes from the fold builders of ``_folds.py`` (re-exported here).

``out_of_fold`` also returns the in-sample cells (the tables ``transform`` uses), pooled
from its per-(fold, level) statistics, so k-fold fitting reads the rows once.

Inputs shared by every scheme
-----------------------------
``codes``  int64 (n_rows,): a level index ``>= 0``, or negative for a row in no level
           (missing under ``missing="prior"``); such a row feeds the prior only and its
           cell is empty (``n == 0``), hence it gets the prior.
``Y``      float64 (n_rows, n_targets): one column for a binary or continuous target,
           one indicator column per class for a multiclass target.
``n_levels`` number of levels; ``spread`` whether to compute squared deviations and the
           target variance (only empirical-Bayes smoothing needs them).

All work is ``np.bincount`` over codes and ``np.take`` back; loops run over folds and
target columns only.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

# the fold builders are re-exported: callers and tests read them as ``_crossfit.<name>``
from harness.encoders._folds import (
    count_groups,
    folds_from_splits,
    group_folds,
    group_holdout,
    holdout_folds,
    kfold_folds,
    random_folds,
)
from harness.errors import EncoderInputError

__all__ = [
    "CellStats",
    "LevelStats",
    "level_stats",
    "in_sample",
    "out_of_fold",
    "leave_one_out",
    "ordered",
    "random_folds",
    "holdout_folds",
    "folds_from_splits",
    "group_folds",
    "group_holdout",
    "kfold_folds",
    "leave_one_group_out",
]


class LevelStats(NamedTuple):
    """Per-group statistics: ``n`` (G,), ``total`` and ``sq_dev`` (G, T) or ``None``."""

    n: np.ndarray
    total: np.ndarray
    sq_dev: np.ndarray | None


class CellStats(NamedTuple):
    """Cells of statistics and the cell each training row uses.

    ``n`` (R,); ``total``, ``sq_dev``, ``prior``, ``tau2`` broadcastable to (R, T)
    (``sq_dev``/``tau2`` are ``None`` without ``spread``); ``index`` (n_rows,) int64.
    ``prior`` and ``tau2`` (target variance, ddof 0) come from the same rows as the
    cell's statistics, so under a leak-safe scheme none depends on the row's own target.
    """

    n: np.ndarray
    total: np.ndarray
    sq_dev: np.ndarray | None
    prior: np.ndarray
    tau2: np.ndarray | None
    index: np.ndarray


# --- statistics of groups ----------------------------------------------------------------
def level_stats(groups: np.ndarray, Y: np.ndarray, n_groups: int, spread: bool = True) -> LevelStats:
    """Count, target sum and (with ``spread``) sum of squared deviations per group.

    ``groups`` must be ``>= 0``. Squared deviations use two passes (group mean, then
    deviations from it), as scikit-learn's ``TargetEncoder``: no cancellation.
    """
    n = np.bincount(groups, minlength=n_groups).astype(np.float64)
    total = _sum_by(groups, Y, n_groups)
    if not spread:
        return LevelStats(n, total, None)
    dev = Y - np.take(_safe_mean(total, n), groups, axis=0)
    np.multiply(dev, dev, out=dev)  # squared in place: no second row-sized array
    return LevelStats(n, total, _sum_by(groups, dev, n_groups))


def _sum_by(groups: np.ndarray, values: np.ndarray, n_groups: int) -> np.ndarray:
    out = np.empty((n_groups, values.shape[1]))
    for t in range(values.shape[1]):  # one bincount per target column
        out[:, t] = np.bincount(groups, weights=values[:, t], minlength=n_groups)
    return out


def _safe_mean(total: np.ndarray, n: np.ndarray) -> np.ndarray:
    """``total / n`` with 0 for empty groups."""
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(n[:, None] > 0, total / n[:, None], 0.0)


def _keyed(codes: np.ndarray, n_levels: int) -> np.ndarray:
    """Rows in no level go to an extra last group ``n_levels`` (emptied afterwards)."""
    if len(codes) and codes.min() >= 0:  # every row in a level: a reduction, not a copy
        return codes.astype(np.int64, copy=False)
    return np.where(codes >= 0, codes, n_levels)


def _without_others(stats: LevelStats) -> LevelStats:
    """Per group of axis 0 (folds), the statistics of all *other* groups pooled.

    Pooled squared deviations use the parallel-variance identity
    ``SS = sum_g [SS_g + n_g (mean_g - mean)^2]`` (Chan, Golub & LeVeque 1983,
    The American Statistician 37(3)), which stays exact where subtracting
    ``sum y^2 - n mean^2`` would cancel.
    """
    n_o = stats.n.sum(axis=0) - stats.n
    total_o = stats.total.sum(axis=0) - stats.total
    if stats.sq_dev is None:
        return LevelStats(n_o, total_o, None)
    n_folds = stats.n.shape[0]
    mean_g = _safe_mean_nd(stats.total, stats.n)
    mean_o = _safe_mean_nd(total_o, n_o)
    sq_o = np.zeros_like(stats.sq_dev)
    d, term = np.empty_like(stats.sq_dev[0]), np.empty_like(stats.sq_dev[0])
    for f in range(n_folds):
        # SS_g + (n_g d) d summed over the other folds g in fold order: the operations and
        # order of ``.sum(axis=0)`` over an outer axis, without copying the slices out
        for g in range(n_folds):
            if g != f:
                np.subtract(mean_g[g], mean_o[f], out=d)
                np.multiply(stats.n[g][..., None], d, out=term)
                term *= d
                term += stats.sq_dev[g]
                sq_o[f] += term
    return LevelStats(n_o, total_o, sq_o)


def _pooled(stats: LevelStats, axis: int) -> LevelStats:
    """Pool groups along ``axis`` with the parallel-variance identity (see above)."""
    n, total = stats.n.sum(axis=axis), stats.total.sum(axis=axis)
    if stats.sq_dev is None:
        return LevelStats(n, total, None)
    d = _safe_mean_nd(stats.total, stats.n) - np.expand_dims(_safe_mean_nd(total, n), axis)
    return LevelStats(n, total, (stats.sq_dev + stats.n[..., None] * d * d).sum(axis=axis))


def _safe_mean_nd(total: np.ndarray, n: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(n[..., None] > 0, total / n[..., None], 0.0)


# --- schemes -------------------------------------------------------------------------------
def in_sample(codes: np.ndarray, Y: np.ndarray, n_levels: int, spread: bool = True) -> CellStats:
    """No cross-fitting: one cell per level, from all rows (own row included).

    Cell ``n_levels`` is empty: rows in no level (and unseen values) get the prior.
    These cells are also the full-data tables that ``transform`` uses.
    """
    key = _keyed(codes, n_levels)
    everyone = LevelStats(np.float64(len(Y)), Y.sum(axis=0), len(Y) * Y.var(axis=0) if spread else None)
    return _in_sample_cells(level_stats(key, Y, n_levels + 1, spread), key, n_levels, everyone)


def _in_sample_cells(stats: LevelStats, key, n_levels: int, everyone: LevelStats) -> CellStats:
    """Cells of levels, the extra group emptied; prior and variance of ``everyone``."""
    n, total, sq = _empty_last(stats, n_levels)
    prior = (everyone.total / everyone.n)[None, :]
    tau2 = None if everyone.sq_dev is None else (everyone.sq_dev / everyone.n)[None, :]
    return CellStats(n, total, sq, prior, tau2, key)


def _empty_last(stats: LevelStats, n_levels: int):
    """Zero the statistics of the extra group ``n_levels`` (along the last level axis)."""
    n, total = stats.n.copy(), stats.total.copy()
    n[..., n_levels] = 0.0
    total[..., n_levels, :] = 0.0
    sq = None
    if stats.sq_dev is not None:
        sq = stats.sq_dev.copy()
        sq[..., n_levels, :] = 0.0
    return n, total, sq


def out_of_fold(
    codes: np.ndarray, Y: np.ndarray, n_levels: int, fold: np.ndarray, n_folds: int, spread: bool = True
) -> tuple[CellStats, CellStats]:
    """Each row uses the rows of all other folds: one cell per (fold, level).

    ``fold[i]`` is the fold in which row ``i`` is a validation row. Each fold has its own
    prior and target variance, from its training rows, exactly as
    ``sklearn.preprocessing.TargetEncoder.fit_transform`` computes them.

    Returns
    -------
    cells : CellStats
        The cross-fitted cells.
    full : CellStats
        The in-sample cells of :func:`in_sample` (the full-data tables), pooled from
        the same per-(fold, level) statistics instead of another pass over the rows.
    """
    width = n_levels + 1
    key = _keyed(codes, n_levels)
    cell = np.multiply(fold, width, dtype=np.int64)
    cell += key
    per_cell = level_stats(cell, Y, n_folds * width, spread)
    by_fold = LevelStats(*(_fold_major(a, n_folds) for a in per_cell))
    n, total, sq = _empty_last(_without_others(by_fold), n_levels)
    # each fold's prior and variance: all rows outside the fold (rows in no level
    # included), pooled from the cells
    per_fold = _pooled(by_fold, axis=1)
    train = _without_others(_as_folds(per_fold))
    prior = _safe_mean(train.total[:, 0], train.n[:, 0])
    tau2 = None if not spread else train.sq_dev[:, 0] / train.n[:, 0][:, None]
    n_targets = Y.shape[1]
    cells = CellStats(
        n.reshape(-1),
        total.reshape(-1, n_targets),
        None if sq is None else sq.reshape(-1, n_targets),
        np.repeat(prior, width, axis=0),
        None if tau2 is None else np.repeat(tau2, width, axis=0),
        cell,
    )
    everyone = _pooled(per_fold, axis=0)
    full = _in_sample_cells(_pooled(by_fold, axis=0), key, n_levels, everyone)
    return cells, full


def _fold_major(a, n_folds: int):
    """(folds * groups, ...) -> (folds, groups, ...); ``None`` stays ``None``."""
    return None if a is None else a.reshape(n_folds, -1, *a.shape[1:])


def _as_folds(stats: LevelStats) -> LevelStats:
    """View per-fold statistics as (folds, one group) for :func:`_without_others`."""
    sq = None if stats.sq_dev is None else stats.sq_dev[:, None, :]
    return LevelStats(stats.n[:, None], stats.total[:, None, :], sq)


def leave_one_out(codes: np.ndarray, Y: np.ndarray, n_levels: int, spread: bool = True) -> CellStats:
    """Each row uses all other rows: its own target is removed from every statistic.

    Squared deviations are downdated with the one-point inverse of Welford's update,
    ``SS' = SS - (y - mean)(y - mean')`` (Welford 1962, Technometrics 4(3)); the prior
    and target variance exclude the row in the same way. One cell per row.

    No row's encoding depends on its own target, yet the scheme still leaks through
    the *distribution* of encodings: within a level, a positive row sees one positive
    fewer than a negative row, so even a constant feature separates the classes
    perfectly (Prokhorenkova et al. 2018, NeurIPS). Prefer ``kfold`` or ``ordered``.

    Raises
    ------
    EncoderInputError
        With fewer than two rows (no other row to learn from).
    """
    n_rows = Y.shape[0]
    if n_rows < 2:
        raise EncoderInputError(f"TargetStatistics(crossfit='loo') needs at least 2 training rows; got {n_rows}.")
    n, total, sq = _drop_own(in_sample(codes, Y, n_levels, True), Y, codes >= 0)
    everyone = np.zeros(n_rows, dtype=np.int64)
    _, g_total, g_sq = _drop_own(in_sample(everyone, Y, 1, True), Y, np.ones(n_rows, bool))
    tau2 = g_sq / (n_rows - 1) if spread else None
    prior = g_total / (n_rows - 1)
    return CellStats(n, total, sq if spread else None, prior, tau2, np.arange(n_rows))


def _drop_own(cells: CellStats, Y: np.ndarray, has_level: np.ndarray):
    """Statistics of each row's cell with the row's own target removed (vectorised)."""
    n = cells.n[cells.index]
    total = np.take(cells.total, cells.index, axis=0)
    sq = np.take(cells.sq_dev, cells.index, axis=0)
    n_out = n - has_level
    total_out = total - Y * has_level[:, None]
    mean, mean_out = _safe_mean(total, n), _safe_mean(total_out, n_out)
    sq_out = sq - (Y - mean) * (Y - mean_out)
    # a group of one has no spread; rounding must not make a sum of squares negative
    sq_out = np.where(n_out[:, None] > 1, np.maximum(sq_out, 0.0), 0.0)
    return n_out, total_out, sq_out


def leave_one_group_out(
    codes: np.ndarray, Y: np.ndarray, n_levels: int, groups: np.ndarray, spread: bool = True
) -> CellStats:
    """Each row uses all rows outside its group: one cell per (group, level) present.

    The statistics of a level without the group follow from the level's and the
    (group, level) pair's by subtraction; squared deviations by the parallel-variance
    identity solved for one part, ``SS_o = SS - SS_g - n_o n_g / n (mean_o - mean_g)^2``
    (Chan, Golub & LeVeque 1983, The American Statistician 37(3)). The prior and variance
    are those of the rows outside the group.

    Raises
    ------
    EncoderInputError
        With fewer than two groups (no other group to learn from).
    """
    n_groups = count_groups(groups)
    width = n_levels + 1
    key = _keyed(codes, n_levels)
    pairs, index = np.unique(groups.astype(np.int64) * width + key, return_inverse=True)
    index = index.reshape(-1)
    level_of, group_of = pairs % width, pairs // width
    n, total, sq = _drop_part(level_stats(key, Y, width, spread), level_stats(index, Y, len(pairs), spread), level_of)
    n[level_of == n_levels], total[level_of == n_levels] = 0.0, 0.0  # rows in no level: the prior
    everyone = np.zeros(len(Y), dtype=np.int64)
    g_n, g_total, g_sq = _drop_part(
        level_stats(everyone, Y, 1, spread),
        level_stats(groups, Y, n_groups, spread),
        np.zeros(n_groups, dtype=np.int64),
    )
    prior = _safe_mean(g_total, g_n)[group_of]
    tau2 = None if not spread else (g_sq / g_n[:, None])[group_of]
    if sq is not None:
        sq[level_of == n_levels] = 0.0
    return CellStats(n, total, sq, prior, tau2, index)


def _drop_part(whole: LevelStats, part: LevelStats, whole_of: np.ndarray):
    """Statistics of ``whole[whole_of[p]]`` without part ``p``, for every part."""
    n_all, n_p = whole.n[whole_of], part.n
    n_o = n_all - n_p
    total_o = whole.total[whole_of] - part.total
    if whole.sq_dev is None:
        return n_o, total_o, None
    mean_o, mean_p = _safe_mean(total_o, n_o), _safe_mean(part.total, n_p)
    with np.errstate(invalid="ignore", divide="ignore"):
        between = np.where(n_all[:, None] > 0, (n_o * n_p / n_all)[:, None] * (mean_o - mean_p) ** 2, 0.0)
    sq_o = whole.sq_dev[whole_of] - part.sq_dev - between
    return n_o, total_o, np.where(n_o[:, None] > 1, np.maximum(sq_o, 0.0), 0.0)


def ordered(
    codes: np.ndarray,
    Y: np.ndarray,
    n_levels: int,
    permutation: np.ndarray,
    spread: bool = True,
    groups: np.ndarray | None = None,
) -> CellStats:
    """Ordered target statistics: each row uses the same-level rows before it.

    With ``groups`` (codes ``0..G-1``), ``permutation`` orders the groups instead of the
    rows: a row uses the same-level rows of the groups before its own, never a row of its
    own group, and its prior is that of the rows outside its group.

    Rows are visited in ``permutation`` order (``permutation[k]`` is the k-th row). A
    stable sort by (level, position) makes each level one contiguous run; grouped
    cumulative sums minus the row's own term give the statistics of the earlier rows.
    The prior and variance are those of all other rows (leave one out), independent of
    the row's own target; a fixed ``prior`` on the encoder replaces them, as in the
    paper. One cell per row.

    Sums run over targets shifted by their level's mean: the cumulative sums stay small
    (no cancellation when a long prefix is subtracted) and squared deviations follow
    as ``S2 - S1**2 / n``.

    References
    ----------
    Prokhorenkova, L., Gusev, G., Vorobev, A., Dorogush, A. V., Gulin, A. (2018).
    CatBoost: unbiased boosting with categorical features. NeurIPS.
    """
    n_rows = Y.shape[0]
    n_units = n_rows if groups is None else int(groups.max(initial=-1)) + 1
    position = np.empty(n_units, dtype=np.int64)
    position[np.asarray(permutation)] = np.arange(n_units)
    if groups is not None:
        position = position[groups]  # every row takes its group's place
    key = _keyed(codes, n_levels)
    order = np.lexsort((position, key))
    full = level_stats(key, Y, n_levels + 1, spread=False)
    shift = np.take(_safe_mean(full.total, full.n), key[order], axis=0)
    tie = None if groups is None else position[order]
    n_s, total, sq = _prefix_stats(key[order], Y[order] - shift, n_levels, tie)
    total = total + n_s[:, None] * shift
    out_n, out_total, out_sq = np.empty(n_rows), np.empty_like(Y), np.empty_like(Y)
    out_n[order], out_total[order], out_sq[order] = n_s, total, sq
    if groups is None:
        base = leave_one_out(np.zeros(n_rows, dtype=np.int64), Y, 1, spread)
        prior, tau2 = base.prior, base.tau2
    else:
        base = leave_one_group_out(np.zeros(n_rows, dtype=np.int64), Y, 1, groups, spread)
        prior, tau2 = (None if a is None else np.take(a, base.index, axis=0) for a in (base.prior, base.tau2))
    sq = out_sq if spread else None
    return CellStats(out_n, out_total, sq, prior, tau2, np.arange(n_rows))


def _run_starts(change: np.ndarray, n_rows: int) -> np.ndarray:
    """Index of the first row of each row's run, runs cut where ``change`` is true."""
    start = np.r_[0, np.flatnonzero(change) + 1]
    return np.repeat(start, np.diff(np.r_[start, n_rows]))


def _prefix_stats(k_sorted: np.ndarray, d: np.ndarray, n_levels: int, tie: np.ndarray | None = None):
    """Count, sum and squared deviations of the earlier rows of each row's run.

    With ``tie`` (sorted group positions), rows of one group within a level's run are not
    earlier than each other: each takes the statistics at its group's first row.
    """
    n_rows = len(k_sorted)
    new_level = k_sorted[1:] != k_sorted[:-1]
    run_start = _run_starts(new_level, n_rows)
    s1 = _exclusive_run_cumsum(d, run_start)
    s2 = _exclusive_run_cumsum(d * d, run_start)
    first = np.arange(n_rows)
    if tie is not None:
        first = _run_starts(new_level | (tie[1:] != tie[:-1]), n_rows)
        s1, s2 = s1[first], s2[first]
    n_before = (first - run_start).astype(np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        sq = np.where(n_before[:, None] > 0, s2 - s1 * s1 / n_before[:, None], 0.0)
    has_level = (k_sorted < n_levels)[:, None]
    n_s = np.where(has_level[:, 0], n_before, 0.0)
    return n_s, np.where(has_level, s1, 0.0), np.where(has_level, np.maximum(sq, 0.0), 0.0)


def _exclusive_run_cumsum(values: np.ndarray, run_start: np.ndarray) -> np.ndarray:
    """Cumulative sum within each contiguous run, excluding the current row."""
    csum = np.cumsum(values, axis=0)
    offset = np.concatenate([np.zeros((1, values.shape[1])), csum])[run_start]
    return csum - values - offset
