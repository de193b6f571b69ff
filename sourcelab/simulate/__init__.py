"""Simulation through the template forward model: one home for the demo, the tests and benchmarks.

Everything simulated here is invented: no real person's data is involved.

* :mod:`.recording` -- sensor data from oscillating cortical patches over a pink background
  (:func:`simulate_raw`, :class:`Generator`);
* :mod:`.tables` -- cohorts of analysis tables that are Gaussian after the norms' transforms
  (:func:`gaussian_cohort`), for the norms machinery;
* :mod:`.sphere` -- a small analytic test head (sources on a sphere) for the trust tools.
"""

from .recording import (
    Generator,
    narrowband,
    ocular_artefacts,
    patch_vertices,
    pink_noise,
    simulate_raw,
    simulate_sensor_data,
)
from .tables import GaussianCohort, gaussian_cohort

__all__ = [
    "GaussianCohort",
    "Generator",
    "gaussian_cohort",
    "narrowband",
    "ocular_artefacts",
    "patch_vertices",
    "pink_noise",
    "simulate_raw",
    "simulate_sensor_data",
]
