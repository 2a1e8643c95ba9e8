"""Grouped outer folds make the target encoder's inner folds grouped too.

On a synthetic clustered table (invented for this test: incidents of 8 rows sharing one
outcome, each at one of 40 sites), cross-fitted target statistics with random inner folds
carry a row's own incident into its statistic and look optimistic (train-minus-test gap
far above integer codes'); with inner folds grouped by incident the gap is within noise
of integer codes'. The optimism gap as a leakage check is common practice, no source.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import roc_auc_score
from sklearn.model_selection import GroupKFold

from harness.encoders import build
from harness.models import build_model


def clustered_table(seed, n_clusters=1500, size=8, n_sites=40):
    rng = np.random.RandomState(seed)
    site_effect = rng.normal(scale=0.7, size=n_sites)
    site = rng.randint(0, n_sites, n_clusters)
    score = site_effect[site] + rng.normal(scale=3.0, size=n_clusters)
    outcome = (rng.uniform(size=n_clusters) < 1 / (1 + np.exp(-score))).astype(int)
    incident = np.repeat(np.arange(n_clusters), size)
    X = pd.DataFrame({"site": [f"s{v}" for v in site[incident]]})
    return X, outcome[incident], incident


def optimism_gaps(kind, params, grouped, seeds=range(3)):
    """Train-minus-test ROC AUC of a linear model per outer fold (grouped outer folds)."""
    out = []
    for seed in seeds:
        X, y, g = clustered_table(seed)
        for tr, te in GroupKFold(5, shuffle=True, random_state=seed).split(X, y, g):
            enc = build(kind, **params)
            train = enc.fit_transform(X.iloc[tr], y[tr], **({"groups": g[tr]} if grouped else {}))
            test = enc.transform(X.iloc[te])
            model = build_model("linear", "binary", seed=0).fit(train, y[tr])
            out.append(
                roc_auc_score(y[tr], model.predict_proba(train)[:, 1])
                - roc_auc_score(y[te], model.predict_proba(test)[:, 1])
            )
    return np.array(out)


@pytest.fixture(scope="module")
def integer_gaps():
    return optimism_gaps("integer", {}, False)


def _paired(gaps, reference):
    d = gaps - reference
    return d.mean(), d.std(ddof=1) / np.sqrt(len(d))


def test_random_inner_folds_are_optimistic_on_clustered_rows(integer_gaps):
    mean, se = _paired(optimism_gaps("target", {"random_state": 0}, grouped=False), integer_gaps)
    assert mean > 3.5 * se and mean > 0.05


@pytest.mark.parametrize("crossfit", ["kfold", "holdout", "ordered", "loo"])
def test_grouped_inner_folds_are_within_noise_of_integer_codes(integer_gaps, crossfit):
    gaps = optimism_gaps("target", {"crossfit": crossfit, "random_state": 0}, grouped=True)
    mean, se = _paired(gaps, integer_gaps)
    assert abs(mean) < 2.5 * se
    assert gaps.mean() < 0.02


def test_the_runner_hands_the_groups_to_the_encoder(tmp_path):
    from harness.cellwork import _encode
    from harness.config import parse_config
    from harness.runner import _jobs_for, plan

    X, y, g = clustered_table(0, n_clusters=60)
    X.assign(incident=g, y=y).to_csv(tmp_path / "t.csv", index=False)
    cfg = parse_config(
        {
            "experiment": {"name": "grp", "seed": 2},
            "protocol": {"folds": 3, "group": "incident"},
            "datasets": {"t": {"source": "file", "path": str(tmp_path / "t.csv"), "target": "y"}},
            "encoders": {"te": {"kind": "target", "random_state": 5}},
            "models": {"lin": {"family": "linear"}},
        }
    )
    the_plan = plan(cfg)
    label, job = _jobs_for(the_plan, the_plan.cells)[0]
    ds = the_plan.datasets[label]
    encoded = _encode(ds, job)
    groups = ds.groups.iloc[job.train_idx].to_numpy()
    assert set(groups).isdisjoint(ds.groups.iloc[job.test_idx])  # outer folds grouped
    expected = build("target", random_state=5, target_type="binary").fit_transform(
        ds.X.iloc[job.train_idx][["site"]], ds.y.iloc[job.train_idx].to_numpy(), groups=groups
    )
    np.testing.assert_allclose(encoded.train[:, :1], expected)
