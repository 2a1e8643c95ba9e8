"""How a run stops: Ctrl-C and SIGTERM under every backend, a stopped worker killed by
the watchdog, and a store deleted under a live run."""

from __future__ import annotations

import os
import signal
import time

import psutil
import pytest

from _runtools import CONFIGS, assert_clean_refusal, count_rows, integrity, run, start, wait_for_rows

SMALL = CONFIGS / "small.toml"
KILL = CONFIGS / "kill.toml"


def _harness_children(proc) -> list[psutil.Process]:
    try:
        kids = psutil.Process(proc.pid).children(recursive=True)
    except psutil.NoSuchProcess:
        return []
    return [k for k in kids if "resource_tracker" not in " ".join(k.cmdline())]


@pytest.mark.slow
@pytest.mark.parametrize(("backend", "jobs", "sig", "whom"), [
    ("local", 1, signal.SIGTERM, "process"),
    ("local", 2, signal.SIGTERM, "group"),
    ("dask", 2, signal.SIGTERM, "process"),
    ("dask", 2, signal.SIGINT, "group"),  # a terminal's Ctrl-C
])
def test_signal_stops_with_one_line_and_a_valid_store(tmp_path, backend, jobs, sig, whom):
    out = tmp_path / "run"
    proc = start("run", SMALL, "--out", out, "--quiet", "--jobs", jobs, "--backend", backend, group=True)
    assert wait_for_rows(out, 1, proc) > 0
    kids = _harness_children(proc)
    (os.killpg if whom == "group" else os.kill)(proc.pid, sig)
    stdout, stderr = proc.communicate(timeout=90)
    assert proc.returncode == 128 + sig, stderr
    lines = stderr.strip().splitlines()
    word = "stopped by SIGTERM" if sig == signal.SIGTERM else "interrupted"
    assert len(lines) == 1 and lines[0].startswith(f"{word}: finished cells are kept"), stderr
    assert integrity(out) == "ok" and count_rows(out) > 0
    _, alive = psutil.wait_procs(kids, timeout=20)
    assert not alive, f"workers outlived the stopped run: {alive}"
    rerun = run("run", SMALL, "--out", out, "--quiet")
    assert rerun.returncode == 0, rerun.stderr


@pytest.mark.slow
def test_watchdog_kills_stopped_workers_and_records_timeout(tmp_path):
    config = tmp_path / "watched.toml"
    config.write_text(SMALL.read_text() + "\n[execution]\njobs = 2\ncell_timeout_s = 2\n")
    out = tmp_path / "run"
    proc = start("run", config, "--out", out, "--quiet")
    assert wait_for_rows(out, 1, proc) > 0
    stopped = _harness_children(proc)
    assert stopped
    for worker in stopped:  # both workers, so at least one unit is surely in flight
        worker.suspend()
    sent = time.monotonic()
    stdout, stderr = proc.communicate(timeout=120)
    took = time.monotonic() - sent
    assert proc.returncode == 0, stderr
    print(f"\nwatchdog: run ended {took:.1f} s after SIGSTOP of {len(stopped)} workers; {stdout.splitlines()[0]}")
    from harness.store import read_results

    df = read_results(out)
    assert len(df) == 72 and df["cell_id"].is_unique
    timed_out = df[df["status"] == "timeout"]
    assert 1 <= len(timed_out) <= 2 * 2  # the units in flight (two models each), no more
    assert timed_out["error"].str.contains("the watchdog killed it", regex=False).all()
    assert (df.loc[df["status"] != "timeout", "status"] == "ok").all()
    assert all(not p.is_running() or p.status() == psutil.STATUS_ZOMBIE for p in stopped)


@pytest.mark.slow
def test_deleting_the_store_mid_run_stops_the_run(tmp_path):
    out = tmp_path / "run"
    proc = start("run", KILL, "--out", out, "--quiet")
    assert wait_for_rows(out, 1, proc) > 0
    for path in out.glob("results.sqlite*"):
        path.unlink()
    _, stderr = proc.communicate(timeout=120)
    flat = assert_clean_refusal(type("P", (), {"returncode": proc.returncode, "stderr": stderr}), code=3)
    assert "was deleted or replaced while this run was writing to it" in flat
