"""The runner under faults: hard kills, Ctrl-C, two runs on one directory, cells that
raise, time out or run out of memory, dying workers (process pool and Dask), and damaged
or foreign results stores at the command line.

Each fault ends with the same two checks: the store holds exactly one row per cell of
the grid, and the numbers equal those of an uninterrupted run of the same config.
"""

from __future__ import annotations

import os
import re
import signal
import sqlite3
import subprocess
import sys
import time

import numpy as np
import psutil
import pytest

from harness.cli import main
from harness.config import load_config, parse_config
from harness.grid import SCHEMA_VERSION
from harness.runner import execute, plan
from harness.store import Store, read_results

from _runtools import (
    CONFIGS,
    assert_clean_refusal,
    assert_same_results,
    count_rows,
    integrity,
    results_by_cell,
    run,
    start,
    store_rows,
    tiny_config,
    wait_for_rows,
)

KILL_CONFIG = CONFIGS / "kill.toml"
SMALL_CONFIG = CONFIGS / "small.toml"


def _grid_ids(path) -> list[str]:
    return sorted(c.cell_id for c in plan(load_config(path)).cells)


@pytest.fixture(scope="module")
def small_reference(tmp_path_factory):
    """An uninterrupted in-process run of the small config: the numbers to match."""
    out = tmp_path_factory.mktemp("small_reference")
    execute(plan(load_config(SMALL_CONFIG)), out, progress=False)
    return results_by_cell(out)


@pytest.fixture(scope="module")
def kill_reference(tmp_path_factory):
    """An uninterrupted in-process run of the 360-cell config: the numbers to match."""
    out = tmp_path_factory.mktemp("kill_reference")
    execute(plan(load_config(KILL_CONFIG)), out, progress=False)
    return results_by_cell(out)


def _workers(proc) -> list[psutil.Process]:
    """Descendants of a harness process that run harness code (not the resource tracker)."""
    try:
        kids = psutil.Process(proc.pid).children(recursive=True)
    except psutil.NoSuchProcess:
        return []
    return [k for k in kids if "resource_tracker" not in " ".join(_cmdline(k))]


def _cmdline(p) -> list[str]:
    try:
        return p.cmdline()
    except psutil.Error:
        return []


def _assert_complete(out, config_path, reference=None) -> None:
    df = results_by_cell(out)
    assert list(df.index) == _grid_ids(config_path)  # one row per cell: none lost, none twice
    assert integrity(out) == "ok"
    if reference is not None:
        assert_same_results(df, reference)


# --------------------------------------------------------------------------- hard kill
def _kill_round(out, proc, rng, during_startup: bool, before: int) -> dict:
    """Let ``proc`` reach a random point, SIGKILL it and check what it leaves behind."""
    if during_startup:  # imports, data loading, opening the store
        time.sleep(rng.uniform(0.2, 2.0))
    else:  # mid-run: after this process committed at least one unit, plus a random delay
        wait_for_rows(out, before + 1, proc)
        time.sleep(rng.uniform(0.0, 1.2))
    workers = _workers(proc)
    if proc.poll() is not None:  # finished before the kill point: it must have succeeded
        assert proc.returncode == 0, proc.communicate()[1]  # e.g. refused: lock still held
        return {"killed": False, "rows": count_rows(out)}
    proc.kill()
    proc.communicate()
    # forked pool workers die with the driver (they used to live on, holding the lock)
    _, alive = psutil.wait_procs(workers, timeout=15)
    assert not alive, f"workers outlived the killed driver: {alive}"
    # the kernel released the flock: a new writer takes the lock at once; the file is sound
    with Store(out) as store:
        rows = len(store.done_ids())
    assert integrity(out) == "ok"
    assert rows >= before  # committed units are never lost
    return {"killed": True, "rows": rows}


