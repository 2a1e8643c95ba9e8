"""Model families (CPU only): one builder per task type and declared capabilities.

``FAMILIES`` is the registry the config names. Each family says whether it takes sparse
input and whether it takes pandas categorical columns natively; the runner pairs the
``native`` encoder kind only with the latter and densifies sparse matrices for the others.
``register_family(family)`` adds a family at run time (tests, code outside the package); an
entry in ``FAMILIES`` is the normal route.
"""

from __future__ import annotations

import inspect
import json
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.ensemble import (
    HistGradientBoostingClassifier,
    HistGradientBoostingRegressor,
    RandomForestClassifier,
    RandomForestRegressor,
)
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.neighbors import KNeighborsClassifier, KNeighborsRegressor
from sklearn.neural_network import MLPClassifier, MLPRegressor
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.svm import SVC, SVR

from harness import _registry
from harness.errors import ConfigError, closest

__all__ = [
    "Family",
    "FAMILIES",
    "BUILTIN_FAMILIES",
    "SCALING_POLICY",
    "BlockScaler",
    "build_model",
    "family_params",
    "register_family",
    "role_params",
    "unregister_family",
]


@dataclass(frozen=True)
class Family:
    """A model family.

    Attributes
    ----------
    classifier, regressor : callable
        ``builder(seed, **params) -> estimator`` for each task type.
    sparse : bool
        Accepts scipy sparse input.
    native_categorical : bool
        Accepts pandas ``category`` columns and treats them as categories.
    scaled : bool
        Inputs are standardised first (distance- or gradient-based models).
    defaults : dict
        Parameters applied unless the config overrides them.
    skip_above_rows : int or None
        Training-fold size above which the family is skipped (with the reason recorded).
        Default of the config key ``models.<label>.skip_above_rows``.
    """

    name: str
    classifier: Callable
    regressor: Callable
    sparse: bool
    native_categorical: bool = False
    scaled: bool = False
    defaults: dict = field(default_factory=dict)
    skip_above_rows: int | None = None
    summary: str = ""


def _seeded(cls, seed_name: str | None = "random_state"):
    def build(seed: int, **params):
        if seed_name and seed_name in inspect.signature(cls).parameters:
            params.setdefault(seed_name, seed)
        return cls(**params)

    build.estimator = cls
    return build


def _svm_classifier(seed: int, **params):
    """RBF SVC with probabilities from a sigmoid (Platt) calibration on 3 internal folds.

    scikit-learn 1.9 deprecates ``SVC(probability=True)`` in favour of this construction.
    """
    from sklearn.calibration import CalibratedClassifierCV

    params.setdefault("random_state", seed)
    return CalibratedClassifierCV(SVC(**params), method="sigmoid", cv=3, ensemble=False)


_svm_classifier.estimator = SVC


def _lightgbm(kind: str):
    def build(seed: int, **params):
        import lightgbm as lgb

        cls = lgb.LGBMClassifier if kind == "classifier" else lgb.LGBMRegressor
        params.setdefault("random_state", seed)
        params.setdefault("verbosity", -1)
        params.setdefault("n_jobs", 1)
        # the row-/column-wise histogram choice is made by timing; fixing it keeps the
        # numbers identical from run to run
        params.setdefault("force_col_wise", True)
        return cls(**params)

    return build


def _hgb(cls):
    def build(seed: int, **params):
        params.setdefault("random_state", seed)
        params.setdefault("categorical_features", "from_dtype")
        return cls(**params)

    build.estimator = cls
    return build


