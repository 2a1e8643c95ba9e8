"""Every key is checked at load: model parameters by name (LightGBM's aliases included)
and by a probe fit, numeric limits, the grid-size cap and its override."""

from __future__ import annotations

import pytest

from harness.cli import main
from harness.config import DEFAULT_MAX_CELLS, parse_config
from harness.errors import ConfigError


def _raw(model=None, encoder=None, execution=None):
    raw = {
        "experiment": {"name": "checks"},
        "protocol": {"folds": 2},
        "datasets": {"a": {"source": "synthetic", "n_rows": 60, "cardinalities": [3], "task": "binary"}},
        "encoders": {"e": encoder or {"kind": "integer"}},
        "models": {"m": model or {"family": "linear"}},
    }
    if execution:
        raw["execution"] = execution
    return raw


@pytest.mark.parametrize(
    "params", [{"num_iterations": 5}, {"min_data_in_leaf": 3, "n_estimators": 5}, {"lambda_l2": 1.0}]
)
def test_lightgbm_documented_names_and_aliases_pass(params):
    # names and aliases as LightGBM's own parameter table declares them (LGBM_DumpParamAliases)
    parse_config(_raw({"family": "lightgbm", **params}))


def test_lightgbm_typo_is_refused_with_the_closest_name():
    with pytest.raises(ConfigError, match="no parameter 'n_estimator'.*Closest match: 'n_estimators'"):
        parse_config(_raw({"family": "lightgbm", "n_estimator": 50}))


@pytest.mark.parametrize(
    "encoder, hint",
    [
        ({"kind": "target", "crossfit": "kfolds"}, "'kfold'"),  # a value outside the rules
        ({"kind": "target", "smoothin": "m-estimate"}, "'smoothing'"),  # an unknown parameter
    ],
)
def test_encoder_typo_hint_reads_as_sentences(encoder, hint):
    # the hint is wrapped by "... Fix the value of that key."; it once read "'kfold'?. Fix"
    with pytest.raises(ConfigError) as info:
        parse_config(_raw(encoder=encoder))
    text = str(info.value)
    assert f"Closest match: {hint}. Fix the value of that key." in text
    assert "?." not in text and ".." not in text


@pytest.mark.parametrize(
    "family, key, value",
    [("mlp", "alpha", -1.0), ("knn", "n_neighbors", 0), ("svm", "C", "x"), ("boosting", "max_iter", "many")],
)
def test_probe_fit_rejects_bad_values_of_every_family(family, key, value):
    with pytest.raises(ConfigError, match=rf"`models.m` .* the {family} estimator rejects its parameters \({key} = "):
        parse_config(_raw({"family": family, key: value}))


def test_grid_size_cap_has_an_override():
    values = [float(v) for v in range(DEFAULT_MAX_CELLS // 2 + 1)]
    with pytest.raises(ConfigError, match="more than `execution.max_cells`"):
        parse_config(_raw(encoder={"kind": "target", "m": values}))
    small = [1.0, 2.0, 3.0]
    cfg = parse_config(_raw(encoder={"kind": "target", "m": small}, execution={"max_cells": 6}))
    assert len(cfg.encoders) == 3
    with pytest.raises(ConfigError, match="describes 6 cells .* more than `execution.max_cells` = 5"):
        parse_config(_raw(encoder={"kind": "target", "m": small}, execution={"max_cells": 5}))


def test_jobs_option_is_capped_at_a_multiple_of_the_cores(capsys, tmp_path):
    import os

    code = main(["run", "configs/quickstart.toml", "--jobs", "100000", "--dry-run", "--out", str(tmp_path)])
    err = " ".join(capsys.readouterr().err.split())
    assert code == 2
    assert f"--jobs must be at most 4 x the {os.cpu_count()} core(s)" in err and "Traceback" not in err


def test_nan_anywhere_is_refused():
    raw = _raw(encoder={"kind": "target", "noise": float("nan")})
    with pytest.raises(ConfigError, match=r"`encoders.e.noise` .* must be a finite number; got nan"):
        parse_config(raw)


def test_a_bound_set_by_the_probe_tables_size_is_left_to_the_data():
    # max_samples = 1000 exceeds the 40-row probe table but is valid on a larger dataset
    parse_config(_raw({"family": "forest", "max_samples": 1000}))
    with pytest.raises(ConfigError, match=r"rejects its parameters \(max_samples = -3\)"):
        parse_config(_raw({"family": "forest", "max_samples": -3}))
