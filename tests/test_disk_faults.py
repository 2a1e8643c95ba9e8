"""The results store and the outputs under disk faults: a SIGKILL at each early write of
the store, a read-only mount, a full disk, and outputs that must never be half written.

Kills are injected with strace (``-e inject=pwrite64:signal=SIGKILL:when=K``: the process
is killed as it makes its K-th ``pwrite64`` call, which is how SQLite writes pages).
Mounts are tmpfs or read-only bind mounts made by the test and removed by it.
"""

from __future__ import annotations

import contextlib
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from harness.grid import SCHEMA_VERSION
from harness.store import Store, read_results

from _runtools import CONFIGS, assert_clean_refusal, integrity, run, tiny_config

KILL_SCRIPT = CONFIGS / "kill_each_write.py"
UNIT = 3  # rows per write in that script
OFFSET = 100  # harmless writes + store writes before the injected kill, per child


def _strace(tmp_path, *inject) -> subprocess.CompletedProcess:
    return subprocess.run(
        [
            "strace",
            "-qq",
            "-f",
            "-o",
            "/dev/null",
            "-e",
            "trace=pwrite64",
            *inject,
            sys.executable,
            str(KILL_SCRIPT),
            str(tmp_path),
            str(OFFSET),
            "40",
            str(UNIT),
        ],
        capture_output=True,
        text=True,
        timeout=120,
        check=True,
    )


@pytest.mark.slow
@pytest.mark.skipif(shutil.which("strace") is None, reason="needs strace (.ci/run installs it)")
def test_sigkill_at_each_early_write_leaves_no_store_or_a_valid_one(tmp_path):
    """Atomic creation: before the rename there is no store, after it a valid one."""
    counted = tmp_path / "count"
    counted.mkdir()
    _strace(counted)  # no injection: every child completes
    assert len(read_results(counted / "k40")) == 3 * UNIT
    statuses = json.loads(_strace(tmp_path, "-e", f"inject=pwrite64:signal=SIGKILL:when={OFFSET}").stdout)
    outcomes = {}
    for k, status in statuses.items():
        out = tmp_path / f"k{k}"
        if not os.WIFSIGNALED(status):
            assert int(k) > 30, f"child {k} was not killed at its write {k}"  # past its last write
            continue
        if not (out / "results.sqlite").exists():
            outcomes[int(k)] = "none"
        else:
            assert integrity(out) == "ok"
            rows = len(read_results(out))
            assert rows % UNIT == 0  # whole units only
            outcomes[int(k)] = rows
        with Store(out) as store:  # the next run accepts what is there and goes on
            store.write([{"cell_id": "next", "schema_version": SCHEMA_VERSION, "status": "ok"}])
        assert integrity(out) == "ok"
    print(f"\nrows left after a SIGKILL at write k: {outcomes}")
    assert len(outcomes) >= 30 and list(outcomes) == list(range(1, len(outcomes) + 1))
    assert "none" in outcomes.values() and 0 in outcomes.values()  # kills before and after the rename


# --------------------------------------------------------------------------- mounts
def _sh(*cmd) -> None:
    subprocess.run(list(map(str, cmd)), check=True, capture_output=True, timeout=30)


@contextlib.contextmanager
def _mounted(target, *how):
    """Mount something at ``target`` for the block; always unmounted afterwards."""
    target.mkdir(parents=True, exist_ok=True)
    _sh("mount", *how, target)
    try:
        yield target
    finally:
        subprocess.run(["umount", "-l", str(target)], capture_output=True, timeout=30)


needs_root = pytest.mark.skipif(os.geteuid() != 0 or shutil.which("mount") is None, reason="needs root to mount")


def _tiny_config(tmp_path, repeats: int = 1):
    return tiny_config(
        tmp_path / f"tiny{repeats}.toml",
        repeats=repeats,
        n_rows=120,
        cardinalities=(4, 9),
        encoders={"codes": "integer", "freq": "frequency"},
    )


def _snapshot(directory) -> dict:
    return {p.relative_to(directory): p.read_bytes() for p in sorted(directory.rglob("*")) if p.is_file()}


@pytest.mark.slow
@needs_root
def test_a_finished_store_on_a_read_only_mount_is_read_exported_and_reported(tmp_path):
    src = tmp_path / "src"
    config = _tiny_config(tmp_path)
    assert run("run", config, "--out", src, "--quiet").returncode == 0
    before = _snapshot(src)
    ro = tmp_path / "ro"
    with _mounted(ro, "--bind", src):
        _sh("mount", "-o", "remount,bind,ro", ro)
        with pytest.raises(OSError):
            (ro / "probe").write_text("x")  # really read-only
        status = run("status", ro)
        assert status.returncode == 0 and "4 finished" in status.stdout, status.stderr
        dry = run("run", config, "--out", ro, "--dry-run")
        assert dry.returncode == 0 and "0 to compute" in dry.stdout, dry.stderr
        exported = run("export", ro, "--to", tmp_path / "copy.parquet")
        assert exported.returncode == 0, exported.stderr
        reported = run("report", ro, "--out", tmp_path / "elsewhere")
        assert reported.returncode == 0, reported.stderr
        assert (tmp_path / "elsewhere" / "report" / "report.html").stat().st_size > 0
        writer = run("run", config, "--out", ro, "--quiet")  # a writer is refused clearly
        flat = assert_clean_refusal(writer, code=2)
        assert f"cannot write to the output directory {ro}" in flat
    assert _snapshot(src) == before  # no WAL switch, no -shm, nothing changed
    assert len(pd.read_parquet(tmp_path / "copy.parquet")) == len(read_results(src)) == 4


