"""The robustness section: the decision rule rerun on other metrics and regimes."""

from __future__ import annotations

from pathlib import Path

from harness.reporting._blocks import pct, table
from harness.reporting._html import Heading, Note, Para
from harness.reporting.tables import metric_name

__all__ = ["robustness_section", "robustness_sentence"]


def robustness_sentence(rob) -> str:
    """How many slices keep the headline choice, generated from the table."""
    if rob.empty:
        return "No slice differs from the headline analysis: nothing to vary."
    out = []
    for model, part in rob.groupby("model", sort=False):  # loop over models
        same = int(part["agrees"].sum())
        empty = int((part["agrees"] & ~part["reachable"]).sum())
        text = f"{model}: the rule makes the headline choice in {same} of {len(part)} slices"
        if empty:
            text += f" (in {empty} of them too few datasets leave no verdict reachable, so that agreement says nothing)"
        moved = part.loc[~part["agrees"] & part["reachable"]]
        if len(moved):
            text += "; it chooses otherwise in " + _slice_list(moved, with_choice=True)
        mute = part.loc[~part["agrees"] & ~part["reachable"]]
        if len(mute):
            text += (
                f"; in {len(mute)} slice(s) too few datasets leave no verdict reachable, so the rule can "
                f"only keep the reference there, which is no evidence against the choice: {_slice_list(mute)}"
            )
        out.append(text + ".")
    return " ".join(out)


def _slice_name(axis: str, name: str) -> str:
    """A slice as the report names it: a metric by its display name, a regime as is."""
    return metric_name(name) if axis == "metric" else name


def _slice_list(rows, *, with_choice: bool = False) -> str:
    """``axis 'slice' (choice, n dataset(s))`` for each row, comma-separated."""
    return ", ".join(
        f"{r.axis} '{_slice_name(r.axis, r.slice)}' ({f'{r.choice}, ' if with_choice else ''}{r.n_datasets} dataset(s))"
        for r in rows.itertuples()
    )


def robustness_section(a, root: Path) -> list:
    """Does the choice survive another metric or one cardinality regime alone?"""
    out = [Heading("Does the choice survive other settings?", 2, "robustness")]
    rob = a.robustness
    if rob.empty:
        return out + [
            Note("No slice differs from the headline analysis (one metric, one regime): there is nothing to vary.")
        ]
    out.append(
        Para(
            "Exploratory and uncorrected for the number of slices: the decision "
            "rule, with the same reference and numbers, is rerun on each other metric "
            "over all datasets and on each cardinality regime alone; each distinct "
            "slice appears once. The choice does not rest on an aggregation of ranks, "
            "so that axis is not varied. " + robustness_sentence(rob)
        )
    )
    shown = rob.assign(
        effect=rob["effect"].map(lambda v: pct(v) if v == v else "—"),
        lower=rob["lower"].map(lambda v: pct(v) if v == v else "—"),
        slice=[_slice_name(ax, s) for ax, s in zip(rob["axis"], rob["slice"])],
    )
    out.append(
        table(
            rob,
            root,
            "robustness",
            "The rule's choice per slice (exploratory, "
            "uncorrected); verdict, effect and lower bound belong to the slice's own "
            "choice ('kept' = the reference is kept); reachable = the slice has enough "
            "datasets for any verdict; agrees = the slice makes the headline choice.",
            shown=shown,
        )
    )
    return out