@pytest.mark.slow
def test_sigkill_at_random_points_loses_and_duplicates_nothing(tmp_path, seed):
    rng = np.random.default_rng(seed)
    out = tmp_path / "killed"
    started = time.perf_counter()
    log, rows = [], 0
    for round_ in range(12):
        jobs = 1 + round_ % 2  # in-process and forked workers alike
        proc = start("run", KILL_CONFIG, "--out", out, "--quiet", "--jobs", jobs)
        outcome = _kill_round(out, proc, rng, during_startup=round_ < 2, before=rows)
        log.append({"round": round_, "jobs": jobs, **outcome})
        rows = max(outcome["rows"], rows)
    kills = sum(entry["killed"] for entry in log)
    final = run("run", KILL_CONFIG, "--out", out, "--quiet")
    assert final.returncode == 0, final.stderr
    total = len(_grid_ids(KILL_CONFIG))
    assert f"{total} cells ({total - rows} computed, {rows} reused)" in final.stdout  # resumed
    killed_s = time.perf_counter() - started
    reference = tmp_path / "uninterrupted"
    t0 = time.perf_counter()
    execute(plan(load_config(KILL_CONFIG)), reference, progress=False)
    print(
        f"\n{kills} SIGKILLs; rows after each: {[e['rows'] for e in log]}; "
        f"killed+resumed run {killed_s:.1f} s, uninterrupted {time.perf_counter() - t0:.1f} s"
    )
    assert kills >= 10
    assert 0 < rows < total  # the kills really fell mid-run
    _assert_complete(out, KILL_CONFIG, results_by_cell(reference))


def test_forked_child_does_not_keep_the_run_lock(tmp_path):
    """A forked child of a killed writer must not hold the lock (flock follows the fd)."""
    done = subprocess.run(
        [sys.executable, str(CONFIGS / "fork_and_die.py"), str(tmp_path)], capture_output=True, text=True, timeout=60
    )
    assert done.returncode == -signal.SIGKILL, done.stderr
    child = psutil.Process(int(done.stdout.split()[0]))
    try:
        assert child.is_running()
        Store(tmp_path).close()  # would raise "another `levelfold run` is writing" before the fix
    finally:
        child.kill()


# --------------------------------------------------------------------------- Ctrl-C
@pytest.mark.slow
@pytest.mark.parametrize(("jobs", "whom"), [(1, "process"), (2, "process"), (2, "group")])
def test_ctrl_c_exits_130_promptly_and_resumes(tmp_path, jobs, whom, kill_reference):
    """SIGINT to the driver, or to its whole process group as a terminal's Ctrl-C does."""
    out = tmp_path / "run"
    # the 360-cell config: the 72 cells of small.toml can all finish between the first row
    # seen and the signal on a quiet machine, and then the run rightly exits 0
    proc = start("run", KILL_CONFIG, "--out", out, "--quiet", "--jobs", jobs, group=True)
    assert wait_for_rows(out, 1, proc) > 0
    sent = time.perf_counter()
    if whom == "group":
        os.killpg(proc.pid, signal.SIGINT)
    else:
        proc.send_signal(signal.SIGINT)
    stdout, stderr = proc.communicate(timeout=60)
    took = time.perf_counter() - sent
    print(f"\nexit {proc.returncode} {took:.2f} s after SIGINT (jobs {jobs}, to the {whom})")
    assert proc.returncode == 130, (stderr, count_rows(out))  # all rows: it ended before the signal
    assert took < 10
    assert "interrupted: finished cells are kept in the store; rerun the same command to resume." in stderr
    assert "Traceback" not in stderr and "internal error" not in stderr
    kept = count_rows(out)
    assert integrity(out) == "ok" and 0 < kept < len(kill_reference)
    assert f"({kept} computed, 0 reused)" in stdout  # what was written, not what was planned
    rerun = run("run", KILL_CONFIG, "--out", out, "--quiet", "--jobs", jobs)
    assert rerun.returncode == 0, rerun.stderr
    assert f"{kept} reused" in rerun.stdout
    _assert_complete(out, KILL_CONFIG, kill_reference)


# --------------------------------------------------------------------------- two runs at once
@pytest.mark.slow
def test_second_run_on_same_directory_is_refused(tmp_path):
    out = tmp_path / "shared"
    # the longer config: the first run must still hold the lock when the second has loaded
    first = start("run", KILL_CONFIG, "--out", out, "--quiet")
    assert wait_for_rows(out, 1, first) > 0
    second = run("run", KILL_CONFIG, "--out", out, "--quiet", "--jobs", 2)
    status = run("status", out)  # a reader needs no lock, even mid-run
    assert first.poll() is None, "the first run ended too early to test the lock"
    flat = assert_clean_refusal(second, code=3)
    assert f"another `levelfold run` is writing to {out}" in flat and "pass a different --out" in flat
    assert status.returncode == 0 and "rows" in status.stdout, status.stderr
    stdout, stderr = first.communicate(timeout=600)
    assert first.returncode == 0, stderr
    _assert_complete(out, KILL_CONFIG)


