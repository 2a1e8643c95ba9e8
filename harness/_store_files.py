"""The results store's files: the run lock, atomic creation, ``kept-N/``, read-only opening.

Everything here acts on the output directory and the SQLite file as files (``flock``,
rename, fsync), never on their rows; :mod:`harness._store_db` holds the :class:`Store`
that uses it, and every message about an unwritable directory or a full disk is worded here.
"""

from __future__ import annotations

import contextlib
import errno
import fcntl
import os
import shutil
import sqlite3
from collections.abc import Callable
from pathlib import Path
from urllib.parse import quote

from harness._outputs import fsync_path, is_disk_full
from harness.errors import DiskFullError, OutputError, StoreError

__all__ = [
    "STORE_NAME",
    "CREATING_PREFIX",
    "KEPT_PREFIX",
    "lock_directory",
    "unlock",
    "file_identity",
    "connect_readonly",
    "create_atomically",
    "remove_creation_leftovers",
    "keep_aside",
    "finish_keeping",
    "make_dir",
    "disk_full",
    "output_error",
]

STORE_NAME = "results.sqlite"
CREATING_PREFIX = ".results.sqlite.creating-"  # a store being built; renamed when complete
KEPT_PREFIX = "kept-"  # kept-1/, kept-2/ ...: earlier stores set aside by --fresh

# Run-lock descriptors held by this process. A forked pool worker inherits them, and flock
# locks belong to the shared open file description: a worker orphaned by a SIGKILL of the
# driver kept the lock alive and every resume was refused. The child drops its copies
# (closing a duplicate never releases the parent's lock; only the last close does).
_HELD_LOCK_FDS: set[int] = set()


def _drop_inherited_locks() -> None:
    for fd in _HELD_LOCK_FDS:
        with contextlib.suppress(OSError):
            os.close(fd)
    _HELD_LOCK_FDS.clear()


os.register_at_fork(after_in_child=_drop_inherited_locks)


# ------------------------------------------------------------------------------ run lock
def lock_directory(out: Path) -> int:
    """flock the output directory itself: no file a user could delete holds the lock.

    Returns the locked descriptor (release it with :func:`unlock`).

    Raises
    ------
    StoreError
        Another run holds the lock.
    OutputError
        The directory cannot be opened.
    """
    try:
        fd = os.open(out, os.O_RDONLY | os.O_DIRECTORY)
    except OSError as exc:
        raise output_error(out, exc) from None
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        os.close(fd)
        raise StoreError(
            f"another `levelfold run` is writing to {out} (it holds the lock on that directory). "
            "Wait for it to finish, or pass a different --out."
        ) from None
    _HELD_LOCK_FDS.add(fd)
    return fd


def unlock(fd: int) -> None:
    """Release a lock taken by :func:`lock_directory` and close its descriptor."""
    _HELD_LOCK_FDS.discard(fd)
    fcntl.flock(fd, fcntl.LOCK_UN)
    os.close(fd)


# --------------------------------------------------------------------------- file handling
def file_identity(path: Path):
    """``(device, inode)`` of a file, None when it is missing: a replaced store has another."""
    try:
        st = path.stat()
    except FileNotFoundError:
        return None
    return st.st_dev, st.st_ino


def connect_readonly(path: Path) -> sqlite3.Connection:
    """Open read-only; as immutable where SQLite cannot create its ``-shm`` file.

    That happens on a read-only mount or a full disk. ``immutable=1`` is safe then: an
    absent or empty ``-wal`` file means the main file holds every committed row, and no writer is live
    (a live writer keeps the ``-shm`` file in place, so the first open succeeds).
    """
    uri = f"file:{quote(str(path.resolve()))}?mode=ro"
    db = sqlite3.connect(uri, uri=True, timeout=30, isolation_level=None)
    try:
        db.execute("SELECT count(*) FROM sqlite_master").fetchone()
        return db
    except sqlite3.OperationalError as exc:
        db.close()
        wal = Path(str(path) + "-wal")
        cannot_share = any(m in str(exc) for m in ("unable to open", "disk I/O error"))
        wal_rows = wal.exists() and wal.stat().st_size > 0  # an empty -wal may be our own failed open's
        if not cannot_share or (wal_rows and os.access(path.parent, os.W_OK)):
            raise
    return sqlite3.connect(uri + "&immutable=1", uri=True, isolation_level=None)


