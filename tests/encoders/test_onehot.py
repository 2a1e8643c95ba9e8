"""OneHotCodes against scikit-learn's OneHotEncoder, including its rare-level pooling."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp
from sklearn.preprocessing import OneHotEncoder

from harness.encoders import OneHotCodes
from harness.errors import ConfigError, EncoderInputError


def make_frame(rng, n_rows: int = 80) -> pd.DataFrame:
    """Tiny synthetic data with skewed counts (so pooling has something to pool)."""
    letters = rng.choice(list("abcdef"), p=[0.4, 0.25, 0.15, 0.1, 0.06, 0.04], size=n_rows)
    letters = letters.astype(object)
    letters[rng.random(n_rows) < 0.1] = np.nan
    return pd.DataFrame({"letter": letters, "number": rng.choice([10, 2, 7, 5], size=n_rows)})


NEW = pd.DataFrame({"letter": ["a", "zzz", np.nan, "f", "c"], "number": [2, 3, 10, 5, 99]})


def test_equals_one_hot_encoder(rng):
    # reference: scikit-learn 1.9.1 OneHotEncoder(handle_unknown="ignore")
    frame = make_frame(rng)
    ours = OneHotCodes().fit(frame)
    ref = OneHotEncoder(handle_unknown="ignore").fit(frame)
    np.testing.assert_array_equal(ours.transform(NEW).toarray(), ref.transform(NEW).toarray())
    np.testing.assert_array_equal(ours.fit_transform(frame).toarray(), ref.transform(frame).toarray())
    # same layout, our naming: "_" becomes "=", NaN becomes <missing>
    names = [n.replace("_", "=", 1).replace("=nan", "=<missing>") for n in ref.get_feature_names_out()]
    assert list(ours.get_feature_names_out()) == names


def test_published_infrequent_example():
    # scikit-learn 1.9.1 OneHotEncoder(min_frequency=3), behaviour read in its source:
    # training counts b:5, a:3, c:2, d:1, nan:2 -> columns [a, b, infrequent]
    train = pd.DataFrame({"x": ["b"] * 5 + ["a"] * 3 + ["c"] * 2 + ["d"] + [np.nan] * 2})
    new = pd.DataFrame({"x": ["a", "c", "d", "zzz", np.nan]})
    expected = np.array([[1, 0, 0], [0, 0, 1], [0, 0, 1], [0, 0, 0], [0, 0, 1]], dtype=float)
    ours = OneHotCodes(min_count=3).fit(train)
    assert list(ours.get_feature_names_out()) == ["x=a", "x=b", "x=<other>"]
    np.testing.assert_array_equal(ours.transform(new).toarray(), expected)
    ref = OneHotEncoder(handle_unknown="ignore", min_frequency=3).fit(train)
    np.testing.assert_array_equal(ref.transform(new).toarray(), expected)


@pytest.mark.parametrize("min_count", [1, 3, 8, 100])
@pytest.mark.parametrize("max_levels", [None, 1, 2, 4])
def test_pooling_equals_min_frequency_and_max_categories(rng, min_count, max_levels):
    # reference: scikit-learn's min_frequency and max_categories (= max_levels + 1, since
    # scikit-learn counts the infrequent column among max_categories)
    frame = make_frame(rng)
    ours = OneHotCodes(min_count=min_count, max_levels=max_levels).fit(frame)
    ref = OneHotEncoder(
        handle_unknown="ignore",
        min_frequency=min_count if min_count > 1 else None,
        max_categories=None if max_levels is None else max_levels + 1,
    ).fit(frame)
    np.testing.assert_array_equal(ours.transform(NEW).toarray(), ref.transform(NEW).toarray())
    np.testing.assert_array_equal(ours.transform(frame).toarray(), ref.transform(frame).toarray())


def test_tie_rule_equals_max_categories():
    # scikit-learn keeps, among equal counts, the level later in sorted order
    train = pd.DataFrame({"x": ["a", "b", "c", "d", "d"]})
    ours = OneHotCodes(max_levels=2).fit(train)
    ref = OneHotEncoder(max_categories=3, handle_unknown="ignore").fit(train)
    assert list(ours.get_feature_names_out()) == ["x=c", "x=d", "x=<other>"]
    np.testing.assert_array_equal(ours.transform(train).toarray(), ref.transform(train).toarray())


def test_drop_one_equals_drop_first(rng):
    # reference: scikit-learn OneHotEncoder(drop="first")
    frame = make_frame(rng).dropna()
    ours = OneHotCodes(drop_one=True).fit(frame)
    ref = OneHotEncoder(drop="first").fit(frame)
    np.testing.assert_array_equal(ours.transform(frame).toarray(), ref.transform(frame).toarray())
    assert len(ours.get_feature_names_out()) == len(ref.get_feature_names_out())


def test_output_is_canonical_csr_or_dense(rng):
    frame = make_frame(rng)
    sparse = OneHotCodes().fit(frame).transform(NEW)
    assert sp.issparse(sparse) and sparse.format == "csr" and sparse.has_sorted_indices
    dense = OneHotCodes(sparse=False).fit(frame).transform(NEW)
    assert isinstance(dense, np.ndarray)
    np.testing.assert_array_equal(dense, sparse.toarray())


@pytest.mark.parametrize("value", ["zzz", np.nan])
def test_unseen_error(value):
    enc = OneHotCodes(unseen="error").fit(pd.DataFrame({"x": ["a", "b"]}))
    with pytest.raises(EncoderInputError, match=r"column 'x' has value\(s\) not seen at fit"):
        enc.transform(pd.DataFrame({"x": ["a", value]}))


@pytest.mark.parametrize(
    ("param", "value", "error", "match"),
    [
        ("unseen", "ignore", ConfigError, "'unseen' must be one of 'zeros', 'error'"),
        ("min_count", 0, ConfigError, "'min_count' must be an integer >= 1"),
        ("max_levels", 2.5, ConfigError, "'max_levels' must be an integer >= 1 or None"),
        ("drop_one", "yes", ConfigError, "'drop_one' must be true or false"),
        ("sparse", None, ConfigError, "'sparse' must be true or false"),
    ],
)
def test_bad_parameter(rng, param, value, error, match):
    with pytest.raises(error, match=match):
        OneHotCodes(**{param: value}).fit(make_frame(rng))
