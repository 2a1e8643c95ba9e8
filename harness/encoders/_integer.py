"""Integer (ordinal) codes: one float column per input column holding the level's index."""

from __future__ import annotations

import numpy as np
from sklearn.utils.validation import _check_feature_names_in, check_is_fitted

from harness.encoders._base import UNSEEN, LevelCodeEncoder, looked_up
from harness.encoders._rules import Options
from harness.errors import EncoderInputError

__all__ = ["IntegerCodes"]

ORDERS = ("lexical", "frequency", "appearance")
UNSEEN_RULES = ("code", "nan", "error")
MISSING_RULES = ("code", "nan")


class IntegerCodes(LevelCodeEncoder):
    """Replace each category by an integer code (returned as float64).

    For a column with ``K`` levels seen at fit, the codes are ``0 .. K-1`` for the levels,
    ``K`` for a value not seen at fit and ``K + 1`` for a missing value (defaults).

    Parameters
    ----------
    order : {"lexical", "frequency", "appearance"}, default="lexical"
        Which level gets code 0, 1, ...: sorted values (numbers numerically, strings
        lexically; the order of scikit-learn's ``OrdinalEncoder``), most frequent first
        (ties lexical), or order of first occurrence in the training data.
    unseen : {"code", "nan", "error"}, default="code"
        A value not seen at fit becomes the dedicated code ``K``, NaN, or raises
        ``EncoderInputError``.
    missing : {"code", "nan"}, default="code"
        A missing value (None, NaN, pd.NA) becomes the dedicated code ``K + 1`` or NaN.
        The default keeps missingness a usable level for every model, including those that
        reject NaN input; ``"nan"`` hands it to models with their own missing-value rule.

    Attributes
    ----------
    levels_ : list of pandas.Index
        Levels of each column in code order; missing is never a level.
    lookups_ : list of float64 ndarray
        Per column, the output of each level code, then of missing and unseen values.
    n_features_in_, feature_names_in_, levels_, counts_, n_missing_, stringified_
        See ``CategoricalEncoder``.

    See Also
    --------
    sklearn.preprocessing.OrdinalEncoder : the same codes in ``order="lexical"``.

    Examples
    --------
    >>> import pandas as pd
    >>> from harness.encoders import build
    >>> X = pd.DataFrame({"city": ["Oslo", "Rome", "Oslo", None, "Lima"]})
    >>> enc = build("integer").fit(X)
    >>> enc.levels_[0].tolist(), enc.counts_[0].tolist()
    (['Lima', 'Oslo', 'Rome'], [1, 2, 1])
    >>> enc.transform(pd.DataFrame({"city": ["Rome", "Paris", None]})).ravel().tolist()
    [2.0, 3.0, 4.0]
    """

    param_rules = {
        "order": (Options(*ORDERS),),
        "unseen": (Options(*UNSEEN_RULES),),
        "missing": (Options(*MISSING_RULES),),
    }

    def __init__(self, order="lexical", unseen="code", missing="code"):
        self.order = order
        self.unseen = unseen
        self.missing = missing

    def missing_rule(self) -> str:
        return "a level of its own" if self.missing == "code" else 'NaN, left to the model (missing = "nan")'

    def get_feature_names_out(self, input_features=None):
        """One output column per input column, named as the input column."""
        check_is_fitted(self)
        return np.asarray(_check_feature_names_in(self, input_features), dtype=object)

    # --- helpers ---------------------------------------------------------------------------
    def _fit_codes(self, X) -> list[np.ndarray]:
        frame = self._frame(X, reset=True)
        codes = self._fit_levels(frame, order=self.order)
        # lookup[codes] maps every code at once; the two trailing entries are read through
        # negative indexing: lookup[-2] for MISSING (-2), lookup[-1] for UNSEEN (-1)
        self.lookups_ = [self._lookup(len(levels)) for levels in self.levels_]
        return codes

    def _lookup(self, n_levels: int) -> np.ndarray:
        unseen = np.nan if self.unseen == "nan" else float(n_levels)
        missing = np.nan if self.missing == "nan" else float(n_levels + 1)
        return np.concatenate([np.arange(n_levels, dtype=np.float64), [missing, unseen]])

    def _to_output(self, codes: list[np.ndarray]) -> np.ndarray:
        return looked_up(self.lookups_, codes)

    def _refuse_unseen(self, frame, codes: list[np.ndarray]) -> None:
        for j, col in enumerate(codes):
            bad = col == UNSEEN
            if bad.any():
                values = frame.iloc[:, j][bad].unique()[:5]
                raise EncoderInputError(
                    f"IntegerCodes: column '{frame.columns[j]}' has value(s) not seen at fit: "
                    f"{list(values)}; allowed with unseen='error': the {len(self.levels_[j])} "
                    "fitted levels. Use unseen='code' or 'nan' to encode them instead."
                )
