"""Shared test fixtures: seeds, Hypothesis profiles, data paths."""

from __future__ import annotations

import os
from pathlib import Path

import matplotlib
import pytest
from hypothesis import HealthCheck, settings

matplotlib.use("Agg")

TESTS_DIR = Path(__file__).parent
DATA_DIR = TESTS_DIR / "data"
#: Figures written by tests for a reviewer to open (git-ignored).
ARTIFACTS_DIR = TESTS_DIR.parent / "artifacts"

# Deterministic by default so CI is reproducible; SHOTCHECK_HYPOTHESIS=nondeterministic explores more.
settings.register_profile(
    "deterministic",
    derandomize=True,
    database=None,
    max_examples=25,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow],
)
settings.register_profile("nondeterministic", max_examples=200, deadline=None)
settings.load_profile(os.environ.get("SHOTCHECK_HYPOTHESIS", "deterministic"))


def _seeds() -> list[int]:
    """Seeds for stochastic tests: 42 by default, ``SHOTCHECK_TEST_SEEDS=all`` runs 0-19, or a list '1,2,3'."""
    spec = os.environ.get("SHOTCHECK_TEST_SEEDS", "42")
    if spec == "all":
        return list(range(20))
    return [int(s) for s in spec.split(",") if s.strip()]


@pytest.fixture(params=_seeds())
def global_random_seed(request: pytest.FixtureRequest) -> int:
    """Seed for synthetic-data and training tests (see ``_seeds``)."""
    return int(request.param)


@pytest.fixture
def data_dir() -> Path:
    """Folder of committed test data files."""
    return DATA_DIR


@pytest.fixture
def artifacts_dir() -> Path:
    """Folder for figures a reviewer may open after the test run (created on demand)."""
    ARTIFACTS_DIR.mkdir(exist_ok=True)
    return ARTIFACTS_DIR
