"""Norms and z-scores for electrode-pair and network-edge coupling (pure functions).

The z of a pair or edge value ``v`` is ``z = (T(v) - mean) / sd`` as for band power, with the
transform ``T`` of its measure (:data:`TRANSFORM_FOR_COUPLING`); for the circular ``phase_deg``
the difference is wrapped into (-180, 180] first.  The norms table rows for these quantities are
``kind = "pair"`` (``name`` = the pair label, e.g. ``F3-F4``; atlas and hemisphere ``n/a``) and
``kind = "edge"`` (``atlas``; ``name`` = the edge label ``roi.hemisphere|roi.hemisphere``;
hemisphere ``n/a``), keyed further by ``band`` and ``measure`` like ROI rows, so the age models,
predictive p-values and FDR of :mod:`sourcelab.norms` apply unchanged.

Transforms, and why
-------------------
* ``msc``, ``lagcoh``, ``lps`` (squared coherence-type, in [0, 1)): ``fisher_sqrt`` =
  ``atanh(sqrt(v))``, Fisher's z of the coherence magnitude.  For Gaussian data the sample
  coherence magnitude's ``atanh`` is close to normal with a variance that depends on the number
  of epochs but not on the true coherence (Enochson & Goodman 1965; Benignus 1969; from memory),
  the property Fisher's z has for the correlation coefficient (Fisher 1915).
* ``imcoh``, ``wpli``, ``aec_orth`` (correlation-type, in (-1, 1)): ``fisher`` = ``atanh(v)``.
* ``wpli2_debiased``: ``identity``.  It is a U-statistic over pairs of epochs, unbiased and
  asymptotically normal (Hoeffding 1948; Vinck et al. 2011), and takes negative values where
  the true index is near 0; a square root folds that symmetric spread into a bimodal one (on
  simulated cohorts the signed-root Fisher transform gave 3.3 % of |z| > 1.96 against 5.0 %
  for the identity).  ``fisher_ssqrt`` (``atanh(sign(v) sqrt(|v|))``) remains available.
* ``asymmetry`` ``(A - B)/(A + B)``: ``fisher``, because ``atanh((A - B)/(A + B)) =
  ln(A/B) / 2``: half the log power ratio, normal when log power is (the log transform of
  absolute power norms; Gasser et al. 1982).
* ``phase_sd_deg`` (a positive spread): ``log10``.
* ``lag_ms``: ``identity``; ``phase_deg``: ``circular_deg``, angles with circular differences
  (period 360°; norms are fitted to deviations from the cohort's circular mean direction).
  Phase and lag norms mean little where coupling is weak (the phase is then random): read them
  with the pair's coherence.

References
----------
Fisher RA (1915).  Frequency distribution of the values of the correlation coefficient in
samples from an indefinitely large population.  Biometrika 10:507-521.
Enochson LD, Goodman NR (1965).  Gaussian approximations to the distribution of sample coherence.
Tech Rep AFFDL-TR-65-57 (from memory).
Benignus VA (1969).  Estimation of the coherence spectrum and its confidence interval using the
fast Fourier transform.  IEEE Trans Audio Electroacoust 17:145-150 (from memory).
Gasser T, Bächer P, Möcks J (1982).  Electroencephalogr Clin Neurophysiol 53:119-124 (from
memory).
Hoeffding W (1948).  A class of statistics with asymptotically normal distribution.  Ann Math
Stat 19:293-325.
Vinck M et al. (2011).  NeuroImage 55:1548-1565.
"""

from __future__ import annotations

import numpy as np

from ..checks import check_option
from ..errors import InputError
from .transforms import get_transform

