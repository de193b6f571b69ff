"""Intake: read a recording, recognise the 10-20 sites, check units, repair bad sites, clean.

Data flow: :func:`read_recording` -> :class:`Recording` -> :func:`clean_recording` ->
:class:`CleanData` (epochs in µV) -> spectra.  :func:`band_power` and the reliability helpers are
pure array functions.
"""

from .channels import canonical_site, match_channels
from .clean import CleanData, clean_recording, detect_mains
from .power import band_power, epoch_band_power, epoch_spectra, peak_frequency
from .quality import plot_quality
from .recording import Recording, detect_bad_sites, read_recording
from .reliability import (
    Reliability,
    ReliabilitySummary,
    pearson_r,
    reliability_summary,
    spearman_brown,
    split_half,
    test_retest,
)

__all__ = [
    "read_recording",
    "Recording",
    "clean_recording",
    "CleanData",
    "band_power",
    "epoch_band_power",
    "epoch_spectra",
    "peak_frequency",
    "pearson_r",
    "spearman_brown",
    "split_half",
    "test_retest",
    "reliability_summary",
    "Reliability",
    "ReliabilitySummary",
    "plot_quality",
    "canonical_site",
    "match_channels",
    "detect_bad_sites",
    "detect_mains",
]
