"""One-hot indicators, with optional pooling of rare levels into one "other" column."""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from sklearn.utils.validation import _check_feature_names_in, check_is_fitted

from harness.encoders._base import UNSEEN, LevelCodeEncoder
from harness.encoders._rules import Flag, Interval, Nothing, Options
from harness.errors import EncoderInputError

__all__ = ["OneHotCodes", "indicator_matrix"]

UNSEEN_RULES = ("zeros", "error")
MISSING_RULES = ("category", "zeros")
MISSING_NAME = "<missing>"
OTHER_NAME = "<other>"


class OneHotCodes(LevelCodeEncoder):
    """One indicator column per level (one-hot encoding).

    Per input column the output block holds the levels in sorted order, then a column for
    missing values if any were seen at fit, then one trailing ``<other>`` column for the
    pooled rare levels if any: the layout of scikit-learn's ``OneHotEncoder``.

    Parameters
    ----------
    unseen : {"zeros", "error"}, default="zeros"
        A value not seen at fit (or a missing value when none was seen at fit) gives a row
        of zeros in that column's block, or raises ``EncoderInputError``.
    min_count : int, default=1
        Levels with fewer training rows than this are pooled into the ``<other>`` column
        (missing counts as a level here). 1 pools nothing.
    max_levels : int or None, default=None
        Keep at most this many levels per column (the most frequent; on a tie in counts
        the level later in sorted order is kept, scikit-learn's rule) and pool the rest
        into ``<other>``. The block is then at most ``max_levels + 1`` columns wide; it
        matches ``OneHotEncoder(max_categories=max_levels + 1)``.
    drop_one : bool, default=False
        Drop the first column of each block, so that the indicators are not collinear
        with an intercept (for unpenalised linear models).
    sparse : bool, default=True
        Return a scipy CSR matrix; False returns a dense float64 array.
    missing : {"category", "zeros"}, default="category"
        A missing value is a level of its own (its ``<missing>`` column, when missing
        values were seen at fit), or a row of zeros in the block (never an error).

    Attributes
    ----------
    lookups_ : list of ndarray
        Per input column, the output column (within the block; -1 for none) of every
        level, followed by the entries for missing and unseen values.
    kept_ : list of (ndarray, bool)
        Per input column, the levels (then missing) with a column of their own, and
        whether a trailing ``<other>`` column pools the rest.
    widths_ : ndarray
        Number of output columns per input column.
    n_features_in_, feature_names_in_, levels_, counts_, n_missing_, stringified_
        See ``CategoricalEncoder``.

    Examples
    --------
    >>> import pandas as pd
    >>> from harness.encoders import build
    >>> X = pd.DataFrame({"city": ["Oslo", "Rome", "Oslo", None, "Lima"]})
    >>> enc = build("onehot").fit(X)
    >>> enc.get_feature_names_out().tolist()
    ['city=Lima', 'city=Oslo', 'city=Rome', 'city=<missing>']
    >>> enc.transform(pd.DataFrame({"city": ["Rome", "Paris"]})).toarray().tolist()
    [[0.0, 0.0, 1.0, 0.0], [0.0, 0.0, 0.0, 0.0]]
    """

    param_rules = {
        "unseen": (Options(*UNSEEN_RULES),),
        "min_count": (Interval("int", 1, None),),
        "max_levels": (Interval("int", 1, None), Nothing()),
        "drop_one": (Flag(),),
        "sparse": (Flag(),),
        "missing": (Options(*MISSING_RULES),),
    }

    def __init__(self, unseen="zeros", min_count=1, max_levels=None, drop_one=False, sparse=True, missing="category"):
        self.unseen = unseen
        self.min_count = min_count
        self.max_levels = max_levels
        self.drop_one = drop_one
        self.sparse = sparse
        self.missing = missing

    def missing_rule(self) -> str:
        return "a level of its own" if self.missing == "category" else 'a row of zeros (missing = "zeros")'

    def get_feature_names_out(self, input_features=None):
        """``<column>=<level>``, ``<column>=<missing>`` and ``<column>=<other>`` names."""
        check_is_fitted(self)
        names = _check_feature_names_in(self, input_features)
        out = []
        for name, labels in zip(names, self._labels()):
            out.extend(f"{name}={label}" for label in labels)
        return np.asarray(out, dtype=object)

    def _labels(self) -> list[list[str]]:
        """Column labels per block, built from the layout only when names are asked for."""
        out = []
        for levels, n_missing, (kept, pooled) in zip(self.levels_, self.n_missing_, self.kept_):
            has_missing = n_missing and self.missing == "category"
            labels = [str(v) for v in levels.tolist()] + ([MISSING_NAME] if has_missing else [])
            labels = [labels[k] for k in kept] + ([OTHER_NAME] if pooled else [])
            out.append(labels[1:] if self.drop_one and labels else labels)
        return out

    # --- fit helpers -----------------------------------------------------------------------
    def _fit_codes(self, X) -> list[np.ndarray]:
        frame = self._frame(X, reset=True)
        codes = self._fit_levels(frame, order="lexical")
        self.lookups_, self.kept_, widths = [], [], []
        for levels, counts, n_missing in zip(self.levels_, self.counts_, self.n_missing_):
            lookup, kept, pooled = self._layout(levels, counts, int(n_missing) if self.missing == "category" else 0)
            self.lookups_.append(lookup)
            self.kept_.append((kept, pooled))
            widths.append(max(len(kept) + pooled - bool(self.drop_one), 0))
        self.widths_ = np.asarray(widths, dtype=np.int64)
        return codes

    def _layout(self, levels, counts, n_missing) -> tuple[np.ndarray, np.ndarray, bool]:
        """Output column of each level (then missing, then unseen), the kept levels (index
        into levels then missing) and whether an ``<other>`` column pools the rest."""
        # missing is one more level, sorted last, when seen at fit (as scikit-learn does)
        all_counts = np.append(counts, n_missing) if n_missing else counts
        rare = rare_levels(all_counts, self.min_count, self.max_levels)
        kept = np.flatnonzero(~rare)
        pooled = bool(rare.any())
        column = np.full(len(all_counts), -1, dtype=np.int64)
        column[kept] = np.arange(len(kept))
        column[rare] = len(kept)  # the trailing <other> column
        if self.drop_one and (len(kept) or pooled):
            column -= 1  # the first column becomes -1: no column
        missing_column = column[-1] if n_missing else -1
        # lookup[codes]: codes >= 0 index levels; MISSING (-2) and UNSEEN (-1) read the
        # two trailing entries through negative indexing
        lookup = np.concatenate([column[: len(levels)], [missing_column, -1]])
        return lookup, kept, pooled

    # --- transform helpers -----------------------------------------------------------------
    def _to_output(self, codes: list[np.ndarray]):
        columns = [lookup[col] for lookup, col in zip(self.lookups_, codes)]
        offsets = np.concatenate([[0], np.cumsum(self.widths_)[:-1]])
        matrix = indicator_matrix(columns, offsets, int(self.widths_.sum()))
        return matrix if self.sparse else matrix.toarray()

    def _refuse_unseen(self, frame, codes: list[np.ndarray]) -> None:
        for j, (lookup, col) in enumerate(zip(self.lookups_, codes)):
            # a missing value with no missing column at fit counts as unseen too
            bad = (col == UNSEEN) | ((lookup[-2] < 0) & (col < 0) & (self.missing == "category"))
            if bad.any():
                values = frame.iloc[:, j][bad].unique()[:5]
                raise EncoderInputError(
                    f"OneHotCodes: column '{frame.columns[j]}' has value(s) not seen at fit: "
                    f"{list(values)}; allowed with unseen='error': the "
                    f"{len(self.levels_[j])} fitted levels. Use unseen='zeros' to encode "
                    "them as a row of zeros."
                )


