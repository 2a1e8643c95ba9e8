"""The Dask backend: units on a Dask cluster (an existing one or a local one), and its watchdog.

``DaskCluster`` has the interface of every backend (``backends``): it takes
``(dataset_label, UnitJob)`` pairs and yields ``(UnitJob, rows)`` as units finish. Units run
in worker threads, where SIGALRM cannot reach them; ``_DaskWatchdog``, run by the driver
every ``DaskCluster.CHECK_S``, records a unit past ``unit_budget_s`` + ``WATCHDOG_MARGIN_S``
as ``timeout`` and takes its worker, and any silent worker, out of the run.
``distributed`` is imported only when a cluster is built.
"""

from __future__ import annotations

import contextlib
import logging
import os
import signal
import time

from harness._watchdog import WATCHDOG_MARGIN_S, overdue_rows, unit_budget_s
from harness.cellwork import UnitJob, base_row, run_unit
from harness.errors import ClusterError, ConfigError
from harness.schema import FAILED

__all__ = ["DaskCluster"]


def _silence(*names: str) -> dict:
    """Disable the named loggers and their children; returns their previous state."""
    known = [n for n in logging.root.manager.loggerDict if any(n == m or n.startswith(m + ".") for m in names)]
    loggers = {lg: lg.disabled for lg in map(logging.getLogger, set(known) | set(names))}
    for lg in loggers:
        lg.disabled = True
    return loggers


def _killed_workers(fut) -> bool:
    """True when Dask gave up on the task because it killed worker after worker."""
    if fut.status != "error":
        return False
    from distributed.scheduler import KilledWorker

    return isinstance(fut.exception(), KilledWorker)


_NOT_YET = object()  # a finished unit whose result its worker has not handed over yet


def _dask_unit(dataset, job: UnitJob, topic: str) -> list[dict]:
    """``run_unit`` on a Dask worker, telling the driver first that the unit has started.

    The scheduler lists the tasks assigned to a worker, queued ones included; only this
    event says which one is executing, so the watchdog times a unit from its real start.
    """
    from distributed import get_worker

    worker = get_worker()
    worker.log_event(topic, {"key": worker.get_current_task(), "worker": worker.address})
    return run_unit(dataset, job)


