"""Tiny invented results tables for the decision tests (synthetic demo data)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness import stats as S


def table(
    effects: dict,
    *,
    reference="ref",
    seconds=None,
    features=None,
    n_folds=5,
    metric="roc_auc",
    leaky=(),
    base=0.8,
    regression=(),
    fold_noise=None,
    rng=None,
):
    """Results rows where candidate ``c`` scores ``base * (1 + effects[c][i])`` on dataset i.

    For datasets listed in ``regression`` the metric is RMSE with ``base / exp(effect)``,
    so the unit-free effect is the same number. ``seconds`` maps an encoder to its
    encoder-fit seconds per fold (model fit adds 1 s everywhere).
    """
    n = len(next(iter(effects.values())))
    effects = {reference: np.zeros(n), **{k: np.asarray(v, float) for k, v in effects.items()}}
    rows = []
    for enc, eff in effects.items():  # loop over encoders
        for i, e in enumerate(eff):  # loop over datasets
            for f in range(n_folds):  # loop over folds
                noise = 0.0 if fold_noise is None else fold_noise[enc][i][f]
                reg = f"d{i}" in regression
                value = base / np.exp(e + noise) if reg else base * (1 + e + noise)
                rows.append(
                    {
                        "dataset": f"d{i}",
                        "encoder": enc,
                        "model": "m",
                        "repeat": 0,
                        "fold": f,
                        "status": "ok",
                        "task": "regression" if reg else "binary",
                        "primary_metric": "rmse" if reg else metric,
                        "rmse": value if reg else np.nan,
                        metric: np.nan if reg else value,
                        "encoder_fit_s": (seconds or {}).get(enc, 1.0),
                        "encoder_transform_s": 0.0,
                        "model_fit_s": 1.0,
                        "n_features_out": (features or {}).get(enc, 10),
                        "n_train": 400 * (n_folds - 1),
                        "n_test": 400,
                        "encoder_kind": "target" if enc in leaky else enc,
                        "uses_target": enc in leaky,
                        "leaky": enc in leaky,
                        "encoder_params": "{}",
                        "max_cardinality": 5 + 50 * i,
                    }
                )
    return S.pool_task_score(pd.DataFrame(rows))


def decide_on_deltas(deltas, margin=0.01, alpha=0.05) -> str:
    """The verdict of one candidate whose per-dataset effects are ``deltas``."""
    df = table({"cand": deltas})
    d = S.decide(df, "m", S.POOLED, S.DecisionRule(reference="ref", margin=margin, alpha=alpha))
    return str(d.table.loc["cand", "verdict"])
