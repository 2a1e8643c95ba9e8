"""Cross-fitting schemes: brute-force references and the leak-safety property.

The vectorised schemes of ``_crossfit.py`` are compared with a direct computation that
selects, row by row, the rows a scheme allows (fine in a test on a few rows). Then a
hypothesis property checks through the encoder that, under every leak-safe scheme,
changing one row's own target leaves that row's training encoding unchanged
(Prokhorenkova et al. 2018, NeurIPS: a row's target statistic must not use its target).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from sklearn.model_selection import GroupKFold, KFold

from harness.encoders import _crossfit
from harness.encoders._target import SMOOTHINGS, TargetStatistics
from harness.errors import EncoderInputError

FAST = settings(max_examples=60, deadline=None)


@st.composite
def rows(draw, min_rows=2, max_rows=25, n_targets=None):
    """Level codes (-1 = in no level), float targets, and a row to look at."""
    n = draw(st.integers(min_rows, max_rows))
    codes = np.array(draw(st.lists(st.integers(-1, 3), min_size=n, max_size=n)), dtype=np.int64)
    t = n_targets or draw(st.integers(1, 2))
    values = draw(st.lists(st.integers(-20, 20), min_size=n * t, max_size=n * t))
    Y = np.array(values, dtype=np.float64).reshape(n, t) / 4.0  # exact binary fractions
    return codes, Y


def brute_force(codes, Y, allowed):
    """Per-row statistics from ``allowed(i) -> (level rows, pool rows)`` masks."""
    out = {key: [] for key in ("n", "total", "sq_dev", "prior", "tau2")}
    for i in range(len(codes)):  # a loop over rows is fine in a reference computation
        level, pool = allowed(i)
        level = level & (codes == codes[i]) & (codes[i] >= 0)
        chosen = Y[level]
        mean = chosen.mean(axis=0) if len(chosen) else np.zeros(Y.shape[1])
        out["n"].append(level.sum())
        out["total"].append(chosen.sum(axis=0))
        out["sq_dev"].append(((chosen - mean) ** 2).sum(axis=0))
        out["prior"].append(Y[pool].mean(axis=0))
        out["tau2"].append(Y[pool].var(axis=0))
    return {key: np.array(value, dtype=np.float64) for key, value in out.items()}


def assert_cells_match(cells, expected):
    idx = cells.index
    np.testing.assert_array_equal(cells.n[idx], expected["n"])
    for key in ("total", "sq_dev", "prior", "tau2"):
        got = np.broadcast_to(getattr(cells, key), (len(cells.n), expected[key].shape[1]))
        np.testing.assert_allclose(got[idx], expected[key], rtol=0, atol=1e-9, err_msg=key)


# --- brute-force references ---------------------------------------------------------------
@FAST
@given(rows())
def test_in_sample_uses_every_row(data):
    codes, Y = data
    everyone = np.ones(len(codes), dtype=bool)
    expected = brute_force(codes, Y, lambda i: (everyone, everyone))
    assert_cells_match(_crossfit.in_sample(codes, Y, 4), expected)


@FAST
@given(rows(min_rows=3), st.data())
def test_out_of_fold_uses_the_other_folds(data, draw):
    codes, Y = data
    n_folds = draw.draw(st.integers(2, 4))
    n = len(codes)
    fold = np.array(draw.draw(st.lists(st.integers(0, n_folds - 1), min_size=n, max_size=n)))
    assume(len(np.unique(fold)) >= 2)  # every fold must have training rows
    expected = brute_force(codes, Y, lambda i: (fold != fold[i], fold != fold[i]))
    cells, full = _crossfit.out_of_fold(codes, Y, 4, fold, n_folds)
    assert_cells_match(cells, expected)
    everyone = np.ones(len(codes), dtype=bool)
    assert_cells_match(full, brute_force(codes, Y, lambda i: (everyone, everyone)))


@FAST
@given(rows())
def test_leave_one_out_uses_all_other_rows(data):
    codes, Y = data
    others = lambda i: np.arange(len(codes)) != i  # noqa: E731
    expected = brute_force(codes, Y, lambda i: (others(i), others(i)))
    assert_cells_match(_crossfit.leave_one_out(codes, Y, 4), expected)


@FAST
@given(rows(), st.randoms(use_true_random=False))
def test_ordered_uses_earlier_rows_of_the_level(data, random):
    codes, Y = data
    permutation = np.array(random.sample(range(len(codes)), len(codes)))
    position = np.argsort(permutation)
    others = lambda i: np.arange(len(codes)) != i  # noqa: E731
    expected = brute_force(codes, Y, lambda i: (position < position[i], others(i)))
    assert_cells_match(_crossfit.ordered(codes, Y, 4, permutation), expected)


# --- leak safety, through the encoder ---------------------------------------------------------
def encoder(crossfit, smoothing, statistic="mean", target_type="continuous"):
    # a fixed, target-independent split: KFold (not stratified) and a fixed seed
    return TargetStatistics(
        crossfit=crossfit,
        smoothing=smoothing,
        statistic=statistic,
        target_type=target_type,
        cv=KFold(3, shuffle=True, random_state=0),
        random_state=0,
        m=2.0,
        ramp_center=2.0,
        ramp_width=1.0,
    )


def frame_of(codes) -> pd.DataFrame:
    values = np.array(["a", "b", "c", "d"], dtype=object)[np.maximum(codes, 0)]
    values[codes < 0] = None  # missing
    return pd.DataFrame({"x": values})


@settings(max_examples=150, deadline=None)
@given(
    rows(min_rows=3, n_targets=1),
    st.sampled_from(["kfold", "loo", "ordered", "holdout"]),
    st.sampled_from(SMOOTHINGS),
    st.data(),
)
def test_own_target_never_moves_own_encoding(data, crossfit, smoothing, draw):
    codes, Y = data
    y = Y[:, 0]
    i = draw.draw(st.integers(0, len(y) - 1))
    changed = y.copy()
    changed[i] = draw.draw(st.integers(-20, 20)) / 4.0
    X = frame_of(codes)
    before = encoder(crossfit, smoothing).fit_transform(X, y)
    after = encoder(crossfit, smoothing).fit_transform(X, changed)
    np.testing.assert_allclose(after[i], before[i], rtol=0, atol=1e-9)


@settings(max_examples=100, deadline=None)
@given(
    st.lists(st.integers(-1, 2), min_size=4, max_size=20),
    st.sampled_from(["kfold", "loo", "ordered", "holdout"]),
    st.sampled_from(SMOOTHINGS),
    st.data(),
)
def test_own_label_never_moves_own_weight_of_evidence(levels, crossfit, smoothing, draw):
    codes = np.array(levels, dtype=np.int64)
    y = np.array(draw.draw(st.lists(st.integers(0, 1), min_size=len(codes), max_size=len(codes))))
    i = draw.draw(st.integers(0, len(y) - 1))
    assume(set(np.delete(y, i)) == {0, 1})  # the class set must not hinge on row i
    changed = y.copy()
    changed[i] = 1 - y[i]
    X = frame_of(codes)
    make = lambda: encoder(crossfit, smoothing, statistic="woe", target_type="binary")  # noqa: E731
    np.testing.assert_allclose(make().fit_transform(X, changed)[i], make().fit_transform(X, y)[i], rtol=0, atol=1e-9)


@pytest.mark.parametrize("smoothing", SMOOTHINGS)
def test_in_sample_encoding_moves_with_own_target(smoothing):
    # the counter-example: without cross-fitting a row sees its own target (leaks on purpose)
    X = frame_of(np.array([0, 0, 0, 1, 1]))
    y = np.array([0.0, 1.0, 1.0, 0.0, 1.0])
    changed = y.copy()
    changed[0] = 5.0
    before = encoder("none", smoothing).fit_transform(X, y)[0]
    after = encoder("none", smoothing).fit_transform(X, changed)[0]
    assert abs(after[0] - before[0]) > 0.1


# --- fold assignments ------------------------------------------------------------------------
@pytest.mark.parametrize("n_rows", [5, 103])
@pytest.mark.parametrize("n_classes", [None, 2, 3, 40])  # 40: the sort path
def test_random_folds_are_balanced_and_stratified(rng, n_rows, n_classes):
    classes = None if n_classes is None else rng.integers(0, n_classes, size=n_rows)
    fold = _crossfit.random_folds(n_rows, 5, np.random.RandomState(0), classes)
    sizes = np.bincount(fold, minlength=5)
    assert sizes.max() - sizes.min() <= 1
    for c in range(n_classes or 0):  # loop over classes: each fold holds its share
        per_class = np.bincount(fold[classes == c], minlength=5)
        assert per_class.max() - per_class.min() <= 1


def test_folds_from_splits_follow_the_splitter(rng):
    groups = rng.integers(0, 6, size=40)
    splits = list(GroupKFold(3).split(np.zeros((40, 1)), groups=groups))
    fold, n_folds = _crossfit.folds_from_splits(splits, 40)
    assert n_folds == 3
    for f, (_, test) in enumerate(splits):  # loop over folds
        np.testing.assert_array_equal(np.flatnonzero(fold == f), np.sort(test))


def test_random_folds_need_enough_rows():
    with pytest.raises(EncoderInputError, match="needs at least 5 training rows; got 4"):
        _crossfit.random_folds(4, 5, np.random.RandomState(0))


def test_holdout_parts_have_the_requested_size():
    fold = _crossfit.holdout_folds(50, 0.3, np.random.RandomState(0))
    assert np.bincount(fold).tolist() == [15, 35]


@pytest.mark.parametrize("n_rows", [5, 17, 1000])
@pytest.mark.parametrize("random_state", [None, 0, 7])
@pytest.mark.parametrize("shuffle", [True, False])
def test_kfold_fast_path_equals_kfold_split(n_rows, random_state, shuffle):
    """Our direct fold assignment equals scikit-learn's KFold.split (read in its source,
    KFold._iter_test_indices, scikit-learn 1.9.1)."""
    from sklearn.model_selection import KFold

    from harness.encoders._crossfit import folds_from_splits, kfold_folds

    rs = random_state if (shuffle and random_state is not None) else None
    kw = {"shuffle": shuffle, "random_state": rs} if shuffle else {}
    if shuffle and rs is None:
        np.random.seed(3)
        ours = kfold_folds(n_rows, KFold(5, **kw))
        np.random.seed(3)
        ref, _ = folds_from_splits(KFold(5, **kw).split(np.zeros(n_rows)), n_rows)
    else:
        ours = kfold_folds(n_rows, KFold(5, **kw))
        ref, _ = folds_from_splits(KFold(5, **kw).split(np.zeros(n_rows)), n_rows)
    np.testing.assert_array_equal(ours, ref)


def test_kfold_fast_path_refuses_too_few_rows():
    from sklearn.model_selection import KFold

    from harness.encoders._crossfit import kfold_folds
    from harness.errors import EncoderInputError

    with pytest.raises(EncoderInputError, match="only 3 rows"):
        kfold_folds(3, KFold(5))
