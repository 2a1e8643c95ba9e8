"""How a run stops: Ctrl-C and SIGTERM under every backend, a stopped worker killed by
the watchdog (process pool, local Dask cluster; the Dask watchdog's rules on a fake
cluster), and a store deleted under a live run."""

from __future__ import annotations

import os
import signal
import time
from types import SimpleNamespace

import psutil
import pytest

from harness.backends import WATCHDOG_MARGIN_S, _DaskWatchdog

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
@pytest.mark.parametrize(
    ("backend", "jobs", "sig", "whom"),
    [
        ("local", 1, signal.SIGTERM, "process"),
        ("local", 2, signal.SIGTERM, "group"),
        ("dask", 2, signal.SIGTERM, "process"),
        ("dask", 2, signal.SIGINT, "group"),  # a terminal's Ctrl-C
    ],
)
def test_signal_stops_with_one_line_and_a_valid_store(tmp_path, backend, jobs, sig, whom):
    out = tmp_path / "run"
    # the 360-cell config: the 72 cells of small.toml can all finish between the first row
    # seen and the signal on a quiet machine, and then the run rightly exits 0
    proc = start("run", KILL, "--out", out, "--quiet", "--jobs", jobs, "--backend", backend, group=True)
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
    rerun = run("run", KILL, "--out", out, "--quiet", "--jobs", 2)
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
def test_watchdog_kills_stopped_local_dask_workers_and_records_timeout(tmp_path):
    config = tmp_path / "watched.toml"
    config.write_text(SMALL.read_text() + "\n[execution]\ncell_timeout_s = 2\n")
    out = tmp_path / "run"
    proc = start("run", config, "--out", out, "--quiet", "--backend", "dask", "--jobs", "2")
    try:
        assert wait_for_rows(out, 1, proc) > 0
        stopped = [p for p in _harness_children(proc) if "spawn_main" in " ".join(p.cmdline())]
        assert len(stopped) == 2
        for worker in stopped:  # both: their nannies must start new workers for the run to end
            worker.suspend()
        sent = time.monotonic()
        stdout, stderr = proc.communicate(timeout=120)
        took = time.monotonic() - sent
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 0, stderr
    print(f"\nwatchdog (local dask): run ended {took:.1f} s after SIGSTOP of 2 workers; {stdout.splitlines()[0]}")
    from harness.store import read_results

    df = read_results(out)
    assert len(df) == 72 and df["cell_id"].is_unique
    timed_out = df[df["status"] == "timeout"]
    # the units the two workers were executing (two models each); a worker stopped between
    # two units had none executing, and its queued units ran again elsewhere
    assert len(timed_out) <= 2 * 2 and len(timed_out) % 2 == 0
    assert timed_out["error"].str.endswith("the watchdog killed it").all()
    assert (df.loc[df["status"] != "timeout", "status"] == "ok").all(), df["error"].unique()
    _, alive = psutil.wait_procs(stopped, timeout=20)
    assert all(p.status() == psutil.STATUS_ZOMBIE for p in alive), alive


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


# --------------------------------------------------------------------------- Dask watchdog rules
class _FakeCluster:
    """What the watchdog asks a Dask client, set by hand; time is a number the test moves."""

    id = "fake"

    def __init__(self):
        self.now = 0.0
        self.processing_ = {}  # worker -> keys assigned there
        self.beat = {}  # worker -> last heartbeat value the scheduler reports
        self.results = {}  # key -> workers holding a finished unit's result

    def subscribe_topic(self, topic, handler):
        self.started = lambda key, worker: handler((0.0, {"key": key, "worker": worker}))

    def processing(self):
        return self.processing_

    def scheduler_info(self, n_workers=-1):
        return {"workers": {w: {"last_seen": t} for w, t in self.beat.items()}}

    @property
    def scheduler(self):
        return SimpleNamespace(who_has=lambda keys: {k: self.results.get(k, []) for k in keys})

    def sync(self, fn, **kwargs):
        return fn(**kwargs)


class _Future:
    def __init__(self, key, done):
        self.key, self._done = key, done

    def done(self):
        return self._done


