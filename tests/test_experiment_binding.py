"""One results directory, one experiment: a cell's identity holds everything that sets its
numbers, a rerun computes exactly the changed cells, and rows of cells no longer in the
config are set aside as superseded (kept, never pooled)."""

from __future__ import annotations

import copy

import pandas as pd
import pytest

from harness.cli import main
from harness.config import parse_config
from harness.runner import execute, plan
from harness.store import Store, read_results, read_set_aside


def _raw(csv=None):
    # invented table for a demo of reruns: 120 rows, 2 folds, 2 encoders x 1 model
    data = {"source": "synthetic", "n_rows": 120, "cardinalities": [5], "task": "binary", "seed": 3}
    if csv is not None:
        data = {"source": "file", "path": str(csv), "target": "y"}
    return {
        "experiment": {"name": "bind", "seed": 1},
        "protocol": {"folds": 2},
        "datasets": {"t": data},
        "encoders": {"codes": {"kind": "integer"}, "te": {"kind": "target", "m": 10.0}},
        "models": {"lgb": {"family": "lightgbm", "n_estimators": 20}},
    }


def _run(raw, out):
    return execute(plan(parse_config(raw)), out, progress=False)


N_CELLS = 1 * 2 * 1 * 2  # datasets x encoders x models x folds


@pytest.mark.parametrize(
    "change, recomputed, reason",
    [
        (lambda r: r["models"]["lgb"].update(n_estimators=10), N_CELLS, "other model parameters"),
        (lambda r: r["encoders"]["te"].update(m=1.0), 2, "other encoder parameters"),
        (lambda r: r["protocol"].update(folds=3), 3 * 2, "another protocol"),
        (lambda r: r["experiment"].update(seed=2), N_CELLS, "another experiment seed"),
    ],
    ids=["n_estimators", "m", "folds", "seed"],
)
def test_changed_setting_under_the_same_label_recomputes_and_sets_old_rows_aside(tmp_path, change, recomputed, reason):
    raw = _raw()
    _run(raw, tmp_path)
    first = read_results(tmp_path)
    changed = copy.deepcopy(raw)
    change(changed)
    summary = _run(changed, tmp_path)
    assert summary.computed == recomputed
    df = read_results(tmp_path)
    assert len(df) == summary.total  # one row per cell of the current grid, never pooled
    assert df.groupby(["dataset", "encoder", "model", "repeat", "fold"]).size().max() == 1
    aside = read_set_aside(tmp_path)
    assert sum(aside.values()) == len(set(first["cell_id"]) - set(df["cell_id"]))
    assert any(reason in r for r in aside), aside


def test_removed_encoder_is_set_aside_and_absent_from_report_and_export(tmp_path, capsys):
    _run(_raw(), tmp_path)
    raw = _raw()
    del raw["encoders"]["te"]
    summary = _run(raw, tmp_path)
    assert summary.computed == 0 and summary.reused == 2
    assert set(read_results(tmp_path)["encoder"]) == {"codes"}
    assert read_set_aside(tmp_path) == {"encoder 'te' is no longer in the config": 2}
    assert main(["export", str(tmp_path), "--to", str(tmp_path / "x.csv")]) == 0
    err = " ".join(capsys.readouterr().err.split())
    assert set(pd.read_csv(tmp_path / "x.csv")["encoder"]) == {"codes"}
    assert "2 row(s) of cells no longer in the current config were set aside" in err
    assert "encoder 'te' is no longer in the config: 2" in err


def test_returning_to_an_earlier_config_restores_its_rows(tmp_path):
    _run(_raw(), tmp_path)
    raw = _raw()
    raw["encoders"]["te"]["m"] = 1.0
    _run(raw, tmp_path)
    summary = _run(_raw(), tmp_path)
    assert summary.computed == 0
    assert read_set_aside(tmp_path) == {"other encoder parameters": 2}


def test_replaced_file_under_the_same_path_recomputes(tmp_path):
    csv = tmp_path / "data.csv"
    # invented table: a colour column and a binary outcome
    frame = pd.DataFrame({"c": list("abcab") * 16, "x": range(80), "y": [0, 1] * 40})
    frame.to_csv(csv, index=False)
    out = tmp_path / "out"
    _run(_raw(csv), out)
    assert _run(_raw(csv), out).computed == 0  # same content: nothing to do
    frame.assign(y=[1, 0] * 40).to_csv(csv, index=False)
    summary = _run(_raw(csv), out)
    assert summary.computed == N_CELLS
    assert read_set_aside(out) == {"other dataset content or source settings": N_CELLS}
    assert len(read_results(out)) == N_CELLS


def test_code_version_is_part_of_the_identity(monkeypatch):
    from harness import grid

    before = {c.cell_id for c in grid.build_grid(parse_config(_raw()))}
    monkeypatch.setattr(grid, "CODE_VERSION", grid.CODE_VERSION + 1)
    after = {c.cell_id for c in grid.build_grid(parse_config(_raw()))}
    assert before.isdisjoint(after)


def test_default_change_changes_the_identity(monkeypatch):
    """Resolved parameters, not the config text: a changed family default is a new cell."""
    from harness import grid, models

    before = {c.cell_id for c in grid.build_grid(parse_config(_raw()))}
    fam = models.FAMILIES["lightgbm"]
    changed = type(fam)(**{**fam.__dict__, "defaults": {"classifier": {"n_estimators": 7}, "regressor": {}}})
    monkeypatch.setitem(models.FAMILIES, "lightgbm", changed)
    raw = _raw()
    del raw["models"]["lgb"]["n_estimators"]
    plain = {c.cell_id for c in grid.build_grid(parse_config(raw))}
    monkeypatch.setitem(models.FAMILIES, "lightgbm", fam)
    assert plain.isdisjoint({c.cell_id for c in grid.build_grid(parse_config(raw))})
    assert before.isdisjoint(plain)


def test_status_shows_finished_missing_and_superseded(tmp_path, capsys):
    _run(_raw(), tmp_path)
    raw = _raw()
    raw["encoders"]["freq"] = {"kind": "frequency"}
    del raw["encoders"]["te"]
    cfg = parse_config(raw)
    the_plan = plan(cfg, "*codes*")  # run only part of the new grid
    execute(the_plan, tmp_path, progress=False)
    capsys.readouterr()
    assert main(["status", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "4 cells in the current grid: 2 finished, 2 missing; 2 superseded rows set aside" in out
    assert "superseded (2 rows): encoder 'te' is no longer in the config" in out


def test_report_uses_the_current_grid_and_says_what_it_set_aside(tmp_path):
    from harness.reporting.report import load_run

    _run(_raw(), tmp_path)
    raw = _raw()
    del raw["encoders"]["te"]
    _run(raw, tmp_path)
    run = load_run(tmp_path)
    assert set(run.results["encoder"]) == {"codes"}
    assert run.set_aside == {"encoder 'te' is no longer in the config": 2}


def test_version_1_store_is_upgraded_by_a_writer(tmp_path):
    import sqlite3

    _run(_raw(), tmp_path)
    db = sqlite3.connect(tmp_path / "results.sqlite")
    db.execute("DROP TABLE grid")
    db.execute("DROP TABLE superseded")
    db.execute("UPDATE meta SET value='1' WHERE key='schema_version'")
    db.commit()
    db.close()
    assert read_set_aside(tmp_path) == {}  # a reader opens it unchanged
    summary = _run(_raw(), tmp_path)  # a writer upgrades it; identical cells are reused
    assert summary.computed == 0
    with Store(tmp_path, lock=False, create=False) as store:
        assert len(store.grid()) == N_CELLS
