"""The grid: one cell per dataset x encoder x model x repeat x fold, grouped in units."""

from __future__ import annotations

import pytest

from harness.config import parse_config
from harness.grid import build_grid, select, units


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


@pytest.mark.parametrize("pattern, expected", [("a", 36), ("te*", 48), ("*/codes/gb/*", 12), ("a/codes/gb/r0*", 3), ("zzz", 0)])
def test_select_by_pattern(pattern, expected):
    cells = build_grid(parse_config(_raw()))
    assert len(select(cells, pattern)) == expected
