"""FrequencyCodes against a pandas value_counts/map computation."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from harness.encoders import FrequencyCodes
from harness.errors import ConfigError


def make_frame(rng, n_rows: int = 40) -> pd.DataFrame:
    letters = rng.choice(["x", "y", "z"], p=[0.6, 0.3, 0.1], size=n_rows).astype(object)
    letters[rng.random(n_rows) < 0.2] = None
    letters = pd.Series(letters, dtype="str")
    return pd.DataFrame({"letter": letters, "flag": rng.random(n_rows) < 0.3})


@pytest.mark.parametrize("scale", ["count", "proportion"])
def test_equals_value_counts(rng, scale):
    # common practice, no source: a level's frequency is its number of training rows
    frame = make_frame(rng)
    ours = FrequencyCodes(scale=scale).fit_transform(frame)
    for j, column in enumerate(frame.columns):
        col = frame[column].astype(object)
        table = col.value_counts(dropna=False, normalize=scale == "proportion")
        expected = col.map(table).to_numpy(dtype=np.float64)
        np.testing.assert_allclose(ours[:, j], expected)


def test_unseen_is_zero_and_missing_is_its_count(rng):
    frame = make_frame(rng)
    enc = FrequencyCodes().fit(frame)
    new = pd.DataFrame({"letter": ["never", None], "flag": [None, True]})
    out = enc.transform(new)
    n_missing = int(frame["letter"].isna().sum())
    assert n_missing > 0
    np.testing.assert_array_equal(out[:, 0], [0.0, n_missing])
    # no missing flag at fit: a missing value has frequency 0
    np.testing.assert_array_equal(out[:, 1], [0.0, frame["flag"].sum()])


def test_names(rng):
    enc = FrequencyCodes(scale="proportion").fit(make_frame(rng))
    assert list(enc.get_feature_names_out()) == ["letter__proportion", "flag__proportion"]


def test_bad_scale(rng):
    with pytest.raises(ConfigError, match="'scale' must be one of 'count', 'proportion'"):
        FrequencyCodes(scale="percent").fit(make_frame(rng))