FAMILIES: dict[str, Family] = {
    "linear": Family(
        "linear",
        _seeded(LogisticRegression),
        _seeded(Ridge),  # the seed reaches the sag/saga solvers; others ignore it
        sparse=True,
        scaled=True,
        defaults={"classifier": {"max_iter": 2000, "C": 1.0}, "regressor": {"alpha": 1.0}},
        summary="logistic regression / ridge on standardised inputs",
    ),
    "knn": Family(
        "knn",
        _seeded(KNeighborsClassifier, None),
        _seeded(KNeighborsRegressor, None),
        sparse=True,
        scaled=True,
        defaults={"classifier": {"n_neighbors": 15}, "regressor": {"n_neighbors": 15}},
        summary="k nearest neighbours on standardised inputs",
    ),
    "svm": Family(
        "svm",
        _svm_classifier,
        _seeded(SVR, None),
        sparse=True,
        scaled=True,
        skip_above_rows=20_000,
        summary="RBF support vector machine; skipped above skip_above_rows training rows",
    ),
    "forest": Family(
        "forest",
        _seeded(RandomForestClassifier),
        _seeded(RandomForestRegressor),
        sparse=True,
        defaults={
            "classifier": {"n_estimators": 100, "min_samples_leaf": 2, "n_jobs": 1},
            "regressor": {"n_estimators": 100, "min_samples_leaf": 2, "n_jobs": 1},
        },
        summary="random forest",
    ),
    "boosting": Family(
        "boosting",
        _hgb(HistGradientBoostingClassifier),
        _hgb(HistGradientBoostingRegressor),
        sparse=False,
        native_categorical=True,
        summary="scikit-learn histogram gradient boosting",
    ),
    "lightgbm": Family(
        "lightgbm",
        _lightgbm("classifier"),
        _lightgbm("regressor"),
        sparse=True,
        native_categorical=True,
        defaults={"classifier": {"n_estimators": 200}, "regressor": {"n_estimators": 200}},
        summary="LightGBM gradient boosting",
    ),
    "mlp": Family(
        "mlp",
        _seeded(MLPClassifier),
        _seeded(MLPRegressor),
        sparse=True,
        scaled=True,
        defaults={
            "classifier": {"hidden_layer_sizes": (64,), "max_iter": 200, "early_stopping": True},
            "regressor": {"hidden_layer_sizes": (64,), "max_iter": 200, "early_stopping": True},
        },
        summary="multi-layer perceptron (one hidden layer) on standardised inputs",
    ),
}
#: the families this package ships (the entries above): the shipped configs cover these;
#: ``register_family`` adds to ``FAMILIES`` only, never to this tuple
BUILTIN_FAMILIES = tuple(sorted(FAMILIES))

# keys of [models.<label>] that steer the harness rather than the estimator
HARNESS_KEYS = ("family", "skip_above_rows", "cell_timeout_s", "search")


def family_params(family: str) -> tuple[str, ...]:
    """Estimator parameter names a family accepts (union of both task types; see
    :func:`role_params` for one that only one task's estimator takes).

    LightGBM's scikit-learn classes take any keyword and hand it to the library, which
    ignores an unknown one with a warning: its names are the class's own parameters
    plus every parameter and alias the compiled library declares (``LGBM_DumpParamAliases``,
    read through ``lightgbm.basic._ConfigAliases``).
    """
    fam = _family(family)
    names = set()
    for builder in (fam.classifier, fam.regressor):
        est = getattr(builder, "estimator", None)
        if est is None:
            return lightgbm_params()
        names |= set(inspect.signature(est).parameters)
    return tuple(sorted(names))


def lightgbm_params() -> tuple[str, ...]:
    import lightgbm as lgb
    from lightgbm.basic import _ConfigAliases

    names = set(inspect.signature(lgb.LGBMModel).parameters) - {"kwargs"}
    for name, aliases in _ConfigAliases._get_all_param_aliases().items():
        names |= {name, *aliases}
    return tuple(sorted(names))


def resolved_params(family: str, params: dict | None = None) -> dict:
    """Every estimator parameter in effect, per task type: config values, the family's
    defaults and the estimator's own defaults (part of a cell's identity).

    The seed is left out: it is derived from the experiment seed and the repeat, which
    the identity holds separately.
    """
    out = {}
    for task in ("binary", "regression"):
        est = build_model(family, task, seed=0, params=dict(params or {}))
        got = est.get_params(deep=True)
        out[task] = {k: v for k, v in got.items() if not k.endswith("random_state")}
    return json.loads(json.dumps(out, sort_keys=True, default=repr))


# The one scaling policy, stated in the report's methods paragraph from this text.
SCALING_POLICY = (
    "numeric columns were median-imputed and standardised (centred, unit variance) on the "
    "training fold whatever the encoding; every categorical output column was divided by its "
    "training-fold standard deviation without centring, which keeps sparse one-hot and hashing "
    "blocks sparse and puts every encoding on the same unit-variance scale"
)


