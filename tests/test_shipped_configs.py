"""Every config shipped in configs/ loads and validates; the quickstart is offline-ready."""

from __future__ import annotations

from pathlib import Path

import pytest

from harness.config import load_config
from harness.grid import build_grid

CONFIGS = sorted((Path(__file__).parents[1] / "configs").glob("*.toml"))


@pytest.mark.parametrize("path", CONFIGS, ids=[p.stem for p in CONFIGS])
def test_config_loads(path):
    cfg = load_config(path)
    assert build_grid(cfg)


def test_team_default_covers_what_it_promises():
    cfg = load_config(Path(__file__).parents[1] / "configs" / "team-default.toml")
    from harness import encoders, models

    assert len(cfg.datasets) >= 12
    # the package's own registry entries; kinds and families that a test registers at run
    # time (tests/test_recipes.py) are no part of the shipped study
    assert {e.kind for e in cfg.encoders} == set(encoders.BUILTIN_KINDS)
    assert {m.family for m in cfg.models} == set(models.BUILTIN_FAMILIES)
    schemes = {e.params.get("crossfit") for e in cfg.encoders if e.kind == "target"}
    assert {"kfold", "loo", "ordered", "holdout", "none"} <= schemes
    assert len({e.params.get("smoothing") for e in cfg.encoders if e.kind == "target"}) >= 3
    assert (cfg.protocol.folds, cfg.protocol.repeats) == (5, 2)
