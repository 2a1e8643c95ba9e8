"""The `synthetic` source: planted effects are recoverable, noise carries none, seeds repeat."""

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from harness.datasets import load, make_synthetic, params_of
from harness.errors import ConfigError


def _level_numbers(column: pd.Series) -> np.ndarray:
    # level k of column c is the string "c_k"
    return column.str.rsplit("_", n=1).str[1].astype(int).to_numpy()


def _level_means(column: pd.Series, target: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    codes = _level_numbers(column)
    counts = np.bincount(codes, minlength=k)
    sums = np.bincount(codes, weights=target, minlength=k)
    seen = counts >= 30  # only levels with enough rows for a stable mean
    return sums[seen] / counts[seen], seen


def _groups(column: pd.Series, y: np.ndarray) -> list:
    codes = _level_numbers(column)
    return [y[codes == k] for k in np.unique(codes)]


@pytest.mark.parametrize("task", ["regression", "binary"])
def test_planted_effect_is_recoverable(task, seed):
    # common practice, no source: with enough rows per level, the per-level mean of y
    # orders levels as their planted effects do (the link is monotone for binary)
    ds, truth = make_synthetic(n_rows=20_000, cardinalities=[25], zipf=0.5, effect=1.0, task=task, seed=seed)
    means, seen = _level_means(ds.X["cat0"], ds.y.to_numpy(dtype=float), 25)
    rho = stats.spearmanr(means, truth.effects["cat0"][seen]).statistic
    assert rho > 0.9


def test_planted_multiclass_effects_are_recoverable(seed):
    ds, truth = make_synthetic(
        n_rows=30_000, cardinalities=[15], zipf=0.0, effect=1.0, task="multiclass", n_classes=3, seed=seed
    )
    effects = truth.effects["cat0"]
    assert effects.shape == (15, 3)
    # a class is more frequent at levels whose effect for it exceeds the others' (common
    # practice, no source): pooled over (level, class) pairs, frequencies follow effects
    relative = effects - effects.mean(axis=1, keepdims=True)
    y = ds.y.to_numpy()
    frequency = np.column_stack([_level_means(ds.X["cat0"], (y == c).astype(float), 15)[0] for c in range(3)])
    assert stats.spearmanr(frequency.ravel(), relative.ravel()).statistic > 0.85


def test_noise_column_carries_no_signal(seed):
    ds, truth = make_synthetic(
        n_rows=20_000, cardinalities=[10], zipf=0.0, effect=0.5, noise_column=50, task="regression", seed=seed
    )
    assert truth.noise_columns == ("noise",) and ds.categorical == ("cat0", "noise")
    assert ds.X["noise"].nunique() == 50
    y = ds.y.to_numpy()
    # one-way ANOVA across levels (Fisher's F test): strong for cat0, chance level for noise
    assert stats.f_oneway(*_groups(ds.X["cat0"], y)).pvalue < 1e-10
    assert stats.f_oneway(*_groups(ds.X["noise"], y)).pvalue > 1e-3


@pytest.mark.parametrize("zipf", [0.0, 1.0, 2.0])
def test_level_frequencies_follow_the_zipf_weights(zipf, seed):
    ds, _ = make_synthetic(n_rows=50_000, cardinalities=[8], zipf=zipf, n_numeric=0, seed=seed)
    observed = np.bincount(_level_numbers(ds.X["cat0"]), minlength=8) / 50_000
    weights = np.arange(1, 9, dtype=float) ** -zipf  # p_k ∝ (k+1)^-zipf, by definition
    np.testing.assert_allclose(observed, weights / weights.sum(), atol=0.01)


def test_binary_classes_are_balanced_and_numeric_columns_present(seed):
    ds, truth = make_synthetic(n_rows=1000, cardinalities=[5, 50], n_numeric=3, task="binary", seed=seed)
    assert ds.task == "binary" and ds.numeric == ("num0", "num1", "num2")
    assert ds.fingerprint["class_counts"] == {"0": 500, "1": 500}
    assert set(truth.coefficients) == {"num0", "num1", "num2"}


def test_same_seed_same_data(seed):
    a = load("synthetic", "syn", seed=seed)
    b = load("synthetic", "syn", seed=seed)
    c = load("synthetic", "syn", seed=seed + 1)
    assert a.name == "syn" and a.source == "synthetic"
    assert a.fingerprint == b.fingerprint
    assert a.fingerprint["checksum"] != c.fingerprint["checksum"]


@pytest.mark.parametrize(
    ("keys", "pattern"),
    [
        ({"n_rows": 1}, r"`n_rows` must be an integer in \[2, 20,000,000\] .*; got 1"),
        (
            {"n_rows": 10**11},
            r"`n_rows` must be an integer in \[2, 20,000,000\] \(use a `file` dataset for larger tables\); "
            r"got 100000000000",
        ),
        ({"cardinalities": []}, r"`cardinalities` must be a non-empty list of integers in \[1, n_rows\].*; got \[\]"),
        (
            {"cardinalities": [10**12]},
            r"`cardinalities` must be .*a column cannot have more levels than rows\); got \[1000000000000\]",
        ),
        ({"cardinalities": [3, 0]}, r"`cardinalities` must be a non-empty list"),
        ({"zipf": -1.0}, r"`zipf` must be a number >= 0; got -1.0"),
        ({"effect": -0.1}, r"`effect` must be a number >= 0"),
        ({"noise_column": 0}, r"`noise_column` must be an integer in \[1, n_rows\] or left out; got 0"),
        ({"task": "ranking"}, r"`task` must be one of binary, multiclass, regression; got 'ranking'"),
        ({"task": "multiclass", "n_classes": 2}, r"`n_classes` must be an integer >= 3 for task 'multiclass'; got 2"),
        ({"n_numeric": -1}, r"`n_numeric` must be an integer >= 0"),
    ],
)
def test_invalid_parameters(keys, pattern):
    with pytest.raises(ConfigError, match=r"dataset 'syn' \(source 'synthetic'\): synthetic source: " + pattern):
        load("synthetic", "syn", **keys)


def test_keys():
    assert list(params_of("synthetic")) == [
        "n_rows",
        "cardinalities",
        "zipf",
        "effect",
        "noise_column",
        "task",
        "n_classes",
        "n_numeric",
        "seed",
    ]
