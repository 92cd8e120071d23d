"""Shared fixtures: a seeded random generator and small synthetic signals."""

from __future__ import annotations

import numpy as np
import pytest


@pytest.fixture
def rng() -> np.random.Generator:
    """A seeded generator, so every run of the suite sees the same noise."""
    return np.random.default_rng(20261202)
