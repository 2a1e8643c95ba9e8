"""The leakage section: each target-statistics setting against its cross-fitted twin."""

from __future__ import annotations

from pathlib import Path

from harness import stats
from harness.reporting import _bib, figures
from harness.reporting._blocks import figure, pct, table
from harness.reporting._html import Bullets, Heading, Para

__all__ = ["leakage_section"]


def _bullets(summary) -> tuple:
    out = []
    for r in summary.itertuples():  # loop over settings x models
        where = (
            f"flagged on {r.flagged_datasets} of {r.n_datasets} dataset(s)"
            if r.flagged_datasets
            else f"flagged on none of {r.n_datasets} dataset(s)"
        )
        out.append(
            f"**{r.encoder}** with {r.model}: {where} against its twin '{r.twin}' (median gap "
            f"excess {r.median_gap_diff:+.3f}, median test effect "
            f"{pct(r.median_test_effect)})"
            + ("; never chosen (it fits target statistics on the rows it encodes)." if r.leaky else ".")
        )
    return tuple(out)


def leakage_section(a, root: Path) -> list:
    """The paired, per-dataset audit, its summary and ``tables/leakage_audit.csv``."""
    out = [
        Heading("Leakage audit", 2, "leakage"),
        Para(
            "Each target-statistics setting is compared, on every dataset and model, with "
            "its cross-fitted twin: the same statistic and smoothing with k-fold "
            "cross-fitting, on the same folds. Per fold, the difference of the optimism "
            "gaps (training-fold minus test-fold primary metric; relative, (test − "
            "train) / test, for errors) and the unit-free difference of the test scores "
            f"get corrected resampled t bounds, one-sided at α = {a.rule.alpha:g} "
            f"({_bib.cite('nadeau2003')}). A setting is flagged on a dataset when its gap "
            "exceeds its twin's and its test score is worse, both beyond those bounds: "
            "the model learnt from encoded values that do not exist at prediction time "
            f"({_bib.cite('prokhorenkova2018')}). Exploratory: one test per dataset, "
            "uncorrected."
        ),
    ]
    audit = a.audit
    out += figure(
        lambda: figures.leakage_plot(audit, models=a.models),
        root,
        "leakage_audit",
        "Optimism gap of each setting minus its twin's, per dataset, with one-sided "
        "corrected-t bounds; filled squares are flagged.",
        "leakage audit",
    )
    if audit.empty:
        return out + [Para("No target-statistics setting has a cross-fitted twin in this run: nothing to audit.")]
    out.append(Bullets(_bullets(stats.audit_summary(audit))))
    out.append(
        table(
            audit,
            root,
            "leakage_audit",
            "Per dataset, model and setting: optimism "
            "gap against the cross-fitted twin and the test effect (positive = the "
            "setting scores better), with one-sided bounds; flagged = both beyond.",
        )
    )
    return out
