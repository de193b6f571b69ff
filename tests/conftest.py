"""Shared fixtures: seeded RNG, Agg backend, the shipped head model."""

import os

os.environ.setdefault("MPLBACKEND", "Agg")

import matplotlib  # noqa: E402

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pytest  # noqa: E402


@pytest.fixture(autouse=True)
def _close_figures():
    """Close every pyplot figure a test opened (figures are returned open, as users get them)."""
    yield
    import matplotlib.pyplot as plt

    plt.close("all")


@pytest.fixture
def rng():
    """A seeded random generator (each test gets the same stream)."""
    return np.random.default_rng(12345)


@pytest.fixture(scope="session")
def head_model():
    from sourcelab.headmodel import load_head_model

    return load_head_model()


def pytest_configure(config):
    # the atlas build scripts live in the top-level atlases/ folder of a source checkout
    import sys
    from pathlib import Path

    root = str(Path(__file__).resolve().parent.parent)
    if root not in sys.path:
        sys.path.append(root)


@pytest.fixture(scope="session")
def demo_result():
    """The real demo analysis (invented participant against the invented demo norms), as
    ``sourcelab demo`` computes it: what figures, report and exports are tested on."""
    from sourcelab.demo import demo_result as run

    return run()


@pytest.fixture(scope="session")
def plain_result():
    """The demo recording analysed without norms (no z-scores)."""
    from sourcelab.analysis import analyze
    from sourcelab.demo import demo_recording

    return analyze(demo_recording())
