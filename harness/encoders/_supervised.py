"""What the encoders fitted on the target share: target type, group labels, fold dispatch.

``TargetStatistics`` (``_target.py``) and ``RandomInterceptCodes`` (``_glmm.py``) read
the target the same way (type, classes, indicator columns), treat a missing value the
same way (an extra last level, or none) and cross-fit with the same fold builders of
``_folds.py``; ``_SupervisedLevels`` holds that once. Error messages name the class
of the encoder that raised them.
"""

from __future__ import annotations

from numbers import Integral

import numpy as np
import pandas as pd
from sklearn.model_selection import KFold
from sklearn.utils.multiclass import type_of_target
from sklearn.utils.validation import check_array

from harness.encoders._base import MISSING
from harness.encoders._folds import (
    folds_from_splits,
    group_folds,
    group_holdout,
    holdout_folds,
    kfold_folds,
    random_folds,
)
from harness.errors import EncoderInputError

TARGET_TYPES = ("auto", "binary", "multiclass", "continuous")


def _target_kind(y, requested: str, name: str):
    """Target type, and for a class target its sorted classes and each row's class code.

    ``auto`` runs ``type_of_target`` on the distinct values found by one hash pass
    (``pd.factorize``) instead of sorting ``y``: for a one-dimensional target the
    answer depends only on the dtype and the set of distinct values. ``name`` (the
    encoder's class) starts every message.

    Raises
    ------
    EncoderInputError
        If the target is not binary, multiclass or continuous, or has missing labels.
    """
    if requested == "continuous" or (
        requested == "auto" and y.dtype.kind == "f" and np.all(np.isfinite(y)) and np.any(y != np.trunc(y))
    ):
        return "continuous", None, None
    codes, uniques = _factorize(y)
    kind = requested
    if kind == "auto":
        # NaN makes type_of_target raise its own "Input y contains NaN" error
        kind = type_of_target(y if len(codes) and codes.min() < 0 else uniques, input_name="y")
    if kind not in TARGET_TYPES[1:]:
        raise EncoderInputError(
            f"{name}: Unknown label type: the target type was inferred as {kind!r}; "
            "supported: binary, multiclass, continuous. Pass numeric or string labels, or "
            "set target_type explicitly."
        )
    if kind == "continuous":
        return kind, None, None
    if len(codes) and codes.min() < 0:
        raise EncoderInputError(
            f"{name}: the target has {int(np.sum(codes < 0))} missing label(s); "
            "drop those rows or impute the target first."
        )
    order = np.argsort(uniques, kind="stable")
    if np.array_equal(order, np.arange(len(order))):  # labels met in sorted order: codes are ranks
        return kind, uniques, codes.astype(np.int64, copy=False)
    rank = np.empty(len(order), dtype=np.int64)
    rank[order] = np.arange(len(order))
    return kind, uniques[order], rank[codes]


def _factorize(y):
    """Codes and distinct values of ``y``; small non-negative integers skip the hash table."""
    if y.dtype.kind in "iub" and len(y) and y.min() >= 0 and y.max() < 2**16:
        y64 = y.astype(np.int64, copy=False)
        present = np.bincount(y64) > 0
        uniques = np.flatnonzero(present).astype(y.dtype)
        if present.all():  # labels 0..k-1 (the usual 0/1) are their own codes
            return y64, uniques
        return (np.cumsum(present) - 1)[y64], uniques
    codes, uniques = pd.factorize(y, use_na_sentinel=True)
    return codes, np.asarray(uniques)


def _group_codes(groups, n_rows: int, name: str):
    """Group labels as codes ``0..G-1`` (``None`` stays ``None``); ``name`` starts messages.

    Raises
    ------
    EncoderInputError
        If the labels do not match the rows or one is missing.
    """
    if groups is None:
        return None
    codes, _ = pd.factorize(np.asarray(groups, dtype=object).reshape(-1), use_na_sentinel=True)
    if len(codes) != n_rows:
        raise EncoderInputError(f"{name}: `groups` has {len(codes)} labels for {n_rows} rows; they must match.")
    if len(codes) and codes.min() < 0:
        raise EncoderInputError(f"{name}: `groups` has missing labels; every row needs a group.")
    return codes.astype(np.int64)


class _SupervisedLevels:
    """Mixin for a ``CategoricalEncoder`` fitted on the target.

    The class declares ``_unfolded``, the ``crossfit`` values that build no folds, and
    reads its parameters ``crossfit``, ``cv``, ``holdout_fraction``, ``missing`` and
    ``target_type``; ``_check_target_kind`` may refuse a target type a setting cannot use.
    """

    _unfolded: tuple[str, ...] = ("none",)

    def _folds(self, frame, y, classes, rng, groups=None):
        """Fold of each row and number of folds (``None`` when ``crossfit`` builds none)."""
        if self.crossfit == "holdout" and groups is not None:
            return group_holdout(groups, self.holdout_fraction, rng), 2
        if self.crossfit == "holdout":
            return holdout_folds(len(y), self.holdout_fraction, rng), 2
        if self.crossfit in self._unfolded:
            return None
        if isinstance(self.cv, Integral) and groups is not None:
            return group_folds(groups, int(self.cv), rng)
        if isinstance(self.cv, Integral):
            return random_folds(len(y), int(self.cv), rng, classes), int(self.cv)
        if type(self.cv) is KFold and groups is None:
            return kfold_folds(len(y), self.cv), self.cv.n_splits
        return folds_from_splits(self.cv.split(frame, y, groups), len(y))

    def _groups(self, groups, n_rows: int):
        """``groups`` as codes ``0..G-1``, or ``None``; see ``_group_codes``."""
        return _group_codes(groups, n_rows, type(self).__name__)

    def _target_matrix(self, y):
        """``y`` as float columns, and class codes (``None`` for a continuous target).

        One column for a binary (positive class ``classes_[1]``) or continuous target,
        one indicator column per sorted class for a multiclass target.
        """
        name = type(self).__name__
        kind, self.classes_, inverse = _target_kind(y, self.target_type, name)
        self.target_type_ = kind
        self._check_target_kind(kind)
        if kind == "continuous":
            y = check_array(y, ensure_2d=False, dtype=np.float64, input_name="y")
            return y[:, None], None
        if kind == "binary" and len(self.classes_) > 2:
            raise EncoderInputError(
                f"{name}(target_type='binary') got {len(self.classes_)} classes; "
                "a binary target has at most 2. Use target_type='multiclass' or 'auto'."
            )
        if kind == "binary":
            return (inverse == 1).astype(np.float64)[:, None], inverse
        Y = np.zeros((len(y), len(self.classes_)))
        Y[np.arange(len(y)), inverse] = 1.0
        return Y, inverse

    def _check_target_kind(self, kind: str) -> None:
        """Refuse a target type the settings cannot encode; every type is fine here."""

    def _level_codes(self, codes: np.ndarray, j: int) -> np.ndarray:
        """Missing becomes an extra last level under ``missing="category"``, else -1."""
        if self.missing == "category":
            return np.where(codes == MISSING, len(self.levels_[j]), codes)
        return np.where(codes == MISSING, -1, codes)

    def _n_levels(self, j: int) -> int:
        """Levels of column ``j`` in its table, the missing level included."""
        return len(self.levels_[j]) + (self.missing == "category")
