"""Shared machinery for every encoder: input coercion, per-column level tables, codes.

Every encoder factorises each column once at ``fit`` (a hash table, no sort unless the
encoder asks for one) and maps new data with ``Index.get_indexer``: both are vectorised,
so no encoder ever loops over rows in Python.

Codes convention used by all encoders
-------------------------------------
``codes[i] >= 0``   index of the row's level in ``levels_[j]``
``codes[i] == UNSEEN`` (-1) a non-missing value not seen at fit
``codes[i] == MISSING`` (-2) a missing value (None, NaN, pd.NA, NaT)
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.utils.validation import check_is_fitted

from harness.errors import ConfigError, EncoderInputError, closest

UNSEEN = -1
MISSING = -2

__all__ = [
    "UNSEEN",
    "MISSING",
    "CategoricalEncoder",
    "LevelCodeEncoder",
    "as_frame",
    "check_count",
    "check_flag",
    "check_option",
    "normalize_column",
]


def as_frame(X) -> pd.DataFrame:
    """Return ``X`` as a DataFrame; arrays get column names ``x0, x1, ...``.

    Raises
    ------
    ValueError
        If ``X`` is not two-dimensional.
    """
    if isinstance(X, pd.DataFrame):
        return X
    if isinstance(X, pd.Series):
        return X.to_frame()
    if hasattr(X, "toarray") or hasattr(X, "tocsr"):
        raise TypeError("categorical encoders take dense input; got a sparse matrix")
    arr = np.asarray(X, dtype=object) if not isinstance(X, np.ndarray) else X
    if arr.ndim != 2:
        raise ValueError(
            f"Expected a 2D array or DataFrame of categorical columns, got an array with "
            f"{arr.ndim} dimension(s). Reshape your data with X.reshape(-1, 1) for a single feature."
        )
    return pd.DataFrame(arr, columns=[f"x{j}" for j in range(arr.shape[1])], copy=False)


def is_mixed(s: pd.Series) -> bool:
    """True for an object column whose non-missing values are of more than one type."""
    if s.dtype != object:
        return False
    present = s[s.notna()].array[:100_000]
    kinds = {type(v) for v in present}
    return len(kinds) > 1 or bool(kinds and not kinds <= {str, bool, int, float})


def normalize_column(s: pd.Series, force_str: bool = False) -> pd.Series:
    """Make one column hashable and consistently typed.

    Object columns mixing types (``1`` and ``"1"``, ints and strings) become strings so
    that one level is one value; homogeneous columns (strings, numbers, bools) are left
    as they are so that numeric levels keep numeric order. Category dtype is unwrapped
    to its values (levels are learnt from data, not from the declared categories).
    ``force_str`` stringifies any non-string column (used at transform when the column
    was stringified at fit, so a fold that happens to hold only ints still matches).
    """
    if isinstance(s.dtype, pd.CategoricalDtype):
        s = s.astype(s.dtype.categories.dtype if len(s.dtype.categories) else object)
    if (force_str or is_mixed(s)) and not pd.api.types.is_string_dtype(s.dtype):
        s = s.astype(object).where(s.isna(), s.astype(str))
    elif (force_str or is_mixed(s)) and s.dtype == object:
        s = s.where(s.isna(), s.astype(str))
    return s


class CategoricalEncoder(TransformerMixin, BaseEstimator):
    """Base class: validates input and learns one level table per column.

    Subclasses call ``self._fit_levels(X, order=...)`` in ``fit`` and ``self._codes(X)`` in
    ``transform``. Fitted attributes: ``feature_names_in_``, ``n_features_in_``,
    ``levels_`` (list of ``pd.Index``, missing never included), ``counts_`` (list of int64
    arrays aligned with ``levels_``), ``n_missing_`` (int64 array, one per column).
    """

    def missing_rule(self) -> str:
        """How this encoder, as configured, treats a missing categorical value (report text).

        The default across encoders is a level of its own; encoders with a ``missing``
        option say what the other choice does.
        """
        return "a level of its own"

    # --- input ---------------------------------------------------------------------------
    def _frame(self, X, *, reset: bool) -> pd.DataFrame:
        frame = as_frame(X)
        if any(getattr(dtype, "kind", "") == "c" for dtype in frame.dtypes):
            # scikit-learn's rule (check_array): complex numbers are no category labels
            raise EncoderInputError(
                f"Complex data not supported by {type(self).__name__}: category labels must be "
                "strings, numbers or bools; got a complex column."
            )
        if frame.shape[1] == 0:
            raise ValueError(
                f"0 feature(s) (shape={frame.shape}) while a minimum of 1 is required."
            )
        if frame.shape[0] == 0:
            raise ValueError(
                f"0 sample(s) (shape={frame.shape}) while a minimum of 1 is required."
            )
        names = np.asarray([str(c) for c in frame.columns], dtype=object)
        if reset:
            self.n_features_in_ = frame.shape[1]
            if isinstance(X, pd.DataFrame):
                self.feature_names_in_ = names
            elif hasattr(self, "feature_names_in_"):
                del self.feature_names_in_
        else:
            check_is_fitted(self)
            if frame.shape[1] != self.n_features_in_:
                raise ValueError(
                    f"X has {frame.shape[1]} features, but {type(self).__name__} is expecting "
                    f"{self.n_features_in_} features as input."
                )
            if isinstance(X, pd.DataFrame) and hasattr(self, "feature_names_in_"):
                if not np.array_equal(names, self.feature_names_in_):
                    raise ValueError(
                        "The feature names should match those that were passed during fit; "
                        f"got {list(names)}, expected {list(self.feature_names_in_)}."
                    )
        return frame

    def _input_names(self) -> np.ndarray:
        if hasattr(self, "feature_names_in_"):
            return self.feature_names_in_
        return np.asarray([f"x{j}" for j in range(self.n_features_in_)], dtype=object)

    # --- levels --------------------------------------------------------------------------
    def _fit_levels(self, frame: pd.DataFrame, order: str = "lexical") -> list[np.ndarray]:
        """Learn ``levels_``/``counts_``/``n_missing_``; return the training codes per column.

        ``order`` is ``"lexical"`` (sorted; numbers numerically), ``"frequency"``
        (most frequent first, ties lexical) or ``"appearance"`` (first occurrence).
        """
        self.levels_, self.counts_, codes_out, self.stringified_ = [], [], [], []
        self.n_missing_ = np.zeros(frame.shape[1], dtype=np.int64)
        for j in range(frame.shape[1]):
            raw = frame.iloc[:, j]
            self.stringified_.append(is_mixed(raw))
            col = normalize_column(raw, force_str=self.stringified_[j])
            codes, uniques = pd.factorize(col, use_na_sentinel=True)
            codes = codes.astype(np.int64, copy=False)
            counts = np.bincount(codes[codes >= 0], minlength=len(uniques)).astype(np.int64)
            perm = self._level_order(uniques, counts, order)
            uniques = pd.Index(uniques).take(perm)
            # one trailing entry maps factorize's NA sentinel (-1) to MISSING; it also
            # keeps the lookup valid for an all-missing column (no level at all)
            inverse = np.full(len(perm) + 1, MISSING, dtype=np.int64)
            inverse[perm] = np.arange(len(perm))
            missing = codes < 0
            codes = inverse[codes]
            self.levels_.append(uniques)
            self.counts_.append(counts[perm])
            self.n_missing_[j] = int(missing.sum())
            codes_out.append(codes)
        return codes_out

    @staticmethod
    def _level_order(uniques, counts: np.ndarray, order: str) -> np.ndarray:
        n = len(uniques)
        if order == "appearance" or n == 0:
            return np.arange(n)
        lexical = _lexical_argsort(uniques)
        if order == "lexical":
            return lexical
        if order == "frequency":
            # stable sort on -count over the lexical order: ties stay lexical
            return lexical[np.argsort(-counts[lexical], kind="stable")]
        raise ValueError(f"unknown level order {order!r}; allowed: appearance, frequency, lexical")

    def _codes(self, frame: pd.DataFrame) -> list[np.ndarray]:
        """Codes of new data against the fitted ``levels_`` (see module docstring)."""
        out = []
        for j in range(frame.shape[1]):
            col = normalize_column(frame.iloc[:, j], force_str=self.stringified_[j])
            levels = self.levels_[j]
            try:
                codes = levels.get_indexer(col).astype(np.int64, copy=False)
            except (TypeError, ValueError):
                codes = levels.astype(str).get_indexer(col.astype(str)).astype(np.int64)
            codes[col.isna().to_numpy()] = MISSING
            out.append(codes)
        return out

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.input_tags.categorical = True
        tags.input_tags.string = True
        tags.input_tags.allow_nan = True
        return tags


class LevelCodeEncoder(CategoricalEncoder):
    """An encoder whose output depends only on each row's level codes (no target).

    Subclasses provide ``_fit_codes(X) -> codes`` (validate parameters, learn levels and
    layout) and ``_to_output(codes)``; with ``unseen="error"`` they also provide
    ``_refuse_unseen(frame, codes)``. Fitting, transforming and the one-pass
    ``fit_transform`` (one factorisation instead of two) are the same for all of them.
    """

    def fit(self, X, y=None):
        """Learn the levels of each column. ``y`` is ignored."""
        self._fit_codes(X)
        return self

    def fit_transform(self, X, y=None, **fit_params):
        """Fit and return the encoded training rows. ``y`` is ignored."""
        return self._to_output(self._fit_codes(X))

    def transform(self, X):
        """Encode ``X`` with the fitted levels.

        Raises
        ------
        EncoderInputError
            If ``unseen="error"`` and ``X`` holds a value not seen at fit.
        """
        frame = self._frame(X, reset=False)
        codes = self._codes(frame)
        if getattr(self, "unseen", None) == "error":
            self._refuse_unseen(frame, codes)
        return self._to_output(codes)


def _lexical_argsort(uniques) -> np.ndarray:
    """Sorted order of levels: numbers numerically, strings lexically, mixed by string."""
    if isinstance(getattr(uniques, "dtype", None), pd.StringDtype):
        # pandas' (Arrow) string sort is ~5x faster than sorting Python objects, and UTF-8
        # byte order equals code-point order, i.e. Python's str order
        return np.asarray(pd.Index(uniques).argsort(), dtype=np.int64)
    values = np.asarray(uniques, dtype=object) if not isinstance(uniques, np.ndarray) else uniques
    try:
        return np.argsort(values, kind="stable")
    except TypeError:
        return np.argsort(values.astype(str), kind="stable")


def check_option(encoder, name: str, allowed) -> None:
    """Raise ``ConfigError`` unless ``encoder.<name>`` is one of ``allowed``.

    Parameters are checked at ``fit`` (scikit-learn's rule: ``__init__`` only stores), so a
    bad value from a config is reported with the encoder, the allowed values and the value
    received.
    """
    value = getattr(encoder, name)
    if isinstance(value, str) and value in allowed:
        return
    shown = ", ".join(repr(a) for a in allowed)
    hint = closest(value, allowed) if isinstance(value, str) else ""
    raise ConfigError(
        f"{type(encoder).__name__}: parameter '{name}' must be one of {shown}; "
        f"got {value!r}.{hint}"
    )


def check_count(encoder, name: str, low: int, allow_none: bool = False) -> None:
    """Raise ``ConfigError`` unless ``encoder.<name>`` is an integer >= ``low`` (or None)."""
    value = getattr(encoder, name)
    if value is None and allow_none:
        return
    if isinstance(value, (int, np.integer)) and not isinstance(value, bool) and value >= low:
        return
    extra = " or None" if allow_none else ""
    raise ConfigError(
        f"{type(encoder).__name__}: parameter '{name}' must be an integer >= {low}{extra}; "
        f"got {value!r}."
    )


def check_flag(encoder, name: str) -> None:
    """Raise ``ConfigError`` unless ``encoder.<name>`` is a bool."""
    value = getattr(encoder, name)
    if not isinstance(value, (bool, np.bool_)):
        raise ConfigError(
            f"{type(encoder).__name__}: parameter '{name}' must be true or false; got {value!r}."
        )
