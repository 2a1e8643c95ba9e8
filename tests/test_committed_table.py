"""A results directory that ships its exported table but no store (the committed sample):
``status``, ``export`` and ``report`` read the table, and a run starts its store from it,
so only cells the table lacks are computed."""

from __future__ import annotations

import pandas as pd
import pytest

from _runtools import RESULT_COLUMNS, run, tiny_config

ENCODERS = {"codes": "integer", "freq": "frequency"}


def _config(path, encoders=ENCODERS):
    return tiny_config(path, n_rows=120, cardinalities=(4, 9), encoders=encoders)


def _shipped(tmp_path):
    """A finished run with its store removed: what a repository commits."""
    config = _config(tmp_path / "tiny.toml")
    out = tmp_path / "sample"
    assert run("run", config, "--out", out, "--quiet").returncode == 0
    for p in out.glob("results.sqlite*"):
        p.unlink()
    (out / "results.csv").unlink()
    return config, out


@pytest.mark.slow
def test_status_export_and_report_read_the_committed_table(tmp_path):
    _, out = _shipped(tmp_path)
    status = run("status", out)
    assert status.returncode == 0, status.stderr
    assert "4 finished, 0 missing" in status.stdout
    assert "no results store" in status.stderr and "results.parquet" in status.stderr
    exported = run("export", out, "--to", tmp_path / "copy.csv")
    assert exported.returncode == 0, exported.stderr
    assert len(pd.read_csv(tmp_path / "copy.csv")) == 4
    report = run("report", out, "--out", tmp_path / "rep")
    assert report.returncode == 0, report.stderr
    assert (tmp_path / "rep" / "report" / "report.md").is_file()
    assert not list(out.glob("results.sqlite*"))  # readers create no store


@pytest.mark.slow
def test_a_run_starts_its_store_from_the_table_and_computes_only_new_cells(tmp_path):
    config, out = _shipped(tmp_path)
    before = pd.read_parquet(out / "results.parquet").set_index("cell_id").sort_index()
    dry = run("run", config, "--out", out, "--dry-run")
    assert dry.returncode == 0 and "0 to compute, 4 already" in dry.stdout, dry.stdout
    _config(config, {**ENCODERS, "hot": "onehot"})
    dry = run("run", config, "--out", out, "--dry-run")
    assert "2 to compute, 4 already" in dry.stdout, dry.stdout
    done = run("run", config, "--out", out, "--quiet")
    assert done.returncode == 0, done.stderr
    after = pd.read_parquet(out / "results.parquet").set_index("cell_id").sort_index()
    assert len(after) == 6 and set(after["encoder"]) == {"codes", "freq", "hot"}
    kept = after.loc[before.index, RESULT_COLUMNS]
    pd.testing.assert_frame_equal(kept, before[RESULT_COLUMNS])  # the table's rows, unchanged


def test_a_damaged_committed_table_is_a_store_problem_with_the_next_step(tmp_path):
    out = tmp_path / "sample"
    out.mkdir()
    (out / "results.parquet").write_bytes(b"PAR1 not really")
    status = run("status", out)
    err = " ".join(status.stderr.split())
    assert status.returncode == 3 and "Traceback" not in err
    assert "results.parquet cannot be read" in err and "restore it" in err


@pytest.mark.slow
@pytest.mark.parametrize(
    ("config", "sample"),
    [("configs/team-default.toml", "results/team-default"), ("configs/tuned-sample.toml", "results/tuned-sample")],
)
def test_each_committed_sample_holds_every_cell_of_its_shipped_config(config, sample, tmp_path):
    # a change to a cell's identity (a model's parameters, a seed) without regenerating
    # the sample would make a run into it recompute those cells: README promises it does not
    import shutil

    from _runtools import ROOT

    for name in ("results.parquet", "manifest.json"):
        shutil.copy(ROOT / sample / name, tmp_path / name)
    dry = run("run", ROOT / config, "--out", tmp_path, "--dry-run")
    assert dry.returncode == 0, dry.stderr
    n = len(pd.read_parquet(tmp_path / "results.parquet"))
    head = dry.stdout.splitlines()[0]
    assert f"= {n} cells; 0 to compute, {n} already in" in head
    assert "set aside" not in dry.stdout
    if "tuned" in config:  # half the cells under each regime: the header says so, not a product
        assert f"under 2 tuning regimes (defaults {n // 2}, tuned-model {n // 2}) = {n} cells" in head
