"""Analysis: everything the report shows, computed once from a run."""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from harness import stats
from harness.reporting import tables
from harness.reporting._run import Run
from harness.schema import Manifest

__all__ = ["Analysis", "analyse", "rule_of"]


@dataclass(frozen=True)
class Analysis:
    """Everything the report shows, computed once from a :class:`Run`.

    ``decisions`` and ``comparisons`` are keyed by ``(model, metric)`` in model order
    (config order), the headline metric first; the headline rows are confirmatory, the
    per-metric rows exploratory.
    """

    run: Run
    rule: stats.DecisionRule
    metrics: tuple
    models: tuple
    medium_levels: tuple  # (first, last) level count of the medium regime, inclusive
    comparisons: dict
    decisions: dict
    robustness: pd.DataFrame
    cost: pd.DataFrame
    audit: pd.DataFrame
    regimes: pd.Series

    @property
    def headline(self) -> list:
        """The confirmatory decisions: one per model, on the headline metric."""
        return [d for (_, metric), d in self.decisions.items() if metric == self.metrics[0]]


def rule_of(manifest) -> stats.DecisionRule:
    """The decision rule of a run: its config's ``[decision]`` table, defaults otherwise."""
    return stats.DecisionRule.from_mapping(Manifest.coerce(manifest).decision)


def _task_metrics(results: pd.DataFrame, manifest: Manifest) -> tuple:
    """The headline metric first: pooled over all datasets when tasks are mixed."""
    seen = set(stats.ok_rows(results)["primary_metric"].dropna())
    wanted = [manifest.protocol.classification_metric, manifest.protocol.regression_metric]
    own = [m for m in wanted if m in seen] + sorted(seen - set(wanted))
    return tuple(([stats.POOLED] if len(own) > 1 else []) + own)


def _models(results: pd.DataFrame, manifest: Manifest) -> tuple:
    order = list(manifest.models)
    present = list(pd.unique(results["model"]))
    return tuple([m for m in order if m in present] + [m for m in present if m not in order])


def _comparison(eligible, decision, n_boot, seed):
    keep = tuple(e for e in (decision.reference, *decision.choice) if e)
    m = stats.score_matrix(eligible, decision.model, decision.metric, keep=keep)
    return stats.compare_encoders(
        m,
        alpha=decision.rule.alpha,
        n_boot=n_boot,
        seed=seed,
        control=decision.reference if decision.reference in m.encoders else None,
    )


def analyse(run: Run, *, n_boot: int = 2000, seed: int = 0) -> Analysis:
    """Decide and compare the encoders for every model and primary metric of a run."""
    res, man = run.results, run.manifest
    low, high = man.protocol.medium_levels
    metrics, models = _task_metrics(res, man), _models(res, man)
    rule = rule_of(man)
    eligible, _ = stats.eligible_rows(res)
    ok = stats.ok_rows(res)
    comps, decs = {}, {}
    for metric in metrics:  # loops over metrics and models only
        for model in models:
            has = ok.loc[(ok["model"] == model) & ok[metric].notna()]
            if has.empty and metric != metrics[0]:
                continue
            d = stats.decide(res, model, metric, rule)
            decs[(model, metric)] = d
            comps[(model, metric)] = _comparison(eligible, d, n_boot, seed) if d.choice else None
    head = [d for (_, m), d in decs.items() if m == metrics[0]]
    related = [m for m in tables.METRIC_NAMES if m in res.columns and m != stats.POOLED]
    robust = stats.choice_robustness(res, head, metrics=related, low=low, high=high)
    return Analysis(
        run,
        rule,
        metrics,
        models,
        (low, high),
        comps,
        decs,
        robust,
        tables.cost_summary(res),
        stats.leakage_audit(res, alpha=rule.alpha),
        stats.dataset_regimes(res, low=low, high=high),
    )
