"""Cross-fitting schemes: which training rows feed the statistics of each training row.

Every scheme returns a :class:`RowStats`: for each training row, the sufficient
statistics of the same-level rows it is allowed to use (count, sum of targets, sum of
squared deviations from their mean) together with the prior and the target variance of
the rows it is allowed to use. ``_target.py`` turns those into encodings with one
smoothing rule, so every scheme works with every smoothing and every target type.

Inputs shared by every scheme
-----------------------------
``codes``  int64 array (n_rows,): a level index ``>= 0``, or a negative value for a row
           that belongs to no level (missing under ``missing="prior"``); such rows feed
           the prior but no level, and get ``n == 0`` (hence the prior).
``Y``      float64 array (n_rows, n_targets): one column for a binary or continuous
           target, one indicator column per class for a multiclass target.
``n_levels`` number of levels (the length of the per-level tables).

All work is ``np.bincount`` over codes and ``np.take`` back to rows; loops run over
folds or target columns only.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from harness.errors import EncoderInputError

__all__ = [
    "LevelStats",
    "RowStats",
    "level_stats",
    "in_sample",
    "out_of_fold",
    "leave_one_out",
    "ordered",
    "holdout_folds",
]


class LevelStats(NamedTuple):
    """Per-level sufficient statistics: ``n`` (L,), ``total`` and ``sq_dev`` (L, T)."""

    n: np.ndarray
    total: np.ndarray
    sq_dev: np.ndarray


class RowStats(NamedTuple):
    """Per-row statistics a row may use: ``n`` (N,), the rest (N, T).

    ``prior`` and ``tau2`` (the target variance, ddof 0) are computed on the same rows
    that feed ``n``/``total``/``sq_dev`` (all rows a level could draw from), so under a
    leak-safe scheme none of them depends on the row's own target.
    """

    n: np.ndarray
    total: np.ndarray
    sq_dev: np.ndarray
    prior: np.ndarray
    tau2: np.ndarray


def level_stats(codes: np.ndarray, Y: np.ndarray, n_levels: int) -> LevelStats:
    """Count, target sum and sum of squared deviations per level.

    The squared deviations use two passes (mean first, then deviations from it), as
    scikit-learn's ``TargetEncoder`` does, so no precision is lost to cancellation.
    """
    known = codes >= 0
    c, Yk = codes[known], Y[known]
    n = np.bincount(c, minlength=n_levels).astype(np.float64)
    total = _sum_by(c, Yk, n_levels)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = total / n[:, None]
    dev = Yk - np.take(np.nan_to_num(mean), c, axis=0)
    return LevelStats(n, total, _sum_by(c, dev * dev, n_levels))


def _sum_by(c: np.ndarray, values: np.ndarray, n_levels: int) -> np.ndarray:
    cols = [np.bincount(c, weights=values[:, t], minlength=n_levels) for t in range(values.shape[1])]
    return np.stack(cols, axis=1) if cols else np.zeros((n_levels, 0))


def _gather(stats: LevelStats, codes: np.ndarray) -> tuple[np.ndarray, ...]:
    """Take level statistics back to rows; rows without a level get zeros."""
    idx = np.where(codes >= 0, codes, len(stats.n))
    n = np.append(stats.n, 0.0)
    zero = np.zeros((1, stats.total.shape[1]))
    total = np.concatenate([stats.total, zero])
    sq_dev = np.concatenate([stats.sq_dev, zero])
    return n[idx], np.take(total, idx, axis=0), np.take(sq_dev, idx, axis=0)


def _moments(Y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    return Y.mean(axis=0), Y.var(axis=0)


def in_sample(codes: np.ndarray, Y: np.ndarray, n_levels: int) -> RowStats:
    """No cross-fitting: every row uses all rows, its own included (leaks on purpose)."""
    n, total, sq_dev = _gather(level_stats(codes, Y, n_levels), codes)
    prior, tau2 = _moments(Y)
    shape = total.shape
    return RowStats(n, total, sq_dev, np.broadcast_to(prior, shape), np.broadcast_to(tau2, shape))


def out_of_fold(codes: np.ndarray, Y: np.ndarray, n_levels: int, folds) -> RowStats:
    """Each row uses the training rows of the fold that holds it as a validation row.

    ``folds`` is an iterable of ``(train_idx, test_idx)``; every row must be a test row
    exactly once. Each fold has its own prior and target variance, computed on its
    training rows, exactly as ``sklearn.preprocessing.TargetEncoder.fit_transform``.

    Raises
    ------
    EncoderInputError
        If the test parts do not cover every row exactly once.
    """
    n_rows, n_targets = Y.shape
    out = [np.zeros(n_rows)] + [np.zeros((n_rows, n_targets)) for _ in range(4)]
    seen = np.zeros(n_rows, dtype=np.int64)
    for train, test in folds:
        train, test = np.asarray(train), np.asarray(test)
        seen += np.bincount(test, minlength=n_rows)
        stats = level_stats(codes[train], Y[train], n_levels)
        n, total, sq_dev = _gather(stats, codes[test])
        prior, tau2 = _moments(Y[train])
        for arr, value in zip(out, (n, total, sq_dev, prior, tau2)):
            arr[test] = value
    if not np.all(seen == 1):
        raise EncoderInputError(
            "TargetStatistics: the validation parts of `cv` must cover every training row "
            f"exactly once; {int(np.sum(seen != 1))} of {n_rows} rows are covered 0 or 2+ "
            "times. Pass a splitter with non-overlapping validation folds (e.g. KFold)."
        )
    return RowStats(*out)


def holdout_folds(n_rows: int, fraction: float, rng: np.random.RandomState) -> list:
    """Two complementary parts: a random ``fraction`` of rows (H) and the rest (R).

    Rows of R are encoded from the statistics of H and rows of H from those of R, so
    every row gets an encoding and none uses its own target. With ``fraction=0.5`` this
    is two-fold cross-fitting; other fractions make the two parts unequal.

    Raises
    ------
    EncoderInputError
        If either part would be empty.
    """
    size = int(round(fraction * n_rows))
    if size < 1 or size > n_rows - 1:
        raise EncoderInputError(
            f"TargetStatistics(crossfit='holdout'): holdout_fraction={fraction} of {n_rows} "
            "rows leaves one part empty; both parts need at least one row. Use more rows "
            "or a fraction nearer 0.5."
        )
    perm = rng.permutation(n_rows)
    held, rest = np.sort(perm[:size]), np.sort(perm[size:])
    return [(held, rest), (rest, held)]


def leave_one_out(codes: np.ndarray, Y: np.ndarray, n_levels: int) -> RowStats:
    """Each row uses all other rows: its own target is removed from every statistic.

    The sum of squared deviations is downdated with the one-point inverse of Welford's
    update, ``SS' = SS - (y - mean)(y - mean')`` (Welford 1962, Technometrics 4(3)),
    and the prior and target variance exclude the row in the same way.

    Raises
    ------
    EncoderInputError
        With fewer than two rows (no other row to learn from).
    """
    n_rows = Y.shape[0]
    if n_rows < 2:
        raise EncoderInputError(
            f"TargetStatistics(crossfit='loo') needs at least 2 training rows; got {n_rows}."
        )
    n, total, sq_dev = _gather(level_stats(codes, Y, n_levels), codes)
    n_out, total_out, sq_out = _drop_own(n, total, sq_dev, Y, codes >= 0)
    all_rows = np.zeros(n_rows, dtype=np.int64)
    g_n, g_total, g_sq = _gather(level_stats(all_rows, Y, 1), all_rows)
    _, prior_sum, tau_sq = _drop_own(g_n, g_total, g_sq, Y, np.ones(n_rows, dtype=bool))
    prior = prior_sum / (n_rows - 1)
    return RowStats(n_out, total_out, sq_out, prior, tau_sq / (n_rows - 1))


def _drop_own(n, total, sq_dev, Y, has_level):
    """Remove each row's own target from the statistics of its group (vectorised)."""
    n_out = n - has_level
    total_out = total - Y * has_level[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = total / n[:, None]
        mean_out = np.where(n_out[:, None] > 0, total_out / n_out[:, None], 0.0)
    sq_out = sq_dev - np.nan_to_num((Y - mean) * (Y - mean_out))
    sq_out = np.where((n_out[:, None] > 1), np.maximum(sq_out, 0.0), 0.0)
    total_out = np.where(has_level[:, None], total_out, 0.0)
    return n_out, total_out, sq_out


def ordered(
    codes: np.ndarray, Y: np.ndarray, n_levels: int, permutation: np.ndarray
) -> RowStats:
    """Ordered target statistics: each row uses the same-level rows before it.

    Rows are visited in ``permutation`` order (``permutation[k]`` is the k-th row); a
    stable sort by (level, position) makes each level a contiguous run, and grouped
    cumulative sums minus the row's own contribution give the statistics of the rows
    before it. The prior and target variance are those of all other rows (leave one
    out), so they do not depend on the row's own target either; a fixed ``prior`` set
    on the encoder replaces them as in the paper.

    Sums run over targets shifted by each level's mean, which keeps the cumulative sums
    small (no cancellation when a long prefix is subtracted) and gives the squared
    deviations as ``S2 - S1**2 / n``.

    References
    ----------
    Prokhorenkova, L., Gusev, G., Vorobev, A., Dorogush, A. V., Gulin, A. (2018).
    CatBoost: unbiased boosting with categorical features. NeurIPS.
    """
    n_rows = Y.shape[0]
    position = np.empty(n_rows, dtype=np.int64)
    position[np.asarray(permutation)] = np.arange(n_rows)
    key = np.where(codes >= 0, codes, n_levels)  # rows without a level form one extra run
    order = np.lexsort((position, key))
    n_s, total, sq = _prefix_stats(key[order], Y[order], codes, Y, n_levels)
    out_n, out_total, out_sq = np.empty(n_rows), np.empty_like(Y), np.empty_like(Y)
    out_n[order], out_total[order], out_sq[order] = n_s, total, sq
    loo = leave_one_out(np.zeros(n_rows, dtype=np.int64), Y, 1)
    return RowStats(out_n, out_total, out_sq, loo.prior, loo.tau2)


def _prefix_stats(k_sorted, Y_sorted, codes, Y, n_levels):
    """Statistics of the earlier rows of the same run, rows sorted by (level, position)."""
    n_rows = len(k_sorted)
    start = np.r_[0, np.flatnonzero(k_sorted[1:] != k_sorted[:-1]) + 1]
    run_start = np.repeat(start, np.diff(np.r_[start, n_rows]))
    n_before = (np.arange(n_rows) - run_start).astype(np.float64)
    full = level_stats(codes, Y, n_levels)
    with np.errstate(invalid="ignore", divide="ignore"):
        shift = np.nan_to_num(full.total / full.n[:, None])
    shift = np.take(np.concatenate([shift, np.zeros((1, Y.shape[1]))]), k_sorted, axis=0)
    d = Y_sorted - shift
    s1 = _exclusive_run_cumsum(d, run_start)
    s2 = _exclusive_run_cumsum(d * d, run_start)
    with np.errstate(invalid="ignore", divide="ignore"):
        sq = np.where(n_before[:, None] > 0, s2 - s1 * s1 / n_before[:, None], 0.0)
    has_level = (k_sorted < n_levels)[:, None]
    n_s = np.where(has_level[:, 0], n_before, 0.0)
    total = np.where(has_level, n_before[:, None] * shift + s1, 0.0)
    return n_s, total, np.where(has_level, np.maximum(sq, 0.0), 0.0)


def _exclusive_run_cumsum(values: np.ndarray, run_start: np.ndarray) -> np.ndarray:
    """Cumulative sum within each run, excluding the current row (runs are contiguous)."""
    csum = np.cumsum(values, axis=0)
    before = csum - values
    offset = np.concatenate([np.zeros((1, values.shape[1])), csum])[run_start]
    return before - offset
