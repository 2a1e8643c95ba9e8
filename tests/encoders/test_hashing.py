"""HashedCodes against scikit-learn's FeatureHasher and published MurmurHash3 values."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp
from sklearn.feature_extraction import FeatureHasher
from sklearn.utils import murmurhash3_32

from harness.encoders import HashedCodes
from harness.encoders._hashing import hash_tokens
from harness.errors import ConfigError


def make_frame(rng, n_rows: int = 60) -> pd.DataFrame:
    colors = rng.choice(["red", "green", "blue", "ünïcode"], size=n_rows).astype(object)
    colors[rng.random(n_rows) < 0.1] = None
    return pd.DataFrame(
        {
            "color": pd.Series(colors, dtype="str"),
            "size": rng.choice([1, 2, 30], size=n_rows),
            "flag": rng.random(n_rows) < 0.5,
        }
    )


def token_lists(frame: pd.DataFrame) -> list[list[str]]:
    """FeatureHasher input: one list of "column=value" per row, "<missing>" for NA."""
    cols = [
        name + "=" + frame[name].astype(object).where(frame[name].notna(), "<missing>").astype(str)
        for name in frame.columns
    ]
    return pd.concat(cols, axis=1).to_numpy().tolist()


def test_murmurhash_check_values():
    # scikit-learn 1.9.1 source (sklearn/feature_extraction/_hashing_fast.pyx); Weinberger et al. 2009, ICML: signed
    # MurmurHash3_x86_32 of "foo" with seed 0, and three tokens in 16 columns
    assert murmurhash3_32("foo", seed=0) == -156908512
    index, sign = hash_tokens(["color=red", "size=L", "color=blue"], 16)
    np.testing.assert_array_equal(index, [2, 12, 10])
    np.testing.assert_array_equal(sign, [-1.0, 1.0, 1.0])


def test_hash_tokens_equal_feature_hasher():
    # reference: FeatureHasher's index |h| mod n and sign of h, over many tokens
    tokens = [f"t={i}" for i in range(2000)]
    index, sign = hash_tokens(tokens, 37)
    ref = FeatureHasher(n_features=37, input_type="string").transform([[t] for t in tokens])
    np.testing.assert_array_equal(ref.indices, index)
    np.testing.assert_array_equal(ref.data, sign)


@pytest.mark.parametrize("width", [1, 8, 256])
@pytest.mark.parametrize("signed", [True, False])
def test_shared_space_equals_feature_hasher(rng, width, signed):
    # reference: scikit-learn 1.9.1 FeatureHasher(input_type="string"), one token list per row
    frame = make_frame(rng)
    ours = HashedCodes(width=width, signed=signed).fit(frame)
    ref = FeatureHasher(n_features=width, input_type="string", alternate_sign=signed)
    new = pd.DataFrame({"color": ["never seen", None], "size": [1, 99], "flag": [True, None]})
    for data in (frame, new):
        np.testing.assert_array_equal(ours.transform(data).toarray(), ref.transform(token_lists(data)).toarray())


def test_per_column_blocks_equal_feature_hasher_per_column(rng):
    frame = make_frame(rng)
    out = HashedCodes(width=16, space="per-column").fit_transform(frame)
    assert out.shape == (len(frame), 16 * frame.shape[1])
    ref = FeatureHasher(n_features=16, input_type="string")
    for j, name in enumerate(frame.columns):
        block = out[:, 16 * j : 16 * (j + 1)].toarray()
        np.testing.assert_array_equal(block, ref.transform(token_lists(frame[[name]])).toarray())


def test_ndarray_columns_are_named_x0(rng):
    values = make_frame(rng).to_numpy(dtype=object)
    ours = HashedCodes(width=32).fit(values).transform(values)
    frame = pd.DataFrame(values, columns=["x0", "x1", "x2"])
    ref = FeatureHasher(n_features=32, input_type="string").transform(token_lists(frame))
    np.testing.assert_array_equal(ours.toarray(), ref.toarray())


def test_output_and_names(rng):
    enc = HashedCodes(width=4, space="per-column").fit(make_frame(rng))
    out = enc.transform(make_frame(rng))
    assert sp.issparse(out) and out.format == "csr"
    assert list(enc.get_feature_names_out())[:5] == [
        "color__hash_0",
        "color__hash_1",
        "color__hash_2",
        "color__hash_3",
        "size__hash_0",
    ]
    assert list(HashedCodes(width=2).fit(make_frame(rng)).get_feature_names_out()) == ["hash_0", "hash_1"]


@pytest.mark.parametrize(
    ("param", "value", "match"),
    [
        ("width", 0, r"'width' must be an integer in \[1, 16777216\]"),
        ("width", 2**24 + 1, r"'width' must be an integer in \[1, 16777216\]; got 16777217"),
        ("space", "separate", "'space' must be one of 'shared', 'per-column'"),
        ("signed", 1, "'signed' must be true or false"),
    ],
)
def test_bad_parameter(rng, param, value, match):
    with pytest.raises(ConfigError, match=match):
        HashedCodes(**{param: value}).fit(make_frame(rng))


def test_float_column_at_transform_hashes_like_the_fitted_integers():
    # a NaN turns an integer column float; 1.0 must still hash as the fitted "size=1"
    enc = HashedCodes(width=64).fit(pd.DataFrame({"size": [1, 2, 3]}))
    out = enc.transform(pd.DataFrame({"size": [1.0, np.nan, 2.0]})).toarray()
    ref = FeatureHasher(n_features=64, input_type="string")
    expected = ref.transform([["size=1"], ["size=<missing>"], ["size=2"]]).toarray()
    np.testing.assert_array_equal(out, expected)
