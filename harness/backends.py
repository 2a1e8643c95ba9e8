"""Execution backends behind one small interface.

A backend takes ``(dataset_label, UnitJob)`` pairs and yields ``(UnitJob, rows)`` as units
finish, in any order. Only the driver writes the store. Both backends run the same
``cellwork.run_unit`` with the same seeds, so their numbers are identical.

Rows with status ``failed`` come only from a cell's own error (``run_unit`` catches
those). A unit lost with a worker or with its data is run again; when that keeps
happening, or the cluster itself is gone, the run stops with :class:`ClusterError` and
records nothing for the lost units, so a plain rerun computes them.

Both worker backends have a watchdog: a unit that runs past its cells' time limits by
``WATCHDOG_MARGIN_S`` without returning (its worker stopped, or stuck in native code
where SIGALRM cannot reach) is recorded ``timeout`` and its worker taken out of the run
(``_watchdog`` holds the budget both share).

This module holds the interface (``make_backend``) and the local backends; the Dask
backend and its watchdog live in ``_dask_backend``.
"""

from __future__ import annotations

import multiprocessing as mp
import os
import signal
import time
from collections.abc import Iterable, Iterator
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool

# _DaskWatchdog is imported from here by the tests of the Dask watchdog
from harness._dask_backend import DaskCluster, _DaskWatchdog  # noqa: F401
from harness._watchdog import WATCHDOG_MARGIN_S, overdue_rows, unit_budget_s
from harness.cellwork import UnitJob, base_row, run_unit
from harness.schema import FAILED

__all__ = ["InProcess", "ProcessPool", "DaskCluster", "make_backend", "unit_budget_s", "WATCHDOG_MARGIN_S"]

_DATASETS: dict = {}  # filled in the driver before forking; workers inherit it


def _work(label: str, job: UnitJob) -> list[dict]:
    return run_unit(_DATASETS[label], job)


def _init_worker(driver_pid: int) -> None:
    """Pool-worker initializer: die with the driver; leave Ctrl-C and SIGTERM to it.

    Without PR_SET_PDEATHSIG a SIGKILL of the driver left its forked workers running
    forever. A terminal's Ctrl-C reaches every process of the group: workers ignore it
    (the driver stops them) instead of each printing a traceback; SIGTERM kills them
    outright rather than running the driver's inherited handler.
    """
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    try:
        import ctypes

        ctypes.CDLL(None, use_errno=True).prctl(1, signal.SIGKILL)  # 1 = PR_SET_PDEATHSIG
    except (OSError, AttributeError):  # pragma: no cover - not Linux
        return
    if os.getppid() != driver_pid:  # the driver died before prctl took effect
        os._exit(1)


class InProcess:
    """Runs units one after another in the driver (``--jobs 1``): lowest overhead."""

    def __init__(self, datasets: dict):
        self.datasets = datasets

    def run(self, work: Iterable[tuple[str, UnitJob]]) -> Iterator[tuple[UnitJob, list[dict]]]:
        for label, job in work:
            yield job, run_unit(self.datasets[label], job)

    def close(self) -> None:
        pass


class ProcessPool:
    """A pool of forked worker processes (``--jobs N``).

    A worker that dies (killed, out of memory at the OS level) breaks the pool: the pool
    is rebuilt and the units that were in flight are run again, each up to ``retries``
    times; a unit that kills its worker every time is recorded as failed with the reason.
    A watchdog kills the pool when a unit runs past its cells' time limits by
    ``WATCHDOG_MARGIN_S`` (the worker is stopped or stuck where SIGALRM cannot reach it);
    that unit is recorded as ``timeout``, the others in flight are run again.
    """

    def __init__(self, datasets: dict, jobs: int, retries: int = 1):
        self.datasets, self.jobs, self.retries = datasets, jobs, retries
        _DATASETS.clear()
        _DATASETS.update(datasets)
        self.pool = None

    def _new_pool(self):
        return ProcessPoolExecutor(
            self.jobs, mp_context=mp.get_context("fork"), initializer=_init_worker, initargs=(os.getpid(),)
        )

    def run(self, work):
        pending = list(work)[::-1]
        tries: dict[int, int] = {}
        self.pool = self._new_pool()
        inflight: dict = {}  # future -> (label, job, deadline or None)
        while pending or inflight:
            # at most one unit per worker, so a unit starts when it is submitted and its
            # deadline counts from there
            while pending and len(inflight) < self.jobs:
                label, job = pending.pop()
                budget = unit_budget_s(job)
                deadline = time.monotonic() + budget + WATCHDOG_MARGIN_S if budget else None
                inflight[self.pool.submit(_work, label, job)] = (label, job, deadline)
            deadlines = [d for _, _, d in inflight.values() if d is not None]
            timeout = max(0.0, min(deadlines) - time.monotonic()) + 0.05 if deadlines else None
            done, _ = wait(inflight, timeout=timeout, return_when=FIRST_COMPLETED)
            broken = False
            for fut in done:
                label, job, _ = inflight.pop(fut)
                try:
                    yield job, fut.result()
                except BrokenProcessPool:
                    broken = True
                    tries[id(job)] = tries.get(id(job), 0) + 1
                    if tries[id(job)] > self.retries:
                        yield (
                            job,
                            [
                                base_row(
                                    c, self.datasets[label], job, FAILED, "worker process died while running this unit"
                                )
                                for c in job.cells
                            ],
                        )
                    else:
                        pending.append((label, job))
            now = time.monotonic()
            overdue = [f for f, (_, _, d) in inflight.items() if d is not None and now > d and not f.done()]
            for fut in overdue:
                label, job, _ = inflight.pop(fut)
                yield job, overdue_rows(self.datasets, label, job, unit_budget_s(job))
            if overdue:
                self._kill_workers()
                broken = True
            if broken:
                # every other in-flight unit is lost with the pool: run them again
                pending.extend((label, job) for label, job, _ in inflight.values())
                inflight.clear()
                self.pool.shutdown(wait=False, cancel_futures=True)
                self.pool = self._new_pool()

    def _kill_workers(self) -> None:
        # SIGKILL: a stopped process never acts on SIGTERM
        for proc in list(getattr(self.pool, "_processes", {}).values()):
            if proc.is_alive():
                proc.kill()
        for proc in list(getattr(self.pool, "_processes", {}).values()):
            proc.join(5)

    def close(self) -> None:
        if self.pool is not None:
            self._kill_workers()
            self.pool.shutdown(wait=False, cancel_futures=True)


def make_backend(
    kind: str, datasets: dict, jobs: int, scheduler: str | None = None, retries: int = 1, memory_mb: int = 0
):
    """Build the backend for ``--backend``/``--jobs``.

    ``--jobs 1`` without a memory cap runs in the driver (lowest overhead); its time limit
    is SIGALRM alone, as there is no worker a watchdog could kill.
    """
    if kind == "dask":
        return DaskCluster(datasets, jobs, scheduler, retries)
    if jobs == 1 and not memory_mb:
        return InProcess(datasets)
    return ProcessPool(datasets, jobs, retries)
