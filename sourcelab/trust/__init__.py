"""Trust in every ROI value: bootstrap confidence intervals and ROI-to-ROI leakage.

Public API::

    add_intervals, add_sensor_intervals, norms_z_function   # CI columns for the tidy tables
    add_result_intervals                                     # both tables of an AnalysisResult
    z_interval, robust_flags, bootstrap_weights              # pure helpers
    leakage_matrix, leakage_for, Leakage, plot_leakage       # cross-talk between ROIs
    leakage_hints                                            # deviating ROIs and their leakers
"""

from .bootstrap import (INTERVAL_COLUMNS, add_intervals, add_result_intervals, add_sensor_intervals, bootstrap_weights,
                        norms_z_function, percentile_interval, robust_flags, roi_bootstrap,
                        sensor_bootstrap, z_interval)
from .leakage import (HINT_COLUMNS, LEAKAGE_COLUMNS, Leakage, activity_gain, leakage_for,
                      leakage_hints, leakage_matrix, plot_leakage, point_spread_power)

__all__ = [
    "HINT_COLUMNS", "INTERVAL_COLUMNS", "LEAKAGE_COLUMNS", "Leakage", "activity_gain",
    "add_intervals", "add_result_intervals", "add_sensor_intervals", "bootstrap_weights", "leakage_for", "leakage_hints",
    "leakage_matrix", "norms_z_function", "percentile_interval", "plot_leakage",
    "point_spread_power", "robust_flags", "roi_bootstrap", "sensor_bootstrap", "z_interval",
]
