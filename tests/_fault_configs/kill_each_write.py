"""Create a store and write three units in forked children, each to be killed at one write.

Run under ``strace -f -e inject=pwrite64:signal=SIGKILL:when=OFFSET``: strace counts
syscalls per process, so child ``k`` first makes ``OFFSET - k`` harmless pwrite64 calls
to a scratch file and is then killed at its k-th write to the store. One import of the
harness serves every kill point. Prints one JSON object: k -> the child's wait status.

Usage: kill_each_write.py DIR OFFSET KMAX ROWS_PER_UNIT
"""

import json
import os
import sys
from pathlib import Path

from harness.grid import SCHEMA_VERSION
from harness.store import Store

root, offset, kmax, per_unit = Path(sys.argv[1]), int(sys.argv[2]), int(sys.argv[3]), int(sys.argv[4])
scratch = os.open(root / "scratch", os.O_WRONLY | os.O_CREAT, 0o644)


def rows(unit):
    return [{"cell_id": f"u{unit}c{i}", "schema_version": SCHEMA_VERSION, "status": "ok"} for i in range(per_unit)]


statuses = {}
for k in range(1, kmax + 1):
    pid = os.fork()
    if pid == 0:
        for _ in range(offset - k):
            os.pwrite(scratch, b"x", 0)
        with Store(root / f"k{k}") as store:
            for unit in range(3):
                store.write(rows(unit))
        os._exit(0)
    statuses[k] = os.waitpid(pid, 0)[1]
print(json.dumps(statuses))