# --------------------------------------------------------------------------- failing cells
def _faulty_raw(jobs: int) -> dict:
    return {
        "experiment": {"name": "faults", "seed": 2},
        "protocol": {"folds": 2},
        "datasets": {
            "d": {"source": "synthetic", "n_rows": 600, "cardinalities": [5, 20], "task": "binary", "seed": 1}
        },
        "encoders": {
            "codes": {"kind": "integer"},
            # 2**22 hash columns stay sparse, but a dense-only family densifies them:
            # 300 rows x 4M x 8 bytes = 10 GB, far above the cap below
            "huge": {"kind": "hashing", "width": 2**22},
        },
        "models": {
            "lin": {"family": "linear"},
            # valid at load (a probe fit passes) but more neighbours than the 300 training
            # rows: raises at prediction
            "bad": {"family": "knn", "n_neighbors": 500},
            "slow": {"family": "forest", "n_estimators": 3000, "cell_timeout_s": 0.3},
            "gb": {"family": "boosting", "max_iter": 10},
        },
        # the cap is what keeps the densification above from reaching the OOM killer
        "execution": {"jobs": jobs, "cell_memory_mb": 1024},
    }


@pytest.mark.parametrize("jobs", [1, 2])
def test_raising_slow_and_oversized_cells_become_rows(tmp_path, jobs):
    summary = execute(plan(parse_config(_faulty_raw(jobs))), tmp_path, progress=False)
    assert not summary.interrupted
    df = read_results(tmp_path)
    assert len(df) == summary.total == 2 * 4 * 2
    status = df.set_index(["encoder", "model", "fold"])["status"]
    for fold in (0, 1):
        assert status["codes", "lin", fold] == "ok" and status["codes", "gb", fold] == "ok"
        assert status["codes", "bad", fold] == status["huge", "bad", fold] == "failed"
        assert status["codes", "slow", fold] == status["huge", "slow", fold] == "timeout"
        assert status["huge", "gb", fold] == "out-of-memory"
        # a sparse family may or may not fit 4M coefficients under the cap; never a crash
        assert status["huge", "lin", fold] in {"ok", "out-of-memory"}
    errors = df.groupby("status")["error"].first()
    assert "ValueError" in errors["failed"] and "n_neighbors" in errors["failed"]
    assert errors["timeout"] == "cell exceeded the time limit of 0.3 s (models.slow.cell_timeout_s)"
    assert "execution.cell_memory_mb" in errors["out-of-memory"]
    assert (df.loc[df["status"] == "ok", "roc_auc"].between(0, 1)).all()


# --------------------------------------------------------------------------- dying workers
def _kill_one_worker(proc, out, match: str) -> int:
    """Wait until cells are being computed, then SIGKILL one worker process; its pid."""
    assert wait_for_rows(out, 1, proc) > 0
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        workers = [w for w in _workers(proc) if match in " ".join(_cmdline(w))]
        if workers:
            workers[0].kill()
            assert count_rows(out) < len(_grid_ids(SMALL_CONFIG))  # mid-run, not after
            return workers[0].pid
        time.sleep(0.1)
    raise AssertionError("no worker process found")


@pytest.mark.slow
def test_pool_worker_killed_mid_run_is_retried(tmp_path, small_reference):
    out = tmp_path / "pool"
    proc = start("run", SMALL_CONFIG, "--out", out, "--quiet", "--jobs", 2)
    _kill_one_worker(proc, out, "harness")
    stdout, stderr = proc.communicate(timeout=300)
    assert proc.returncode == 0, stderr
    df = results_by_cell(out)
    died = df["error"].str.contains("worker process died", regex=False)
    assert (df.loc[~died, "status"] == "ok").all()  # retried (execution.retries = 1)
    assert list(df.index) == _grid_ids(SMALL_CONFIG) and integrity(out) == "ok"
    assert_same_results(df[~died], small_reference[~died])


