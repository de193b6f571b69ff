"""Constants shared across the package (one home each).

Nothing here imports anything from sourcelab: every layer may use these.
"""

from __future__ import annotations

#: The 19 international 10-20 sites, in sourcelab's canonical order (modern names; T7/T8/P7/P8
#: are the old T3/T4/T5/T6 — American Clinical Neurophysiology Society guideline 2006, from
#: memory).
SITES_1020: tuple[str, ...] = (
    "Fp1",
    "Fp2",
    "F7",
    "F3",
    "Fz",
    "F4",
    "F8",
    "T7",
    "C3",
    "Cz",
    "C4",
    "T8",
    "P7",
    "P3",
    "Pz",
    "P4",
    "P8",
    "O1",
    "O2",
)

#: |z| beyond which a value is called deviating: the two-sided 5 % point of the standard normal
#: (P(|Z| < 1.96) = 0.950004, scipy.stats; the "about 2 SD" rule is common practice).
Z_THRESHOLD = 1.96
#: False-discovery-rate level of the ``fdr`` flags (Benjamini & Hochberg 1995; common practice).
FDR_ALPHA = 0.05

#: BLAS/OpenMP threads while sourcelab computes (analysis, coupling, ICA, drawing, batch
#: workers).  Its matrices are small (19 channels; the largest product, the relative-power
#: bootstrap, is a few tens of GFLOP), and on a machine that is busy with other work, threads that
#: wait for each other cost more than they gain: measured on 2 shared cores (load average 10-13),
#: a 10-minute analysis took 4.5-4.8 s wall with one thread against 7.7-11 s with two, and one
#: 19 x 18,715 product 1 ms against 1.6 s.  Used through :mod:`sourcelab._threads`.
BLAS_THREADS = 1

#: Inverse methods (``sourcelab.inverse.methods.METHODS`` implements exactly these).
INVERSE_METHODS: tuple[str, ...] = ("sLORETA", "eLORETA", "dSPM")
#: Source orientations: surface-normal, or free with Pascual-Marqui's 3x3 standardisation.
ORIENTATIONS: tuple[str, ...] = ("fixed", "free")
#: Band-power measures.
MEASURES: tuple[str, ...] = ("absolute", "relative")
#: Columns that name one row of an ROI table (atlas, region, side, band, measure), in the order
#: every ROI-level table (ROI table, candidates, deviations, leakage hints) starts them.
ROI_KEY: tuple[str, ...] = ("atlas", "roi", "hemisphere", "band", "measure")

#: Units of the values, by measure (column descriptions in the table sidecars).
UNITS = {
    "absolute": "sLORETA power (standardised, data in µV)",
    "relative": "fraction of 1-45 Hz power",
    "sensor_absolute": "µV²",
}

#: Recording file suffixes sourcelab reads -> format name (one list for intake, cohorts, batches).
RECORDING_FORMATS = {
    ".edf": "EDF",
    ".bdf": "BDF",
    ".vhdr": "BrainVision",
    ".set": "EEGLAB",
    ".fif": "FIF",
    ".fif.gz": "FIF",
}
RECORDING_SUFFIXES: tuple[str, ...] = tuple(RECORDING_FORMATS)
#: The formats in words, for messages.
ALLOWED_FORMATS = (
    "EDF/EDF+ (.edf), BDF (.bdf), BrainVision (.vhdr), EEGLAB (.set), FIF (.fif, .fif.gz)"
)


def recording_suffix(name) -> str | None:
    """The recording suffix of a file name (lower case; ``".fif.gz"`` as one), or None.

    Parameters
    ----------
    name : str | os.PathLike
        A file name or path.

    Returns
    -------
    str | None
        One of :data:`RECORDING_SUFFIXES`, or None when the name has none of them.
    """
    low = str(name).lower()
    for suffix in sorted(RECORDING_SUFFIXES, key=len, reverse=True):
        if low.endswith(suffix):
            return suffix
    return None
