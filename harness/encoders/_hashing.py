"""Signed feature hashing of ``column=value`` strings into a fixed number of columns."""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.utils import murmurhash3_32
from sklearn.utils.validation import _check_feature_names_in, check_is_fitted

from harness.encoders._base import UNSEEN, CategoricalEncoder
from harness.encoders._onehot import indicator_matrix
from harness.encoders._rules import Flag, Interval, Options

__all__ = ["HashedCodes", "hash_tokens"]

SPACES = ("shared", "per-column")
MISSING_TOKEN = "<missing>"
MISSING_RULES = ("category", "zeros")


class HashedCodes(CategoricalEncoder):
    """Feature hashing: each value becomes one signed entry in ``width`` columns.

    The token ``"<column>=<value>"`` is hashed with signed 32-bit MurmurHash3 (seed 0);
    its column is ``|h| mod width`` and its sign is ``+1`` if ``h >= 0`` else
    ``-1``; entries that land in the same column of a row are summed. This is exactly
    scikit-learn's ``FeatureHasher(input_type="string")`` fed one token list per row.

    Parameters
    ----------
    width : int in [1, 2**24], default=256
        Number of hash columns (per input column when ``space="per-column"``).
    space : {"shared", "per-column"}, default="shared"
        All input columns share one block of ``width`` columns (collisions across
        columns possible), or each input column gets its own block.
    signed : bool, default=True
        Use the hash's sign bit as the entry's sign, so that collisions cancel in
        expectation (Weinberger et al., 2009); False makes every entry +1.
    missing : {"category", "zeros"}, default="category"
        A missing value is hashed as a level of its own (the token below), or gives no
        entry at all.

    Notes
    -----
    A missing value is hashed as the token ``"<column>=<missing>"``: missingness stays a
    signal, as in the other encoders. A value not seen at fit needs no special rule: it is
    hashed like any other. Values are ``str(value)`` (so ``1`` gives ``"x=1"`` and ``1.0``
    gives ``"x=1.0"``); a value equal to a level seen at fit (``1.0`` against a fitted
    ``1``) reuses that level's token, so a column that turns float at transform time
    (because it holds a NaN) still hashes as at fit. Only distinct values are hashed: the
    levels at fit, the distinct unseen values at transform; rows are mapped by codes.

    Attributes
    ----------
    lookups_ : list of (int64 ndarray, float64 ndarray)
        Per column, the hash column and sign of each level, then of the missing token
        (a cache: values not seen at fit are hashed at transform).
    n_features_in_, feature_names_in_, levels_, counts_, n_missing_, stringified_
        See ``CategoricalEncoder``.

    References
    ----------
    .. [1] Weinberger, K., Dasgupta, A., Langford, J., Smola, A., Attenberg, J. (2009).
       Feature hashing for large scale multitask learning. ICML, 1113-1120.

    Examples
    --------
    >>> import pandas as pd
    >>> from harness.encoders import build
    >>> X = pd.DataFrame({"city": ["Oslo", "Rome", None]})
    >>> out = build("hashing", width=4).fit_transform(X)
    >>> out.shape, out.nnz
    ((3, 4), 3)
    >>> from sklearn.feature_extraction import FeatureHasher
    >>> ref = FeatureHasher(4, input_type="string").transform(
    ...     [["city=Oslo"], ["city=Rome"], ["city=<missing>"]])
    >>> bool((out != ref).nnz == 0)
    True
    """

    references = ("weinberger2009",)
    param_rules = {
        # 2**24 columns: far beyond any useful hashed width (common practice, no source), and
        # below the index range of the sparse formats the models take
        "width": (Interval("int", 1, 2**24),),
        "space": (Options(*SPACES),),
        "signed": (Flag(),),
        "missing": (Options(*MISSING_RULES),),
    }

    def __init__(self, width=256, space="shared", signed=True, missing="category"):
        self.width = width
        self.space = space
        self.signed = signed
        self.missing = missing

    def missing_rule(self) -> str:
        return "a level of its own" if self.missing == "category" else 'no entry (missing = "zeros")'

    def fit(self, X, y=None):
        """Hash the levels seen in ``X`` (a cache; any value can be hashed later).

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features)
        y : ignored

        Returns
        -------
        self : the fitted encoder.
        """
        self._fit_codes(X)
        return self

    def fit_transform(self, X, y=None, **fit_params):
        """Fit and return the hashed training rows (one factorisation instead of two)."""
        codes = self._fit_codes(X)
        return self._to_output(codes, [None] * len(codes))

    def transform(self, X):
        """Return the hashed features.

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features_in_)

        Returns
        -------
        scipy.sparse.csr_matrix of shape (n_samples, width) or (n_samples, width * n_features_in_)
            Shared or per-column blocks (``space``).
        """
        frame = self._frame(X, reset=False)
        return self._to_output(*self._codes(frame, with_values=True))

    def get_feature_names_out(self, input_features=None):
        """``hash_<k>`` (shared) or ``<column>__hash_<k>`` (per-column)."""
        check_is_fitted(self)
        names = _check_feature_names_in(self, input_features)
        slots = [f"hash_{k}" for k in range(self.width)]
        if self.space == "shared":
            return np.asarray(slots, dtype=object)
        return np.asarray([f"{name}__{slot}" for name in names for slot in slots], dtype=object)

    # --- helpers ---------------------------------------------------------------------------
    def _fit_codes(self, X) -> list[np.ndarray]:
        frame = self._frame(X, reset=True)
        codes = self._fit_levels(frame, order="any")  # no order needed: skip the sort
        # per column: column and sign of every level, then of the missing token; the
        # missing entry is read by MISSING (-2) through negative indexing, and the last
        # (UNSEEN, -1) entry is overwritten per row by hashing the unseen value itself
        self.lookups_ = []
        for name, levels in zip(self._input_names(), self.levels_):
            # tolist() first: iterating an Arrow-backed Index element by element is slow
            tokens = [f"{name}={value}" for value in levels.tolist()]
            tokens.append(f"{name}={MISSING_TOKEN}")
            index, sign = self._hash(tokens)
            if self.missing == "zeros":
                index[-1] = -1  # the missing token's column: none
            self.lookups_.append((np.append(index, 0), np.append(sign, 0.0)))
        return codes

    def _hash(self, tokens) -> tuple[np.ndarray, np.ndarray]:
        index, sign = hash_tokens(tokens, self.width)
        return index, (sign if self.signed else np.ones_like(sign))

    def _to_output(self, codes: list[np.ndarray], values: list):
        """``values[j]``: ``(raw codes, distinct values)`` of column ``j`` at transform."""
        names, n = self._input_names(), self.width
        columns, signs = [], []
        for j, ((index, sign), col) in enumerate(zip(self.lookups_, codes)):
            column, value = index[col], sign[col]
            unseen = col == UNSEEN
            if unseen.any():  # hash the distinct unseen values only
                raw, uniques = values[j]
                new_codes, distinct = pd.factorize(raw[unseen])
                tokens = [f"{names[j]}={v}" for v in uniques.take(distinct).tolist()]
                new_index, new_sign = self._hash(tokens)
                column[unseen], value[unseen] = new_index[new_codes], new_sign[new_codes]
            columns.append(column)
            signs.append(value)
        if self.space == "per-column":
            offsets = np.arange(len(codes)) * n
            return indicator_matrix(columns, offsets, n * len(codes), values=signs)
        matrix = indicator_matrix(columns, np.zeros(len(codes), dtype=np.int64), n, signs)
        if len(codes) > 1:
            matrix.sum_duplicates()  # tokens of one row that collide add up
        return matrix


def hash_tokens(tokens, width: int) -> tuple[np.ndarray, np.ndarray]:
    """Column and sign of each token, as scikit-learn's ``FeatureHasher`` computes them.

    Parameters
    ----------
    tokens : sequence of str
        Distinct tokens (a loop over distinct values, never over rows).
    width : int
        Number of columns.

    Returns
    -------
    index : int64 ndarray
        ``|h| mod width`` with ``h`` the signed MurmurHash3_x86_32 of the UTF-8
        token, seed 0.
    sign : float64 ndarray
        ``+1.0`` where ``h >= 0``, else ``-1.0``.

    References
    ----------
    .. [1] Weinberger et al. (2009), ICML; scikit-learn 1.9.1
       ``feature_extraction/_hashing_fast.pyx`` for the index and sign rule.
    """
    h = np.fromiter((murmurhash3_32(t, seed=0) for t in tokens), dtype=np.int64, count=len(tokens))
    # int64 holds |-2**31| exactly, which gives the value scikit-learn special-cases
    index = np.abs(h) % width
    sign = np.where(h >= 0, 1.0, -1.0)
    return index, sign
