"""IntegerCodes against scikit-learn's OrdinalEncoder and the documented code layout."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.preprocessing import OrdinalEncoder

from harness.encoders import IntegerCodes
from harness.errors import ConfigError, EncoderInputError


def make_frame(rng, n_rows: int = 50, dtype=object) -> pd.DataFrame:
    """Tiny synthetic data: 2 < 10 checks numeric order, "B" < "a" < "é" code-point order."""
    letters = rng.choice(["b", "a", "B", "é", "d"], size=n_rows).astype(object)
    letters[rng.random(n_rows) < 0.15] = np.nan
    letters = pd.Series(letters, dtype=dtype)
    return pd.DataFrame({"letter": letters, "number": rng.choice([10, 2, 7], size=n_rows)})


NEW = pd.DataFrame({"letter": ["a", "zzz", np.nan, "é"], "number": [2, 3, 10, 99]})


def reference(frame, new, column, unknown, missing):
    """scikit-learn 1.9.1 OrdinalEncoder on one column (its unknown_value is one number)."""
    ref = OrdinalEncoder(handle_unknown="use_encoded_value", unknown_value=unknown, encoded_missing_value=missing)
    return ref.fit(frame[[column]]).transform(new[[column]])[:, 0]


@pytest.mark.parametrize("unseen", ["code", "nan"])
@pytest.mark.parametrize("missing", ["code", "nan"])
@pytest.mark.parametrize("dtype", [object, "str"])
def test_equals_ordinal_encoder(rng, unseen, missing, dtype):
    # reference: scikit-learn's OrdinalEncoder (lexical order; numbers numerically)
    frame = make_frame(rng, dtype=dtype)
    ours = IntegerCodes(unseen=unseen, missing=missing).fit(frame).transform(NEW)
    for j, column in enumerate(frame.columns):
        k = frame[column].dropna().nunique()
        expected = reference(
            frame, NEW, column, unknown=np.nan if unseen == "nan" else k, missing=np.nan if missing == "nan" else k + 1
        )
        np.testing.assert_array_equal(ours[:, j], expected)


def test_fit_transform_equals_fit_then_transform(rng):
    frame = make_frame(rng)
    np.testing.assert_array_equal(IntegerCodes().fit_transform(frame), IntegerCodes().fit(frame).transform(frame))


def test_frequency_order(rng):
    # common practice, no source: most frequent level first, ties in sorted order
    frame = make_frame(rng)
    counts = frame["letter"].value_counts()
    ranked = sorted(counts.index, key=lambda level: (-counts[level], level))
    enc = IntegerCodes(order="frequency").fit(frame)
    assert list(enc.levels_[0]) == ranked
    codes = enc.transform(pd.DataFrame({"letter": ranked, "number": [2] * len(ranked)}))
    np.testing.assert_array_equal(codes[:, 0], np.arange(len(ranked)))


def test_appearance_order_equals_factorize(rng):
    # common practice, no source: pandas.factorize numbers levels by first occurrence
    frame = make_frame(rng)
    expected, _ = pd.factorize(frame["letter"])
    k = frame["letter"].nunique()
    expected = np.where(expected < 0, k + 1, expected)
    codes = IntegerCodes(order="appearance").fit_transform(frame)
    np.testing.assert_array_equal(codes[:, 0], expected)


def test_unseen_error(rng):
    enc = IntegerCodes(unseen="error").fit(make_frame(rng))
    with pytest.raises(EncoderInputError, match=r"column 'letter' has value\(s\) not seen"):
        enc.transform(NEW)


@pytest.mark.parametrize(
    ("param", "value", "match"),
    [
        ("order", "alphabetical", "'order' must be one of"),
        ("unseen", "zeros", "'unseen' must be one of"),
        ("missing", None, "'missing' must be one of"),
    ],
)
def test_bad_parameter(rng, param, value, match):
    with pytest.raises(ConfigError, match=match):
        IntegerCodes(**{param: value}).fit(make_frame(rng))


def test_feature_names_are_input_names(rng):
    enc = IntegerCodes().fit(make_frame(rng))
    assert list(enc.get_feature_names_out()) == ["letter", "number"]