def create_atomically(out: Path, path: Path, create_tables: Callable[[sqlite3.Connection], None]) -> None:
    """Build an empty store under a temporary name, commit its schema, rename it into place.

    ``create_tables(db)`` creates the tables inside the transaction (``_store_db.create_tables``).
    """
    tmp = out / f"{CREATING_PREFIX}{os.getpid()}"
    try:
        db = sqlite3.connect(tmp, isolation_level=None)
        try:
            db.execute("BEGIN")
            create_tables(db)
            db.execute("COMMIT")
            db.execute("PRAGMA journal_mode=WAL")  # recorded in the header; no -wal left at close
        finally:
            db.close()
        fsync_path(tmp)
        os.rename(tmp, path)
        fsync_path(out)
    except (sqlite3.Error, OSError) as exc:
        remove_creation_leftovers(out)
        if is_disk_full(exc):
            raise disk_full(out, "creating the results store") from None
        if isinstance(exc, OSError):
            raise output_error(out, exc) from None
        raise


def remove_creation_leftovers(out: Path) -> None:
    """Remove temporaries of a creation that was killed (only a lock holder calls this)."""
    for leftover in out.glob(CREATING_PREFIX + "*"):
        leftover.unlink(missing_ok=True)


def _kept_dirs(out: Path) -> list[Path]:
    return [p for p in out.glob(KEPT_PREFIX + "*") if p.name[len(KEPT_PREFIX) :].split(".")[0].isdigit()]


def keep_aside(out: Path) -> Path:
    """Move the store with its ``-wal`` and ``-shm`` into a new ``kept-N/``.

    The files go into ``kept-N.partial/`` first, which is then renamed: a kill half-way
    leaves the ``.partial`` directory, and the next writer finishes the move before it
    touches anything (:func:`_finish_keeping`), so a WAL is never separated from its file.
    """
    numbers = [int(p.name[len(KEPT_PREFIX) :].split(".")[0]) for p in _kept_dirs(out)]
    partial = out / f"{KEPT_PREFIX}{max(numbers, default=0) + 1}.partial"
    try:
        partial.mkdir()
        fsync_path(out)
    except OSError as exc:
        raise output_error(out, exc) from None
    return finish_keeping(out)


def finish_keeping(out: Path) -> Path | None:
    done = None
    for partial in sorted(p for p in _kept_dirs(out) if p.name.endswith(".partial")):
        try:
            # the WAL first: the main file must never sit alone beside a new store's name
            for suffix in ("-wal", "-shm", ""):
                src = out / (STORE_NAME + suffix)
                if src.exists():
                    os.rename(src, partial / src.name)
            fsync_path(partial)
            done = partial.with_name(partial.name[: -len(".partial")])
            os.rename(partial, done)
            fsync_path(out)
        except OSError as exc:
            raise output_error(out, exc) from None
    return done


def make_dir(out: Path) -> None:
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise output_error(out, exc) from None
    if not os.access(out, os.W_OK | os.X_OK):
        raise output_error(out, PermissionError(errno.EACCES, "not writable"))


def disk_full(where: Path, doing: str, need_bytes: int = 0) -> DiskFullError:
    """The one message for a full disk: the directory, the free space, the space wanted."""
    where = Path(where)
    probe = where if where.exists() else where.parent
    try:
        free = shutil.disk_usage(probe).free
    except OSError:
        free = 0
    store = where / STORE_NAME if where.is_dir() else where
    size = sum(p.stat().st_size for p in (store, Path(f"{store}-wal")) if p.is_file())
    # the exports and the manifest take about as much again as the store itself
    need = max(need_bytes + 2 * size, 1 << 20)
    return DiskFullError(
        f"no space left on the device of {where} while {doing} ({_mb(free)} free; this run needs at least "
        f"about {_mb(need)} more). Every row committed before is kept. Free some space (or pass --out on "
        "another disk) and rerun the same command to resume."
    )


def _mb(n: int) -> str:
    return f"{n / 2**20:.1f} MB"


def output_error(where: Path, exc: OSError) -> OutputError:
    if is_disk_full(exc):
        return disk_full(where, "writing")
    reason = exc.strerror or str(exc)
    return OutputError(
        f"cannot write to the output directory {where} ({reason}). It must be a directory you can "
        "write to, not a file or a path under a file; pass --out (or set experiment.output) to "
        "another directory."
    )
