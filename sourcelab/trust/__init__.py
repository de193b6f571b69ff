"""Trust in every value: bootstrap confidence intervals and ROI-to-ROI leakage.

Public API::

    add_intervals, add_sensor_intervals                      # CI columns for the tidy tables
    z_interval, robust_flags, bootstrap_weights              # pure helpers
    leakage_matrix, leakage_for, Leakage, plot_leakage       # cross-talk between ROIs
    leakage_hints                                            # deviating ROIs and their leakers
"""

from .bootstrap import (
    INTERVAL_COLUMNS,
    RoiReplicates,
    add_intervals,
    add_sensor_intervals,
    bootstrap_weights,
    percentile_interval,
    robust_flags,
    roi_bootstrap,
    roi_replicates,
    sensor_bootstrap,
    z_interval,
)
from .leakage import (
    HINT_COLUMNS,
    LEAKAGE_COLUMNS,
    Leakage,
    activity_gain,
    leakage_for,
    leakage_hints,
    leakage_matrix,
    plot_leakage,
    point_spread_power,
)

__all__ = [
    "HINT_COLUMNS",
    "INTERVAL_COLUMNS",
    "LEAKAGE_COLUMNS",
    "Leakage",
    "RoiReplicates",
    "activity_gain",
    "add_intervals",
    "add_sensor_intervals",
    "bootstrap_weights",
    "leakage_for",
    "leakage_hints",
    "leakage_matrix",
    "percentile_interval",
    "plot_leakage",
    "point_spread_power",
    "robust_flags",
    "roi_bootstrap",
    "roi_replicates",
    "sensor_bootstrap",
    "z_interval",
]
