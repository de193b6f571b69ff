"""Norms: a documented file format, normalising transforms, z-scoring, fitting and calibration.

Public API::

    Norms, read_norms, write_norms, check_norms           # the file (see FORMAT.md)
    match_norms, zscore, apply_norms, chance_summary       # z-scoring an analysis's tables
    fit_norms, norms_from_tables                           # from a cohort's tables
    calibration_report, calibration_summary, plot_calibration
    TRANSFORMS, get_transform, transform_for_measure       # log10 / logit with inverses

Norms from a folder of *recordings* (analysing each one) is :func:`sourcelab.build_norms`.

References
----------
Gasser T, Bächer P, Möcks J (1982).  Electroencephalogr Clin Neurophysiol 53:119-124 (from memory).
John ER, Ahn H, Prichep L, et al. (1980).  Science 210:1255-1258 (from memory).
Benjamini Y, Hochberg Y (1995).  J R Stat Soc B 57:289-300.
"""

from .calibration import calibration_report, calibration_summary, plot_calibration
from .fit import NormsFit, entry_values, fit_norms, norms_from_tables
from .io import (
    COLUMNS,
    FORMAT_VERSION,
    NA,
    Norms,
    check_norms,
    normalise_condition,
    read_norms,
    write_norms,
)
from .transforms import TRANSFORMS, get_transform, transform_for_measure
from .zscore import NormRows, apply_norms, bh_adjust, chance_summary, match_norms, zscore

__all__ = [
    "COLUMNS",
    "FORMAT_VERSION",
    "NA",
    "TRANSFORMS",
    "NormRows",
    "Norms",
    "NormsFit",
    "apply_norms",
    "bh_adjust",
    "calibration_report",
    "calibration_summary",
    "chance_summary",
    "check_norms",
    "entry_values",
    "fit_norms",
    "get_transform",
    "match_norms",
    "normalise_condition",
    "norms_from_tables",
    "plot_calibration",
    "read_norms",
    "transform_for_measure",
    "write_norms",
    "zscore",
]
