"""K-fold row splits, shared by the outer folds of a run and the inner folds of a search.

Stratified by class for classification (when every class has at least two rows), grouped
when the dataset has groups, shuffled with a given seed (common practice, no source).
"""

from __future__ import annotations

import numpy as np
from sklearn.model_selection import GroupKFold, KFold, StratifiedGroupKFold, StratifiedKFold

__all__ = ["kfold_indices"]


def kfold_indices(y, groups, task: str, folds: int, stratify: bool, random_state: int) -> list:
    """``[(train positions, test positions), ...]`` for one shuffled K-fold pass.

    Parameters
    ----------
    y : Series
        Targets of the rows to split.
    groups : Series or None
        Group of each row; a group never spans two folds.
    task : str
        "binary", "multiclass" or "regression".
    folds : int
    stratify : bool
        Stratify by class (classification only; a class with one row turns it off).
    random_state : int
    """
    n = len(y)
    classify = task != "regression" and stratify
    if classify:
        classify = y.value_counts().min() >= 2  # a singleton class cannot be stratified
    if groups is not None:
        splitter = (
            StratifiedGroupKFold(folds, shuffle=True, random_state=random_state)
            if classify
            else GroupKFold(folds, shuffle=True, random_state=random_state)
        )
        parts = splitter.split(np.zeros(n), y, groups)
    elif classify:
        parts = StratifiedKFold(folds, shuffle=True, random_state=random_state).split(np.zeros(n), y)
    else:
        parts = KFold(folds, shuffle=True, random_state=random_state).split(np.zeros(n))
    return list(parts)
