"""Fixtures of the reporting tests: an invented results table and one real small sweep.

``sweep_dir`` runs the real pipeline once per test session (several datasets of
different cardinality, five encoders including a target setting without cross-fitting,
two models, three folds) for the tests that need a real run directory.
"""

from __future__ import annotations

import json
import shutil

import pandas as pd
import pytest

from reporting_fakes import SWEEP, fake_results, run_sweep


@pytest.fixture
def results(rng) -> pd.DataFrame:
    """Four datasets, three encoders ('te' best, 'codes' worst), one model."""
    return fake_results(rng, skill={"te": 0.03, "onehot": 0.015})


@pytest.fixture(scope="session")
def sweep_dir(tmp_path_factory):
    """A real run directory of :data:`SWEEP`, built once per session (copy before writing)."""
    out = tmp_path_factory.mktemp("sweep") / "run"
    run_sweep(json.loads(json.dumps(SWEEP)), out)
    return out


@pytest.fixture
def run_dir(sweep_dir, tmp_path):
    """A private copy of the session sweep that a test may write a report into."""
    out = tmp_path / "run"
    shutil.copytree(sweep_dir, out, ignore=shutil.ignore_patterns("report", ".run.lock"))
    return out
