"""A unit's time budget, and the rows recorded when a watchdog stops a unit past it.

Shared by the worker backends, ``backends.ProcessPool`` and ``_dask_backend.DaskCluster``.
"""

from __future__ import annotations

from harness.cellwork import UnitJob, base_row
from harness.schema import TIMEOUT

__all__ = ["WATCHDOG_MARGIN_S", "overdue_rows", "unit_budget_s"]

# how far past the sum of its cells' time limits a unit may run before its worker is
# killed: the limits are enforced inside the worker (SIGALRM); the watchdog is for a worker
# that cannot enforce them (stopped, or stuck in native code that never returns)
WATCHDOG_MARGIN_S = 5.0


def unit_budget_s(job: UnitJob) -> float | None:
    """Seconds a unit may take: its encoding's limit plus each model cell's (None: unbounded)."""
    limits = [job.timeout_s] + [c.model.cell_timeout_s or job.timeout_s for c in job.cells]
    if not all(limits):
        return None
    # a tuned unit encodes and fits once per candidate and inner fold, then refits
    return float(sum(limits)) * job.fits_per_cell


def overdue_rows(datasets, label: str, job: UnitJob, budget: float, fate: str = "killed it") -> list[dict]:
    """One ``timeout`` row per cell of a unit the watchdog stopped; ``fate`` ends the reason."""
    why = (
        f"worker ran {budget + WATCHDOG_MARGIN_S:g} s, past the unit's time limits of {budget:g} s in total "
        "(execution.cell_timeout_s, models.<label>.cell_timeout_s), without returning (stopped or stuck "
        f"in native code); the watchdog {fate}"
    )
    return [base_row(c, datasets[label], job, TIMEOUT, why) for c in job.cells]
