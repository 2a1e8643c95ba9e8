"""DropColumns and NativeCategories: shapes, fixed categories, and models that use them."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.ensemble import HistGradientBoostingClassifier

from harness.encoders import DropColumns, NativeCategories


def make_frame(rng, n_rows: int = 80) -> pd.DataFrame:
    colors = rng.choice(["red", "green", "blue"], size=n_rows).astype(object)
    colors[rng.random(n_rows) < 0.1] = None
    frame = pd.DataFrame({"color": pd.Series(colors, dtype="str"), "size": rng.choice([3, 1, 20], size=n_rows)})
    return frame.set_axis(np.arange(100, 100 + n_rows))


def test_drop_returns_no_column(rng):
    frame = make_frame(rng)
    enc = DropColumns()
    out = enc.fit_transform(frame)
    assert out.shape == (len(frame), 0) and out.dtype == np.float64
    assert enc.get_feature_names_out().shape == (0,)


def test_native_categories_fixed_at_fit(rng):
    frame = make_frame(rng)
    enc = NativeCategories().fit(frame)
    new = pd.DataFrame({"color": ["blue", "purple", None], "size": [20, 4, 3]}, index=[7, 8, 9])
    out = enc.transform(new)
    assert isinstance(out, pd.DataFrame) and list(out.index) == [7, 8, 9]
    assert list(out["color"].cat.categories) == ["blue", "green", "red"]
    assert list(out["size"].cat.categories) == [1, 3, 20]  # numbers in numeric order
    # unseen and missing both become a missing category
    assert out["color"].isna().tolist() == [False, True, True]
    assert out["size"].isna().tolist() == [False, True, False]
    assert out.loc[7, "color"] == "blue" and out.loc[9, "size"] == 3


def test_native_output_trains_hist_gradient_boosting(rng):
    # the consumer the kind exists for: categorical_features="from_dtype"
    frame = make_frame(rng)
    y = (frame["color"] == "red").to_numpy()
    X = NativeCategories().fit_transform(frame)
    model = HistGradientBoostingClassifier(categorical_features="from_dtype", max_iter=5)
    assert model.fit(X, y).predict(X).shape == (len(frame),)
    assert model.is_categorical_.tolist() == [True, True]


def test_native_output_trains_lightgbm(rng):
    lightgbm = pytest.importorskip("lightgbm")
    frame = make_frame(rng)
    y = (frame["color"] == "red").to_numpy().astype(int)
    X = NativeCategories().fit_transform(frame)
    model = lightgbm.LGBMClassifier(n_estimators=3, min_child_samples=2, verbose=-1)
    assert model.fit(X, y).predict(X).shape == (len(frame),)