@pytest.mark.slow
@needs_root
def test_a_full_disk_stops_the_run_with_one_message_and_loses_no_row(tmp_path):
    disk = tmp_path / "disk"
    config = _tiny_config(tmp_path, repeats=40)  # 160 cells: the WAL outgrows the disk
    with _mounted(disk, "-t", "tmpfs", "-o", "size=400k", "tmpfs"):
        filler = disk / "filler"
        with contextlib.suppress(OSError), open(filler, "wb") as fh:
            while True:
                fh.write(b"\0" * 4096)
        at_creation = run("run", config, "--out", disk / "new", "--quiet")  # no room for the store itself
        assert "no space left on the device of" in assert_clean_refusal(at_creation, code=4)
        assert not (disk / "new" / "results.sqlite").exists() and not list((disk / "new").glob(".*"))
        filler.unlink()
        out = disk / "out"
        full = run("run", config, "--out", out, "--quiet", "--jobs", "1")
        flat = assert_clean_refusal(full, code=4)
        print(f"\n{flat}")
        assert f"no space left on the device of {out}" in flat and "MB free" in flat
        assert "Every row committed before is kept" in flat
        assert integrity(out) == "ok"
        kept = len(read_results(out))
        assert 0 < kept < 160
        assert not list(out.glob(".*tmp*"))  # no half-written export left behind
        _sh("mount", "-o", "remount,size=64m", disk)  # space freed: a plain rerun resumes
        again = run("run", config, "--out", out, "--quiet")
        assert again.returncode == 0, again.stderr
        assert f"160 cells ({160 - kept} computed, {kept} reused)" in again.stdout
        csv_before = (out / "results.csv").read_bytes()
        with contextlib.suppress(OSError), open(filler, "wb") as fh:
            while True:
                fh.write(b"\0" * 65536)
        export = run("export", out, "--to", out / "results.csv")  # over the good file
        flat = assert_clean_refusal(export, code=4)
        assert "no space left" in flat
        assert (out / "results.csv").read_bytes() == csv_before  # never truncated
        assert not list(out.glob(".*tmp*"))


# --------------------------------------------------------------------------- whole outputs
def test_a_failed_export_or_report_leaves_the_previous_one_whole(tmp_path):
    from harness._outputs import swap_in_dir, temporary_beside

    old = tmp_path / "results.csv"
    old.write_text("cell_id\nc0\n")
    with pytest.raises(KeyboardInterrupt), temporary_beside(old) as tmp:
        tmp.write_text("cell_id\nc")  # half written when the Ctrl-C came
        raise KeyboardInterrupt
    assert old.read_text() == "cell_id\nc0\n" and sorted(p.name for p in tmp_path.iterdir()) == ["results.csv"]
    report = tmp_path / "report"
    report.mkdir()
    (report / "report.md").write_text("previous")
    with pytest.raises(OSError), swap_in_dir(report) as new:
        (new / "report.md").write_text("half")
        raise OSError(28, "No space left on device")
    assert (report / "report.md").read_text() == "previous"
    with swap_in_dir(report) as new:
        (new / "report.md").write_text("new")
    assert (report / "report.md").read_text() == "new"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report", "results.csv"]  # no temporary left


def test_two_reports_at_once_on_one_directory_both_finish(tmp_path):
    """Each writer builds its own temporary; the later swap wins, neither crashes."""
    import threading

    from harness._outputs import swap_in_dir

    report, errors, started = tmp_path / "report", [], threading.Barrier(2)

    def write(tag):
        try:
            with swap_in_dir(report) as new:
                started.wait(timeout=10)  # both are building at the same time
                (new / "report.md").write_text(tag)
        except Exception as exc:  # noqa: BLE001
            errors.append(exc)

    threads = [threading.Thread(target=write, args=(t,)) for t in ("a", "b")]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=30)
    assert not errors
    assert (report / "report.md").read_text() in {"a", "b"}
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report"]


def test_a_report_that_appears_between_check_and_rename_is_swapped_over(tmp_path, monkeypatch):
    """The other writer's report lands after our existence check: ours still swaps in."""
    from harness import _outputs

    report, real_rename = tmp_path / "report", os.rename
    calls = []

    def racing_rename(src, dst):
        if Path(dst) == report and not calls:
            calls.append(dst)
            report.mkdir()  # the other writer wins the race by a hair
            (report / "report.md").write_text("other")
        return real_rename(src, dst)

    monkeypatch.setattr(_outputs.os, "rename", racing_rename)
    with _outputs.swap_in_dir(report) as new:
        (new / "report.md").write_text("ours")
    assert calls and (report / "report.md").read_text() == "ours"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report"]


def test_temporaries_of_killed_writers_are_removed_and_live_ones_kept(tmp_path):
    from harness._outputs import swap_in_dir, temporary_beside

    dead = subprocess.run(
        [sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True, check=True
    )
    dead_pid = int(dead.stdout)  # a process that has exited: its temporaries are remains
    (tmp_path / f".report.tmp-{dead_pid}-0000dead").mkdir()
    (tmp_path / f".results.csv.tmp-{dead_pid}-0000dead").write_text("half")
    live = tmp_path / f".report.tmp-{os.getppid()}-0000live"
    live.mkdir()  # a live writer's temporary is never touched
    with swap_in_dir(tmp_path / "report") as new:
        (new / "report.md").write_text("x")
    with temporary_beside(tmp_path / "results.csv") as tmp:
        tmp.write_text("cell_id\n")
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(["report", "results.csv", live.name])
