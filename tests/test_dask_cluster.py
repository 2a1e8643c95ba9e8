"""The Dask backend against a real cluster: a `dask scheduler` and `dask worker` processes
that the test starts on 127.0.0.1 and stops itself (by pid), with bounded waits.

- One worker lost mid-run, holding the only copy of the data: every unit is still
  computed (resubmitted, the data sent again), no cell is recorded as failed, exit 0.
- The scheduler lost mid-run: one message, a non-zero exit, nothing recorded as failed;
  a plain rerun completes.
- One worker stopped (SIGSTOP) mid-run: the watchdog records the unit it was executing
  as `timeout`, removes the worker from the scheduler, and the units queued there run on
  the other worker; the run ends, exit 0. Stopped before the run: it is sent no data,
  the units queued on it run elsewhere once it is removed, all cells `ok`.
"""

from __future__ import annotations

import contextlib
import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest

from _runtools import CONFIGS, ROOT, count_rows, integrity, results_by_cell, run, start, wait_for_rows

pytestmark = pytest.mark.slow

SMALL = CONFIGS / "small.toml"
DASK = str(Path(sys.executable).with_name("dask"))


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _wait_port(port: int, timeout: float = 60) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        with contextlib.suppress(OSError), socket.create_connection(("127.0.0.1", port), timeout=1):
            return
        time.sleep(0.2)
    raise AssertionError(f"nothing listens on port {port} after {timeout} s")


class Cluster:
    """Processes of one test cluster; every one is stopped by pid at the end."""

    def __init__(self, log_dir: Path):
        self.port = _free_port()
        self.address = f"tcp://127.0.0.1:{self.port}"
        self.log_dir = log_dir
        self.procs: list[subprocess.Popen] = []

    def _spawn(self, name: str, *args) -> subprocess.Popen:
        with open(self.log_dir / f"{name}.log", "wb") as log:  # the child keeps its own copy
            proc = subprocess.Popen(
                [DASK, *args],
                cwd=ROOT,
                stdout=log,
                stderr=subprocess.STDOUT,
                env={**os.environ, "PYTHONUNBUFFERED": "1"},
            )
        self.procs.append(proc)
        return proc

    def scheduler(self) -> subprocess.Popen:
        proc = self._spawn("scheduler", "scheduler", "--host", "127.0.0.1", "--port", str(self.port), "--no-dashboard")
        _wait_port(self.port)
        return proc

    def worker(self, name: str) -> subprocess.Popen:
        # no nanny: a killed worker stays dead, as a lost machine does
        return self._spawn(
            name,
            "worker",
            self.address,
            "--nthreads",
            "1",
            "--no-nanny",
            "--no-dashboard",
            "--host",
            "127.0.0.1",
            "--name",
            name,
            "--death-timeout",
            "60",
        )

    def wait_workers(self, n: int, timeout: float = 60) -> None:
        from distributed import Client

        with Client(self.address, timeout="20s") as client:
            client.wait_for_workers(n, timeout=timeout)

    def stop(self) -> None:
        for proc in self.procs:
            if proc.poll() is None:
                proc.kill()
        for proc in self.procs:
            with contextlib.suppress(subprocess.TimeoutExpired):
                proc.wait(timeout=20)


@pytest.fixture
def cluster(tmp_path):
    c = Cluster(tmp_path)
    try:
        yield c
    finally:
        c.stop()


def _dask_run(out, address, *extra) -> subprocess.Popen:
    return start("run", SMALL, "--out", out, "--quiet", "--backend", "dask", "--scheduler", address, *extra)


def test_a_lost_worker_holding_the_only_copy_of_the_data_loses_no_cell(tmp_path, cluster):
    cluster.scheduler()
    first = cluster.worker("w1")
    cluster.wait_workers(1)
    out = tmp_path / "run"
    proc = _dask_run(out, cluster.address)
    try:
        assert wait_for_rows(out, 1, proc) > 0  # the data went to w1 only: w2 did not exist yet
        cluster.worker("w2")
        cluster.wait_workers(2)
        first.send_signal(signal.SIGKILL)
        first.wait(timeout=20)
        assert count_rows(out) < 72  # mid-run
        stdout, stderr = proc.communicate(timeout=240)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 0, stderr
    df = results_by_cell(out)
    assert len(df) == 72 and integrity(out) == "ok"
    assert (df["status"] == "ok").all(), df.loc[df["status"] != "ok", "error"].unique()


