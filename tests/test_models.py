"""``harness.models.build_model``: the estimator each family builds per task, parameters
passed through over the family defaults, the seed, the scaling policy, unknown names."""

from __future__ import annotations

import lightgbm as lgb
import numpy as np
import pytest
from sklearn.calibration import CalibratedClassifierCV
from sklearn.ensemble import (
    HistGradientBoostingClassifier,
    HistGradientBoostingRegressor,
    RandomForestClassifier,
    RandomForestRegressor,
)
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.neighbors import KNeighborsClassifier, KNeighborsRegressor
from sklearn.neural_network import MLPClassifier, MLPRegressor
from sklearn.pipeline import Pipeline
from sklearn.svm import SVC, SVR

from harness.errors import ConfigError
from harness.models import FAMILIES, BlockScaler, build_model

#: family -> (classifier class, regressor class, scaled inputs)
EXPECTED = {
    "linear": (LogisticRegression, Ridge, True),
    "knn": (KNeighborsClassifier, KNeighborsRegressor, True),
    "svm": (CalibratedClassifierCV, SVR, True),
    "forest": (RandomForestClassifier, RandomForestRegressor, False),
    "boosting": (HistGradientBoostingClassifier, HistGradientBoostingRegressor, False),
    "lightgbm": (lgb.LGBMClassifier, lgb.LGBMRegressor, False),
    "mlp": (MLPClassifier, MLPRegressor, True),
}
TASKS = ("binary", "multiclass", "regression")
#: estimators that take no seed at all (deterministic)
UNSEEDED = {("knn", "binary"), ("knn", "multiclass"), ("knn", "regression"), ("svm", "regression")}


def _final(model):
    """The estimator itself, behind the scaler of a scaled family."""
    return model.steps[-1][1] if isinstance(model, Pipeline) else model


def _seeded_estimator(model):
    """The estimator that holds the seed (the SVC inside the calibration wrapper)."""
    est = _final(model)
    return est.estimator if isinstance(est, CalibratedClassifierCV) else est


def test_every_family_has_an_expectation():
    assert set(EXPECTED) == set(FAMILIES)  # a new family gets its row in EXPECTED
    assert {name: fam.scaled for name, fam in FAMILIES.items()} == {
        name: scaled for name, (_, _, scaled) in EXPECTED.items()
    }


@pytest.mark.parametrize("task", TASKS)
@pytest.mark.parametrize("family", sorted(EXPECTED))
def test_family_builds_its_estimator_for_each_task(family, task):
    classifier, regressor, scaled = EXPECTED[family]
    model = build_model(family, task, seed=0, n_numeric=2)
    assert type(_final(model)) is (regressor if task == "regression" else classifier)
    if scaled:  # models.SCALING_POLICY: the block scaler first, told the numeric columns
        assert isinstance(model, Pipeline) and len(model.steps) == 2
        assert isinstance(model.steps[0][1], BlockScaler) and model.steps[0][1].n_numeric == 2
    else:
        assert not isinstance(model, Pipeline)
        assert not any(isinstance(s, BlockScaler) for s in model.get_params(deep=True).values())


def test_svm_classifier_is_a_platt_calibrated_svc():
    model = _final(build_model("svm", "binary", seed=0, params={"C": 3.0}))
    assert type(model.estimator) is SVC and model.estimator.C == 3.0
    assert (model.method, model.cv, model.ensemble) == ("sigmoid", 3, False)


@pytest.mark.parametrize(
    "family, task",
    [(f, t) for f in sorted(EXPECTED) for t in TASKS if (f, t) not in UNSEEDED and (f, t) != ("linear", "regression")],
)  # ridge: see below
def test_seed_is_set_where_the_estimator_takes_one(family, task):
    assert _seeded_estimator(build_model(family, task, seed=1234)).random_state == 1234
    assert _seeded_estimator(build_model(family, task, seed=7)).random_state == 7


@pytest.mark.parametrize("family, task", sorted(UNSEEDED))
def test_estimators_without_a_seed_take_none(family, task):
    assert "random_state" not in _seeded_estimator(build_model(family, task, seed=1)).get_params()


def test_ridge_gets_the_seed():
    """Ridge's sag/saga solvers, settable from the config, draw random numbers."""
    assert _final(build_model("linear", "regression", seed=1234)).random_state == 1234


