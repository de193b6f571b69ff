"""Coupling between electrode pairs and between cortical networks (pure array functions).

Data path::

    clean epochs ──epoch_fourier(taper=True)──► X (n_epochs, n_ch, n_bins)   [spectra.py]
                  └epoch_fourier(taper=False)─► X_plain (for envelopes)
    X ──sensor_coupling──► SensorCoupling ──pair_table──► pair_table.tsv rows
    X, X_plain ──network_coupling(op, atlases)──► [EdgeCoupling] ──coupling_table──► rows

Each epoch is one Welch segment, so its cross-spectrum is the rank-one ``X Xᴴ``
(:func:`sourcelab.spectra.epoch_bin_cross_spectra` returns it as matrices); the functions here
accept the coefficients to avoid forming them.  ROI signals are fixed spatial filters ``W``
applied to ``X`` (``W C Wᵀ``).

Modules
-------
``measures``  per-bin coherence, imaginary coherency, lagged coherence, wPLI, debiased wPLI²,
              lagged phase synchronisation, phase lag; band averages; bootstrap over epochs;
              the conjugation (time-reversal) null of instantaneous mixing.
``pairs``     pair sets from 10-20 geometry (all, homologous, anterior-posterior,
              intrahemispheric).
``sensor``    pair measures and asymmetry per band; :func:`pair_table`.
``source``    ROI filters, leakage expectations, orthogonalised envelope correlation;
              :func:`coupling_table`.

Norms for these measures: :mod:`sourcelab.norms.coupling` (transforms and z).  Table columns:
``TABLES.md`` beside this file.
"""

from .measures import BAND_MEASURES, LAGGED_MEASURES, conjugation_null, pair_statistics
from .pairs import PairSets, pair_sets
from .sensor import (
    MEASURE_DESCRIPTIONS,
    MEASURE_UNITS,
    PAIR_COLUMN_NOTES,
    PAIR_COLUMNS,
    SensorCoupling,
    pair_table,
    sensor_coupling,
)
from .source import (
    COUPLING_ATLASES,
    EDGE_COLUMN_NOTES,
    EDGE_COLUMNS,
    EDGE_MEASURES,
    EdgeCoupling,
    RoiFilters,
    coupling_table,
    independent_source_covariance,
    network_coupling,
    roi_filters,
)

__all__ = [
    "BAND_MEASURES",
    "COUPLING_ATLASES",
    "EDGE_COLUMN_NOTES",
    "EDGE_COLUMNS",
    "EDGE_MEASURES",
    "LAGGED_MEASURES",
    "MEASURE_DESCRIPTIONS",
    "MEASURE_UNITS",
    "PAIR_COLUMN_NOTES",
    "PAIR_COLUMNS",
    "EdgeCoupling",
    "PairSets",
    "RoiFilters",
    "SensorCoupling",
    "conjugation_null",
    "coupling_table",
    "independent_source_covariance",
    "network_coupling",
    "pair_sets",
    "pair_statistics",
    "pair_table",
    "roi_filters",
    "sensor_coupling",
]