def test_a_lost_scheduler_stops_the_run_and_a_plain_rerun_completes(tmp_path, cluster):
    scheduler = cluster.scheduler()
    cluster.worker("w1")
    cluster.worker("w2")
    cluster.wait_workers(2)
    out = tmp_path / "run"
    proc = _dask_run(out, cluster.address)
    try:
        assert wait_for_rows(out, 1, proc) > 0
        scheduler.send_signal(signal.SIGKILL)
        scheduler.wait(timeout=20)
        lost_at = time.monotonic()
        stdout, stderr = proc.communicate(timeout=120)
        took = time.monotonic() - lost_at
    finally:
        if proc.poll() is None:
            proc.kill()
    print(f"\nlost scheduler: exit {proc.returncode} {took:.1f} s after the kill; {stderr.strip()}")
    assert proc.returncode == 5, stderr
    lines = stderr.strip().splitlines()
    flat = " ".join(stderr.split())
    assert flat.startswith("error: lost the connection to the Dask scheduler at " + cluster.address), stderr
    assert "Traceback" not in stderr and len([ln for ln in lines if ln.startswith("error")]) == 1
    kept = count_rows(out)
    df = results_by_cell(out)
    assert integrity(out) == "ok" and 0 < kept < 72
    assert (df["status"] == "ok").all()  # nothing recorded as failed
    rerun = run("run", SMALL, "--out", out, "--quiet")  # plain rerun, local backend
    assert rerun.returncode == 0, rerun.stderr
    assert f"72 cells ({72 - kept} computed, {kept} reused)" in rerun.stdout
    assert (results_by_cell(out)["status"] == "ok").all()


def _stopped_worker_run(tmp_path, cluster, stop_before_run: bool):
    """Run with w1 stopped mid-run (or before the run): exit code, stderr, seconds from the stop."""
    cluster.scheduler()
    stopped = cluster.worker("w1")
    cluster.worker("w2")
    cluster.wait_workers(2)
    # no retries: a unit lost because the watchdog removed a worker is not the cluster's
    # failure and must not need one
    config = tmp_path / "watched.toml"
    config.write_text(SMALL.read_text() + "\n[execution]\ncell_timeout_s = 2\nretries = 0\n")
    out = tmp_path / "run"
    if stop_before_run:
        os.kill(stopped.pid, signal.SIGSTOP)
    proc = start("run", config, "--out", out, "--quiet", "--backend", "dask", "--scheduler", cluster.address)
    try:
        if not stop_before_run:
            assert wait_for_rows(out, 1, proc) > 0
            os.kill(stopped.pid, signal.SIGSTOP)
        sent = time.monotonic()
        _, stderr = proc.communicate(timeout=150)
        took = time.monotonic() - sent
    finally:
        if proc.poll() is None:
            proc.kill()
        with contextlib.suppress(ProcessLookupError):
            os.kill(stopped.pid, signal.SIGCONT)  # cluster.stop() kills it by pid
    return proc.returncode, stderr, took


def test_a_stopped_worker_is_timed_out_and_removed_and_the_run_ends(tmp_path, cluster):
    code, stderr, took = _stopped_worker_run(tmp_path, cluster, stop_before_run=False)
    assert code == 0, stderr
    out = tmp_path / "run"
    df = results_by_cell(out)
    print(f"\nstopped dask worker: run ended {took:.1f} s after SIGSTOP; {df['status'].value_counts().to_dict()}")
    assert took < 120
    assert len(df) == 72 and df.index.is_unique and integrity(out) == "ok"
    timed_out = df[df["status"] == "timeout"]
    # the unit it was executing (two models), unless the stop fell between two units:
    # then its queued units are only run again elsewhere
    assert len(timed_out) in (0, 2), timed_out[["encoder", "model", "repeat", "fold", "error"]]
    assert timed_out[["encoder", "repeat", "fold"]].drop_duplicates().shape[0] <= 1
    assert timed_out["error"].str.endswith("the watchdog removed it from the cluster").all()
    assert (df.loc[df["status"] != "timeout", "status"] == "ok").all(), df["error"].unique()


def test_a_worker_stopped_before_the_run_does_not_hang_it(tmp_path, cluster):
    code, stderr, took = _stopped_worker_run(tmp_path, cluster, stop_before_run=True)
    assert code == 0, stderr
    df = results_by_cell(tmp_path / "run")
    print(f"\nworker stopped before the run: run took {took:.1f} s; {df['status'].value_counts().to_dict()}")
    assert took < 120
    assert len(df) == 72 and df.index.is_unique and (df["status"] == "ok").all(), df["error"].unique()
