"""The analysis result: a frozen dataclass that figures, report, norms and exports read."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .config import AnalysisConfig
from .provenance import Fingerprint

#: Columns every ``roi_table`` has, in order (more may follow: p, fdr, CI columns ...).
ROI_COLUMNS = ("atlas", "roi", "hemisphere", "band", "measure", "value", "unit", "n_vertices",
               "small", "z")
#: Columns every ``sensor_table`` has.
SENSOR_COLUMNS = ("channel", "band", "measure", "value", "unit", "z")

#: Units of the values by measure.
UNITS = {
    "absolute": "sLORETA power (standardised, data in µV)",
    "relative": "fraction of 1-45 Hz power",
    "sensor_absolute": "µV²",
}


@dataclass(frozen=True, eq=False)
class AnalysisResult:
    """Everything one analysis produced.

    Attributes
    ----------
    config : AnalysisConfig
    fingerprint : Fingerprint
    ch_names : tuple of str
        The 19 sites, canonical order.
    source_abs, source_rel : ndarray, shape (n_bands, n_src), float32
        Absolute (standardised) and relative source band power per template source.
    sensor_abs, sensor_rel : ndarray, shape (n_bands, n_ch)
        Absolute (µV²) and relative band power per electrode (average reference).
    roi_table : DataFrame
        Tidy, one row per atlas x ROI x band x measure; columns start with :data:`ROI_COLUMNS`.
        ``z`` is NaN without norms.
    sensor_table : DataFrame
        Tidy, one row per channel x band x measure; columns start with :data:`SENSOR_COLUMNS`.
    quality : dict
        Data-quality figures: seconds kept/rejected, epochs, per-channel kept fraction, reliability.
    recording : dict
        Input summary: path, sha256, sfreq, duration_s, channel mapping, participant age.
    norms : dict | None
        Summary of the norms used (path, sha256, fingerprint), or None.
    epoch_csd : ndarray, shape (n_epochs, n_bands, n_ch, n_ch) | None
        Per-epoch band cross-spectra (µV², as recorded; the kernel applies the average
        reference), kept for resampling (confidence intervals) and reliability.
    epoch_total : ndarray, shape (n_epochs, n_ch, n_ch) | None
        Per-epoch broadband (:data:`sourcelab.config.BROADBAND_HZ`) cross-spectra, the
        denominator of relative power.
    """

    config: AnalysisConfig
    fingerprint: Fingerprint
    ch_names: tuple[str, ...]
    source_abs: np.ndarray
    source_rel: np.ndarray
    sensor_abs: np.ndarray
    sensor_rel: np.ndarray
    roi_table: pd.DataFrame
    sensor_table: pd.DataFrame
    quality: dict = field(default_factory=dict)
    recording: dict = field(default_factory=dict)
    norms: dict | None = None
    epoch_csd: np.ndarray | None = None
    epoch_total: np.ndarray | None = None

    @property
    def bands(self):
        return self.config.bands

    def source_map(self, band: str, measure: str = "absolute") -> np.ndarray:
        """Per-source values of one band, shape (n_src,)."""
        i = self.bands.names.index(band)
        return (self.source_abs if measure == "absolute" else self.source_rel)[i]

    def roi_z_map(self, band: str, measure: str = "absolute", atlas: str = "brodmann",
                  n_src: int | None = None) -> np.ndarray:
        """Per-source map of ROI z-scores (each source gets its ROI's z; NaN elsewhere)."""
        from .rois import load_atlas

        at = load_atlas(atlas)
        n = n_src if n_src is not None else self.source_abs.shape[1]
        out = np.full(n, np.nan)
        t = self.roi_table
        sel = t[(t.atlas == atlas) & (t.band == band) & (t.measure == measure)]
        z = {(r.roi, r.hemisphere): r.z for r in sel.itertuples()}
        for roi in at.rois:
            out[roi.vertices] = z.get((roi.name, roi.hemisphere), np.nan)
        return out
