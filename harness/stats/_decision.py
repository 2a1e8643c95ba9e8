"""The decision: which encoder to use for a model, by non-inferiority against a reference.

Every number of the rule comes from one :class:`~harness.stats._rule.DecisionRule`. Over
several datasets the tests run on per-dataset unit-free effects (one-sided Wilcoxon
signed-rank, Hodges-Lehmann bounds, Bayesian signed-rank); on one dataset on fold-paired
effects (corrected resampled t, Bayesian correlated t).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from harness.stats._common import (
    POOLED,
    _row_test_train_ratio,
    metric_values,
    ok_rows,
    pool_task_score,
    unit_free_delta,
)
from harness.stats._cost import fold_seconds
from harness.stats._leakage import leaky_settings
from harness.stats._matrix import score_matrix
from harness.stats._rule import SHOWN_NOT_WORSE, DecisionRule
from harness.stats._tests import (
    bayesian_signed_rank,
    corrected_t,
    corrected_t_greater,
    correlated_t,
    datasets_needed,
    hodges_lehmann,
    holm,
    repeats_needed,
    signed_rank_greater,
    signed_rank_less,
)

__all__ = ["Decision", "DECISION_COLUMNS", "decide", "decision_table"]

#: the fixed columns of ``report/tables/decision.csv`` (scripts outside the package read them)
DECISION_COLUMNS = [
    "model",
    "encoder",
    "reference",
    "verdict",
    "chosen",
    "n_datasets",
    "effect",
    "lower",
    "upper",
    "p_noninferior",
    "prob_worse",
    "cost_ratio",
]
_EXTRA = [
    "eligible",
    "family",
    "method",
    "n_folds",
    "p_superior",
    "bound_level",
    "saving_s",
    "n_features",
    "needed",
    "needed_unit",
]


@dataclass(frozen=True)
class Decision:
    """The choice for one model and metric with the evidence per encoder.

    ``table`` has one row per encoder (the reference included, verdict ``"reference"``)
    and the columns of :data:`DECISION_COLUMNS` plus ``eligible, family, method, n_folds,
    p_superior, bound_level, saving_s, n_features, needed, needed_unit``.

    Candidates fall into Holm families by cost and leakage alone (``family``): ``switch``
    (saves enough cost to replace the reference; the only family the choice reads),
    ``other`` (cannot change the choice; secondary verdicts) and ``leaky``. ``lower`` and
    ``upper`` are one-sided bounds at ``bound_level = alpha / m`` (Bonferroni over the m
    candidates of the row's family): a lower bound above ``-margin`` implies that the
    Holm-adjusted non-inferiority test rejects; Holm may also reject with a bound below
    it. ``choice`` holds more than one label only when a tie could not be broken (it is
    then stated, not resolved).
    """

    model: str
    metric: str
    rule: DecisionRule
    reference: str | None
    reference_from_data: bool
    method: str
    table: pd.DataFrame
    choice: tuple
    n_datasets: int
    notes: tuple

    @property
    def family_size(self) -> int:
        """m of the family the choice reads: candidates saving enough cost (else the others)."""
        t = self.table
        if not len(t) or "family" not in t:
            return 1
        switch = int((t["family"] == "switch").sum())
        return switch or max(int((t["family"] == "other").sum()), 1)

    @property
    def holm_floor(self) -> tuple[int, float]:
        """(m, smallest Holm-adjusted p reachable over datasets).

        With all N effects on one side the exact one-sided signed-rank p is ``2^-N``; Holm
        multiplies the smallest p by m, the size of the family (:attr:`family_size`). On
        one dataset (corrected t) any p can be reached: the floor is 0.

        References
        ----------
        Wilcoxon (1945), Biometrics Bulletin 1(6); Holm (1979), Scand. J. Statistics 6(2).
        """
        m = self.family_size
        if self.method != "datasets":
            return m, 0.0
        return m, float(m * 2.0**-self.n_datasets)

    @property
    def reachable(self) -> bool:
        """Whether any candidate could be shown non-inferior at this size at all."""
        return bool(len(self.table)) and self.holm_floor[1] < self.rule.alpha

    @property
    def switch(self) -> bool:
        """True when the choice is another encoder than the reference."""
        return bool(self.choice) and self.choice != (self.reference,)


# --------------------------------------------------------------------------- inputs
def _cells(results: pd.DataFrame, model: str, metric: str) -> pd.DataFrame:
    """Fold rows of one model: raw value, orientation, cost and size."""
    df = ok_rows(results)
    df = df.loc[df["model"] == model]
    values, gib = metric_values(df, metric)
    # a tuned cell's search is part of what the encoding costs to use (0 untuned)
    cost = fold_seconds(df)
    feats = df["n_features_out"].astype(float) if "n_features_out" in df else np.nan
    out = pd.DataFrame(
        {
            "dataset": df["dataset"],
            "encoder": df["encoder"],
            "repeat": df["repeat"],
            "fold": df["fold"],
            "value": values,
            "gib": gib,
            "cost": cost,
            "features": feats,
            "ratio": _row_test_train_ratio(df),
        }
    )
    return out.dropna(subset=["value"])


def _per_dataset(cells: pd.DataFrame) -> pd.DataFrame:
    g = cells.groupby(["dataset", "encoder"])
    return pd.DataFrame(
        {
            "value": g["value"].mean(),
            "gib": g["gib"].first(),
            "cost": g["cost"].median(),
            "features": g["features"].median(),
        }
    )


def _pick_reference(results, model, metric, eligible, rule) -> tuple[str | None, bool, list]:
    if rule.reference is not None and rule.reference in eligible:
        return rule.reference, False, []
    notes = []
    if rule.reference is not None:
        notes.append(
            f"the configured reference '{rule.reference}' has no score for this "
            "model (or is not eligible); the best average rank is used instead"
        )
    pooled = results if POOLED in results else pool_task_score(results)
    pooled = pooled.loc[pooled["encoder"].isin(eligible)]
    m = score_matrix(pooled, model, metric if metric in pooled else POOLED)
    if not m.encoders or m.n_datasets == 0:
        return None, True, notes
    ranks = m.ranks.mean()
    best = ranks[np.isclose(ranks, ranks.min(), rtol=0, atol=1e-12)].index
    if len(best) > 1:
        tied = ", ".join(map(str, best))
        cost = _per_dataset(_cells(results, model, metric)).groupby("encoder")["cost"].median()
        cheap = cost.reindex(best)
        best = cheap.index[np.isclose(cheap, cheap.min(), rtol=0, atol=0)]
        notes.append(
            f"the best average rank is tied between {tied}; the cheaper is the "
            "reference" + ("" if len(best) == 1 else "; they also tie on cost, so the first in label order is used")
        )
        best = sorted(map(str, best))[:1]
    return str(best[0]), True, notes


# --------------------------------------------------------------------- per candidate
def _over_datasets(d: np.ndarray, rule: DecisionRule, m: int) -> dict:
    # simultaneous bounds (Bonferroni over the m candidates): a lower bound above -margin
    # implies the Holm-adjusted test rejects, so a bound never contradicts a verdict
    hl = hodges_lehmann(d, rule.alpha / m)
    bayes = bayesian_signed_rank(d, rule.margin, prior_strength=rule.prior_strength)
    return {
        "effect": hl.estimate,
        "lower": hl.lower,
        "upper": hl.upper,
        "bound_level": rule.alpha / m,
        "p_ni": signed_rank_greater(d + rule.margin)[1],
        "p_sup": signed_rank_greater(d)[1],
        "p_eq": signed_rank_less(d - rule.margin)[1],
        "p_inf": signed_rank_less(d + rule.margin)[1],
        "prob_worse": bayes.p_left,
        # Holm's first step tests at alpha / m: the sample size is planned at that level
        "needed": datasets_needed(d, rule.margin, rule.alpha / m, rule.power),
        "needed_unit": "datasets",
    }


def _over_folds(d: np.ndarray, ratio: float, n_folds: int, rule: DecisionRule, m: int) -> dict:
    # 1 - 2 alpha/m two-sided = simultaneous one-sided bounds at alpha/m (see _over_datasets)
    ct = corrected_t(d, ratio, alpha=2 * rule.alpha / m)
    post = correlated_t(d, ratio / (1 + ratio), rule.margin)
    return {
        "effect": ct.mean,
        "lower": ct.ci_low,
        "upper": ct.ci_high,
        "bound_level": rule.alpha / m,
        "p_ni": corrected_t_greater(d, ratio, rule.margin),
        "p_sup": corrected_t_greater(d, ratio, 0.0),
        "p_eq": corrected_t_greater(-d, ratio, rule.margin),
        "p_inf": corrected_t_greater(-d, ratio, -rule.margin),
        "prob_worse": post.prob_below,
        "needed": repeats_needed(d, rule.margin, n_folds, rule.alpha / m, rule.power),
        "needed_unit": "repeats",
    }


def _paired(per, ref, enc) -> pd.DataFrame:
    """Per-dataset rows of ``enc`` beside those of ``ref`` (suffix ``_ref``), both present."""
    return per.xs(enc, level="encoder").join(per.xs(ref, level="encoder").add_suffix("_ref"), how="inner")


def _cost_row(j: pd.DataFrame) -> dict:
    """Paired cost of a candidate against the reference: median per-dataset ratio, saving."""
    ratio_cost = (j["cost"] / j["cost_ref"]).replace([np.inf, -np.inf], np.nan)
    return {
        "n_datasets": len(j),
        "cost_ratio": float(ratio_cost.median()),
        "saving_s": float((j["cost_ref"] - j["cost"]).median()),
        "n_features": float(j["features"].median()),
    }


def _quality(cells, j, ref, enc, method, rule, m) -> dict:
    """The one-sided tests, bounds and power of ``enc`` in a family of ``m`` candidates
    (``j``: its per-dataset rows paired with the reference's, from :func:`_paired`)."""
    if method == "datasets":
        d = unit_free_delta(j["value"], j["value_ref"], j["gib"])
        return {"n_folds": np.nan, **_over_datasets(d[np.isfinite(d)], rule, m)}
    keys = ["repeat", "fold"]
    fa = cells.loc[cells["encoder"] == enc].set_index(keys)
    fb = cells.loc[cells["encoder"] == ref].set_index(keys)
    f = fa.join(fb[["value"]].add_suffix("_ref"), how="inner")
    d = unit_free_delta(f["value"], f["value_ref"], f["gib"])
    n_folds = int(cells["fold"].nunique())
    return {
        "n_folds": int(np.isfinite(d).sum()),
        **_over_folds(d[np.isfinite(d)], float(f["ratio"].mean()), n_folds, rule, m),
    }


def _families(costs: pd.DataFrame, leaky, rule: DecisionRule) -> pd.Series:
    """Each candidate's Holm family, decided by cost and leakage alone (never by quality).

    ``switch``: eligible and saving enough cost to replace the reference: the only family
    the choice reads, so adding or removing a candidate that cannot save enough cost
    never changes the choice. ``other``: eligible, but not cheap enough to change the
    choice (secondary verdicts). ``leaky``: never chosen.
    """
    saves = (1 - costs["cost_ratio"] >= rule.min_saving) & (costs["saving_s"] >= rule.min_saving_s)
    leak = costs.index.isin(list(leaky))
    return pd.Series(np.where(leak, "leaky", np.where(saves, "switch", "other")), costs.index)


# ------------------------------------------------------------------------- verdicts
def _adjust(table: pd.DataFrame) -> pd.DataFrame:
    """Holm across the candidates of one family, each one-sided test separately."""
    out = table.copy()
    for col in ("p_ni", "p_sup", "p_eq", "p_inf"):  # loop over the four tests
        out[col + "_holm"] = holm(out[col].to_numpy(float)) if len(out) else []
    return out


def _verdicts(t: pd.DataFrame, alpha: float) -> pd.Series:
    ni, sup = t["p_ni_holm"] < alpha, t["p_sup_holm"] < alpha
    eq, inf = ni & (t["p_eq_holm"] < alpha), t["p_inf_holm"] < alpha
    return pd.Series(
        np.select([sup, eq, ni, inf], ["superior", "equivalent", "non-inferior", "inferior"], "inconclusive"), t.index
    )


def _choose(t: pd.DataFrame, ref: str) -> tuple[tuple, list]:
    ok = t.loc[(t["family"] == "switch") & t["verdict"].isin(SHOWN_NOT_WORSE)]
    if ok.empty:
        return (ref,), []
    best = ok.loc[ok["cost_ratio"] == ok["cost_ratio"].min()]
    best = best.loc[best["effect"] == best["effect"].max()]
    best = best.loc[best["n_features"] == best["n_features"].min()] if best["n_features"].notna().any() else best
    notes = []
    if len(best) > 1:
        notes.append(
            "tie: " + ", ".join(map(str, best.index)) + " have the same cost ratio, "
            "effect and output features; either is the choice"
        )
    return tuple(map(str, best.index)), notes


def _evidence(cells, ref, encoders, leaky, method, rule) -> pd.DataFrame:
    per = _per_dataset(cells)
    pairs = {e: _paired(per, ref, e) for e in encoders}
    costs = pd.DataFrame.from_dict({e: _cost_row(j) for e, j in pairs.items()}, orient="index")
    costs["family"] = _families(costs, leaky, rule)
    costs["eligible"] = costs["family"] != "leaky"
    size = costs["family"].value_counts()
    rows = {e: _quality(cells, pairs[e], ref, e, method, rule, int(size[costs.at[e, "family"]])) for e in encoders}
    t = costs.join(pd.DataFrame.from_dict(rows, orient="index"))
    # Holm within each family (loop over at most three families)
    parts = [_adjust(t.loc[t["family"] == fam]) for fam in pd.unique(t["family"])]
    t = pd.concat(parts).reindex(t.index)
    t["verdict"] = _verdicts(t, rule.alpha)
    return t


def _reference_row(cells, ref, method) -> pd.DataFrame:
    per = _per_dataset(cells).xs(ref, level="encoder")
    n_folds = int(len(cells.loc[cells["encoder"] == ref])) if method == "folds" else np.nan
    return pd.DataFrame(
        {
            "n_datasets": len(per),
            "cost_ratio": 1.0,
            "saving_s": 0.0,
            "n_features": float(per["features"].median()),
            "effect": 0.0,
            "lower": 0.0,
            "upper": 0.0,
            "verdict": "reference",
            "eligible": True,
            "family": "reference",
            "n_folds": n_folds,
        },
        index=[ref],
    )


def decide(results: pd.DataFrame, model: str, metric: str = POOLED, rule: DecisionRule | None = None) -> Decision:
    """Apply the decision rule to one model.

    Parameters
    ----------
    results : DataFrame
        The results table.
    model : str
        Model label.
    metric : str
        A metric column, or :data:`POOLED` (each dataset's own metric, ``primary_metric``).
    rule : DecisionRule, optional
        Default: ``DecisionRule()``.

    Returns
    -------
    Decision
        ``choice`` is empty when no encoder has a score.

    Notes
    -----
    (none: a configured reference without a score for this model is replaced by the best
    average rank, and a note says so)

    References
    ----------
    Wilcoxon (1945); Holm (1979); Hodges & Lehmann (1963); Schuirmann (1987), J.
    Pharmacokinetics and Biopharmaceutics 15(6) (TOST); Benavoli et al. (2017), JMLR 18(77);
    Nadeau & Bengio (2003); Corani & Benavoli (2015), Machine Learning 100.
    """
    rule = rule or DecisionRule()
    cells = _cells(results, model, metric)
    leaky = leaky_settings(results)
    encoders = sorted(map(str, pd.unique(cells["encoder"])))
    eligible = [e for e in encoders if e not in leaky] or encoders
    ref, from_data, notes = _pick_reference(results, model, metric, eligible, rule)
    if ref is None or ref not in encoders:
        return Decision(
            model,
            metric,
            rule,
            ref,
            from_data,
            "none",
            pd.DataFrame(),
            (),
            0,
            tuple(notes + ["no scored cell for this model and metric"]),
        )
    n_ref = int(cells.loc[cells["encoder"] == ref, "dataset"].nunique())
    method = "datasets" if n_ref >= 2 else "folds"
    others = [e for e in encoders if e != ref]
    t = _evidence(cells, ref, others, leaky, method, rule) if others else pd.DataFrame()
    choice, tie = _choose(t, ref) if len(t) else ((ref,), [])
    table = pd.concat([_reference_row(cells, ref, method), t]) if len(t) else _reference_row(cells, ref, method)
    table["chosen"] = table.index.isin(choice)
    table["method"] = method
    return Decision(model, metric, rule, ref, from_data, method, table, choice, n_ref, tuple(notes + tie))


def decision_table(decisions) -> pd.DataFrame:
    """The rows of ``decision.csv``: fixed columns first, one row per model x encoder."""
    frames = []
    for d in decisions:  # loop over models
        if d.table.empty:
            continue
        t = d.table.rename(columns={"p_ni_holm": "p_noninferior", "p_sup_holm": "p_superior"})
        t = t.reindex(columns=DECISION_COLUMNS + _EXTRA)
        t["model"], t["encoder"], t["reference"] = d.model, t.index, d.reference
        frames.append(t)
    if not frames:
        return pd.DataFrame(columns=DECISION_COLUMNS + _EXTRA)
    return pd.concat(frames, ignore_index=True)[DECISION_COLUMNS + _EXTRA]
