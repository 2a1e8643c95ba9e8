"""Cardinality regimes and the robustness of a choice to the analysis settings."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd

from harness.errors import ConfigError
from harness.stats._common import POOLED, ok_rows
from harness.stats._decision import decide


# -------------------------------------------------------------------- cardinality regimes
def cardinality_regime(max_cardinality, *, low: int = 10, high: int = 100) -> np.ndarray:
    """Map a dataset's largest categorical cardinality to ``low``/``medium``/``high``.

    ``low`` if < ``low``, ``high`` if > ``high``, ``medium`` otherwise (inclusive
    bounds); NaN cardinality gives ``"unknown"``.

    Raises
    ------
    ConfigError
        If ``low > high``.

    References
    ----------
    Thresholds: common practice, no source (defaults of this project).
    """
    if low > high:
        raise ConfigError(f"cardinality thresholds must satisfy low <= high; got low={low}, high={high}.")
    c = np.asarray(max_cardinality, dtype=float)
    return np.select([np.isnan(c), c < low, c > high], ["unknown", "low", "high"], default="medium")


def dataset_regimes(results: pd.DataFrame, *, low: int = 10, high: int = 100) -> pd.Series:
    """Cardinality regime of each dataset, from its ``max_cardinality`` column (max over rows).

    Returns
    -------
    Series
        Index ``dataset``, values ``low/medium/high/unknown``; ``unknown`` for every
        dataset when the column is absent.
    """
    if "max_cardinality" not in results.columns:
        ds = pd.Index(results["dataset"].unique(), name="dataset")
        return pd.Series("unknown", index=ds, name="regime")
    card = results.groupby("dataset")["max_cardinality"].max()
    return pd.Series(cardinality_regime(card.to_numpy(), low=low, high=high), index=card.index, name="regime")


ROBUSTNESS_COLUMNS = [
    "model",
    "axis",
    "slice",
    "n_datasets",
    "method",
    "choice",
    "verdict",
    "effect",
    "lower",
    "reachable",
    "agrees",
    "label",
]


def _slices(ok: pd.DataFrame, model: str, metric: str, metrics, regimes) -> list:
    """(axis, slice name, metric, datasets) of each slice, duplicates removed.

    Two slices are duplicates when they judge on the same metric over the same datasets
    (on one dataset every regime slice is the headline again).
    """
    mine = ok.loc[ok["model"] == model]
    head = tuple(sorted(mine["dataset"].unique()))
    out, seen = [], {(metric, head)}
    own = set(mine["primary_metric"].dropna()) if "primary_metric" in mine else set()
    if metric == POOLED and len(own) == 1:  # pooled over one task type: the same slice
        seen.add((own.pop(), head))
    for other in metrics:  # loop over metric names
        has = tuple(sorted(mine.loc[mine[other].notna(), "dataset"].unique())) if other in mine else ()
        if other != metric and len(has) and (other, has) not in seen:
            seen.add((other, has))
            out.append(("metric", other, other, has))
    for regime in ("low", "medium", "high"):  # loop over regimes
        ds = tuple(sorted(set(regimes.index[regimes == regime]) & set(head)))
        if ds and (metric, ds) not in seen:
            seen.add((metric, ds))
            out.append(("regime", regime, metric, ds))
    return out


def choice_robustness(results: pd.DataFrame, decisions, *, metrics=(), low: int = 10, high: int = 100) -> pd.DataFrame:
    """The decision rule rerun on each slice: another metric, or one cardinality regime.

    Exploratory and uncorrected for the number of slices: a slice where the rule picks
    another encoder shows that the choice depends on that setting. The rule's reference
    and numbers are those of the headline decision.

    Returns
    -------
    DataFrame
        Columns :data:`ROBUSTNESS_COLUMNS`; one row per model and distinct slice;
        ``verdict``, ``effect`` and ``lower`` belong to the slice's own choice (``"kept"``
        when it keeps the reference); ``reachable`` says whether any verdict could be
        reached at the slice's size (``Decision.reachable``).
    """
    ok = ok_rows(results)
    regimes = dataset_regimes(ok, low=low, high=high)
    rows = []
    for d in decisions:  # loop over models
        if not d.choice:
            continue
        rule = replace(d.rule, reference=d.reference)
        for axis, name, metric, ds in _slices(ok, d.model, d.metric, metrics, regimes):
            part = decide(ok.loc[ok["dataset"].isin(ds)], d.model, metric, rule)
            got = part.table.loc[part.choice[0]] if part.choice else None
            kept = got is None or not part.switch
            rows.append(
                {
                    "model": d.model,
                    "axis": axis,
                    "slice": name,
                    "n_datasets": part.n_datasets,
                    "method": part.method,
                    "choice": " | ".join(part.choice),
                    "verdict": "kept" if kept else got["verdict"],
                    "effect": np.nan if kept else got["effect"],
                    "lower": np.nan if kept else got["lower"],
                    "reachable": part.reachable,
                    "agrees": tuple(part.choice) == tuple(d.choice),
                    "label": "exploratory, uncorrected",
                }
            )
    return pd.DataFrame(rows, columns=ROBUSTNESS_COLUMNS)
