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
import sqlite3
import subprocess
import sys

import pytest

from _runtools import CONFIGS, assert_clean_refusal, integrity, run
from harness.grid import SCHEMA_VERSION
from harness.store import Store, read_results

KILL_SCRIPT = CONFIGS / "kill_each_write.py"
UNIT = 3  # rows per write in that script
OFFSET = 100  # harmless writes + store writes before the injected kill, per child


def _strace(tmp_path, *inject) -> subprocess.CompletedProcess:
    return subprocess.run(
        ["strace", "-qq", "-f", "-o", "/dev/null", "-e", "trace=pwrite64", *inject, sys.executable,
         str(KILL_SCRIPT), str(tmp_path), str(OFFSET), "40", str(UNIT)],
        capture_output=True, text=True, timeout=120, check=True,
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
