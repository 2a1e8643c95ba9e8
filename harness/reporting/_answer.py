"""The answer section: the choice per model, its verdict, effect, cost and caveats.

Every sentence is formatted from the numbers of a :class:`harness.stats.Decision` and
its rule; no fixed phrase states a comparison.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from harness import stats
from harness.reporting import figures
from harness.reporting._blocks import cost_phrase, family, figure, fmt_p, pct, table
from harness.reporting._html import Bullets, Heading, Note, Para, Table
from harness.reporting.tables import metric_name
from harness.schema import RETRY_STATUSES

__all__ = ["answer_section", "decision_sentence", "decision_caveats"]


def _evidence_phrase(row: pd.Series, d: stats.Decision) -> str:
    test = (
        "Holm-adjusted one-sided Wilcoxon"
        if d.method == "datasets"
        else "Holm-adjusted one-sided corrected resampled t"
    )
    m = int((d.table["family"] == row["family"]).sum())
    fam = (
        "candidates that save enough cost"
        if row["family"] == "switch"
        else "candidates that cannot change the choice"
        if row["family"] == "other"
        else "leaky settings"
    )
    return (
        f"{row['verdict']} ({test} {fmt_p(row['p_ni_holm'])} over the {m} {fam}, against "
        f"'worse by more than {100 * d.rule.margin:g} %'), effect {pct(row['effect'])} "
        f"[{pct(row['lower'])}, {pct(row['upper'])}] (simultaneous one-sided bounds at "
        f"{row['bound_level']:.2g}), P(practically worse) = "
        f"{row['prob_worse']:.2f}"
    )


def _scope(d: stats.Decision, a) -> str:
    if d.method == "folds":
        ds = stats.ok_rows(a.run.results)
        name = ", ".join(map(str, pd.unique(ds.loc[ds["model"] == d.model, "dataset"])))
        n = int(d.table["n_folds"].max())
        return (
            f" Scope: this answer holds for the dataset {name} only; it rests on {n} "
            "fold-paired differences, not on a sample of datasets."
        )
    return ""


def decision_sentence(d: stats.Decision, a) -> str:
    """The answer for one model, generated from its decision table."""
    head = (
        f"**{d.model}** ({family(a.run, d.model)}), judged on {metric_name(d.metric)} "
        f"over {d.n_datasets} dataset(s) against the reference **{d.reference}**"
    )
    if not d.choice:
        return (
            f"**{d.model}** ({family(a.run, d.model)}), judged on {metric_name(d.metric)}: "
            "**no choice** — no encoder has a score for this model."
        )
    t = d.table
    if d.switch:
        names = " or ".join(f"**{c}**" for c in d.choice)
        row = t.loc[d.choice[0]]
        text = (
            f"{head}: use {names} — {_evidence_phrase(row, d)}; it is "
            f"{cost_phrase(row['cost_ratio'], row['saving_s'])}."
        )
    else:
        text = (
            f"{head}: keep **{d.reference}** — no candidate is shown non-inferior "
            f"and cheaper by at least {100 * d.rule.min_saving:g} % and "
            f"{d.rule.min_saving_s:g} s per fold."
        )
    good = t.loc[t["verdict"].isin(stats.SHOWN_NOT_WORSE) & ~t["chosen"]]
    if len(good):
        text += (
            " Also shown non-inferior or better, not chosen: "
            + "; ".join(
                f"{e} ({r['verdict']}, {cost_phrase(r['cost_ratio'], r['saving_s'])}"
                f"{'' if r['eligible'] else ', excluded: leaky'})"
                for e, r in good.iterrows()
            )
            + "."
        )
    return text + _scope(d, a)


def _needed_text(need: float) -> str:
    return "more than 1,000" if need > 1000 else f"about {need:.0f}"


def _power_caveats(d: stats.Decision, a) -> list[str]:
    """One sentence: what the inconclusive candidates would need, from their spread."""
    if "needed" not in d.table:  # the reference alone: nothing was tested
        return []
    t = d.table.loc[(d.table["verdict"] == "inconclusive") & d.table["eligible"]]
    t = t.loc[np.isfinite(t["needed"].astype(float)) | np.isinf(t["needed"].astype(float))]
    if t.empty:
        return []
    unit = t["needed_unit"].iloc[0]
    have = d.n_datasets if unit == "datasets" else int(stats.ok_rows(a.run.results)["repeat"].nunique())
    finite = t.loc[np.isfinite(t["needed"].astype(float))].sort_values("needed")
    never = t.loc[np.isinf(t["needed"].astype(float))]
    out = []
    if len(finite):
        out.append(
            f"Inconclusive candidates and the {unit} in all that the Holm-adjusted "
            f"non-inferiority test would need at their observed spread of effects to "
            f"reject at the margin with power {d.rule.power:g} (this run has {have}): "
            + ", ".join(f"{e} {_needed_text(r['needed'])}" for e, r in finite.iterrows())
            + "."
        )
    if len(never):
        why = (
            "the estimated effect is not above the margin"
            if unit == "datasets"
            else "the effect or the fold spread does not allow it"
        )
        out.append(
            f"More {unit} would not be expected to show {', '.join(map(str, never.index))} non-inferior ({why})."
        )
    return out


def _floor_caveat(d: stats.Decision) -> list[str]:
    """With few datasets no exact one-sided signed-rank test can reject after Holm."""
    if d.reachable or d.method != "datasets":
        return []
    m, floor = d.holm_floor
    need = int(np.floor(np.log2(m / d.rule.alpha))) + 1
    return [
        f"With {d.n_datasets} datasets the smallest one-sided signed-rank p is "
        f"2^-{d.n_datasets} = {2.0**-d.n_datasets:.3g}, times {m} for Holm = "
        f"{floor:.3g} ≥ α = {d.rule.alpha:g}: no candidate can be shown non-inferior, so "
        f"every verdict is inconclusive and the reference is kept; at least {need} "
        "datasets are needed for any verdict."
    ]


def decision_caveats(d: stats.Decision, a) -> list[str]:
    """Caveats of one decision: notes, reference, folds, failures, leaky, power."""
    notes = [n[0].upper() + n[1:] + "." for n in d.notes]
    if d.table.empty:
        return notes
    if d.reference_from_data and d.choice:
        notes.append(
            f"No reference was configured: '{d.reference}' has the best average "
            "rank among eligible settings. A reference chosen from the data makes "
            "the non-inferiority tests conservative; set `decision.reference` to "
            "the team's incumbent."
        )
    if d.method == "folds":
        n = int(d.table["n_folds"].max())
        if n < stats.MIN_FOLDS_ONE_DATASET:
            folds = int(stats.ok_rows(a.run.results)["fold"].nunique())
            need = int(np.ceil(stats.MIN_FOLDS_ONE_DATASET / max(folds, 1)))
            notes.append(
                f"Only {n} outer folds in total: the one-dataset tests have few "
                f"degrees of freedom; use `protocol.repeats = {need}` with "
                f"{folds} folds to reach {stats.MIN_FOLDS_ONE_DATASET}."
            )
    res = a.run.results
    bad = res.loc[(res["model"] == d.model) & res["status"].isin(RETRY_STATUSES)]
    for enc, ds in bad.groupby("encoder")["dataset"].unique().items():  # per encoder
        notes.append(f"Encoder '{enc}' failed or timed out on {len(ds)} dataset(s): {', '.join(map(str, sorted(ds)))}.")
    leaky = d.table.index[~d.table["eligible"]]
    if len(leaky):
        notes.append(
            "Never chosen (target statistics fitted on the rows they encode): " + ", ".join(map(str, leaky)) + "."
        )
    return notes + _floor_caveat(d) + _power_caveats(d, a)


def _summary(a) -> pd.DataFrame:
    rows = []
    for (model, metric), d in a.decisions.items():  # loop over models x metrics
        if not d.choice:
            continue
        r = d.table.loc[d.choice[0]]
        if not d.switch:
            r = r.copy()
            r["verdict"] = "kept: no candidate qualifies"
            r[["effect", "lower", "upper"]] = np.nan
        rows.append(
            {
                "model": model,
                "metric": metric_name(metric),
                "analysis": "confirmatory" if metric == a.metrics[0] else "exploratory, uncorrected",
                "reference": d.reference,
                "choice": " | ".join(d.choice),
                "verdict": r["verdict"],
                "effect": pct(r["effect"]) if d.switch else "—",
                "interval": f"[{pct(r['lower'])}, {pct(r['upper'])}]" if d.switch else "—",
                "cost ratio": round(float(r["cost_ratio"]), 3),
                "datasets": d.n_datasets,
                "evidence": d.method,
            }
        )
    return pd.DataFrame(rows)


def _decision_tables(a, root: Path) -> list:
    full = stats.decision_table(a.headline)
    shown = full[stats.DECISION_COLUMNS + ["family"]].copy()
    out = [
        table(
            full,
            root,
            "decision",
            "Decision per model and encoder (headline analysis, "
            "confirmatory): verdict against the reference, effect (unit-free, positive = "
            "better) with simultaneous one-sided bounds (Bonferroni over the candidates, "
            "level in bound_level of the CSV: a lower bound above the margin always "
            "means non-inferior; Holm can also show it with a bound below), "
            "Holm-adjusted non-inferiority p, Bayesian "
            "P(practically worse), median per-dataset cost ratio, and the Holm family, "
            "set by cost alone: switch = saves enough cost to replace the reference (the "
            "only family the choice reads), other = cannot change the choice (secondary "
            "verdicts), leaky = never chosen.",
            shown=shown,
        )
    ]
    out += figure(
        lambda: figures.delta_plot(a.headline),
        root,
        "decision_effects",
        f"Effect of each candidate against its reference with simultaneous one-sided "
        f"bounds (α = {a.rule.alpha:g} shared over the candidates of each Holm "
        f"family); the dashed line is the margin −{pct(a.rule.margin, False)}; "
        "marker shapes give the verdict.",
        "decision effects",
    )
    return out


def answer_section(a, root: Path) -> list:
    """The question, the choice per model, the decision table and the caveats."""
    out = [
        Heading("Which encoding should be the default?", 2, "answer"),
        Para(
            "Question: for each model in this run, which categorical encoding should be "
            "the default, and at what cost? Decision rule, applied per model: " + a.rule.describe()
        ),
    ]
    if not a.decisions:
        return out + [
            Note(
                "No cell of this run produced a score: there is nothing to "
                "decide. See the list of cells that did not run below."
            )
        ]
    out.append(
        Table(
            _summary(a),
            "Choice per model and metric. The headline metric is the "
            "confirmatory analysis; rows per metric are exploratory and "
            "uncorrected for their number.",
        )
    )
    for d in a.headline:  # loop over models
        out.append(Para(decision_sentence(d, a)))
        caveats = decision_caveats(d, a)
        if caveats:
            out.append(Bullets(tuple("Caveat: " + c for c in caveats)))
    return out + _decision_tables(a, root)
