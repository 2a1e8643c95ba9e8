"""Target leakage: eligibility of settings and the per-dataset audit against a twin."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd

from harness.stats._common import POOLED, _row_test_train_ratio, metric_values, ok_rows, orientation, unit_free_delta
from harness.stats._tests import corrected_t


# ------------------------------------------------------------------------- leakage audit
def _crossfit_scheme(params: pd.Series, key: str, default: str) -> pd.Series:
    """Parse the cross-fitting scheme from JSON ``encoder_params`` (one parse per value).

    A JSON object without ``key`` gets ``default`` (the encoder's own default); text that
    is not a JSON object gets ``""`` (unknown).
    """

    def parse(text):
        try:
            value = json.loads(text) if isinstance(text, str) and text else None
        except json.JSONDecodeError:
            return ""
        if not isinstance(value, dict):
            return ""
        value = value.get(key, default)
        return "" if value is None else str(value)

    uniq = pd.Series(params.unique())
    table = dict(zip(uniq, uniq.map(parse)))  # loop over distinct settings only
    return params.map(table).fillna("")


def _row_gaps(df: pd.DataFrame) -> pd.Series:
    """Optimism of each row's primary metric on its training fold, positive = optimistic.

    Scores that grow with quality (ROC AUC, accuracy, R²) live on bounded, comparable
    scales: the gap is train minus test. Errors (RMSE, MAE, log loss) are in the target's
    own units, which differ by orders of magnitude between datasets: the gap is relative,
    (test - train) / test, the share of the test error that the training fold hides.
    """
    gap = pd.Series(np.nan, index=df.index)
    for metric in pd.unique(df["primary_metric"]):  # loop over metric names
        rows = df["primary_metric"] == metric
        train = f"train_{metric}"
        if metric in df.columns and train in df.columns:
            diff = orientation(metric) * (df.loc[rows, train] - df.loc[rows, metric])
            if orientation(metric) < 0:
                diff = diff / df.loc[rows, metric].abs().replace(0.0, np.nan)
            gap[rows] = diff
    return gap


_TWIN_FREE = ("crossfit", "cv", "holdout_fraction", "random_state")
AUDIT_COLUMNS = [
    "dataset",
    "model",
    "encoder",
    "twin",
    "primary_metric",
    "n_folds",
    "gap",
    "twin_gap",
    "gap_diff",
    "gap_low",
    "gap_high",
    "test_effect",
    "test_low",
    "test_high",
    "leaky",
    "flagged",
]


def _settings(df: pd.DataFrame) -> pd.DataFrame:
    """One row per encoder label: kind, whether it uses the target, leaky, parsed params."""
    first = df.drop_duplicates("encoder").set_index("encoder")
    kind = first["encoder_kind"] if "encoder_kind" in first else pd.Series("", first.index)
    if "uses_target" in first:
        uses = first["uses_target"].fillna(False).astype(bool)
    else:  # legacy tables: the target-statistics kind is the one that uses the target
        uses = kind.eq("target")
    leaky = first.index.isin(list(leaky_settings(df)))
    params = first["encoder_params"] if "encoder_params" in first else pd.Series("{}", first.index)
    parsed = params.map(_as_dict)
    return pd.DataFrame({"kind": kind, "uses_target": uses, "leaky": leaky, "params": parsed}, index=first.index)


def _as_dict(text) -> dict:
    try:
        value = json.loads(text) if isinstance(text, str) and text else {}
    except json.JSONDecodeError:
        return {}
    return value if isinstance(value, dict) else {}


def twins(results: pd.DataFrame) -> dict:
    """Target-using setting -> its cross-fitted twin (same kind and statistic, k-fold).

    Two settings are twins when their parameters agree once the cross-fitting keys
    (``crossfit``, ``cv``, ``holdout_fraction``, ``random_state``) are set aside; the twin
    is a setting of the pair that is not leaky and cross-fits by k-fold (its ``crossfit``
    is ``"kfold"`` or left to the encoder). A setting without a twin is left out.
    """
    s = _settings(results)
    s = s.loc[s["uses_target"]]
    core = s["params"].map(lambda p: json.dumps({k: v for k, v in p.items() if k not in _TWIN_FREE}, sort_keys=True))
    kfold = ~s["leaky"] & s["params"].map(lambda p: p.get("crossfit", "kfold") == "kfold")
    out = {}
    for enc in s.index:  # loop over settings
        same = s.index[(core == core[enc]) & (s["kind"] == s.loc[enc, "kind"]) & kfold]
        same = [t for t in same if t != enc]
        if same:
            out[str(enc)] = str(sorted(same)[0])
    return out


def _fold_frame(df: pd.DataFrame) -> pd.DataFrame:
    values, gib = metric_values(df, POOLED)
    return pd.DataFrame(
        {
            "dataset": df["dataset"],
            "model": df["model"],
            "encoder": df["encoder"],
            "repeat": df["repeat"],
            "fold": df["fold"],
            "metric": df["primary_metric"],
            "value": values,
            "gib": gib,
            "gap": _row_gaps(df),
            "ratio": _row_test_train_ratio(df),
        }
    )


def _audit_pair(part: pd.DataFrame, enc: str, twin: str, alpha: float) -> dict | None:
    keys = ["repeat", "fold"]
    a = part.loc[part["encoder"] == enc].groupby(keys)[["value", "gap", "ratio"]].mean()
    b = part.loc[part["encoder"] == twin].groupby(keys)[["value", "gap"]].mean()
    j = a.join(b.add_suffix("_twin"), how="inner").dropna(subset=["value", "value_twin"])
    if len(j) < 2:
        return None
    gib = bool(part["gib"].iloc[0])
    ratio = float(j["ratio"].mean())
    gap = corrected_t((j["gap"] - j["gap_twin"]).to_numpy(), ratio, alpha=2 * alpha)
    eff = corrected_t(unit_free_delta(j["value"], j["value_twin"], gib), ratio, alpha=2 * alpha)
    flagged = bool(gap.ci_low > 0 and eff.ci_high < 0)
    return {
        "twin": twin,
        "primary_metric": part["metric"].iloc[0],
        "n_folds": len(j),
        "gap": float(j["gap"].mean()),
        "twin_gap": float(j["gap_twin"].mean()),
        "gap_diff": gap.mean,
        "gap_low": gap.ci_low,
        "gap_high": gap.ci_high,
        "test_effect": eff.mean,
        "test_low": eff.ci_low,
        "test_high": eff.ci_high,
        "flagged": flagged,
    }


def leakage_audit(results: pd.DataFrame, *, alpha: float = 0.05) -> pd.DataFrame:
    """Each target-statistics setting against its cross-fitted twin, per dataset and model.

    On the same folds of the same dataset, the fold-paired differences of the optimism gap
    (train minus test primary metric, relative for errors: :func:`_row_gaps`) and of the
    unit-free test effect (:func:`unit_free_delta`, positive = the setting scores better)
    get corrected resampled t bounds, one-sided at ``alpha``. A setting is *flagged* on a
    dataset when its gap exceeds its twin's and its test score is worse, both beyond
    those bounds: its training rows saw encodings that test rows never get.

    Returns
    -------
    DataFrame
        Columns :data:`AUDIT_COLUMNS`, one row per dataset x model x setting that has a twin.

    References
    ----------
    Prokhorenkova, L. et al. (2018). CatBoost: unbiased boosting with categorical
    features. NeurIPS (in-sample target statistics shift the training distribution);
    Nadeau & Bengio (2003), Machine Learning 52; Bouckaert & Frank (2004), PAKDD.
    """
    df = ok_rows(results)
    pairs = twins(df)
    leaky = leaky_settings(df)
    frame = _fold_frame(df.loc[df["encoder"].isin(list(pairs) + list(pairs.values()))])
    rows = []
    for (dataset, model), part in frame.groupby(["dataset", "model"], sort=True):
        for enc, twin in pairs.items():  # loop over settings
            row = _audit_pair(part, enc, twin, alpha)
            if row is not None:
                rows.append({"dataset": dataset, "model": model, "encoder": enc, **row, "leaky": enc in leaky})
    return pd.DataFrame(rows, columns=AUDIT_COLUMNS)


def audit_summary(audit: pd.DataFrame) -> pd.DataFrame:
    """On how many datasets each setting was flagged, per model.

    Returns
    -------
    DataFrame
        Columns ``model, encoder, twin, leaky, flagged_datasets, n_datasets,
        median_gap_diff, median_test_effect``.
    """
    cols = [
        "model",
        "encoder",
        "twin",
        "leaky",
        "flagged_datasets",
        "n_datasets",
        "median_gap_diff",
        "median_test_effect",
    ]
    if audit.empty:
        return pd.DataFrame(columns=cols)
    g = audit.groupby(["model", "encoder", "twin", "leaky"], sort=False)
    out = g.agg(
        flagged_datasets=("flagged", "sum"),
        n_datasets=("dataset", "nunique"),
        median_gap_diff=("gap_diff", "median"),
        median_test_effect=("test_effect", "median"),
    ).reset_index()
    return out[cols]


def eligible_rows(results: pd.DataFrame) -> tuple[pd.DataFrame, set[str]]:
    """The rows of settings that may be ranked and recommended, and the leaky labels.

    When every setting is leaky, all rows are kept (there is nothing else to rank).
    """
    leaky = leaky_settings(results)
    if not leaky:
        return results, leaky
    keep = ~results["encoder"].isin(leaky)
    return (results.loc[keep], leaky) if keep.any() else (results, set())


def leaky_settings(
    results: pd.DataFrame,
    *,
    target_kinds=("target",),
    leaky_schemes=("none", "loo"),
    crossfit_key: str = "crossfit",
    default_scheme: str = "kfold",
) -> set[str]:
    """Encoder labels that fit target statistics on the rows they encode.

    Read from the results column ``leaky`` (declared by each encoder); tables written
    before that column existed fall back to the cross-fitting scheme in ``encoder_params``.

    References
    ----------
    Prokhorenkova et al. (2018), NeurIPS: in-sample and leave-one-out target statistics
    shift the training distribution (target leakage).
    """
    if "leaky" in results:
        flags = results.drop_duplicates("encoder").set_index("encoder")["leaky"]
        return set(flags.index[flags.fillna(False).astype(bool)].astype(str))
    if "encoder_params" not in results or "encoder_kind" not in results:
        return set()
    # legacy stores written before the `leaky` column: read the scheme from the params
    rows = results.drop_duplicates("encoder")
    rows = rows.loc[rows["encoder_kind"].isin(list(target_kinds))]
    scheme = _crossfit_scheme(rows["encoder_params"].astype(object), crossfit_key, default_scheme)
    return set(rows.loc[scheme.isin(list(leaky_schemes)), "encoder"].astype(str))
