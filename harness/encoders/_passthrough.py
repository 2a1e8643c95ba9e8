"""The two encoders that do not turn categories into numbers: drop them, or hand them on.

``DropColumns`` removes every categorical column (a baseline: the model sees only the
numeric columns). ``NativeCategories`` passes the columns on as pandas ``category`` dtype
for models with their own categorical split rule (LightGBM,
``HistGradientBoosting*(categorical_features="from_dtype")``); it is the only encoder
kind whose ``transform`` returns a DataFrame.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.utils.validation import _check_feature_names_in, check_is_fitted

from harness.encoders._base import CategoricalEncoder

__all__ = ["DropColumns", "NativeCategories"]


class DropColumns(CategoricalEncoder):
    """Drop every categorical column: ``transform`` returns an ``(n_samples, 0)`` array.

    The runner then keeps the dataset's numeric columns only, which measures what the
    categorical columns add under every other encoder.

    Attributes
    ----------
    n_features_in_, feature_names_in_
        See ``CategoricalEncoder``.

    Examples
    --------
    >>> import pandas as pd
    >>> from harness.encoders import build
    >>> build("drop").fit_transform(pd.DataFrame({"city": ["Oslo", "Rome"]})).shape
    (2, 0)
    """

    def missing_rule(self) -> str:
        return "not used (categorical columns dropped)"

    def fit(self, X, y=None):
        """Record the input columns.

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features)
        y : ignored

        Returns
        -------
        self : the fitted encoder.
        """
        self._frame(X, reset=True)
        return self

    def transform(self, X):
        """Return an empty array.

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features_in_)

        Returns
        -------
        ndarray of shape (n_samples, 0), float64
        """
        frame = self._frame(X, reset=False)
        return np.empty((frame.shape[0], 0), dtype=np.float64)

    def get_feature_names_out(self, input_features=None):
        """An empty array: no output column."""
        check_is_fitted(self)
        _check_feature_names_in(self, input_features)
        return np.asarray([], dtype=object)


class NativeCategories(CategoricalEncoder):
    """Return the columns as pandas ``category`` dtype with categories fixed at fit.

    Categories are the levels seen at fit in sorted order; a value not seen at fit and a
    missing value both become NaN (a missing category), so a model sees the same
    category table at fit and at predict time.

    Notes
    -----
    The only encoder kind whose ``transform`` returns a ``pandas.DataFrame`` (whatever
    ``set_output`` says); the index of a DataFrame input is kept.

    Attributes
    ----------
    n_features_in_, feature_names_in_, levels_, counts_, n_missing_, stringified_
        See ``CategoricalEncoder``.
        ``levels_[j]`` are column ``j``'s categories.

    Examples
    --------
    >>> import pandas as pd
    >>> from harness.encoders import build
    >>> enc = build("native").fit(pd.DataFrame({"city": ["Oslo", "Rome", "Lima"]}))
    >>> out = enc.transform(pd.DataFrame({"city": ["Rome", "Paris"]}))
    >>> out["city"].tolist(), out["city"].cat.categories.tolist()
    (['Rome', nan], ['Lima', 'Oslo', 'Rome'])
    """

    def missing_rule(self) -> str:
        return "a missing category, left to the model's own rule"

    def fit(self, X, y=None):
        """Learn the categories of each column.

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features)
        y : ignored

        Returns
        -------
        self : the fitted encoder.
        """
        self._fit_levels(self._frame(X, reset=True), order="lexical")
        return self

    def transform(self, X):
        """Return the columns as ``category`` dtype with the categories fixed at fit.

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features_in_)

        Returns
        -------
        pandas.DataFrame of shape (n_samples, n_features_in_)
            One ``category`` column per input column; unseen and missing values are NaN.
        """
        frame = self._frame(X, reset=False)
        names = self.get_feature_names_out()
        columns = {
            name: pd.Categorical.from_codes(np.maximum(codes, -1), categories=levels)
            for name, codes, levels in zip(names, self._codes(frame), self.levels_)
        }
        return pd.DataFrame(columns, index=frame.index)

    def get_feature_names_out(self, input_features=None):
        """One output column per input column, named as the input column."""
        check_is_fitted(self)
        return np.asarray(_check_feature_names_in(self, input_features), dtype=object)
