"""Coverage of the bootstrap intervals of the average rank, measured by simulation.

The intervals are shown only from ``RANK_CI_MIN_DATASETS`` datasets on; this test measures
why: below it the simulated coverage of a nominal 95 % interval falls short.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from harness import stats as S

EFFECTS = np.array([0.0, 0.3, 0.6, 0.9, 1.2])  # invented encoder effects (demo data)


def _coverage(n_datasets: int, rng, reps: int = 300) -> float:
    big = EFFECTS + rng.normal(size=(200_000, EFFECTS.size))
    true = S.rank_rows(pd.DataFrame(big)).mean().to_numpy()  # population mean rank
    hits = []
    for rep in range(reps):  # loop over simulated studies
        scores = pd.DataFrame(EFFECTS + rng.normal(size=(n_datasets, EFFECTS.size)))
        m = S.ScoreMatrix("m", S.POOLED, scores, S.rank_rows(scores))
        r = S.average_ranks(m, n_boot=1000, seed=rep, min_datasets=2).sort_index()
        hits.append(((r["ci_low"] <= true) & (true <= r["ci_high"])).to_numpy())
    return float(np.mean(hits))


@pytest.fixture(scope="module")
def coverage():
    rng = np.random.default_rng(7)
    return {n: _coverage(n, rng) for n in (2, 3, S.RANK_CI_MIN_DATASETS, 12)}


def test_coverage_is_short_of_nominal_below_the_threshold(coverage):
    assert coverage[2] < 0.6
    assert coverage[3] < 0.85


def test_coverage_is_near_nominal_from_the_threshold_on(coverage):
    # nominal 0.95; 300 studies x 5 encoders give a Monte-Carlo error of about 0.01
    assert coverage[S.RANK_CI_MIN_DATASETS] >= 0.91
    assert coverage[12] >= 0.925


def test_intervals_are_omitted_below_the_threshold(rng):
    scores = pd.DataFrame(rng.normal(size=(S.RANK_CI_MIN_DATASETS - 1, 3)))
    m = S.ScoreMatrix("m", S.POOLED, scores, S.rank_rows(scores))
    assert S.average_ranks(m)["ci_low"].isna().all()
