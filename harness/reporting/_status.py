"""The section on cells that produced no score, grouped with their reasons."""

from __future__ import annotations

from pathlib import Path

from harness.reporting import tables
from harness.reporting._analysis import Analysis
from harness.reporting._blocks import table
from harness.reporting._html import Heading, Para

__all__ = ["status_section"]


def status_section(a: Analysis, root: Path) -> list:
    """Failed, timed-out, skipped and not-applicable cells with reasons."""
    res = a.run.results
    out = [Heading("Cells without a score", 2, "not-run")]
    counts = res["status"].value_counts()
    out.append(Para("Cells by status: " + ", ".join(f"{s} {n}" for s, n in counts.items()) + f" (total {len(res)})."))
    st = tables.status_table(res, a.run.private)
    if st.empty:
        return out + [Para("Every cell produced a score.")]
    out.append(
        table(st, root, "cells_without_score", "Cells without a score, grouped by status, model, encoder and reason.")
    )
    return out
