"""One scaling policy for every encoding (``models.SCALING_POLICY``): numeric columns are
standardised on the training fold whatever the encoding; categorical output columns are
divided by their standard deviation without centring, so sparse blocks stay sparse.
The reference for standardisation is scikit-learn's ``StandardScaler``."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from sklearn.preprocessing import StandardScaler

from harness.cellwork import _encode
from harness.config import parse_config
from harness.models import FAMILIES, BlockScaler, build_model
from harness.runner import _jobs_for, plan


def _encoded(kind):
    cfg = parse_config(
        {
            "experiment": {"name": "scale", "seed": 1},
            "protocol": {"folds": 3},
            "datasets": {
                "t": {
                    "source": "synthetic",
                    "n_rows": 300,
                    "cardinalities": [4, 25],
                    "task": "binary",
                    "n_numeric": 2,
                    "seed": 3,
                }
            },
            "encoders": {"e": {"kind": kind}},
            "models": {"lin": {"family": "linear"}},
        }
    )
    the_plan = plan(cfg)
    label, job = _jobs_for(the_plan, the_plan.cells)[0]
    ds = the_plan.datasets[label]
    return ds, job, _encode(ds, job)


@pytest.fixture(scope="module")
def encodings():
    return {kind: _encoded(kind) for kind in ("onehot", "hashing", "integer", "frequency", "target", "drop")}


def test_numeric_columns_are_scaled_the_same_whatever_the_encoding(encodings):
    ds, job, _ = encodings["integer"]
    num = ds.X.iloc[job.train_idx][list(ds.numeric)]
    reference = StandardScaler().fit_transform(num.fillna(num.median()).to_numpy(float))
    for kind, (ds, _job, enc) in encodings.items():
        out = BlockScaler(len(ds.numeric)).fit(enc.train).transform(enc.train)
        dense = out.toarray() if sp.issparse(out) else out
        np.testing.assert_allclose(dense[:, -2:], reference, atol=1e-12, err_msg=kind)


def test_categorical_block_has_unit_variance_and_stays_sparse(encodings):
    for kind in ("onehot", "hashing", "integer", "target", "frequency"):
        _, _, enc = encodings[kind]
        scaler = BlockScaler(2).fit(enc.train)
        out = scaler.transform(enc.test)
        if kind in ("onehot", "hashing"):
            assert sp.issparse(out) and out[:, :-2].nnz == enc.test[:, :-2].nnz
        train = scaler.transform(enc.train)
        train = train.toarray() if sp.issparse(train) else train
        std = train[:, :-2].std(axis=0)
        np.testing.assert_allclose(std[std > 0], 1.0, atol=1e-9, err_msg=kind)
        raw = enc.train.toarray() if sp.issparse(enc.train) else enc.train
        ratio = np.divide(train[:, :-2], raw[:, :-2], out=np.ones_like(raw[:, :-2]), where=raw[:, :-2] != 0)
        assert np.all(ratio > 0)  # divided, never centred: zeros stay zeros, signs kept
        assert np.all((raw[:, :-2] == 0) == (train[:, :-2] == 0))


@pytest.mark.parametrize("family", [name for name, fam in FAMILIES.items() if fam.scaled])
def test_every_scaled_family_starts_with_the_block_scaler(family):
    model = build_model(family, "binary", seed=0, n_numeric=3)
    assert isinstance(model.steps[0][1], BlockScaler) and model.steps[0][1].n_numeric == 3
