"""Shared fixtures: a seeded random generator and small synthetic signals."""

from __future__ import annotations

import numpy as np
import pytest


@pytest.fixture
def rng() -> np.random.Generator:
    """A seeded generator, so every run of the suite sees the same noise."""
    return np.random.default_rng(20261202)


def pytest_terminal_summary(terminalreporter) -> None:
    """Print the counts the issue "Never lose a take" asks to see: the catalogue's bad inputs
    refused as they should be and odd-but-valid ones accepted (passed tests only)."""
    passed = [r.nodeid.rsplit("/", 1)[-1] for r in terminalreporter.stats.get("passed", [])]
    n_bad = sum(n.startswith("test_catalogue.py::test_each_bad_input_") for n in passed)
    n_good = sum(n.startswith("test_catalogue.py::test_each_odd_but_valid_") for n in passed)
    if n_bad or n_good:
        terminalreporter.write_line(f"catalogue: {n_bad} bad inputs refused as they should be, "
                                    f"{n_good} odd but valid inputs accepted")
