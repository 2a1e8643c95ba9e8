"""Outputs that appear whole or not at all: a file written beside its name and renamed,
a directory built beside its name and swapped in.

A kill or a full disk at any point leaves the previous output (or none), never a
truncated one; two writers at once each build their own temporary and the later swap
wins. Linux's ``renameat2(RENAME_EXCHANGE)`` swaps two directories in one step; where
it is missing, the old directory is renamed aside first (a kill between the two renames
then leaves no ``report/`` but its previous copy, never a half-written one).
"""

from __future__ import annotations

import contextlib
import ctypes
import errno
import os
import shutil
import uuid
from pathlib import Path

__all__ = ["temporary_beside", "swap_in_dir", "fsync_path", "is_disk_full", "remove_stale_temporaries"]

_AT_FDCWD = -100
_RENAME_EXCHANGE = 2


def is_disk_full(exc: BaseException) -> bool:
    """True for "no space left" / "quota exceeded" from the OS or from SQLite."""
    if isinstance(exc, OSError) and exc.errno in (errno.ENOSPC, errno.EDQUOT):
        return True
    return "database or disk is full" in str(exc)


def fsync_path(path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _tmp_name(path: Path) -> Path:
    # hidden, unique per writer: two processes never share a temporary
    return path.with_name(f".{path.name}.tmp-{os.getpid()}-{uuid.uuid4().hex[:8]}")


@contextlib.contextmanager
def temporary_beside(path):
    """Yield a temporary path beside ``path``; on success it replaces ``path`` atomically."""
    path = Path(path)
    remove_stale_temporaries(path)
    tmp = _tmp_name(path)
    try:
        yield tmp
        fsync_path(tmp)
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()


def _exchange(a: Path, b: Path) -> bool:
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        renameat2 = libc.renameat2
    except (OSError, AttributeError):
        return False
    res = renameat2(_AT_FDCWD, os.fsencode(a), _AT_FDCWD, os.fsencode(b), _RENAME_EXCHANGE)
    return res == 0


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)  # signal 0: an existence check; PermissionError means it exists
    except ProcessLookupError:
        return False
    except PermissionError:
        pass
    return True


def remove_stale_temporaries(path) -> int:
    """Remove temporaries beside ``path`` left by writers that were killed; return how many.

    A temporary's name carries its writer's process id: one whose process is gone can
    only be the remains of a kill (a live writer's temporary is never touched).
    """
    path = Path(path)
    removed = 0
    for tmp in path.parent.glob(f".{path.name}.tmp-*-*"):
        try:
            pid = int(tmp.name[len(f".{path.name}.tmp-") :].split("-")[0])
        except ValueError:
            continue
        if pid == os.getpid() or _pid_alive(pid):
            continue
        if tmp.is_dir():
            shutil.rmtree(tmp, ignore_errors=True)
        else:
            with contextlib.suppress(FileNotFoundError):
                tmp.unlink()
        removed += 1
    return removed


def _swap(tmp: Path, final: Path) -> None:
    """Put ``tmp`` at ``final``; whatever was at ``final`` ends at ``tmp`` (or is removed)."""
    for _ in range(100):  # another writer may create or swap ``final`` between our steps
        if final.exists():
            if _exchange(tmp, final):
                return  # tmp now holds the previous directory, removed by the caller
            aside = _tmp_name(final)
            try:
                os.rename(final, aside)
            except FileNotFoundError:
                continue  # the other writer moved it aside first: try again
            shutil.rmtree(aside, ignore_errors=True)
        try:
            os.rename(tmp, final)
            return
        except OSError as exc:
            if exc.errno not in (errno.ENOTEMPTY, errno.EEXIST):
                raise
            # another writer's directory arrived first: swap ours in over it
    raise OSError(errno.EBUSY, f"could not swap {tmp} into {final}: another writer kept replacing it")


@contextlib.contextmanager
def swap_in_dir(final):
    """Yield a new empty directory beside ``final``; on success it takes ``final``'s place."""
    final = Path(final)
    remove_stale_temporaries(final)
    tmp = _tmp_name(final)
    tmp.mkdir(parents=True)
    try:
        yield tmp
        _swap(tmp, final)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