@pytest.mark.slow
def test_dask_worker_killed_mid_run(tmp_path, small_reference):
    out = tmp_path / "dask"
    proc = start("run", SMALL_CONFIG, "--out", out, "--quiet", "--backend", "dask", "--jobs", 2)
    victim = _kill_one_worker(proc, out, "spawn_main")
    stdout, stderr = proc.communicate(timeout=400)
    assert proc.returncode == 0, stderr
    assert "Traceback" not in stderr
    assert not psutil.pid_exists(victim) or psutil.Process(victim).status() == psutil.STATUS_ZOMBIE
    df = results_by_cell(out)
    assert list(df.index) == _grid_ids(SMALL_CONFIG) and integrity(out) == "ok"
    failed = df["status"] != "ok"
    # the scheduler reschedules a dead worker's task; only a task that kills worker after
    # worker (Dask's allowed-failures) becomes a failed row, with Dask's reason
    assert df.loc[failed, "error"].str.startswith("Dask task failed").all()
    assert_same_results(df[~failed], small_reference[~failed])


# --------------------------------------------------------------------------- damaged stores
def _filled_store(out) -> None:
    rows = store_rows(300, score=lambda i: 0.5, error="x" * 200)
    with Store(out) as store:
        store.write(rows)


def _truncate(path):
    path.write_bytes(path.read_bytes()[:3000])


def _scribble(path):
    data = bytearray(path.read_bytes())
    data[4096:12288] = b"\x00garbage" * 1024  # pages 2 and 3 overwritten
    path.write_bytes(bytes(data))


def _not_sqlite(path):
    path.write_text("cell_id,status\nc0,ok\n")  # someone saved a CSV under the name


def _schema(value):
    def change(path):
        db = sqlite3.connect(path)
        if value is None:
            db.execute("DROP TABLE meta")  # a store from before versioning
        else:
            db.execute("UPDATE meta SET value=? WHERE key='schema_version'", (str(value),))
        db.commit()
        db.close()

    return change


DAMAGE = {
    "truncated": (_truncate, "damaged|schema version None"),
    "scribbled": (_scribble, "damaged"),
    "not-sqlite": (_not_sqlite, "damaged .*file is not a database"),
    "old-schema": (_schema(0), f"schema version 0, this harness reads version {SCHEMA_VERSION}"),
    "future-schema": (_schema(SCHEMA_VERSION + 98), f"schema version {SCHEMA_VERSION + 98}, this harness reads"),
    "no-version": (_schema(None), "schema version None"),
}


def _tiny_config(tmp_path):
    return tiny_config(tmp_path / "tiny.toml", n_rows=80)


@pytest.mark.parametrize("damage", list(DAMAGE))
@pytest.mark.parametrize("command", ["run", "status", "report", "export"])
def test_damaged_or_foreign_store_is_refused_untouched(tmp_path, capsys, damage, command):
    out = tmp_path / "out"
    _filled_store(out)
    change, expected = DAMAGE[damage]
    path = out / "results.sqlite"
    change(path)
    before = path.read_bytes()
    argv = {
        "run": ["run", str(_tiny_config(tmp_path)), "--out", str(out), "--quiet"],
        "status": ["status", str(out)],
        "report": ["report", str(out)],
        "export": ["export", str(out), "--to", str(tmp_path / "t.csv")],
    }[command]
    code = main(argv)
    err = " ".join(capsys.readouterr().err.split())
    assert code == 3, err
    assert err.startswith("error: ") and "internal error" not in err and "Traceback" not in err
    assert re.search(expected, err), err
    assert "Nothing was changed" in err and "--fresh" in err  # says what to do
    assert path.read_bytes() == before
    assert not (tmp_path / "t.csv").exists()


def test_fresh_sets_a_damaged_store_aside_and_runs(tmp_path, capsys):
    out = tmp_path / "out"
    _filled_store(out)
    _scribble(out / "results.sqlite")
    before = (out / "results.sqlite").read_bytes()
    assert main(["run", str(_tiny_config(tmp_path)), "--out", str(out), "--quiet", "--fresh"]) == 0
    assert (out / "kept-1" / "results.sqlite").read_bytes() == before
    assert len(read_results(out)) == 2
