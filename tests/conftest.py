"""Shared fixtures: one seed for every test that draws random numbers."""

from __future__ import annotations

import numpy as np
import pytest


@pytest.fixture
def seed() -> int:
    """The seed of every random draw in the suite (change it to re-draw all test data)."""
    return 0


@pytest.fixture
def rng(seed) -> np.random.Generator:
    """A fresh numpy Generator seeded with ``seed``."""
    return np.random.default_rng(seed)
