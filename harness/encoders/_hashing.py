"""Signed feature hashing of ``column=value`` strings into a fixed number of columns."""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.utils import murmurhash3_32
from sklearn.utils.validation import _check_feature_names_in, check_is_fitted

from harness.encoders._base import CategoricalEncoder, check_count, check_flag, check_option
from harness.encoders._onehot import indicator_matrix

__all__ = ["HashedCodes", "hash_tokens"]

SPACES = ("shared", "per-column")
MISSING_TOKEN = "<missing>"


class HashedCodes(CategoricalEncoder):
    """Feature hashing: each value becomes one signed entry in ``n_components`` columns.

    The token ``"<column>=<value>"`` is hashed with signed 32-bit MurmurHash3 (seed 0);
    its column is ``|h| mod n_components`` and its sign is ``+1`` if ``h >= 0`` else
    ``-1``; entries that land in the same column of a row are summed. This is exactly
    scikit-learn's ``FeatureHasher(input_type="string")`` fed one token list per row.

    Parameters
    ----------
    n_components : int, default=256
        Number of hash columns (per input column when ``space="per-column"``).
    space : {"shared", "per-column"}, default="shared"
        All input columns share one block of ``n_components`` columns (collisions across
        columns possible), or each input column gets its own block.
    signed : bool, default=True
        Use the hash's sign bit as the entry's sign, so that collisions cancel in
        expectation (Weinberger et al., 2009); False makes every entry +1.

    Notes
    -----
    A missing value is hashed as the token ``"<column>=<missing>"``: missingness stays a
    signal, as in the other encoders. A value not seen at fit needs no special rule: it is
    hashed like any other. Fitting only records the input columns; values are
    ``str(value)`` (so ``1`` gives ``"x=1"`` and ``1.0`` gives ``"x=1.0"``).
    Only the distinct values of each column are hashed; rows are mapped by their codes.

    References
    ----------
    .. [1] Weinberger, K., Dasgupta, A., Langford, J., Smola, A., Attenberg, J. (2009).
       Feature hashing for large scale multitask learning. ICML, 1113-1120.
    """

    def __init__(self, n_components=256, space="shared", signed=True):
        self.n_components = n_components
        self.space = space
        self.signed = signed

    def fit(self, X, y=None):
        """Check the parameters and record the input columns. ``y`` is ignored."""
        check_count(self, "n_components", 1)
        check_option(self, "space", SPACES)
        check_flag(self, "signed")
        self._frame(X, reset=True)
        return self

    def transform(self, X):
        """Return the hashed features as a CSR matrix."""
        frame = self._frame(X, reset=False)
        names = self._input_names()
        n = self.n_components
        columns, signs = [], []
        for j in range(frame.shape[1]):
            codes, uniques = pd.factorize(frame.iloc[:, j], use_na_sentinel=True)
            tokens = [f"{names[j]}={value}" for value in uniques] + [f"{names[j]}={MISSING_TOKEN}"]
            index, sign = hash_tokens(tokens, n)
            if not self.signed:
                sign = np.ones_like(sign)
            # index[-1]/sign[-1] (the missing token) are read by the -1 NA sentinel
            columns.append(index[codes])
            signs.append(sign[codes])
        if self.space == "per-column":
            offsets = np.arange(frame.shape[1]) * n
            return indicator_matrix(columns, offsets, n * frame.shape[1], values=signs)
        matrix = indicator_matrix(columns, np.zeros(frame.shape[1], dtype=np.int64), n, signs)
        if frame.shape[1] > 1:
            matrix.sum_duplicates()  # tokens of one row that collide add up
        return matrix

    def get_feature_names_out(self, input_features=None):
        """``hash_<k>`` (shared) or ``<column>__hash_<k>`` (per-column)."""
        check_is_fitted(self)
        names = _check_feature_names_in(self, input_features)
        slots = [f"hash_{k}" for k in range(self.n_components)]
        if self.space == "shared":
            return np.asarray(slots, dtype=object)
        return np.asarray([f"{name}__{slot}" for name in names for slot in slots], dtype=object)


def hash_tokens(tokens, n_components: int) -> tuple[np.ndarray, np.ndarray]:
    """Column and sign of each token, as scikit-learn's ``FeatureHasher`` computes them.

    Parameters
    ----------
    tokens : sequence of str
        Distinct tokens (a loop over distinct values, never over rows).
    n_components : int
        Number of columns.

    Returns
    -------
    index : int64 ndarray
        ``|h| mod n_components`` with ``h`` the signed MurmurHash3_x86_32 of the UTF-8
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
    index = np.abs(h) % n_components
    sign = np.where(h >= 0, 1.0, -1.0)
    return index, sign
