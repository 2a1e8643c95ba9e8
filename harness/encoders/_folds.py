"""Fold assignments for cross-fitting: which inner fold (or holdout part) each training row is in.

Every builder returns one int64 label per row; ``_crossfit.out_of_fold`` turns the labels
into cells of statistics. With *groups* (codes ``0..G-1``) folds and parts are unions of
whole groups (``group_folds``, ``group_holdout``), so a row's own cluster never feeds its
statistic. Target-fitted encoders choose among them in ``_supervised``.
"""

from __future__ import annotations

import numpy as np
from sklearn.utils import check_random_state

from harness.errors import EncoderInputError

__all__ = [
    "random_folds",
    "holdout_folds",
    "kfold_folds",
    "folds_from_splits",
    "group_folds",
    "group_holdout",
    "count_groups",
]


def count_groups(groups: np.ndarray) -> int:
    """Number of groups (codes ``0..G-1``); at least two are needed to cross-fit."""
    n_groups = int(groups.max(initial=-1)) + 1
    if n_groups < 2:
        raise EncoderInputError(
            "TargetStatistics with groups needs at least 2 groups in the training rows to "
            f"cross-fit; got {n_groups}. Use a group column with more groups, or no group."
        )
    return n_groups


def random_folds(n_rows: int, n_folds: int, rng: np.random.RandomState, classes=None) -> np.ndarray:
    """Fold of each row: labels ``0, 1, ..., n_folds-1, 0, 1, ...`` dealt in random order.

    With ``classes`` (integer class codes) the labels are dealt to each class's rows
    separately, so every fold holds each class in proportion (stratified); fold sizes
    differ by at most one, overall and within each class.

    Raises
    ------
    EncoderInputError
        With fewer rows than folds.
    """
    if n_rows < n_folds:
        raise EncoderInputError(
            f"TargetStatistics(crossfit='kfold', cv={n_folds}) needs at least {n_folds} "
            f"training rows; got {n_rows}. Lower cv."
        )
    # 16-bit labels: shuffling a small array is cache-friendly (2 MB per million rows)
    deal = np.arange(n_folds, dtype=_small_int(n_folds))
    labels = np.tile(deal, -(-n_rows // n_folds))[:n_rows]  # np.resize is 10x slower
    # a Generator seeded from ``rng`` shuffles small integers about twice as fast
    gen = np.random.default_rng(rng.randint(np.iinfo(np.int32).max))
    if classes is None:
        gen.shuffle(labels)
        return labels.astype(np.int64)
    order = _rows_by_class(classes)
    ends = np.cumsum(np.bincount(classes))
    for start, end in zip(np.r_[0, ends[:-1]], ends):  # loop over classes
        gen.shuffle(labels[start:end])
    fold = np.empty(n_rows, dtype=np.int64)
    fold[order] = labels
    return fold


def _rows_by_class(classes: np.ndarray) -> np.ndarray:
    """Row indices grouped by class, in row order within a class."""
    n_classes = int(classes.max(initial=0)) + 1
    if n_classes <= 32:  # a few boolean scans beat a sort
        return np.concatenate([np.flatnonzero(classes == c) for c in range(n_classes)])
    # a stable sort of 16-bit keys is a radix sort in numpy: linear time
    return np.argsort(classes.astype(_small_int(n_classes)), kind="stable")


def _small_int(bound: int):
    return np.int16 if bound < 2**15 else np.int64


def group_folds(groups: np.ndarray, n_folds: int, rng: np.random.RandomState) -> tuple[np.ndarray, int]:
    """Fold of each row when folds are unions of whole groups.

    The groups (codes ``0..G-1``) are put in a random order and dealt round-robin into
    ``min(n_folds, G)`` folds, so no group spans two folds.

    Raises
    ------
    EncoderInputError
        With fewer than two groups.
    """
    n_groups = count_groups(groups)
    k = min(n_folds, n_groups)
    fold_of_group = np.empty(n_groups, dtype=np.int64)
    fold_of_group[rng.permutation(n_groups)] = np.arange(n_groups) % k
    return fold_of_group[groups], k


def group_holdout(groups: np.ndarray, fraction: float, rng: np.random.RandomState) -> np.ndarray:
    """Two parts made of whole groups: groups in random order fill part 0 up to about
    ``fraction`` of the rows (at least one group), the rest is part 1.

    Raises
    ------
    EncoderInputError
        With fewer than two groups.
    """
    n_groups = count_groups(groups)
    order = rng.permutation(n_groups)
    filled = np.cumsum(np.bincount(groups, minlength=n_groups)[order])
    n_first = int(np.clip(np.searchsorted(filled, fraction * len(groups), side="right"), 1, n_groups - 1))
    part = np.ones(n_groups, dtype=np.int64)
    part[order[:n_first]] = 0
    return part[groups]


def holdout_folds(n_rows: int, fraction: float, rng: np.random.RandomState) -> np.ndarray:
    """Two parts: a random ``fraction`` of rows (fold 0) and the rest (fold 1).

    Rows of each part are encoded from the statistics of the other part, so every row
    gets an encoding and none uses its own target. ``fraction=0.5`` is two-fold
    cross-fitting; other fractions make the parts unequal.

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
    fold = np.ones(n_rows, dtype=np.int64)
    fold[rng.permutation(n_rows)[:size]] = 0
    return fold


def kfold_folds(n_rows: int, splitter) -> np.ndarray:
    """Fold of each row exactly as ``sklearn.model_selection.KFold`` assigns it.

    ``KFold`` shuffles ``arange(n)`` once with its ``random_state`` and cuts the result
    into consecutive parts whose sizes differ by at most one, the first ``n % k`` parts
    one larger (scikit-learn's ``KFold._iter_test_indices``). Computing the assignment
    directly gives the same folds without materialising k index arrays and masks.
    """
    indices = np.arange(n_rows)
    if splitter.shuffle:
        check_random_state(splitter.random_state).shuffle(indices)
    k = splitter.n_splits
    if n_rows < k:
        raise EncoderInputError(
            f"TargetStatistics: `cv` has {k} folds but there are only {n_rows} rows; use fewer folds."
        )
    sizes = np.full(k, n_rows // k, dtype=np.int64)
    sizes[: n_rows % k] += 1
    fold = np.empty(n_rows, dtype=np.int64)
    fold[indices] = np.repeat(np.arange(k, dtype=np.int64), sizes)
    return fold


def folds_from_splits(splits, n_rows: int) -> tuple[np.ndarray, int]:
    """Fold of each row from a splitter's ``(train_idx, test_idx)`` pairs.

    Raises
    ------
    EncoderInputError
        If the validation parts do not cover every row exactly once, or a training part
        is not the complement of its validation part.
    """
    fold = np.full(n_rows, -1, dtype=np.int64)
    seen = np.zeros(n_rows, dtype=np.int64)
    n_folds = 0
    for f, (train, test) in enumerate(splits):
        test = np.asarray(test)
        seen += np.bincount(test, minlength=n_rows)
        fold[test] = f
        n_folds = f + 1
        if len(train) + len(test) != n_rows:
            raise EncoderInputError(
                f"TargetStatistics: split {f} of `cv` has {len(train)} training and "
                f"{len(test)} validation rows for {n_rows} rows; cross-fitting needs the "
                "training part to be all other rows. Use KFold, StratifiedKFold or GroupKFold."
            )
    if not np.all(seen == 1):
        raise EncoderInputError(
            "TargetStatistics: the validation parts of `cv` must cover every training row "
            f"exactly once; {int(np.sum(seen != 1))} of {n_rows} rows are covered 0 or 2+ "
            "times. Pass a splitter with non-overlapping validation folds (e.g. KFold)."
        )
    return fold, n_folds
