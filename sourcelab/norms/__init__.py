"""Norms: a documented file format, normalising transforms, z-scoring, building and calibration.

Public API::

    Norms, read_norms, write_norms, check_norms           # the file (see FORMAT.md)
    apply_norms, chance_summary, bh_adjust                 # z-scoring an analysis's tables
    build_norms, fit_norms, build_norms_from_cohort        # from a reference cohort
    calibration_report, calibration_summary, plot_calibration
    TRANSFORMS, get_transform, transform_for_measure       # log10 / logit with inverses

References
----------
Gasser T, Bächer P, Möcks J (1982).  Electroencephalogr Clin Neurophysiol 53:119-124 (from memory).
John ER, Ahn H, Prichep L, et al. (1980).  Science 210:1255-1258 (from memory).
Benjamini Y, Hochberg Y (1995).  J R Stat Soc B 57:289-300.
"""

from .build import (CohortBuild, NormsFit, build_norms, build_norms_from_cohort, check_norms,
                    find_recording, fit_norms, read_participants)
from .calibration import calibration_report, calibration_summary, plot_calibration
from .io import COLUMNS, FORMAT_VERSION, NA, Norms, normalise_condition, read_norms, write_norms
from .transforms import TRANSFORMS, get_transform, transform_for_measure
from .zscore import apply_norms, bh_adjust, chance_summary

__all__ = [
    "COLUMNS", "FORMAT_VERSION", "NA", "TRANSFORMS", "CohortBuild", "Norms", "NormsFit",
    "apply_norms", "bh_adjust", "build_norms", "build_norms_from_cohort", "calibration_report",
    "calibration_summary", "chance_summary", "check_norms", "find_recording", "fit_norms",
    "get_transform", "normalise_condition", "plot_calibration", "read_norms",
    "read_participants", "transform_for_measure", "write_norms",
]
