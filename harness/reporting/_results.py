"""The results section: rank, group, cost and heatmap figures and the main tables."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from harness import stats
from harness.reporting import figures, tables
from harness.reporting._blocks import figure, fmt_p, slug, table
from harness.reporting._html import Heading, Para
from harness.reporting.tables import metric_name

__all__ = ["results_section"]


def _heatmaps(a, root: Path) -> list:
    out = []
    leaky = stats.leaky_settings(a.run.results)
    eligible = [e for e in pd.unique(a.run.results["encoder"]) if e not in leaky]
    for model in a.models:  # loop over models
        out += figure(
            lambda m=model: figures.relative_heatmap(
                a.run.results, m, low=a.medium_levels[0], high=a.medium_levels[1], eligible=eligible
            ),
            root,
            f"heatmap_{slug(model)}",
            f"Per-dataset shortfall of each encoder from the best eligible one for {model}, "
            "in percent of that score on the dataset's primary metric (excluded settings "
            "are measured against it too; a negative value means an excluded setting scores "
            "above every eligible one). "
            + figures.heatmap_note(*a.medium_levels, lines=a.regimes.nunique() > 1).replace("\n", " "),
            f"heatmap {model}",
        )
    return out


def _means_tables(a, root: Path) -> list:
    out = [Heading("Per-dataset means", 3)]
    leaky = stats.leaky_settings(a.run.results)
    for metric in a.metrics:  # loop over primary metrics
        long = tables.dataset_means_table(a.run.results, metric)
        for model in pd.unique(long["model"]):  # loop over models
            comp = a.comparisons.get((model, metric))
            order = list(comp.ranks.index) if comp is not None else None
            wide = tables.means_wide(
                long, model, encoder_order=order, excluded=[e for e in leaky if e in set(long["encoder"])]
            )
            stem = f"dataset_means_{slug(model)}_{metric}"
            what = (
                "each dataset's own primary metric, in its own units" if metric == stats.POOLED else metric_name(metric)
            )
            out.append(
                table(
                    long.loc[long["model"] == model],
                    root,
                    stem,
                    f"{model}: mean test score ({what}) per dataset with 95% "
                    "corrected resampled t interval; (excluded) marks settings that "
                    "are never chosen because they leak the target.",
                    shown=wide,
                )
            )
    return out


def _main_tables(a, root: Path) -> list:
    out = [Heading("Average ranks", 3)]
    ranks = tables.rank_table([c for c in a.comparisons.values() if c is not None], a.decisions)
    out.append(
        table(
            ranks,
            root,
            "average_ranks",
            "Average rank per encoder and model "
            f"among eligible settings with 95% expanded bootstrap interval (left out "
            f"below {stats.RANK_CI_MIN_DATASETS} datasets, where its simulated "
            "coverage falls short); rows per metric other than the headline are "
            "exploratory.",
        )
    )
    out += _means_tables(a, root)
    out.append(Heading("Cost", 3))
    cost = a.cost[["encoder", "model", *stats.COST_PARTS, "total_s", "n_features_out", "encoded_mb", "n_cells"]]
    out.append(table(cost, root, "cost", cost_caption()))
    return out


#: what each part of ``stats.COST_PARTS`` measures, for the cost table's caption
COST_PART_TEXT = {
    "encoder_s": "seconds to encode (fit and transform)",
    "model_fit_s": "seconds to fit the model",
    "tune_s": "seconds of the hyperparameter search of a tuned cell (0 untuned)",
}


def cost_caption() -> str:
    """The cost table's caption: what every column holds and how total_s is made."""
    parts = [f"{p} {COST_PART_TEXT.get(p, 'seconds')}" for p in stats.COST_PARTS]
    return (
        "Cost per fold of each encoder and model, medians over its scored cells: "
        + "; ".join(parts)
        + f"; total_s = {' + '.join(stats.COST_PARTS)}. "
        "n_features_out: columns the encoder outputs (the middle fold, or the lower of "
        "the two middle ones); encoded_mb: megabytes of the encoded training fold; "
        "n_cells: scored cells the medians are over."
    )


def friedman_sentence(comps) -> str:
    """The Friedman test per model, generated from its numbers (never ``p = 0``)."""
    parts = []
    for c in comps:  # loop over models
        f = c.friedman
        if not np.isfinite(f.p):
            continue
        kind = (
            "exact permutation"
            if f.perm_exact
            else "Monte-Carlo permutation"
            if np.isfinite(f.perm_p)
            else "Iman–Davenport"
        )
        parts.append(
            f"{c.matrix.model}: {fmt_p(f.p)} ({kind}; χ²_F = {f.chi2:.3g}, "
            f"F_F = {f.f_stat:.3g} on {f.n_datasets} datasets × {f.n_encoders} "
            "encoders)"
        )
    if not parts:
        return ""
    return "Friedman test that all eligible encoders rank alike, per model: " + "; ".join(parts) + "."


def results_section(a, root: Path) -> list:
    """The four result figures and the main tables (headline metric in the figures)."""
    comps = [c for (model, metric), c in a.comparisons.items() if metric == a.metrics[0] and c is not None]
    out = [Heading("Results", 2, "results")]
    text = friedman_sentence(comps)
    if text:
        out.append(Para(text))
    out += figure(
        lambda: figures.rank_plot(comps, a.decisions),
        root,
        "average_ranks",
        "Average rank per encoder (1 = best) among eligible settings, one panel per "
        "model, with 95% expanded bootstrap intervals over datasets (left out below "
        f"{stats.RANK_CI_MIN_DATASETS} datasets). The square marks the reference, "
        "the filled diamond the choice.",
        "average rank plot",
    )
    out += figure(
        lambda: figures.cd_diagram(comps, alpha=a.rule.alpha),
        root,
        "critical_difference",
        "Nemenyi groups (Demšar 2006): encoders sharing a letter have average ranks "
        "closer than the critical difference, i.e. the test does not separate them; "
        "that is not evidence that they are equivalent (the decision above tests "
        "that).",
        "critical difference groups",
    )
    out += figure(
        lambda: figures.cost_plot(comps, a.cost),
        root,
        "score_vs_cost",
        "Average rank against seconds per fold (total_s of the cost table: the "
        "median times to encode and to fit the model, added; log scale); filled "
        "triangles form the Pareto front.",
        "score versus cost",
    )
    out += _heatmaps(a, root)
    return out + _main_tables(a, root)
