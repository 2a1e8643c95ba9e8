"""Frequency codes: each category replaced by how often it occurred in the training data."""

from __future__ import annotations

import numpy as np
from sklearn.utils.validation import _check_feature_names_in, check_is_fitted

from harness.encoders._base import LevelCodeEncoder, looked_up
from harness.encoders._rules import Options

__all__ = ["FrequencyCodes"]

SCALES = ("count", "proportion")
MISSING_RULES = ("category", "unseen")


class FrequencyCodes(LevelCodeEncoder):
    """Replace each category by its training count (or proportion of training rows).

    Parameters
    ----------
    scale : {"count", "proportion"}, default="count"
        Raw number of training rows holding the level, or that number divided by the
        number of training rows (missing rows included in the denominator).
    missing : {"category", "unseen"}, default="category"
        A missing value gets the frequency of missingness (a level of its own), or 0 as
        an unseen value does.

    Notes
    -----
    A value not seen at fit gets 0: it occurred zero times. A missing value gets the
    frequency of missingness itself (the number of missing training rows), so missing is
    treated as one more level; it is 0 when no training row was missing.
    Output column names are ``<column>__count`` or ``<column>__proportion``.

    Attributes
    ----------
    lookups_ : list of float64 ndarray
        Per column, the output of each level code, then of missing and unseen values.
    n_features_in_, feature_names_in_, levels_, counts_, n_missing_, stringified_
        See ``CategoricalEncoder``.

    Examples
    --------
    >>> import pandas as pd
    >>> from harness.encoders import build
    >>> X = pd.DataFrame({"city": ["Oslo", "Rome", "Oslo", None, "Lima"]})
    >>> enc = build("frequency").fit(X)
    >>> enc.transform(pd.DataFrame({"city": ["Oslo", "Paris", None]})).ravel().tolist()
    [2.0, 0.0, 1.0]
    >>> build("frequency", scale="proportion").fit_transform(X).ravel().tolist()
    [0.4, 0.2, 0.4, 0.2, 0.2]
    """

    param_rules = {"scale": (Options(*SCALES),), "missing": (Options(*MISSING_RULES),)}

    def __init__(self, scale="count", missing="category"):
        self.scale = scale
        self.missing = missing

    def missing_rule(self) -> str:
        return "a level of its own" if self.missing == "category" else '0, as an unseen value (missing = "unseen")'

    def get_feature_names_out(self, input_features=None):
        """``<column>__count`` (or ``__proportion``) per input column."""
        check_is_fitted(self)
        names = _check_feature_names_in(self, input_features)
        return np.asarray([f"{name}__{self.scale}" for name in names], dtype=object)

    def _fit_codes(self, X) -> list[np.ndarray]:
        frame = self._frame(X, reset=True)
        codes = self._fit_levels(frame, order="any")  # no level order is needed: no sort
        n_rows = frame.shape[0]
        divisor = float(n_rows) if self.scale == "proportion" else 1.0
        # trailing entries are read by negative codes: [-2] MISSING, [-1] UNSEEN (0 rows)
        self.lookups_ = [
            np.concatenate([counts, [n_missing if self.missing == "category" else 0, 0]]).astype(np.float64) / divisor
            for counts, n_missing in zip(self.counts_, self.n_missing_)
        ]
        return codes

    def _to_output(self, codes: list[np.ndarray]) -> np.ndarray:
        return looked_up(self.lookups_, codes)