def _unit(key, limit_s=2.0, done=False):
    """A future and its job: encoding and two model cells under ``limit_s`` each (3 x limit_s)."""
    cell = SimpleNamespace(model=SimpleNamespace(cell_timeout_s=None))
    return _Future(key, done), ("data", SimpleNamespace(timeout_s=limit_s, cells=(cell, cell), fits_per_cell=1))


@pytest.fixture
def fake():
    c = _FakeCluster()
    return c, _DaskWatchdog(c, clock=lambda: c.now)


def _at(cluster, dog, t, futures, finished=(), beating=()):
    cluster.now = t
    for w in beating:
        cluster.beat[w] = t
    return dog.check(dict(futures), set(finished))


LIMIT = 3 * 2.0 + WATCHDOG_MARGIN_S


def test_dask_watchdog_times_a_unit_from_its_start_not_from_its_queueing(fake):
    cluster, dog = fake
    a, b = _unit("a"), _unit("b")
    cluster.processing_ = {"w": ["a", "b"]}
    _at(cluster, dog, 0.0, [a, b], beating=["w"])
    cluster.started("a", "w")
    assert _at(cluster, dog, LIMIT - 0.5, [a, b], beating=["w"]) == ([], set())
    assert _at(cluster, dog, LIMIT + 0.5, [a, b], beating=["w"]) == ([a[0]], {"w"})
    cluster.processing_ = {"v": ["b"]}  # rescheduled after w left; queued since 0 on w, not on v
    cluster.started("b", "v")
    assert _at(cluster, dog, LIMIT + 1.5, [b], beating=["v"]) == ([], set())
    assert _at(cluster, dog, 2 * LIMIT + 2, [b], beating=["v"]) == ([b[0]], {"v"})


def test_dask_watchdog_removes_a_silent_worker_holding_units_and_records_nothing(fake):
    cluster, dog = fake
    queued, kept, finished = _unit("queued"), _unit("kept"), _unit("finished", done=True)
    cluster.processing_ = {"stopped": ["queued"], "alive": ["kept"]}
    cluster.results = {"finished": ["stopped"]}
    units = [queued, kept, finished]
    _at(cluster, dog, 0.0, units, [finished[0]], beating=["stopped", "alive"])
    assert _at(cluster, dog, LIMIT - 0.5, units, [finished[0]], beating=["alive"]) == ([], set())
    assert _at(cluster, dog, LIMIT + 0.5, units, [finished[0]], beating=["alive"]) == ([], {"stopped"})


def test_dask_watchdog_removes_a_silent_worker_holding_the_only_copy_of_a_units_data(fake):
    cluster, dog = fake
    waiting = _unit("waiting")  # queued on a live worker, which must fetch the data
    data = {"data": _Future("dataset", True)}
    cluster.processing_ = {"alive": ["waiting"]}
    cluster.results = {"dataset": ["stopped"]}
    _at(cluster, dog, 0.0, [waiting], beating=["stopped", "alive"])
    assert dog.check({waiting[0]: waiting[1]}, set(), data) == ([], set())
    cluster.now, cluster.beat["alive"] = LIMIT + 0.5, LIMIT + 0.5
    assert dog.check({waiting[0]: waiting[1]}, set(), data) == ([], {"stopped"})


def test_dask_watchdog_leaves_a_silent_worker_to_its_executing_units_clock(fake):
    cluster, dog = fake
    running, queued = _unit("running"), _unit("queued")
    cluster.processing_ = {"w": ["running", "queued"]}
    _at(cluster, dog, 0.0, [running, queued], beating=["w"])
    cluster.now = 5.0
    cluster.started("running", "w")  # then w is stopped: no heartbeat after 0
    assert _at(cluster, dog, LIMIT + 1, [running, queued]) == ([], set())
    assert _at(cluster, dog, 5 + LIMIT + 0.5, [running, queued]) == ([running[0]], {"w"})


def test_dask_watchdog_never_times_a_unit_without_a_limit(fake):
    cluster, dog = fake
    free = _unit("free", limit_s=None)
    cluster.processing_ = {"w": ["free"]}
    _at(cluster, dog, 0.0, [free], beating=["w"])
    cluster.started("free", "w")
    assert _at(cluster, dog, 1e6, [free]) == ([], set())
