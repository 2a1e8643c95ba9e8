"""The section on what changed against another run (``levelfold report --compare``)."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from harness import stats
from harness.reporting._analysis import Analysis
from harness.reporting._blocks import table
from harness.reporting._html import Bullets, Heading, Para
from harness.reporting._run import Run
from harness.reporting.tables import metric_name

__all__ = ["compare_section"]


def _rank_changes(a: Analysis, b: Analysis) -> pd.DataFrame:
    rows = []
    for key in dict.fromkeys(list(b.decisions) + list(a.decisions)):
        ra, rb = a.decisions.get(key), b.decisions.get(key)
        ca, cb = a.comparisons.get(key), b.comparisons.get(key)
        both = ca is not None and cb is not None
        shared = (set(ca.ranks.index) & set(cb.ranks.index)) if both else set()
        delta = (
            (ca.ranks["avg_rank"].reindex(sorted(shared)) - cb.ranks["avg_rank"].reindex(sorted(shared)))
            if shared
            else pd.Series()
        )
        moved = ", ".join(f"{e} {d:+.2f}" for e, d in delta.items() if abs(d) >= 0.005)
        rows.append(
            {
                "model": key[0],
                "metric": metric_name(key[1]),
                "chosen before": " | ".join(rb.choice) if rb and rb.choice else "—",
                "chosen now": " | ".join(ra.choice) if ra and ra.choice else "—",
                "datasets before": rb.n_datasets if rb else 0,
                "datasets now": ra.n_datasets if ra else 0,
                "average-rank change (shared encoders)": moved or "none",
            }
        )
    return pd.DataFrame(rows)


def _metric_deltas(a: Run, b: Run) -> pd.DataFrame:
    def means(run):
        ok = stats.ok_rows(run.results)
        parts = [
            ok.loc[ok["primary_metric"] == m]
            .groupby(["dataset", "encoder", "model"])[m]
            .mean()
            .rename("value")
            .reset_index()
            .assign(metric=m)
            for m in pd.unique(ok["primary_metric"])
        ]  # loop over metric names
        return pd.concat(parts) if parts else pd.DataFrame(columns=["dataset", "encoder", "model", "value", "metric"])

    j = means(a).merge(means(b), on=["dataset", "encoder", "model", "metric"], suffixes=("_now", "_before"))
    j["delta"] = j["value_now"] - j["value_before"]
    return j.reindex(j["delta"].abs().sort_values(ascending=False).index)


def _added_removed(now, before, what: str) -> str:
    add, gone = sorted(set(now) - set(before)), sorted(set(before) - set(now))
    return f"{what}: added {', '.join(map(str, add)) or 'none'}; removed {', '.join(map(str, gone)) or 'none'}."


def compare_section(a: Analysis, b: Analysis, root: Path) -> list:
    """What changed from run ``b`` (before) to run ``a`` (now)."""
    ra, rb = a.run.results, b.run.results
    ids_a, ids_b = set(ra["cell_id"]), set(rb["cell_id"])
    out = [
        Heading("Changes against the other run", 2, "compare"),
        Para(
            f"Before: {b.run.directory} (config hash "
            f"{b.run.manifest.config_hash or '?'}); now: {a.run.directory} "
            f"(config hash {a.run.manifest.config_hash or '?'})."
        ),
        Bullets(
            (
                _added_removed(ra["encoder"].unique(), rb["encoder"].unique(), "Encoders"),
                _added_removed(ra["dataset"].unique(), rb["dataset"].unique(), "Datasets"),
                _added_removed(ra["model"].unique(), rb["model"].unique(), "Models"),
                f"Cells: {len(ids_a - ids_b)} added, {len(ids_b - ids_a)} removed, "
                f"{len(ids_a & ids_b)} identical (same content hash).",
            )
        ),
    ]
    changes = _rank_changes(a, b)
    if len(changes):
        out.append(
            table(
                changes, root, "compare_recommendations", "Choice and average-rank change per model (now minus before)."
            )
        )
    deltas = _metric_deltas(a.run, b.run)
    if deltas.empty:
        return out + [Para("No dataset × encoder × model has a score in both runs.")]
    d = deltas["delta"].abs()
    out.append(
        Para(
            f"Primary-metric means on {len(deltas)} shared dataset × encoder × model "
            f"cells: median absolute change {d.median():.3g}, largest {d.max():.3g}."
        )
    )
    out.append(
        table(
            deltas.head(15).reset_index(drop=True),
            root,
            "compare_metric_deltas",
            "Largest changes of the mean primary metric on shared cells (now minus before).",
        )
    )
    return out