class _DaskWatchdog:
    """Finds the Dask units that overran their limits and the workers to take out.

    Two verdicts, both at the unit's ``unit_budget_s`` + ``WATCHDOG_MARGIN_S``:

    - *overdue*: a unit started on a worker (its task's event) and has not returned for
      that long; the worker is stopped, or stuck in native code where no limit reaches.
      The unit is recorded ``timeout`` and its worker removed.
    - *silent*: a worker holds a unit that has not started there, a finished unit's
      result, or the data a waiting unit needs, and has sent the scheduler no heartbeat
      for that long (stopped between two units). The worker is removed; the unit runs
      again elsewhere and nothing is recorded for it.

    A worker is removed through the scheduler (``remove_worker``): it forgets the worker
    at once and reschedules the tasks queued there, without waiting for the worker to
    answer, which a stopped one never does. A unit without a time limit is never timed.
    """

    def __init__(self, client, clock=time.monotonic):
        self.client, self.clock = client, clock
        self.topic = f"harness-unit-started-{client.id}"
        self.started: dict = {}  # task key -> (worker, driver time its start event arrived)
        self.held: dict = {}  # (task key, worker) -> driver time the key was first seen there
        self.beats: dict = {}  # worker -> (last heartbeat as the scheduler saw it, driver time it changed)
        self.where: dict = {}  # task key -> workers it is queued, executing or held on (last check)
        # before the first submission: the subscription and the tasks share one ordered stream
        client.subscribe_topic(self.topic, self._on_start)

    def _on_start(self, event) -> None:
        # called on the client's event-loop thread; one dict assignment, atomic under the GIL
        msg = event[1]
        self.started[msg["key"]] = (msg["worker"], self.clock())

    def check(self, futures: dict, finished: set, data: dict | None = None) -> tuple[list, set]:
        """``(overdue futures, workers to remove)`` among ``futures`` (future -> (label, job)).

        ``finished`` holds the futures whose results could not be fetched yet, held by
        the workers that have their results; ``data`` maps a dataset label to its
        scattered future: a unit waiting for its data is held by the workers that have it.
        """
        now = self.clock()
        self._heartbeats(now)
        where = {key: [w] for w, keys in self.client.processing().items() for key in keys}
        if finished:
            where.update(self.who_has(finished))
        self.where = where
        holders = self.who_has((data or {}).values())
        copies = {label: holders.get(fut.key, []) for label, fut in (data or {}).items()}
        overdue, stuck, busy, silent = [], set(), set(), set()
        for fut, (label, job) in futures.items():
            budget = unit_budget_s(job)
            if not budget:
                continue
            limit = budget + WATCHDOG_MARGIN_S
            places = [*where.get(fut.key, ()), *(() if fut in finished else copies.get(label, ()))]
            for worker in dict.fromkeys(places):
                since = self.held.setdefault((fut.key, worker), now)
                start = self.started.get(fut.key)
                if fut not in finished and start and start[0] == worker:
                    busy.add(worker)  # a unit executing there: its own clock decides
                    if now - start[1] > limit and not fut.done():
                        overdue.append(fut)
                        stuck.add(worker)
                elif now - max(since, self.beats.get(worker, (None, now))[1]) > limit:
                    silent.add(worker)
        self._forget(futures)
        return overdue, stuck | (silent - busy)

    def who_has(self, futures) -> dict:
        """Task key -> workers holding its result (``Client.who_has`` refuses cancelled futures)."""
        keys = [fut.key for fut in futures]
        return self.client.sync(self.client.scheduler.who_has, keys=keys) if keys else {}

    def _heartbeats(self, now: float) -> dict:
        """The scheduler's workers; notes when each one's last heartbeat time changed."""
        workers = self.client.scheduler_info(n_workers=-1)["workers"]
        for worker, info in workers.items():
            seen = info.get("last_seen")
            if self.beats.get(worker, (object(),))[0] != seen:
                self.beats[worker] = (seen, now)
        for worker in set(self.beats) - set(workers):
            del self.beats[worker]
        return workers

    def live_workers(self) -> list[str]:
        """Workers that have sent a heartbeat within ``WATCHDOG_MARGIN_S``.

        Two tests, as a worker seen for the first time has no history here: its last
        heartbeat is close to the newest one of any worker (both on the scheduler's
        clock), and, once seen before, its heartbeat has changed since, by driver time.
        A worker stopped within the margin still passes.
        """
        now = self.clock()
        workers = self._heartbeats(now)
        newest = max((info.get("last_seen") or 0.0 for info in workers.values()), default=0.0)
        return [
            w
            for w, info in workers.items()
            if newest - (info.get("last_seen") or 0.0) < WATCHDOG_MARGIN_S
            and now - self.beats[w][1] < WATCHDOG_MARGIN_S
        ]

    def _forget(self, futures: dict) -> None:
        live = {fut.key for fut in futures}
        # list(): one C-level copy; the event-loop thread may add a key meanwhile
        for key in list(self.started):
            if key not in live:
                self.started.pop(key, None)
        for pair in [p for p in self.held if p[0] not in live]:
            del self.held[pair]

    def remove(self, worker: str) -> None:
        """Make the scheduler forget ``worker`` and reschedule what was queued there."""
        # expected: the units queued there are not to blame (no KilledWorker count for them)
        self.client.sync(
            self.client.scheduler.unregister,
            address=worker,
            stimulus_id=f"harness-watchdog-{time.time()}",
            expected=True,
        )
        self.beats.pop(worker, None)

    def close(self) -> None:
        with contextlib.suppress(Exception):
            self.client.unsubscribe_topic(self.topic)


