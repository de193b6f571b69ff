"""Electrode-pair coupling and amplitude asymmetry per band, and the tidy pair table.

Input: per-epoch complex cross-spectra of the clean epochs
(:func:`sourcelab.spectra.epoch_bin_cross_spectra`).  They are re-referenced to the common
average (the projector ``P = I - 11ᵀ/n``, as sensor band power and the inverse), because
coherence between electrodes depends on the reference and the average reference is the one
sourcelab reports everything in (Nunez et al. 1997 discuss the reference's effect on coherence;
from memory).  Measures per pair and band: :data:`sourcelab.coupling.measures.BAND_MEASURES`,
each per bin then averaged over the band's bins; asymmetry ``(A - B)/(A + B)`` of absolute band
power for homologous (left - right) and anterior-posterior (anterior - posterior) pairs.

Beside each value the table gives what mixing alone would produce:

* ``msc``: the magnitude-squared coherence of the volume-conduction model (independent,
  unit-variance cortical sources through the template leadfield, noise-free,
  :func:`sourcelab.coupling.source.independent_source_covariance`), when that covariance is
  given; ``leakage_explained`` is ``value <= leakage_expected``;
* lagged measures (``imcoh``, ``lagcoh``, ``wpli``, ``wpli2_debiased``, ``lps``): the mean and
  95th percentile of the conjugation (time-reversal) randomisation null
  (:func:`sourcelab.coupling.measures.conjugation_null`), which holds for any instantaneous
  mixture; ``leakage_explained`` is ``|value| <= leakage_q95`` (p >= 0.05).

References
----------
Nunez PL, Srinivasan R, Westdorp AF, et al. (1997).  EEG coherency I: statistics, reference
electrode, volume conduction, Laplacians, cortical imaging, and interpretation at multiple
scales.  Electroencephalogr Clin Neurophysiol 103:499-515 (from memory).
Davidson RJ (1988).  EEG measures of cerebral asymmetry: conceptual and methodological issues.
Int J Neurosci 39:71-89 (asymmetry of homologous sites; from memory).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from dataclasses import dataclass

import numpy as np

if TYPE_CHECKING:  # pandas is imported where tables are built
    import pandas as pd

from ..config import Bands
from .._docs import fill_doc
from ..errors import InputError
from ..spectra import band_bin_indices
from .measures import (
    BAND_MEASURES,
    LAGGED_MEASURES,
    CouplingResult,
    band_coupling,
    one_blas_thread,
    pair_statistics,
    pair_statistics_from_fourier,
)
from .pairs import PairSets, pair_sets

#: Columns of a pair or edge row that hold its estimate (:func:`pair_table`, ``coupling_table``).
ESTIMATE_COLUMNS = ("band", "measure", "value", "unit", "value_lo", "value_hi")
#: Columns of a pair or edge row that compare its value with leakage alone.
LEAKAGE_COLUMNS = ("leakage_expected", "leakage_q95", "leakage_explained")
#: Columns of :func:`pair_table`, in order.
PAIR_COLUMNS = (
    "pair",
    "channel_a",
    "channel_b",
    *ESTIMATE_COLUMNS,
    "homologous",
    "anterior_posterior",
    "intrahemispheric",
    "distance_mm",
    *LEAKAGE_COLUMNS,
    "n_epochs",
    "z",
)

#: Unit of each pair / edge measure (user-facing).
MEASURE_UNITS = {
    "msc": "coherence (0-1)",
    "imcoh": "imaginary coherency (-1 to 1)",
    "lagcoh": "lagged coherence (0-1)",
    "wpli": "wPLI (0-1)",
    "wpli2_debiased": "debiased wPLI squared",
    "lps": "lagged phase synchronisation (0-1)",
    "phase_deg": "degree",
    "lag_ms": "ms",
    "phase_sd_deg": "degree",
    "asymmetry": "(A-B)/(A+B) of absolute power",
    "aec_orth": "correlation (-1 to 1)",
}

#: What each measure is (user-facing; the ``Levels`` of the table sidecars).
MEASURE_DESCRIPTIONS = {
    "msc": "magnitude-squared coherence",
    "imcoh": "imaginary part of coherency (Nolte et al. 2004); positive: the first site or ROI "
    "leads",
    "lagcoh": "lagged coherence (Pascual-Marqui 2007): coherence without its zero-lag part",
    "wpli": "weighted phase-lag index (Vinck et al. 2011)",
    "wpli2_debiased": "debiased squared weighted phase-lag index (Vinck et al. 2011); can be "
    "below 0",
    "lps": "lagged phase synchronisation (Pascual-Marqui 2011)",
    "phase_deg": "mean phase difference; positive: the first site or ROI leads",
    "lag_ms": "time lag from the phase per frequency bin; positive: the first site or ROI leads",
    "phase_sd_deg": "circular standard deviation of the per-epoch phase differences",
    "asymmetry": "(A - B)/(A + B) of absolute band power: left - right for homologous pairs, "
    "anterior - posterior for anterior-posterior pairs",
    "aec_orth": "orthogonalised amplitude-envelope correlation (Hipp et al. 2012)",
}

#: What each column of :func:`pair_table` holds (for the report's and the README's notes).
PAIR_COLUMN_NOTES = {
    "pair": "'A-B', the two sites in canonical 10-20 order (homologous: left first; "
    "anterior-posterior: anterior first)",
    "channel_a": "first site (A) of the pair",
    "channel_b": "second site (B) of the pair",
    "unit": "unit or range of value",
    "band": "frequency band",
    "measure": "coupling measure (see unit)",
    "value": "estimate from all clean epochs, average reference",
    "value_lo": "lower end of the bootstrap interval over epochs",
    "value_hi": "upper end of the bootstrap interval over epochs",
    "homologous": "the pair is a left-right homologous pair",
    "anterior_posterior": "the pair is an anterior-posterior pair",
    "intrahemispheric": "both sites lie in the same hemisphere (off the midline)",
    "distance_mm": "straight-line distance between the sites on the template head",
    "leakage_expected": "value expected from volume conduction alone",
    "leakage_q95": "95th percentile of the value under volume conduction alone",
    "leakage_explained": "volume conduction alone can explain the value",
    "n_epochs": "clean epochs behind the estimate",
    "z": "z-score against norms",
}


def average_reference_bins(csd: np.ndarray) -> np.ndarray:
    """``P C P`` for complex per-bin cross-spectra, shape (..., n, n) (same dtype).

    ``P = I - 11ᵀ/n`` is the average-reference projector; removing row and column means applies
    it on both sides without forming it.

    Parameters
    ----------
    csd : ndarray, shape (..., n, n)
        Cross-spectra (complex or real), e.g. µV²/Hz per bin.

    Returns
    -------
    ndarray, shape (..., n, n)
        Average-referenced cross-spectra, same unit and dtype.
    """
    mean_row = csd.mean(axis=-2, keepdims=True)
    c = csd - mean_row
    return c - c.mean(axis=-1, keepdims=True)


@dataclass(frozen=True, eq=False)
class SensorCoupling(CouplingResult):
    """Pair measures of one recording (with the attributes of :class:`CouplingResult`).

    ``values``, ``null``, ``leakage_msc`` and ``intervals`` run over ``pairs.all``;
    ``intervals`` also holds ``"asymmetry_homologous"`` and ``"asymmetry_anterior_posterior"``.

    Attributes
    ----------
    pairs : PairSets
    asymmetry : dict
        ``"homologous"`` / ``"anterior_posterior"`` -> ndarray, shape (n_bands, n_set).
    band_power : ndarray, shape (n_bands, n_ch)
        Average-reference absolute band power (squared data unit).
    distance_mm : ndarray, shape (n_pairs,)
    """

    pairs: PairSets
    asymmetry: dict
    band_power: np.ndarray
    distance_mm: np.ndarray

    def to_frame(self) -> pd.DataFrame:
        """The tidy pair table (:func:`pair_table`).

        Returns
        -------
        DataFrame
            Columns :data:`PAIR_COLUMNS`, one row per pair x band x measure.
        """
        return pair_table(self)


def asymmetry(power: np.ndarray, pairs: np.ndarray) -> np.ndarray:
    """``(P_a - P_b) / (P_a + P_b)`` of absolute power for pairs ``(a, b)``.

    Parameters
    ----------
    power : ndarray, shape (..., n_ch)
        Absolute band power (> 0).
    pairs : ndarray of int, shape (n_pairs, 2)

    Returns
    -------
    ndarray, shape (..., n_pairs)
        In (-1, 1), dimensionless; ``atanh`` of it is ``ln(P_a / P_b) / 2``.
    """
    pa, pb = power[..., pairs[:, 0]], power[..., pairs[:, 1]]
    with np.errstate(invalid="ignore", divide="ignore"):
        return (pa - pb) / (pa + pb)


def msc_from_covariance(cov: np.ndarray, pairs: np.ndarray) -> np.ndarray:
    """Magnitude-squared coherence implied by a (real) covariance, shape (n_pairs,).

    Parameters
    ----------
    cov : ndarray, shape (n_ch, n_ch)
        Real sensor covariance (e.g. of the volume-conduction model), any unit.
    pairs : ndarray of int, shape (n_pairs, 2)

    Returns
    -------
    ndarray, shape (n_pairs,)
        ``C_ab² / (C_aa C_bb)``, in [0, 1].
    """
    d = np.diag(cov)
    c = cov[pairs[:, 0], pairs[:, 1]]
    return c * c / (d[pairs[:, 0]] * d[pairs[:, 1]])


@fill_doc
@one_blas_thread
def sensor_coupling(
    spectra: np.ndarray,
    freqs: np.ndarray,
    bands: Bands,
    ch_names,
    ch_pos,
    *,
    null_cov: np.ndarray | None = None,
    null_method: str | None = "analytic",
    n_null: int = 500,
    n_boot: int = 0,
    seed: int = 0,
    ci: float = 0.95,
) -> SensorCoupling:
    """Coupling of every electrode pair and the asymmetry of homologous and A-P pairs.

    Parameters
    ----------
    spectra : ndarray, complex
        Either per-epoch per-bin cross-spectra, shape (n_epochs, n_bins, n_ch, n_ch)
        (:func:`sourcelab.spectra.epoch_bin_cross_spectra`), or the epochs' scaled Fourier
        coefficients, shape (n_epochs, n_ch, n_bins) (:func:`sourcelab.spectra.epoch_fourier`;
        one segment per epoch makes each cross-spectrum ``X Xᴴ``, so this is the same input
        without the n x n matrices, and faster).  Any reference: the average reference is
        applied.
    freqs : ndarray, shape (n_bins,)
        Hz.
    bands : Bands
    ch_names : sequence of str
    ch_pos : ndarray, shape (n_ch, 3)
        Electrode positions, metres (the head model's ``ch_pos``).
    null_cov : ndarray, shape (n_ch, n_ch), optional
        Sensor covariance of independent cortical sources (volume-conduction model) for the
        ``msc`` leakage expectation.
    %(coupling_uncertainty)s

    Returns
    -------
    SensorCoupling
        Pair measures (n_bands, n_pairs), asymmetries, band power (squared data unit), nulls
        and intervals.
    """
    spectra = np.asarray(spectra)
    n_ch = len(ch_names)
    ps_sets = pair_sets(ch_names, ch_pos)
    band_idx = band_bin_indices(freqs, bands)
    if any(i.size == 0 for i in band_idx):
        raise InputError("bands: every band needs at least one bin of freqs")
    if spectra.ndim == 4 and spectra.shape[-2:] == (n_ch, n_ch):
        ps = pair_statistics(average_reference_bins(spectra), freqs, ps_sets.all)
    elif spectra.ndim == 3 and spectra.shape[1] == n_ch:
        ps = pair_statistics_from_fourier(
            spectra - spectra.mean(axis=1, keepdims=True), freqs, ps_sets.all
        )
    else:
        raise InputError(
            f"spectra: need shape (n_epochs, n_bins, {n_ch}, {n_ch}) or "
            f"(n_epochs, {n_ch}, n_bins), got {spectra.shape}"
        )
    n_ep = ps.n_epochs
    unc = {"null_method": null_method, "n_null": n_null, "n_boot": n_boot, "seed": seed, "ci": ci}
    values, null, intervals = band_coupling(ps, band_idx, **unc)
    pe = ps.power.astype(float)  # (n_ep, n_bins, n_ch)
    bp = np.stack([pe[:, i].sum(axis=1) for i in band_idx], axis=1)  # (n_ep, n_bands, n_ch)
    band_power = bp.mean(axis=0)
    asym = {
        "homologous": asymmetry(band_power, ps_sets.homologous),
        "anterior_posterior": asymmetry(band_power, ps_sets.anterior_posterior),
    }
    leak = None
    if null_cov is not None:
        cov = np.asarray(null_cov, dtype=float)
        p = np.eye(cov.shape[0]) - 1.0 / cov.shape[0]
        leak = msc_from_covariance(p @ cov @ p, ps_sets.all)
    if n_boot:
        from .measures import _quantile, bootstrap_weights

        w = bootstrap_weights(n_ep, n_boot=n_boot, seed=seed)
        rep = np.einsum("re,ebc->rbc", w, bp)
        q = [(1.0 - ci) / 2.0, (1.0 + ci) / 2.0]
        for key, sub in (
            ("homologous", ps_sets.homologous),
            ("anterior_posterior", ps_sets.anterior_posterior),
        ):
            lo, hi = _quantile(asymmetry(rep, sub), q)
            intervals["asymmetry_" + key] = (lo, hi)
    pos = np.asarray(ch_pos, dtype=float)
    dist = np.linalg.norm(pos[ps_sets.all[:, 0]] - pos[ps_sets.all[:, 1]], axis=1) * 1e3
    return SensorCoupling(
        pairs=ps_sets,
        band_names=tuple(bands.names),
        values=values,
        asymmetry=asym,
        band_power=band_power,
        null=null,
        leakage_msc=leak,
        intervals=intervals,
        n_epochs=int(n_ep),
        distance_mm=dist,
    )


def _boolean(x: np.ndarray) -> pd.arrays.BooleanArray:
    """Float 1/0/NaN -> pandas nullable boolean."""
    import pandas as pd

    x = np.asarray(x, dtype=float)
    return pd.arrays.BooleanArray(x == 1.0, ~np.isfinite(x))


def leakage_arrays(measure: str, value: np.ndarray, null: dict, leak_msc) -> tuple:
    """Volume-conduction reference values of one measure.

    Parameters
    ----------
    measure : str
        Pair measure name.
    value : ndarray, shape (n_bands, n_pairs)
        The measure's values.
    null : dict
        Lagged measure -> (mean, q95) under volume conduction alone, each (n_bands, n_pairs).
    leak_msc : ndarray, shape (n_pairs,) or None
        MSC of the volume-conduction model.

    Returns
    -------
    expected, q95, explained : ndarray, each shape (n_bands, n_pairs)
        Expected value and 95th percentile under volume conduction alone, and whether the value
        (``|imcoh|`` for imcoh) is explained by it (1/0; NaN where not defined).  Lagged measures
        use ``null``; ``msc`` uses ``leak_msc`` (no q95); other measures are all NaN.
    """
    nan = np.full(value.shape, np.nan)
    if measure in LAGGED_MEASURES and measure in null:
        mean, q95 = null[measure]
        mag = np.abs(value) if measure == "imcoh" else value
        ok = np.isfinite(mag) & np.isfinite(q95)
        return mean, q95, np.where(ok, mag <= q95, np.nan)
    if measure == "msc" and leak_msc is not None:
        exp = np.broadcast_to(leak_msc, value.shape)
        return exp, nan, np.where(np.isfinite(value), value <= exp, np.nan)
    return nan, nan, nan


def pair_table(sc: SensorCoupling) -> pd.DataFrame:
    """Tidy table: one row per pair x band x measure (columns :data:`PAIR_COLUMNS`).

    Rows: every measure of :data:`~sourcelab.coupling.measures.BAND_MEASURES` for all
    ``n(n-1)/2`` pairs (measure, then band, then pair), then ``asymmetry`` for the homologous
    and anterior-posterior pairs.  Column meanings: :data:`PAIR_COLUMN_NOTES`.  ``z`` is NaN
    until norms are applied (norms kind ``"pair"``, keyed by ``pair``, ``band``, ``measure``).

    Parameters
    ----------
    sc : SensorCoupling

    Returns
    -------
    DataFrame
        Columns :data:`PAIR_COLUMNS`; units in the ``unit`` column.
    """
    import pandas as pd

    ps = sc.pairs
    names = np.asarray(ps.ch_names)
    flags = ps.membership()
    n_b = len(sc.band_names)
    bands = np.asarray(sc.band_names)

    def block(pairs_idx, labels, pa, pb, measures, values, extra, dist, fl):
        n_p, n_m = len(labels), len(measures)
        rep = n_m * n_b
        return pd.DataFrame(
            {
                "pair": np.tile(labels, rep),
                "channel_a": np.tile(names[pa], rep),
                "channel_b": np.tile(names[pb], rep),
                "band": np.tile(np.repeat(bands, n_p), n_m),
                "measure": np.repeat(np.asarray(measures), n_b * n_p),
                "value": np.concatenate([np.asarray(v, float).ravel() for v in values]),
                "unit": np.repeat(np.asarray([MEASURE_UNITS[m] for m in measures]), n_b * n_p),
                "value_lo": np.concatenate([e[0].ravel() for e in extra]),
                "value_hi": np.concatenate([e[1].ravel() for e in extra]),
                "homologous": np.tile(fl["homologous"], rep),
                "anterior_posterior": np.tile(fl["anterior_posterior"], rep),
                "intrahemispheric": np.tile(fl["intrahemispheric"], rep),
                "distance_mm": np.tile(dist, rep),
                "leakage_expected": np.concatenate([e[2].ravel() for e in extra]),
                "leakage_q95": np.concatenate([e[3].ravel() for e in extra]),
                "leakage_explained": _boolean(np.concatenate([e[4].ravel() for e in extra])),
                "n_epochs": sc.n_epochs,
                "z": np.nan,
            }
        )

    labels = np.array([ps.label(p) for p in ps.all])
    values, extra = [], []
    for m in BAND_MEASURES:
        v = np.asarray(sc.values[m], dtype=float)
        exp, q95, expl = leakage_arrays(m, v, sc.null, sc.leakage_msc)
        nan = np.full(v.shape, np.nan)
        lo, hi = sc.intervals.get(m, (nan, nan))
        values.append(v)
        extra.append(
            [
                np.asarray(lo, float),
                np.asarray(hi, float),
                np.broadcast_to(exp, v.shape),
                np.broadcast_to(q95, v.shape),
                np.broadcast_to(expl, v.shape),
            ]
        )
    frames = [
        block(
            None,
            labels,
            ps.all[:, 0],
            ps.all[:, 1],
            BAND_MEASURES,
            values,
            extra,
            sc.distance_mm,
            flags,
        )
    ]
    pos = {tuple(p): i for i, p in enumerate(ps.all.tolist())}
    for key in ("homologous", "anterior_posterior"):
        sub = getattr(ps, key)
        idx = np.array([pos[tuple(sorted(p))] for p in sub.tolist()], dtype=int)
        v = np.asarray(sc.asymmetry[key], dtype=float)
        nan = np.full(v.shape, np.nan)
        lo, hi = sc.intervals.get("asymmetry_" + key, (nan, nan))
        fl = {k: f[idx] for k, f in flags.items()}
        frames.append(
            block(
                None,
                np.array([ps.label(p) for p in sub]),
                sub[:, 0],
                sub[:, 1],
                ["asymmetry"],
                [v],
                [[lo, hi, nan, nan, nan]],
                sc.distance_mm[idx],
                fl,
            )
        )
    return pd.concat(frames, ignore_index=True)[list(PAIR_COLUMNS)]