def rare_levels(counts: np.ndarray, min_count: int, max_levels: int | None) -> np.ndarray:
    """Boolean mask of the levels pooled into ``<other>``.

    Levels with fewer than ``min_count`` rows are rare; then, if more than ``max_levels``
    remain, all but the ``max_levels`` most frequent are rare too. The stable sort on the
    counts in level order reproduces scikit-learn's tie rule
    (``OneHotEncoder._identify_infrequent``, version 1.9.1).
    """
    rare = counts < min_count
    if max_levels is not None and (~rare).sum() > max_levels:
        rare[np.argsort(counts, kind="stable")[: len(counts) - max_levels]] = True
    return rare


def indicator_matrix(columns: list[np.ndarray], offsets, width: int, values=None) -> sp.csr_matrix:
    """CSR matrix with at most one entry per row for each input column.

    Parameters
    ----------
    columns : list of int ndarray
        Per input column, the output column of each row relative to its offset
        (-1: no entry).
    offsets : array of int
        First output column of each input column's block (all 0 for a shared block).
    width : int
        Number of output columns.
    values : list of float ndarray, optional
        Entry values aligned with ``columns`` (default 1.0).

    Returns
    -------
    scipy.sparse.csr_matrix of shape (n_rows, width)
        Built directly from the index arrays (no per-row work in Python). Entries of one
        row follow the input column order, so they are sorted when the offsets increase;
        with shared blocks the caller sums duplicates.
    """
    n_rows, n_cols = len(columns[0]), len(columns)
    index_type = np.int32 if max(width, n_rows * n_cols) < np.iinfo(np.int32).max else np.int64
    cols = np.empty((n_rows, n_cols), dtype=index_type)
    data = np.ones((n_rows, n_cols), dtype=np.float64)
    for j, col in enumerate(columns):
        cols[:, j] = np.where(col >= 0, col + offsets[j], -1)
        if values is not None:
            data[:, j] = values[j]
    present = cols >= 0
    if present.all():  # the usual case: one entry per block, no masking needed
        indices, data = cols.ravel(), data.ravel()
        indptr = np.arange(0, cols.size + 1, n_cols, dtype=index_type)
    else:
        indices, data = cols[present], data[present]
        indptr = np.zeros(n_rows + 1, dtype=index_type)
        np.cumsum(present.sum(axis=1), out=indptr[1:])
    return sp.csr_matrix((data, indices, indptr), shape=(n_rows, width))
