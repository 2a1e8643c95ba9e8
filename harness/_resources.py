"""Per-cell resource guards: a time limit, a memory limit, and peak-RSS measurement.

All three are best-effort by design and documented as such: the time limit uses SIGALRM
and so works only on a process's main thread (the local backend; Dask cells are checked
after the fact); the memory limit caps the address space above the current size, so an
allocation past it raises ``MemoryError`` in the cell rather than killing the machine.
"""

from __future__ import annotations

import contextlib
import resource
import signal
import threading

__all__ = ["CellTimeout", "time_limit", "memory_limit", "reset_peak_rss", "peak_rss_mb"]


class CellTimeout(Exception):
    """Raised inside a cell that ran past ``execution.cell_timeout_s``."""


def _on_main_thread() -> bool:
    return threading.current_thread() is threading.main_thread()


@contextlib.contextmanager
def time_limit(seconds: float | None, key: str = "execution.cell_timeout_s"):
    """Raise :class:`CellTimeout` in the block after ``seconds`` (main thread only).

    ``key`` is the config key that set the limit; the message names it so that a user
    knows which value to raise.
    """
    if not seconds or not _on_main_thread():
        yield
        return

    def _alarm(signum, frame):
        raise CellTimeout(f"cell exceeded the time limit of {seconds:g} s ({key})")

    previous = signal.signal(signal.SIGALRM, _alarm)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)


def _vm_bytes() -> int:
    with open("/proc/self/statm") as fh:
        return int(fh.read().split()[0]) * resource.getpagesize()


@contextlib.contextmanager
def memory_limit(megabytes: int | None):
    """Cap further address-space growth in the block at ``megabytes`` (0/None: no cap)."""
    if not megabytes:
        yield
        return
    soft, hard = resource.getrlimit(resource.RLIMIT_AS)
    cap = _vm_bytes() + int(megabytes) * 2**20
    if hard != resource.RLIM_INFINITY:
        cap = min(cap, hard)
    resource.setrlimit(resource.RLIMIT_AS, (cap, hard))
    try:
        yield
    finally:
        resource.setrlimit(resource.RLIMIT_AS, (soft, hard))


def reset_peak_rss() -> None:
    """Reset the kernel's high-water mark of this process's RSS (Linux ``clear_refs`` 5)."""
    try:
        with open("/proc/self/clear_refs", "w") as fh:
            fh.write("5")
    except OSError:
        pass


def peak_rss_mb() -> float:
    """Peak resident set size since the last reset, in MiB."""
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024.0
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
