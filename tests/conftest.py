"""Shared fixtures: seeded RNG, Agg backend, the shipped head model."""

import os

os.environ.setdefault("MPLBACKEND", "Agg")

import matplotlib  # noqa: E402

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pytest  # noqa: E402


@pytest.fixture
def rng():
    """A seeded random generator (each test gets the same stream)."""
    return np.random.default_rng(12345)


@pytest.fixture(scope="session")
def head_model():
    from sourcelab.headmodel import load_head_model

    return load_head_model()