class BlockScaler(TransformerMixin, BaseEstimator):
    """The scaling policy for models on scaled inputs (linear, k-NN, SVM, MLP).

    The input is the encoded categorical block followed by ``n_numeric`` numeric columns
    (``cellwork`` builds it so). Numeric columns are standardised; categorical columns
    are divided by their standard deviation and never centred, so a sparse block stays
    sparse and a dense one is scaled by the same rule. Constant columns are left as they
    are (scale 1). Standardising inputs for distance- and gradient-based models is common
    practice, no source.

    Parameters
    ----------
    n_numeric : int, default=0
        Number of trailing numeric columns.
    """

    def __init__(self, n_numeric=0):
        self.n_numeric = n_numeric

    def fit(self, X, y=None):
        k = X.shape[1] - self.n_numeric
        self.categorical_ = StandardScaler(with_mean=False).fit(X[:, :k]) if k else None
        self.numeric_ = StandardScaler().fit(_dense(X[:, k:])) if self.n_numeric else None
        return self

    def transform(self, X):
        k = X.shape[1] - self.n_numeric
        parts = []
        if self.categorical_ is not None:
            parts.append(self.categorical_.transform(X[:, :k]))
        if self.numeric_ is not None:
            parts.append(self.numeric_.transform(_dense(X[:, k:])))
        if sp.issparse(X):
            return sp.hstack([sp.csr_matrix(p) for p in parts], format="csr")
        return np.hstack(parts) if len(parts) > 1 else parts[0]


def _dense(block):
    return block.toarray() if sp.issparse(block) else np.asarray(block, dtype=float)


def build_model(family: str, task: str, seed: int, params: dict | None = None, n_numeric: int = 0):
    """Return an unfitted estimator for ``family`` and ``task``.

    Families with ``scaled`` inputs get :class:`BlockScaler` first (``SCALING_POLICY``):
    the same rule for every encoding, dense or sparse.
    """
    fam = _family(family)
    role = "regressor" if task == "regression" else "classifier"
    merged = {**fam.defaults.get(role, {}), **role_params(family, task, params or {})}
    est = (fam.regressor if role == "regressor" else fam.classifier)(seed, **merged)
    if fam.scaled:
        return make_pipeline(BlockScaler(n_numeric), est)
    return est


def role_params(family: str, task: str, params: dict) -> dict:
    """The parameters that the family's estimator for ``task`` takes.

    A family pairs two estimators; a parameter only one of them takes applies to that
    task only (``C`` of the logistic regression, ``alpha`` of the ridge regression of the
    ``linear`` family), so one model table (or search space) serves both task types.
    """
    fam = _family(family)
    builder = fam.regressor if task == "regression" else fam.classifier
    est = getattr(builder, "estimator", None)
    if est is None:  # LightGBM takes every library parameter for both tasks
        return dict(params)
    own = set(inspect.signature(est).parameters)
    return {k: v for k, v in params.items() if k in own}


def register_family(family: Family) -> None:
    """Add ``family`` to ``FAMILIES`` under ``family.name`` at run time, as an entry there does.

    The normal route is the entry in ``FAMILIES`` (DEVELOPERS.md, "How to add a model
    family"); this hook serves tests and code outside the package. Forked workers
    (``--jobs N``) inherit it; Dask workers import the package afresh and do not.

    Raises
    ------
    ConfigError
        If the name is taken or not an identifier, or a builder lacks ``.estimator`` (the
        class whose signature lists the config keys, see :func:`family_params`; ``_seeded``
        sets it).
    """
    name = family.name
    for role in ("classifier", "regressor"):
        if not isinstance(getattr(getattr(family, role), "estimator", None), type):
            raise ConfigError(
                f"model family '{name}': its {role} builder needs an `estimator` attribute, the "
                "estimator class whose parameters are the config keys; wrap the class with "
                "harness.models._seeded(cls)."
            )
    _registry.add(FAMILIES, name, family, "model family")


def unregister_family(name: str) -> None:
    """Remove a family that :func:`register_family` added.

    Raises
    ------
    ConfigError
        If ``name`` ships with the package (``BUILTIN_FAMILIES``) or is not registered.
    """
    _registry.remove(FAMILIES, BUILTIN_FAMILIES, name, "model family", "register_family")


def _family(name: str) -> Family:
    try:
        return FAMILIES[name]
    except KeyError:
        allowed = sorted(FAMILIES)
        raise ConfigError(
            f"unknown model family '{name}'; allowed: {', '.join(allowed)}.{closest(name, allowed)}"
        ) from None
