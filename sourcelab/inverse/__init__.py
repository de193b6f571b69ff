"""Inverse solutions: sLORETA computed by sourcelab; eLORETA and dSPM through MNE.

* :func:`sloreta_operator` -- the standardised sLORETA kernel as a :class:`SourceOperator`;
* :func:`source_power` -- source power from sensor cross-spectra;
* :func:`inverse_operator` -- the cached operator of the shipped head model;
* :func:`roi_power_matrices` -- ROI mean power as ``tr(M_r C)``.
"""

from .operators import inverse_operator, roi_power_matrices, roi_rows
from .sloreta import SourceOperator, point_source_peaks, sloreta_operator, source_power

__all__ = [
    "SourceOperator",
    "inverse_operator",
    "point_source_peaks",
    "roi_power_matrices",
    "roi_rows",
    "sloreta_operator",
    "source_power",
]
