"""Factorising each dataset once changes no number.

The runner hands every encoder ``category`` columns built once per dataset
(``harness.encoders.factorised``); the encoders read their codes directly. Outputs must
equal those on the original columns, and the quickstart grid's metrics must equal those
of a run that hands every unit the loaded columns, as the runner did before.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from harness import runner
from harness.config import load_config
from harness.encoders import KINDS, build, factorised, params_of
from harness.metrics import METRICS
from harness.runner import execute, load_datasets, outer_splits, plan
from harness.store import read_results

ROOT = Path(__file__).resolve().parents[1]
KEYS = ["dataset", "encoder", "model", "repeat", "fold"]
SETTINGS = [(k, {}) for k in KINDS] + [("target", {"crossfit": c}) for c in ("none", "loo", "ordered")]


def _dense(out) -> np.ndarray:
    return out.toarray() if hasattr(out, "toarray") else np.asarray(out)


def _same(a, b) -> bool:
    if isinstance(a, pd.DataFrame):  # native categories: same codes and category tables
        return all(
            np.array_equal(a[c].cat.codes, b[c].cat.codes) and list(a[c].cat.categories) == list(b[c].cat.categories)
            for c in a.columns
        )
    return bool(np.array_equal(_dense(a), _dense(b), equal_nan=True))


def _awkward(rng, n=400) -> pd.DataFrame:
    """Invented columns of every dtype the fast paths take (demo data)."""
    text = rng.choice(["b", "a", "Ünï", "c", "B"], size=n).astype(object)
    text[rng.random(n) < 0.1] = None
    cat = pd.Categorical(rng.choice(["x", "y", "z"], size=n), categories=["w", "z", "y", "x"])
    return pd.DataFrame(
        {
            "object": text,
            "str": pd.Series(text, dtype="str"),
            "python_str": pd.Series(text, dtype=pd.StringDtype("python")),
            "category": cat,  # "w" is an unused category
            "bool": rng.random(n) < 0.3,
            "boolean": pd.array(np.where(rng.random(n) < 0.1, None, rng.random(n) < 0.5), dtype="boolean"),
            "int": rng.integers(0, 7, size=n),
            "mixed": pd.Series(rng.choice([1, 2, "1", "x"], size=n).tolist(), dtype=object),
        }
    )


@pytest.mark.parametrize(("kind", "params"), SETTINGS, ids=[f"{k}{p}" for k, p in SETTINGS])
def test_encoders_give_the_same_output_on_factorised_columns(kind, params, rng):
    frame = _awkward(rng)
    y = (rng.random(len(frame)) < 0.4).astype(int)
    codes = factorised(frame, frame.columns)
    assert all(isinstance(codes[c].dtype, pd.CategoricalDtype) for c in codes)
    train, test = np.arange(300), np.arange(300, 400)
    for X in (frame, codes):
        assert len(X) == 400
    outs = []
    for X in (frame, codes):
        seeded = {"random_state": 0} if "random_state" in params_of(kind) else {}
        enc = build(kind, **params, **seeded)
        fitted = enc.fit_transform(X.iloc[train], y[train])
        outs.append((fitted, enc.transform(X.iloc[test]), enc.get_feature_names_out()))
    assert _same(outs[0][0], outs[1][0]) and _same(outs[0][1], outs[1][1])
    assert list(outs[0][2]) == list(outs[1][2])


def test_quickstart_folds_encode_identically_after_factorising():
    """Every quickstart dataset x fold x encoder kind: same matrices from codes as from the
    loaded columns (the fast half of the bit-identity promise)."""
    cfg = load_config(ROOT / "configs" / "quickstart.toml")
    for label, ds in load_datasets(cfg).items():
        codes = factorised(ds.X, ds.categorical)
        cat = list(ds.categorical)
        split = outer_splits(ds, cfg.protocol.folds, 1, True, cfg.seed)
        for tr, te in list(split.values())[:2]:
            y = ds.y.iloc[tr].to_numpy()
            for kind, params in SETTINGS:
                outs = []
                for X in (ds.X, codes):
                    target_type = "continuous" if ds.task == "regression" else ds.task
                    extra = {
                        k: v for k, v in {"random_state": 3, "target_type": target_type}.items() if k in params_of(kind)
                    }
                    enc = build(kind, **params, **extra)
                    outs.append((enc.fit_transform(X.iloc[tr][cat], y), enc.transform(X.iloc[te][cat])))
                assert _same(outs[0][0], outs[1][0]) and _same(outs[0][1], outs[1][1]), (label, kind)


@pytest.mark.slow
def test_quickstart_metrics_are_bit_identical_without_factorising(tmp_path, monkeypatch):
    """The whole quickstart grid, run as it was before the runner factorised each dataset
    (every unit re-reading the loaded object columns) and as it runs now."""
    config = load_config(ROOT / "configs" / "quickstart.toml")
    execute(plan(config), tmp_path / "now", jobs=2, progress=False)
    monkeypatch.setattr(runner, "_factorised", lambda ds: ds)
    execute(plan(config), tmp_path / "before", jobs=2, progress=False)
    metrics = list(METRICS) + [f"train_{m}" for m in METRICS]
    cols = KEYS + ["status", "n_features_out"] + metrics
    now, before = (read_results(tmp_path / d)[cols].sort_values(KEYS).reset_index(drop=True) for d in ("now", "before"))
    assert len(now) > 0 and (now["status"] == "ok").mean() > 0.9
    pd.testing.assert_frame_equal(now, before, check_exact=True)
