"""Execution backends behind one small interface.

A backend takes ``(dataset_label, UnitJob)`` pairs and yields ``(UnitJob, rows)`` as units
finish, in any order. Only the driver writes the store. Both backends run the same
``cellwork.run_unit`` with the same seeds, so their numbers are identical.
"""

from __future__ import annotations

import multiprocessing as mp
import os
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from typing import Iterable, Iterator

from harness.cellwork import UnitJob, base_row, run_unit
from harness.errors import ConfigError

__all__ = ["InProcess", "ProcessPool", "DaskCluster", "make_backend"]

_DATASETS: dict = {}  # filled in the driver before forking; workers inherit it


def _work(label: str, job: UnitJob) -> list[dict]:
    return run_unit(_DATASETS[label], job)


def _die_with_driver(driver_pid: int) -> None:
    """Pool-worker initializer: ask Linux to SIGKILL this worker when the driver dies.

    Without it a SIGKILL of the driver left its forked workers running forever (blocked
    on the task queue, which their siblings keep open), burning memory and CPU.
    Best effort: a no-op where ``prctl`` is unavailable.
    """
    try:
        import ctypes
        import signal

        ctypes.CDLL(None, use_errno=True).prctl(1, signal.SIGKILL)  # 1 = PR_SET_PDEATHSIG
    except (OSError, AttributeError):  # pragma: no cover - not Linux
        return
    if os.getppid() != driver_pid:  # the driver died before prctl took effect
        os._exit(1)


def _died(datasets, label: str, job: UnitJob, why: str) -> list[dict]:
    return [base_row(c, datasets[label], job, "failed", why) for c in job.cells]


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
    is rebuilt and the units that were in flight are retried up to ``retries`` times,
    then recorded as failed with the reason.
    """

    def __init__(self, datasets: dict, jobs: int, retries: int = 1):
        self.datasets, self.jobs, self.retries = datasets, jobs, retries
        _DATASETS.clear()
        _DATASETS.update(datasets)
        self.pool = None

    def _new_pool(self):
        return ProcessPoolExecutor(
            self.jobs, mp_context=mp.get_context("fork"), initializer=_die_with_driver, initargs=(os.getpid(),)
        )

    def run(self, work):
        pending = list(work)[::-1]
        tries: dict[int, int] = {}
        self.pool = self._new_pool()
        inflight = {}
        while pending or inflight:
            while pending and len(inflight) < 2 * self.jobs:
                label, job = pending.pop()
                inflight[self.pool.submit(_work, label, job)] = (label, job)
            done, _ = wait(inflight, return_when=FIRST_COMPLETED)
            broken = False
            for fut in done:
                label, job = inflight.pop(fut)
                try:
                    yield job, fut.result()
                except BrokenProcessPool:
                    broken = True
                    key = id(job)
                    tries[key] = tries.get(key, 0) + 1
                    if tries[key] > self.retries:
                        yield job, _died(self.datasets, label, job, "worker process died while running this unit")
                    else:
                        pending.append((label, job))
            if broken:
                # every other in-flight unit is lost with the pool: requeue them too
                pending.extend(inflight.values())
                inflight.clear()
                self.pool.shutdown(wait=False, cancel_futures=True)
                self.pool = self._new_pool()

    def close(self) -> None:
        if self.pool is not None:
            for proc in list(getattr(self.pool, "_processes", {}).values()):
                if proc.is_alive():
                    proc.terminate()
            self.pool.shutdown(wait=False, cancel_futures=True)


class DaskCluster:
    """Runs units on a Dask cluster: an existing one (``scheduler`` address) or a local one.

    Workers need the ``harness`` package installed. Datasets are broadcast once per run.
    A task whose worker dies is retried by Dask (``retries``); one that still fails is
    recorded as failed.
    """

    def __init__(self, datasets: dict, jobs: int, scheduler: str | None, retries: int = 1):
        try:
            from distributed import Client, LocalCluster
        except ImportError as exc:  # pragma: no cover - dependency of the package
            raise ConfigError(f"the dask backend needs `distributed` installed: {exc}") from None
        self.datasets, self.retries = datasets, retries
        self.cluster = None
        try:
            if scheduler:
                self.client = Client(scheduler, timeout="20s")
            else:
                self.cluster = LocalCluster(
                    n_workers=jobs, threads_per_worker=1, processes=True, dashboard_address=None
                )
                self.client = Client(self.cluster)
        except OSError as exc:
            raise ConfigError(
                f"cannot reach the Dask scheduler at '{scheduler}' (--scheduler / execution.scheduler): {exc}. "
                "Start a scheduler there, or omit the address to use a local cluster."
            ) from None
        self.remote = {k: self.client.scatter(v, broadcast=True) for k, v in datasets.items()}

    def run(self, work):
        from distributed import as_completed

        futures = {}
        for label, job in work:
            fut = self.client.submit(run_unit, self.remote[label], job, pure=False, retries=self.retries)
            futures[fut] = (label, job)
        for fut in as_completed(list(futures)):
            label, job = futures.pop(fut)
            try:
                yield job, fut.result()
            except Exception as exc:  # noqa: BLE001 - KilledWorker and friends
                yield job, _died(self.datasets, label, job, f"Dask task failed: {type(exc).__name__}: {exc}")

    def close(self) -> None:
        self.client.close()
        if self.cluster is not None:
            self.cluster.close()


def make_backend(kind: str, datasets: dict, jobs: int, scheduler: str | None = None, retries: int = 1, memory_mb: int = 0):
    """Build the backend for ``--backend``/``--jobs``."""
    if kind == "dask":
        return DaskCluster(datasets, jobs, scheduler, retries)
    if jobs == 1 and not memory_mb:
        return InProcess(datasets)
    return ProcessPool(datasets, jobs, retries)