@pytest.mark.parametrize("family", ["linear", "forest", "boosting", "lightgbm", "mlp"])
def test_a_configured_random_state_wins_over_the_seed(family):
    est = _final(build_model(family, "binary", seed=1, params={"random_state": 99}))
    assert est.random_state == 99


@pytest.mark.parametrize(
    "family, task, params",
    [
        ("linear", "binary", {"C": 0.25, "penalty": "l2"}),
        ("linear", "regression", {"alpha": 3.0}),
        ("knn", "multiclass", {"n_neighbors": 4, "weights": "distance"}),
        ("svm", "regression", {"C": 2.0, "epsilon": 0.2}),
        ("forest", "binary", {"n_estimators": 7, "max_depth": 3}),
        ("boosting", "regression", {"max_iter": 11, "learning_rate": 0.3}),
        ("lightgbm", "multiclass", {"n_estimators": 9, "num_leaves": 5}),
        ("mlp", "regression", {"hidden_layer_sizes": (8, 4), "alpha": 0.01}),
    ],
)
def test_config_params_pass_through_and_override_the_defaults(family, task, params):
    given = dict(params)
    est = _final(build_model(family, task, seed=0, params=given))
    got = est.get_params()
    assert {k: got[k] for k in params} == params
    assert given == params  # the caller's dict is not modified
    role = "regressor" if task == "regression" else "classifier"
    for key, default in FAMILIES[family].defaults.get(role, {}).items():  # the rest stay
        if key not in params:
            assert got[key] == default


@pytest.mark.parametrize(
    "family, task, defaults",
    [
        ("linear", "binary", {"max_iter": 2000, "C": 1.0}),
        ("linear", "regression", {"alpha": 1.0}),
        ("knn", "binary", {"n_neighbors": 15}),
        ("forest", "regression", {"n_estimators": 100, "min_samples_leaf": 2, "n_jobs": 1}),
        ("boosting", "binary", {"categorical_features": "from_dtype"}),
        # force_col_wise: LightGBM otherwise picks its histogram layout by timing
        ("lightgbm", "regression", {"n_estimators": 200, "verbosity": -1, "n_jobs": 1, "force_col_wise": True}),
        ("mlp", "multiclass", {"hidden_layer_sizes": (64,), "max_iter": 200, "early_stopping": True}),
    ],
)
def test_family_defaults_apply(family, task, defaults):
    got = _final(build_model(family, task, seed=0)).get_params()
    assert {k: got[k] for k in defaults} == defaults


def test_builds_do_not_share_state():
    a = build_model("linear", "binary", seed=0, params={"C": 0.1})
    b = build_model("linear", "binary", seed=0)
    assert _final(a).C == 0.1 and _final(b).C == 1.0 and _final(a) is not _final(b)
    assert FAMILIES["linear"].defaults["classifier"] == {"max_iter": 2000, "C": 1.0}


@pytest.mark.parametrize("task", TASKS)
@pytest.mark.parametrize("family", sorted(EXPECTED))
def test_built_estimator_fits_and_predicts(family, task, rng):
    # tiny invented data: three numeric columns, a target that depends on the first
    X = rng.normal(size=(60, 3))
    y = {
        "binary": (X[:, 0] > 0).astype(int),
        "multiclass": np.digitize(X[:, 0], [-0.5, 0.5]),
        "regression": X[:, 0] + rng.normal(0, 0.1, 60),
    }[task]
    params = {"n_estimators": 5} if family in ("forest", "lightgbm") else {}
    model = build_model(family, task, seed=0, params=params, n_numeric=3).fit(X, y)
    if task == "regression":
        assert model.predict(X).shape == (60,)
    else:
        proba = model.predict_proba(X)
        assert proba.shape == (60, len(np.unique(y)))
        np.testing.assert_allclose(proba.sum(axis=1), 1.0, atol=1e-9)


@pytest.mark.parametrize(
    "name, pattern",
    [
        (
            "tabnet",
            (
                r"unknown model family 'tabnet'; allowed: boosting, forest, knn, lightgbm, "
                r"linear, mlp, svm\.$"
            ),
        ),
        ("forrest", r"unknown model family 'forrest'; allowed: .*\. Closest match: 'forest'\.$"),
    ],
)
def test_unknown_family_is_refused(name, pattern):
    with pytest.raises(ConfigError, match=pattern):
        build_model(name, "binary", seed=0)
