"""Split-half and test-retest reliability of band-power features.

Pure functions over per-epoch band power of shape (n_epochs, n_bands, n_items), where items are
sensors or ROIs.  Features are log10 band power averaged within each half; the reliability of a
band is the Pearson correlation of the two halves' features across items.  The Spearman-Brown
formula (Spearman 1910, Br J Psychol 3:271-295; Brown 1910, Br J Psychol 3:296-322) projects it
to the full length of data: r_full = 2 r / (1 + r).

Which value is flagged: the *uncorrected* half-vs-half r is compared with the threshold — the
stricter choice; the corrected value is reported beside it.  (A split-half threshold of 0.90 is
common practice in quantitative EEG.)

The same two halves also give an intraclass correlation (:func:`icc`): items are the targets,
the two halves the "raters", ICC(2,1) (two-way random effects, absolute agreement, one
measurement; Shrout & Fleiss 1979) with its confidence interval from McGraw & Wong (1996).
Unlike r it falls when one half is shifted against the other (power drifting over the
recording), and its interval says how far 19 sensors or 84 areas pin it down.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .._docs import fill_doc
from ..errors import InputError


@dataclass(frozen=True)
class Reliability:
    """Per-band reliability of one split.

    Attributes
    ----------
    kind : str
        ``"split-half"`` (odd vs even epochs) or ``"test-retest"`` (first vs second half).
    r : ndarray, shape (n_bands,)
        Pearson r across items between the halves' log10 band power.
    r_spearman_brown : ndarray, shape (n_bands,)
        2 r / (1 + r).
    n_epochs : tuple of (int, int)
        Epochs in each half.
    threshold : float
        Reliability below which a band is flagged.
    flagged : ndarray of bool, shape (n_bands,)
        ``r < threshold`` (uncorrected r; NaN counts as flagged).
    icc : tuple of ICC
        Per band, ICC(2,1) of the two halves' features across items with its 95 % interval
        (:func:`icc`).
    """

    kind: str
    r: np.ndarray
    r_spearman_brown: np.ndarray
    n_epochs: tuple[int, int]
    threshold: float
    flagged: np.ndarray
    icc: tuple = ()


def pearson_r(a: np.ndarray, b: np.ndarray) -> float:
    """Pearson correlation of two feature vectors (flattened), NaN when undefined.

    Parameters
    ----------
    a, b : ndarray, same shape
        E.g. log10 band power per item from two halves of the data.

    Returns
    -------
    float
        Pearson r in [-1, 1]; NaN when either vector is constant.

    Raises
    ------
    InputError
        When the shapes differ or there are fewer than 3 items.
    """
    a = np.asarray(a, float).ravel()
    b = np.asarray(b, float).ravel()
    if a.shape != b.shape:
        raise InputError(f"pearson_r: shapes differ, {a.shape} vs {b.shape}")
    if a.size < 3:
        raise InputError("pearson_r: need at least 3 items")
    a = a - a.mean()
    b = b - b.mean()
    den = np.sqrt((a @ a) * (b @ b))
    return float(a @ b / den) if den > 0 else float("nan")


def spearman_brown(r, factor: float = 2.0):
    """Spearman-Brown prophecy for k = ``factor`` times the data: k r / (1 + (k-1) r).

    Parameters
    ----------
    r : float or array_like
        Reliability (correlation) of the shorter data, e.g. a half-vs-half r.
    factor : float
        Length of the projected data relative to the data ``r`` was measured on (2: from a
        half to the whole).

    Returns
    -------
    float or ndarray
        Projected reliability, same shape as ``r`` (a NumPy float for a scalar); NaN stays
        NaN.

    References
    ----------
    Spearman C (1910).  Br J Psychol 3:271-295.  Brown W (1910).  Br J Psychol 3:296-322.
    """
    r = np.asarray(r, float)
    return factor * r / (1.0 + (factor - 1.0) * r)


ICC_KINDS = ("2,1", "3,1")


@dataclass(frozen=True)
class ICC:
    """One intraclass correlation with its confidence interval.

    Attributes
    ----------
    kind : {"2,1", "3,1"}
        Shrout & Fleiss form: ``"2,1"`` absolute agreement (two-way random effects),
        ``"3,1"`` consistency (two-way mixed effects); one measurement each.
    value : float
        The ICC (may be negative; NaN when undefined).
    low, high : float
        Confidence interval (McGraw & Wong 1996).
    confidence : float
        Coverage of the interval, e.g. 0.95.
    n_items, n_measurements : int
        Targets (rows) and measurements per target (columns).
    """

    kind: str
    value: float
    low: float
    high: float
    confidence: float
    n_items: int
    n_measurements: int


def icc(ratings: np.ndarray, *, kind: str = "2,1", confidence: float = 0.95) -> ICC:
    """Intraclass correlation ICC(2,1) or ICC(3,1) of an items x measurements table.

    From the two-way ANOVA mean squares of ``ratings`` (n items, k measurements): rows MSR,
    columns MSC, residual MSE,

    * ICC(3,1) = (MSR - MSE) / (MSR + (k-1) MSE)                      (consistency)
    * ICC(2,1) = (MSR - MSE) / (MSR + (k-1) MSE + k (MSC - MSE) / n)  (absolute agreement)

    with intervals from the F distribution (McGraw & Wong 1996, Table 7, cases 3 and 2A; the
    2A interval uses Satterthwaite's degrees of freedom).

    Parameters
    ----------
    ratings : ndarray, shape (n_items, k)
        One row per target (a sensor or an area), one column per measurement (a half of the
        data); n_items >= 3, k >= 2, all finite.
    kind : {"2,1", "3,1"}
    confidence : float
        Interval coverage, in (0, 1).

    Returns
    -------
    ICC
        NaN value and interval when the rows do not vary (MSR = MSE = 0).

    Raises
    ------
    InputError
        On a bad ``kind`` or ``confidence``, a table that is not 2-d, too small or not finite.

    References
    ----------
    Shrout PE, Fleiss JL (1979).  Intraclass correlations: uses in assessing rater reliability.
    Psychol Bull 86:420-428.
    McGraw KO, Wong SP (1996).  Forming inferences about some intraclass correlation
    coefficients.  Psychol Methods 1:30-46 (correction: Psychol Methods 1:390).
    """
    # the F quantile as scipy.stats.f.ppf computes it (scipy.special.fdtri), without importing
    # scipy.stats (~0.5 s)
    from scipy.special import fdtri

    from ..checks import check_number, check_option

    check_option("kind", kind, ICC_KINDS)
    confidence = check_number(
        "confidence", confidence, low=0.0, high=1.0, low_open=True, high_open=True
    )
    x = np.asarray(ratings, float)
    if x.ndim != 2 or x.shape[0] < 3 or x.shape[1] < 2:
        raise InputError(f"ratings: need shape (n_items >= 3, k >= 2), got {x.shape}")
    if not np.all(np.isfinite(x)):
        raise InputError("ratings: every value must be finite")
    n, k = x.shape
    grand = x.mean()
    ssr = k * np.sum((x.mean(1) - grand) ** 2)
    ssc = n * np.sum((x.mean(0) - grand) ** 2)
    sse = np.sum((x - grand) ** 2) - ssr - ssc
    df_r, df_c, df_e = n - 1, k - 1, (n - 1) * (k - 1)
    msr, msc, mse = ssr / df_r, ssc / df_c, max(sse, 0.0) / df_e
    nan = ICC(kind, float("nan"), float("nan"), float("nan"), float(confidence), n, k)
    alpha = 1.0 - confidence
    if kind == "3,1":
        den = msr + (k - 1) * mse
        if den <= 0:
            return nan
        value = (msr - mse) / den
        if mse == 0:
            return ICC(kind, float(value), float(value), float(value), float(confidence), n, k)
        f_obs = msr / mse
        f_lo = f_obs / fdtri(df_r, df_e, 1 - alpha / 2)
        f_hi = f_obs * fdtri(df_e, df_r, 1 - alpha / 2)
        low, high = (f_lo - 1) / (f_lo + k - 1), (f_hi - 1) / (f_hi + k - 1)
    else:
        den = msr + (k - 1) * mse + k * (msc - mse) / n
        if den <= 0:
            return nan
        value = (msr - mse) / den
        if value >= 1.0 or mse == 0:
            return ICC(kind, float(value), float(value), float(value), float(confidence), n, k)
        a = k * value / (n * (1 - value))
        b = 1 + k * value * (n - 1) / (n * (1 - value))
        v = (a * msc + b * mse) ** 2 / ((a * msc) ** 2 / df_c + (b * mse) ** 2 / df_e)
        fl = fdtri(df_r, v, 1 - alpha / 2)
        fu = fdtri(v, df_r, 1 - alpha / 2)
        c = k * msc + (k * n - k - n) * mse
        low = n * (msr - fl * mse) / (fl * c + n * msr)
        high = n * (fu * msr - mse) / (c + n * fu * msr)
    return ICC(kind, float(value), float(low), float(high), float(confidence), n, k)


def _halves_reliability(power, first, second, kind, threshold, log):
    power = np.asarray(power, float)
    if power.ndim != 3:
        raise InputError(f"power: need shape (n_epochs, n_bands, n_items), got {power.shape}")
    if len(first) < 1 or len(second) < 1:
        raise InputError(f"{kind}: need at least 2 epochs, got {power.shape[0]}")
    fa = power[first].mean(0)
    fb = power[second].mean(0)
    if log:
        if np.any(fa <= 0) or np.any(fb <= 0):
            raise InputError(f"{kind}: band power must be > 0 for log features")
        fa, fb = np.log10(fa), np.log10(fb)
    r = np.array([pearson_r(fa[k], fb[k]) for k in range(power.shape[1])])
    flagged = ~(r >= threshold)
    iccs = tuple(
        icc(np.c_[fa[k], fb[k]])
        if np.all(np.isfinite(fa[k]) & np.isfinite(fb[k]))
        else ICC("2,1", np.nan, np.nan, np.nan, 0.95, fa.shape[1], 2)
        for k in range(power.shape[1])
    )
    return Reliability(
        kind, r, spearman_brown(r), (len(first), len(second)), float(threshold), flagged, iccs
    )


@fill_doc
def split_half(power: np.ndarray, *, threshold: float = 0.90, log: bool = True) -> Reliability:
    """Odd vs even epochs.

    %(reliability_parameters)s

    Returns
    -------
    Reliability
        ``kind`` ``"split-half"``; per-band r between the mean features of the even-indexed
        and odd-indexed epochs.

    Raises
    ------
    InputError
        When ``power`` is not 3-d, has fewer than 2 epochs or fewer than 3 items, or (with
        ``log``) a half's mean power is not positive.
    """
    n = np.asarray(power).shape[0]
    return _halves_reliability(
        power, np.arange(0, n, 2), np.arange(1, n, 2), "split-half", threshold, log
    )


@fill_doc
def test_retest(power: np.ndarray, *, threshold: float = 0.90, log: bool = True) -> Reliability:
    """First half vs second half of the epochs (time order); an odd epoch out is dropped.

    %(reliability_parameters)s

    Returns
    -------
    Reliability
        ``kind`` ``"test-retest"``; per-band r between the first ``n_epochs // 2`` and the last
        ``n_epochs // 2`` epochs (the middle epoch of an odd count is left out).

    Raises
    ------
    InputError
        As :func:`split_half`.
    """
    n = np.asarray(power).shape[0]
    h = n // 2
    return _halves_reliability(
        power, np.arange(0, h), np.arange(n - h, n), "test-retest", threshold, log
    )


test_retest.__test__ = False  # not a pytest test when imported into a test module


def _num(x) -> float | None:
    x = float(x)
    return x if np.isfinite(x) else None


@dataclass(frozen=True)
class ReliabilitySummary:
    """Split-half and test-retest reliability of one set of items (sensors or ROIs), per band.

    Attributes
    ----------
    n_epochs : int
        Epochs the reliability was computed from.
    threshold : float
        ``AnalysisConfig.reliability_threshold``, applied to the uncorrected split-half r.
    features : str
        ``"log10 band power"`` or ``"band power"``.
    split_half, split_half_spearman_brown, test_retest, test_retest_spearman_brown : dict
        Band -> r (None where undefined: fewer than 2 epochs, constant features).
    flagged_bands : tuple of str
        Bands whose split-half r is below the threshold (or undefined).
    split_half_icc, test_retest_icc : dict
        Band -> ``{"icc", "low", "high"}`` (ICC(2,1) of the two halves across items and its
        95 % interval, :func:`icc`; values None where undefined).  Empty in results written
        before these were computed.
    """

    n_epochs: int
    threshold: float
    features: str
    split_half: dict
    split_half_spearman_brown: dict
    test_retest: dict
    test_retest_spearman_brown: dict
    flagged_bands: tuple[str, ...]
    split_half_icc: dict = field(default_factory=dict)
    test_retest_icc: dict = field(default_factory=dict)

    @property
    def min_split_half(self) -> float | None:
        vals = [v for v in self.split_half.values() if v is not None]
        return min(vals) if vals else None

    def to_dict(self) -> dict:
        """Plain-JSON form: the fields, ``flagged_bands`` as a list, and ``min_split_half``.

        Returns
        -------
        dict
            Field name -> value (per-band dicts of r or None); ``min_split_half`` is the lowest
            defined split-half r, or None.
        """
        from dataclasses import asdict

        d = asdict(self)
        d["flagged_bands"] = list(self.flagged_bands)
        d["min_split_half"] = self.min_split_half
        return d


def reliability_summary(
    power: np.ndarray, band_names, *, threshold: float = 0.90
) -> ReliabilitySummary:
    """Split-half and test-retest reliability of per-epoch band power.

    Parameters
    ----------
    power : ndarray, shape (n_epochs, n_bands, n_items)
        Per-epoch band power (sensors or ROIs), epochs in time order; positive values are
        correlated as log10, otherwise as they are.
    band_names : sequence of str, length n_bands
        Band names, keys of the per-band dicts.
    threshold : float
        ``AnalysisConfig.reliability_threshold``; applied to the uncorrected split-half r.

    Returns
    -------
    ReliabilitySummary
        With fewer than 2 epochs or 3 items every r is None and every band is flagged.

    Raises
    ------
    InputError
        When ``power`` is not 3-d or its band axis does not match ``band_names``.
    """
    power = np.asarray(power, float)
    names = [str(b) for b in band_names]
    if power.ndim != 3 or power.shape[1] != len(names):
        raise InputError(
            f"power: need shape (n_epochs, {len(names)} bands, n_items), got {power.shape}"
        )
    log = bool(np.all(power > 0))
    common = dict(
        n_epochs=int(power.shape[0]),
        threshold=float(threshold),
        features="log10 band power" if log else "band power",
    )
    if power.shape[0] < 2 or power.shape[2] < 3:
        none = {b: None for b in names}
        empty = {b: {"icc": None, "low": None, "high": None} for b in names}
        return ReliabilitySummary(
            split_half=none,
            split_half_spearman_brown=dict(none),
            test_retest=dict(none),
            test_retest_spearman_brown=dict(none),
            flagged_bands=tuple(names),
            split_half_icc=empty,
            test_retest_icc={b: dict(v) for b, v in empty.items()},
            **common,
        )
    sh = split_half(power, threshold=threshold, log=log)
    tr = test_retest(power, threshold=threshold, log=log)
    return ReliabilitySummary(
        split_half={b: _num(r) for b, r in zip(names, sh.r)},
        split_half_spearman_brown={b: _num(r) for b, r in zip(names, sh.r_spearman_brown)},
        test_retest={b: _num(r) for b, r in zip(names, tr.r)},
        test_retest_spearman_brown={b: _num(r) for b, r in zip(names, tr.r_spearman_brown)},
        flagged_bands=tuple(b for b, f in zip(names, sh.flagged) if f),
        split_half_icc={b: _icc_dict(c) for b, c in zip(names, sh.icc)},
        test_retest_icc={b: _icc_dict(c) for b, c in zip(names, tr.icc)},
        **common,
    )


def _icc_dict(c: ICC) -> dict:
    return {"icc": _num(c.value), "low": _num(c.low), "high": _num(c.high)}
