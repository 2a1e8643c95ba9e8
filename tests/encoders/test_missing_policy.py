"""One missing-value policy by default: a missing categorical value is a level of its own
under every encoder that turns categories into numbers; `missing` changes it where an
encoder offers another rule (integer: NaN; target: the prior)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from harness.encoders import ENCODERS, build

NUMERIC_KINDS = sorted(k for k in ENCODERS if k not in ("drop", "native"))


def _frame():
    # invented: a colour column with missing values, a binary target
    values = ["red", "blue", None, "red", np.nan, "green", None, "blue"] * 10
    y = np.array([1, 0, 1, 1, 1, 0, 1, 0] * 10)
    return pd.DataFrame({"colour": values}), y


@pytest.mark.parametrize("kind", NUMERIC_KINDS)
def test_default_missing_is_a_level_of_its_own(kind):
    X, y = _frame()
    enc = build(kind)
    assert enc.missing_rule() == "a level of its own"
    out = enc.fit(X, y).transform(X)
    out = out.toarray() if hasattr(out, "toarray") else np.asarray(out, dtype=float)
    missing = X["colour"].isna().to_numpy()
    rows = {tuple(r) for r in out[missing]}
    assert len(rows) == 1  # every missing row gets the same encoding
    unseen = enc.transform(pd.DataFrame({"colour": ["violet"]}))
    unseen = unseen.toarray() if hasattr(unseen, "toarray") else np.asarray(unseen, dtype=float)
    seen = {tuple(r) for r in out[~missing]}
    (code,) = rows
    assert code not in seen and not np.any(np.isnan(code))
    if kind != "frequency":  # frequency: unseen is 0 rows, missing its own count; both differ from levels
        assert code != tuple(unseen[0])


def test_target_statistic_of_missing_is_the_m_estimate_of_its_rows():
    """Cestnik (1990), ECAI'90: (sum y + m * prior) / (n + m) over the missing rows."""
    X, y = _frame()
    enc = build("target", m=2.0).fit(X, y)
    missing = X["colour"].isna().to_numpy()
    prior = y.mean()
    expected = (y[missing].sum() + 2.0 * prior) / (missing.sum() + 2.0)
    got = enc.transform(X)[missing]
    np.testing.assert_allclose(got, expected)
    assert not np.isclose(expected, prior)


@pytest.mark.parametrize(
    "kind, params, rule",
    [
        ("target", {"missing": "prior"}, "the prior"),
        ("integer", {"missing": "nan"}, "NaN"),
        ("onehot", {"missing": "zeros"}, "a row of zeros"),
        ("hashing", {"missing": "zeros"}, "no entry"),
        ("frequency", {"missing": "unseen"}, "0, as an unseen value"),
        ("contrast", {"missing": "zeros"}, "a row of zeros"),
        ("similarity", {"missing": "zeros"}, "a vector of zeros"),
        ("glmm", {"missing": "prior"}, "the intercept"),
    ],
)
def test_missing_is_configurable_per_encoder(kind, params, rule):
    X, y = _frame()
    enc = build(kind, **params).fit(X, y)
    assert enc.missing_rule().startswith(rule)
    got = enc.transform(X)[X["colour"].isna().to_numpy()]
    got = got.toarray() if hasattr(got, "toarray") else np.asarray(got, dtype=float)
    if kind == "target":
        np.testing.assert_allclose(got, y.mean())
    elif kind == "glmm":  # the model's intercept: what an unseen level gets
        np.testing.assert_allclose(got, np.broadcast_to(enc.intercept_[0], got.shape))
    elif kind == "integer":
        assert np.isnan(got).all()
    else:  # no column, no entry, or the frequency of a value never seen
        assert (got == 0).all()
    if kind == "onehot":
        assert not any("<missing>" in n for n in enc.get_feature_names_out())


def test_onehot_missing_zeros_is_not_an_error_under_unseen_error():
    X, y = _frame()
    enc = build("onehot", missing="zeros", unseen="error").fit(X, y)
    assert enc.transform(X).shape[0] == len(X)


@pytest.mark.parametrize("kind", ["onehot", "hashing", "frequency", "integer", "target"])
def test_bad_missing_option_is_refused(kind):
    from harness.errors import ConfigError

    X, y = _frame()
    with pytest.raises((ConfigError, ValueError), match="'missing' must be one of"):
        build(kind, missing="drop").fit(X, y)