class DaskCluster:
    """Runs units on a Dask cluster: an existing one (``scheduler`` address) or a local one.

    Workers need the ``harness`` package installed. The driver keeps every dataset and
    scatters it to the workers; a task that fails because its worker or its data was lost
    is submitted again, with the data sent again when its copies are gone, up to
    ``retries`` times per unit. A lost scheduler stops the run with :class:`ClusterError`.
    """

    POLL_S = 0.02  # how often the driver looks at its futures
    CHECK_S = 1.0  # how often it checks that the scheduler is there and runs the watchdog
    GATHER_S = 2.0  # first wait for a finished unit's result (doubled on each later try)
    SCATTER_S = 20.0  # first wait for a dataset to reach the workers (doubled on each later try)
    NO_WORKER_S = 120.0  # how long units may wait for a live worker to take their data

    def __init__(self, datasets: dict, jobs: int, scheduler: str | None, retries: int = 1):
        try:
            from distributed import Client, LocalCluster
        except ImportError as exc:  # pragma: no cover - dependency of the package
            raise ConfigError(f"the dask backend needs `distributed` installed: {exc}") from None
        self.datasets, self.retries, self.scheduler = datasets, retries, scheduler
        self.cluster = None
        self.client = None
        # distributed logs every rescheduled key and closed connection to stderr; the run
        # handles those itself and reports what matters in one message
        self._quiet = _silence("distributed", "tornado", "asyncio")
        try:
            if scheduler:
                self.client = Client(scheduler, timeout="20s")
            else:
                # the worker processes inherit an ignored SIGINT: a terminal's Ctrl-C then
                # stops only the driver, which closes the cluster, instead of every worker
                # printing its own traceback
                previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
                try:
                    self.cluster = LocalCluster(
                        n_workers=jobs,
                        threads_per_worker=1,
                        processes=True,
                        # a free port: a fixed one taken by another cluster prints a warning
                        dashboard_address=":0",
                        # the workers' own log lines (tasks cancelled at close) are not the
                        # user's business; a unit's failure is in its row
                        silence_logs=logging.CRITICAL,
                    )
                finally:
                    signal.signal(signal.SIGINT, previous)
                self.client = Client(self.cluster)
        except (OSError, ValueError, TypeError) as exc:
            self.close()
            raise ConfigError(
                f"cannot reach the Dask scheduler at '{scheduler}' (--scheduler / execution.scheduler): "
                f"{type(exc).__name__}: {exc}. Give an address like tcp://HOST:8786 where `dask scheduler` runs, "
                "or omit the address to use a local cluster."
            ) from None
        self.remote: dict = {}
        self.watchdog = None
        self.spared: set[int] = set()  # units lost to a worker the watchdog removed: a free retry
        self.scatters: dict[str, int] = {}  # dataset label -> sends that timed out

    def _data(self, label: str):
        """The scattered dataset, sent again when every copy was lost with its workers.

        Sent only to workers alive by their heartbeats: a stopped worker would block the
        transfer, and the driver with it. None while there is no such worker.
        """
        fut = self.remote.get(label)
        if fut is None or fut.status != "finished":
            live = self.watchdog.live_workers()
            if not live:
                return None
            tries = self.scatters.get(label, 0)
            try:
                # Client.scatter has no time limit on the transfer itself; a worker stopped
                # within the margin is excluded by the next try. One copy, not a broadcast:
                # the scheduler's memory manager drops extra replicas anyway, and a replicate
                # stuck on a stopped worker holds the scheduler's replica lock, blocking every
                # later one
                fut = self.client.sync(
                    lambda: self.client.scatter(self.datasets[label], workers=live, hash=False, asynchronous=True),
                    callback_timeout=self.SCATTER_S * 2**tries,
                )
            except TimeoutError:
                self.scatters[label] = tries + 1
                return None
            self.remote[label] = fut
        return fut

    def _submit(self, pending: list, futures: dict) -> list:
        """Submit the pending units; returns those whose data found no live worker."""
        left = []
        for label, job in pending:
            data = self._guard(self._data, label)
            if data is None:
                left.append((label, job))
                continue
            fut = self._guard(self.client.submit, _dask_unit, data, job, self.watchdog.topic, pure=False)
            futures[fut] = (label, job)
        return left

    def run(self, work):
        self.watchdog = self._guard(_DaskWatchdog, self.client)
        futures: dict = {}  # future -> (label, job)
        pending = list(work)  # units to submit, or to submit again
        tries: dict[int, int] = {}
        unclaimed: dict = {}  # finished future whose result its worker did not hand over -> (tries, retry at)
        checked = waited = time.monotonic()
        submit_at = 0.0
        while futures or pending:
            now = time.monotonic()
            if pending and now >= submit_at:
                pending = self._submit(pending, futures)
                submit_at = now + self.CHECK_S
            if not pending:
                waited = now
            elif now - waited > self.NO_WORKER_S:
                raise self._no_live_worker()
            if now - checked > self.CHECK_S:
                # on a timer, not only while idle: a healthy worker finishing units must
                # not hide a stopped one
                self._check_scheduler()
                yield from self._watch(futures, unclaimed)
                checked = time.monotonic()
            # poll the futures' local state: distributed.wait raises as soon as one future is
            # cancelled (its data lost), which is exactly the case handled here
            done = [f for f in futures if f.done() and unclaimed.get(f, (0, 0.0))[1] <= now]
            if not done:
                time.sleep(self.POLL_S)
                continue
            for fut in done:
                rows = self._rows(fut, unclaimed)
                if rows is _NOT_YET:
                    continue
                unclaimed.pop(fut, None)
                label, job = futures.pop(fut)
                if rows is None:
                    rows = self._lost(fut, label, job, tries)
                if rows is None:
                    pending.append((label, job))
                    submit_at = 0.0
                else:
                    yield job, rows

    def _lost(self, fut, label: str, job: UnitJob, tries: dict) -> list[dict] | None:
        """A unit lost with its worker or its data: None to run it again, or its rows."""
        self._check_scheduler()
        if id(job) in self.spared:
            # lost because the watchdog removed a worker: not the cluster's failure
            self.spared.discard(id(job))
            return None
        tries[id(job)] = tries.get(id(job), 0) + 1
        if tries[id(job)] <= self.retries:
            return None  # _data sends the data again if its copies went with the worker
        if _killed_workers(fut):
            # the unit's own doing (a crash in native code, memory): record it
            return [
                base_row(
                    c,
                    self.datasets[label],
                    job,
                    FAILED,
                    f"the unit's task killed Dask workers {tries[id(job)]} times (KilledWorker)",
                )
                for c in job.cells
            ]
        raise ClusterError(
            f"a unit of dataset '{label}' was lost with its Dask worker or its data "
            f"{tries[id(job)]} times (execution.retries = {self.retries}); the run stopped and "
            "recorded nothing for it. Check the workers' logs, then rerun the same command "
            "to compute what is missing (raise execution.retries on an unstable cluster)."
        )

    def _no_live_worker(self) -> ClusterError:
        where = self.scheduler or "the local cluster"
        return ClusterError(
            f"for {self.NO_WORKER_S:g} s no worker of the Dask cluster at {where} took a dataset: none "
            "sent the scheduler a heartbeat, or none received the data in time (stopped, stuck or gone). "
            "The run stopped; every unit finished before is kept. Start or resume workers, then rerun "
            "the same command to compute the rest."
        )

    def _watch(self, futures: dict, unclaimed: dict):
        """Record overdue units as ``timeout`` and take their workers, and silent ones, out."""
        overdue, drop = self._guard(self.watchdog.check, futures, set(unclaimed), self.remote)
        fate = "killed it" if self.cluster is not None else "removed it from the cluster"
        for fut in overdue:
            label, job = futures.pop(fut)
            unclaimed.pop(fut, None)
            fut.cancel()  # before the worker goes: the scheduler must not run it again elsewhere
            yield job, overdue_rows(self.datasets, label, job, unit_budget_s(job), fate)
        if drop:
            self._spare(futures, drop)
        for worker in drop:
            self._guard(self.watchdog.remove, worker)
            self._kill_local(worker)

    def _spare(self, futures: dict, drop: set) -> None:
        """Give a free retry to the units that removing ``drop`` may lose.

        Those queued there are rescheduled, but a scattered dataset often has one copy
        (it is sent to one worker, and the scheduler's memory manager drops the replicas
        others fetch); when that copy is on a removed worker, every pending unit of the
        dataset is lost and sent again.
        """
        holders = self._guard(self.watchdog.who_has, self.remote.values())
        alone = {label for label, fut in self.remote.items() if set(holders.get(fut.key, ())) <= drop}
        for fut, (label, job) in futures.items():
            if label in alone or drop & set(self.watchdog.where.get(fut.key, ())):
                self.spared.add(id(job))

    def _kill_local(self, worker: str) -> None:
        """SIGKILL a worker process of the local cluster (a stopped one never acts on SIGTERM).

        Its nanny starts a fresh worker in its place; nothing waits for that. Workers of an
        external cluster are not ours to kill: they are only removed from the scheduler.
        """
        if self.cluster is None:
            return
        for nanny in list(self.cluster.workers.values()):
            pid = getattr(nanny, "pid", None)
            if getattr(nanny, "worker_address", None) == worker and pid:
                with contextlib.suppress(ProcessLookupError):
                    os.kill(pid, signal.SIGKILL)

    def _rows(self, fut, unclaimed: dict):
        """The unit's rows; None when the task or its result was lost with a worker;
        ``_NOT_YET`` when its worker did not hand the result over in time (it may be
        stopped: the watchdog drops it and the scheduler computes the unit again)."""
        if fut.status != "finished":
            return None
        attempts, _ = unclaimed.get(fut, (0, 0.0))
        try:
            return fut.result(timeout=min(self.GATHER_S * 2**attempts, 120))
        except TimeoutError:
            unclaimed[fut] = (attempts + 1, time.monotonic() + self.CHECK_S)
            return _NOT_YET
        except Exception:  # noqa: BLE001 - the result's worker died before it was gathered
            self._check_scheduler()
            return None

    def _check_scheduler(self) -> None:
        if self.client.status not in ("running", "newly-created"):
            raise self._lost_scheduler()

    def _guard(self, fn, *args, **kwargs):
        """Call ``fn`` and turn a lost connection to the scheduler into :class:`ClusterError`."""
        try:
            return fn(*args, **kwargs)
        except (OSError, RuntimeError) as exc:  # timeouts and closed comms included
            raise self._lost_scheduler(exc) from None
        except Exception as exc:  # distributed's CancelledError, CommClosedError ...: re-raised while connected
            if self.client.status in ("running", "newly-created"):
                raise
            raise self._lost_scheduler(exc) from None

    def _lost_scheduler(self, exc: BaseException | None = None) -> ClusterError:
        where = self.scheduler or "the local cluster"
        why = f" ({type(exc).__name__})" if exc is not None else ""
        return ClusterError(
            f"lost the connection to the Dask scheduler at {where}{why}; the run stopped. Every unit "
            "finished before is kept in the store and nothing was recorded as failed. Restart the "
            "scheduler and rerun the same command (or rerun with --backend local) to compute the rest."
        )

    def close(self) -> None:
        try:
            if self.watchdog is not None:
                self.watchdog.close()
            if self.client is not None:
                self.client.close(timeout=10)
            if self.cluster is not None:
                self.cluster.close(timeout=10)
        except Exception:  # noqa: BLE001 - closing a lost cluster may fail; nothing is lost
            pass
        finally:
            # a client that lost its scheduler may still log from its event-loop thread:
            # its loggers stay quiet then (the process is about to end with our message)
            if self.client is None or self.client.status == "closed":
                for lg, disabled in self._quiet.items():
                    lg.disabled = disabled
