"""Shared fixtures: seeded RNG, Agg backend, the shipped head model; the test tiers."""

import os

os.environ.setdefault("MPLBACKEND", "Agg")
if os.environ.get("PYTEST_XDIST_WORKER"):
    # One BLAS/OpenMP thread per test worker: the workers already fill the cores, and idle BLAS
    # threads spinning against each other make small products seconds slow on a busy machine.
    # (The batch engines' list of thread variables; importing it loads no numpy.)
    from sourcelab.batch.engines import THREAD_ENV

    for _var in THREAD_ENV:
        os.environ.setdefault(_var, "1")
    # ... and the output writer draws figures in the worker itself (no pool per worker); the
    # parallel drawing is tested explicitly (result_figures(n_jobs=2)).
    os.environ.setdefault("SOURCELAB_FIGURE_JOBS", "1")

import matplotlib  # noqa: E402

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pytest  # noqa: E402


#: The tiers (DEVELOPERS.md, "Tests"), registered in pyproject.toml:
#:   known_answer - constructed inputs whose exact answer is known;
#:   property     - published properties of the methods (localisation error, coverage, calibration);
#:   reference    - agreement with an outside implementation, published table or real recording;
#:   contract     - what users run and what the README promises (CLI, outputs, safety, packaging).
TIERS = ("known_answer", "property", "reference", "contract")

#: Each test module's tier; a test may carry its own tier marker instead (it then wins).
#: tests/test_architecture.py fails on a test module missing here.
MODULE_TIERS = {
    "test_analysis": "known_answer",
    "test_artefacts": "known_answer",
    "test_compare": "known_answer",
    "test_coupling_figures": "known_answer",
    "test_figures": "known_answer",
    "test_intake": "known_answer",
    "test_reliability_icc": "known_answer",
    "test_live": "known_answer",
    "test_norms": "known_answer",
    "test_ocular": "known_answer",
    "test_ica": "reference",
    "test_rois": "known_answer",
    "test_spectra": "known_answer",
    "test_states": "known_answer",
    "test_config_bands": "known_answer",
    "test_progress": "contract",
    "test_targets_peaks": "known_answer",
    "test_coupling_norms": "property",
    "test_coupling_targets": "property",
    "test_norms_fit": "property",
    "test_norms_predictive": "property",
    "test_trust_bootstrap": "property",
    "test_trust_leakage": "property",
    "test_trust_localise": "property",
    "test_trust_naming": "property",
    "test_naming_evidence": "property",
    "test_atlas_second_opinion": "reference",
    "test_atlases": "reference",
    "test_coupling_sensor": "reference",
    "test_coupling_source": "reference",
    "test_exports": "reference",
    "test_headmodel": "reference",
    "test_intake_realdata": "reference",
    "test_inverse": "reference",
    "test_realdata_analysis": "reference",
    "test_architecture": "contract",
    "test_bad_inputs": "contract",
    "test_batch": "contract",
    "test_cli": "contract",
    "test_cohort": "contract",
    "test_coupling_analysis": "contract",
    "test_demo": "contract",
    "test_examples": "contract",
    "test_packaging": "contract",
    "test_report": "contract",
    "test_stream": "contract",
    "test_targets": "contract",
}


def pytest_collection_modifyitems(config, items):
    """Give every test its module's tier unless it carries a tier marker itself."""
    for item in items:
        if any(item.get_closest_marker(t) for t in TIERS):
            continue
        tier = MODULE_TIERS.get(item.module.__name__.rsplit(".", 1)[-1])
        if tier is not None:
            item.add_marker(getattr(pytest.mark, tier))


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
