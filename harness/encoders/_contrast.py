"""Contrast codes: sum (deviation) and Helmert coding, one block of ``k - 1`` columns per column.

The matrices are those of patsy's ``Sum().code_without_intercept`` and
``Helmert().code_without_intercept`` (patsy 1.0, ``patsy.contrasts``); the test suite
compares them entry by entry.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from sklearn.utils.validation import _check_feature_names_in, check_is_fitted

from harness.encoders._base import UNSEEN, LevelCodeEncoder
from harness.encoders._rules import Flag, Options
from harness.errors import EncoderInputError

__all__ = ["ContrastCodes", "contrast_matrix"]

SCHEMES = ("sum", "helmert")
UNSEEN_RULES = ("zeros", "error")
MISSING_RULES = ("category", "zeros")
MISSING_NAME = "<missing>"
#: a dense contrast matrix or dense output larger than this is refused with the next step
MAX_DENSE_BYTES = 4 * 2**30


def contrast_matrix(scheme: str, n_levels: int) -> np.ndarray:
    """The ``(n_levels, n_levels - 1)`` contrast matrix of ``scheme``, rows in level order.

    Parameters
    ----------
    scheme : {"sum", "helmert"}
        ``sum`` (deviation coding): level ``i < k-1`` is the unit vector ``e_i``, the last
        level is ``-1`` in every column. ``helmert``: column ``j`` is ``-1`` for levels
        ``0..j``, ``j + 1`` for level ``j + 1`` and 0 after it.
    n_levels : int
        Number of levels ``k`` (``k <= 1`` gives a matrix with no column).

    Returns
    -------
    ndarray of float64, shape (n_levels, max(n_levels - 1, 0))

    References
    ----------
    patsy 1.0, ``patsy.contrasts.Sum`` and ``patsy.contrasts.Helmert``, method
    ``code_without_intercept`` (the matrices for levels ``[a, b, c]`` are
    ``[[1, 0], [0, 1], [-1, -1]]`` and ``[[-1, -1], [1, -1], [0, 2]]``).
    """
    k = max(int(n_levels), 0)
    width = max(k - 1, 0)
    if scheme == "sum":
        out = np.vstack([np.eye(k - 1), -np.ones((1, width))]) if k else np.zeros((0, 0))
        return out.astype(np.float64)
    if scheme == "helmert":
        row, col = np.ogrid[:k, :width]
        out = np.where(row <= col, -1.0, 0.0)
        out[np.arange(1, k), np.arange(width)] = np.arange(1, k, dtype=np.float64)
        return out
    raise ValueError(f"unknown contrast scheme {scheme!r}; allowed: {', '.join(SCHEMES)}")


class ContrastCodes(LevelCodeEncoder):
    """Sum (deviation) or Helmert contrast coding: ``k - 1`` columns for ``k`` levels.

    Per input column, the levels are sorted (numbers numerically, strings lexically, as
    ``onehot``), then missing values form one more level, sorted last, when any were seen
    at fit. Each level's row of the contrast matrix (:func:`contrast_matrix`) is its
    output; a column with one level (or none) contributes no output column.

    Parameters
    ----------
    scheme : {"sum", "helmert"}, default="sum"
        ``sum``: each column compares a level with the mean of all level means (the
        last level is ``-1`` everywhere); ``helmert``: column ``j`` compares level
        ``j + 1`` with the mean of the levels before it.
    unseen : {"zeros", "error"}, default="zeros"
        A value not seen at fit (or a missing value when none was seen at fit) gives a
        row of zeros in that column's block, or raises ``EncoderInputError``.
    missing : {"category", "zeros"}, default="category"
        A missing value is a level of its own (counted in ``k`` when seen at fit), or a
        row of zeros as an unseen value.
    sparse : bool, default=False
        Return a scipy CSR matrix instead of a dense float64 array. Sum coding is then
        one entry per row except on the last level; Helmert rows of early levels are
        dense either way (level ``i`` has ``k - i`` non-zero entries, ``k - 1`` for the
        first).

    Notes
    -----
    The row of zeros given to unseen values is no level's row; under both schemes every
    column sums to zero over the levels, so with an intercept the zeros row is the
    intercept itself: the unweighted mean of the level means (the "grand mean"). An
    unseen value is thus predicted as the average level, not as any one level.
    Output column names are ``<column>__sum=<level>`` for the first ``k - 1`` levels
    (the level each column sets apart) and ``<column>__helmert=<level>`` for the last
    ``k - 1`` (the level each column compares with those before it), patsy's labels.

    Attributes
    ----------
    matrices_ : list of float64 ndarray
        Per input column, the ``(k, k - 1)`` contrast matrix with one trailing row of
        zeros (for unseen values).
    lookups_ : list of int64 ndarray
        Per input column, the row of ``matrices_`` of each level code, then of missing
        and unseen values.
    widths_ : int64 ndarray
        Number of output columns per input column (``k - 1``).
    n_features_in_, feature_names_in_, levels_, counts_, n_missing_, stringified_
        See ``CategoricalEncoder``.

    References
    ----------
    patsy 1.0, ``patsy.contrasts`` (Sum and Helmert contrasts, ``code_without_intercept``).

    Examples
    --------
    >>> import pandas as pd
    >>> from harness.encoders import build
    >>> X = pd.DataFrame({"size": ["a", "b", "c", "b"]})
    >>> enc = build("contrast", scheme="sum").fit(X)
    >>> enc.get_feature_names_out().tolist()
    ['size__sum=a', 'size__sum=b']
    >>> enc.transform(pd.DataFrame({"size": ["a", "b", "c", "zzz"]})).tolist()
    [[1.0, 0.0], [0.0, 1.0], [-1.0, -1.0], [0.0, 0.0]]
    >>> build("contrast", scheme="helmert").fit_transform(X).tolist()
    [[-1.0, -1.0], [1.0, -1.0], [0.0, 2.0], [1.0, -1.0]]
    """

    param_rules = {
        "scheme": (Options(*SCHEMES),),
        "unseen": (Options(*UNSEEN_RULES),),
        "missing": (Options(*MISSING_RULES),),
        "sparse": (Flag(),),
    }

    def __init__(self, scheme="sum", unseen="zeros", missing="category", sparse=False):
        self.scheme = scheme
        self.unseen = unseen
        self.missing = missing
        self.sparse = sparse

    def missing_rule(self) -> str:
        return "a level of its own" if self.missing == "category" else 'a row of zeros (missing = "zeros")'

    def get_feature_names_out(self, input_features=None):
        """``<column>__<scheme>=<level>`` per output column (see Notes)."""
        check_is_fitted(self)
        names = _check_feature_names_in(self, input_features)
        out = []
        for name, levels, n_missing in zip(names, self.levels_, self.n_missing_):
            labels = [str(v) for v in levels.tolist()]
            if n_missing and self.missing == "category":
                labels.append(MISSING_NAME)
            # sum sets apart each of the first k-1 levels, helmert compares each of the last
            labels = labels[:-1] if self.scheme == "sum" else labels[1:]
            out.extend(f"{name}__{self.scheme}={label}" for label in labels)
        return np.asarray(out, dtype=object)

    # --- fit helpers -----------------------------------------------------------------------
    def _fit_codes(self, X) -> list[np.ndarray]:
        frame = self._frame(X, reset=True)
        codes = self._fit_levels(frame, order="lexical")
        self.matrices_, self.lookups_ = [], []
        for levels, n_missing in zip(self.levels_, self.n_missing_):
            n_levels = len(levels)
            has_missing = bool(n_missing) and self.missing == "category"
            k = n_levels + has_missing
            self.matrices_.append(self._matrix_with_zeros_row(k, len(self.matrices_)))
            # codes >= 0 index the levels; MISSING (-2) and UNSEEN (-1) read the two
            # trailing entries: the missing level's row (the last level) or the zeros row
            zeros_row = k
            missing_row = n_levels if has_missing else zeros_row
            self.lookups_.append(np.append(np.arange(n_levels), [missing_row, zeros_row]))
        self.widths_ = np.asarray([m.shape[1] for m in self.matrices_], dtype=np.int64)
        return codes

    def _matrix_with_zeros_row(self, k: int, j: int):
        """The column's contrast matrix and a trailing zeros row (unseen values).

        Sparse sum coding is built sparse (2k non-zeros), so a column of many levels
        costs memory in proportion to its levels; a dense matrix beyond
        ``MAX_DENSE_BYTES`` is refused with the next step instead of exhausting memory.
        """
        width = max(k - 1, 0)
        if self.sparse and self.scheme == "sum" and k >= 2:
            body = sp.vstack([sp.eye(width, format="csr"), sp.csr_matrix(-np.ones((1, width)))])
            return sp.vstack([body, sp.csr_matrix((1, width))], format="csr")
        self._refuse_dense(j, k, (k + 1) * width * 8, "its contrast matrix")
        matrix = contrast_matrix(self.scheme, k)
        return np.vstack([matrix, np.zeros((1, matrix.shape[1]))])

    def _refuse_dense(self, j: int, k: int, n_bytes: float, what: str) -> None:
        if n_bytes <= MAX_DENSE_BYTES:
            return
        name = self._input_names()[j] if hasattr(self, "n_features_in_") else f"#{j}"
        raise EncoderInputError(
            f"ContrastCodes(scheme={self.scheme!r}, sparse={self.sparse}): column '{name}' has "
            f"{k} levels, so {what} would take {n_bytes / 2**30:.1f} GiB as dense float64 "
            f"(limit {MAX_DENSE_BYTES / 2**30:g} GiB). Use scheme='sum' with sparse=true, "
            "or onehot with max_levels, or target statistics for a column this wide."
        )

    # --- transform helpers -----------------------------------------------------------------
    def _to_output(self, codes: list[np.ndarray]):
        rows = [lookup[col] for lookup, col in zip(self.lookups_, codes)]
        if self.sparse:
            # CSR row indexing gathers whole rows in compiled code: no per-row Python
            blocks = [sp.csr_matrix(m)[r] for m, r in zip(self.matrices_, rows)]
            return blocks[0] if len(blocks) == 1 else sp.hstack(blocks, format="csr")
        for j, width in enumerate(self.widths_):  # a dense block beyond the limit: refuse
            self._refuse_dense(j, int(width) + 1, len(rows[0]) * float(width) * 8, "the output")
        if len(rows) == 1:
            return np.take(self.matrices_[0], rows[0], axis=0)
        out = np.empty((len(rows[0]), int(self.widths_.sum())), dtype=np.float64)
        start = 0
        for matrix, r in zip(self.matrices_, rows):
            out[:, start : start + matrix.shape[1]] = np.take(matrix, r, axis=0)
            start += matrix.shape[1]
        return out

    def _refuse_unseen(self, frame, codes: list[np.ndarray]) -> None:
        for j, (lookup, col) in enumerate(zip(self.lookups_, codes)):
            # a missing value with no missing level at fit counts as unseen too
            no_missing_level = lookup[-2] == lookup[-1] and self.missing == "category"
            bad = (col == UNSEEN) | (no_missing_level & (col < 0))
            if bad.any():
                values = frame.iloc[:, j][bad].unique()[:5]
                raise EncoderInputError(
                    f"ContrastCodes: column '{frame.columns[j]}' has value(s) not seen at fit: "
                    f"{list(values)}; allowed with unseen='error': the "
                    f"{len(self.levels_[j])} fitted levels. Use unseen='zeros' to encode "
                    "them as a row of zeros (the grand mean)."
                )