#: Transform per pair / edge measure (see the module docstring).
TRANSFORM_FOR_COUPLING: dict[str, str] = {
    "msc": "fisher_sqrt",
    "lagcoh": "fisher_sqrt",
    "lps": "fisher_sqrt",
    "imcoh": "fisher",
    "wpli": "fisher",
    "aec_orth": "fisher",
    "asymmetry": "fisher",
    "wpli2_debiased": "identity",
    "phase_sd_deg": "log10",
    "lag_ms": "identity",
    "phase_deg": "circular_deg",
}
#: Measures fitted without the robust exclusion of outlying controls.  The exclusion rule
#: assumes a Gaussian cohort after the transform, with a few outliers; across people, the phase,
#: the lag and the orthogonalised envelope correlation of a pair or edge mix precise values
#: (strong coupling) with noisy ones (weak coupling), a spread with wide tails by nature (median
#: excess kurtosis on invented cohorts: lag 2.8-5.0, aec_orth 3.6; the other measures 1.7 or
#: less), and trimming those tails as outliers shrinks the SD.  Measured on invented cohorts
#: (reference + new people): trimmed norms gave |z| > 1.96 for 10-11 % of new lags, 6.7 % of
#: phases and 7.0 % of envelope correlations; untrimmed 4.7-5.3 %, 4.3 % and 4.4 %.
UNTRIMMED_MEASURES = ("phase_deg", "lag_ms", "aec_orth")
#: Measures whose values are angles in degrees (differences wrap with this period).
CIRCULAR_PERIOD: dict[str, float] = {
    m: get_transform(t).period
    for m, t in TRANSFORM_FOR_COUPLING.items()
    if get_transform(t).period is not None
}
#: Norms kinds of the coupling tables and the table column that names the quantity.
COUPLING_KINDS = {"pair": {"name": "pair"}, "edge": {"atlas": "atlas", "name": "edge"}}


def transformed(values, measure: str) -> np.ndarray:
    """``T(values)`` for one measure (array-like, any shape).

    Parameters
    ----------
    values : array-like, any shape
        Coupling values in the measure's own unit (dimensionless indices; degrees for
        ``phase_deg`` and ``phase_sd_deg``; ms for ``lag_ms``).
    measure : str
        Pair / edge measure name, a key of :data:`TRANSFORM_FOR_COUPLING`.

    Returns
    -------
    ndarray of float, same shape
        Values on the measure's normalising scale.

    Raises
    ------
    InputError
        For an unknown measure.
    """
    return get_transform(coupling_transform_name(measure)).forward(values)


def coupling_transform_name(measure: str) -> str:
    """The transform name of a pair / edge ``measure`` (InputError for an unknown one)."""
    return TRANSFORM_FOR_COUPLING[check_option("measure", measure, sorted(TRANSFORM_FOR_COUPLING))]


def _difference(t: np.ndarray, mean, measure: str) -> np.ndarray:
    d = np.asarray(t, dtype=float) - np.asarray(mean, dtype=float)
    period = CIRCULAR_PERIOD.get(measure)
    if period is not None:
        d = (d + period / 2.0) % period - period / 2.0
    return d


def reference_statistics(values, measure: str, *, axis: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Mean and SD (ddof 1) of a reference cohort's transformed values (the degree-0 model).

    For ``phase_deg`` the values are first expressed as wrapped deviations from the cohort's
    circular mean direction; the mean is that direction plus the deviations' mean, the SD that of
    the deviations (what :func:`sourcelab.norms.fit_norms` fits on the same scale).

    Parameters
    ----------
    values : ndarray, shape (n_people, ...) (``axis`` = people)
        Values in the measure's own unit (not yet transformed).
    measure : str
        Pair / edge measure name (sets the transform).
    axis : int
        Axis of ``values`` holding the people.

    Returns
    -------
    mean, sd : ndarray, shape without ``axis``
        On the measure's transformed scale (for ``phase_deg`` in degrees).
    """
    t = transformed(values, measure)
    if measure in CIRCULAR_PERIOD:
        ang = np.deg2rad(t)
        centre = np.rad2deg(np.angle(np.nanmean(np.exp(1j * ang), axis=axis)))
        d = _difference(t, np.expand_dims(centre, axis), measure)
        mean = _difference(centre + np.nanmean(d, axis=axis), 0.0, measure)
        return mean, np.nanstd(d, axis=axis, ddof=1)
    return np.nanmean(t, axis=axis), np.nanstd(t, axis=axis, ddof=1)


def coupling_z(values, measure: str, mean, sd) -> np.ndarray:
    """z of pair / edge values against norms: ``(T(v) - mean) / sd`` (wrapped for phases).

    Parameters
    ----------
    values : array_like
    measure : str
    mean, sd : array_like
        Norms on the transformed scale (broadcast against ``values``); ``sd > 0``.

    Returns
    -------
    ndarray
        NaN where the value is NaN.
    """
    sd = np.asarray(sd, dtype=float)
    if np.any(np.isfinite(sd) & ~(sd > 0)):
        raise InputError("sd: norm standard deviations must be > 0")
    return _difference(transformed(values, measure), mean, measure) / sd
