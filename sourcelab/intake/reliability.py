"""Split-half and test-retest reliability of band-power features.

Pure functions over per-epoch band power of shape (n_epochs, n_bands, n_items), where items are
sensors or ROIs.  Features are log10 band power averaged within each half; the reliability of a
band is the Pearson correlation of the two halves' features across items.  The Spearman-Brown
formula (Spearman 1910, Br J Psychol 3:271-295; Brown 1910, Br J Psychol 3:296-322) projects it
to the full length of data: r_full = 2 r / (1 + r).

Which value is flagged: the *uncorrected* half-vs-half r is compared with the threshold — the
stricter choice; the corrected value is reported beside it.  (A split-half threshold of 0.90 is
common practice in quantitative EEG.)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

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
    """

    kind: str
    r: np.ndarray
    r_spearman_brown: np.ndarray
    n_epochs: tuple[int, int]
    threshold: float
    flagged: np.ndarray


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
    return Reliability(kind, r, spearman_brown(r), (len(first), len(second)), float(threshold),
                       flagged)


def split_half(power: np.ndarray, *, threshold: float = 0.90, log: bool = True) -> Reliability:
    """Odd vs even epochs.

    Parameters
    ----------
    power : ndarray, shape (n_epochs, n_bands, n_items)
        Per-epoch band power (µV² or any power unit), epochs in time order.
    threshold : float
        Flag bands whose uncorrected r is below this (``AnalysisConfig.reliability_threshold``).
    log : bool
        Correlate log10 power (default) rather than power.

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
    return _halves_reliability(power, np.arange(0, n, 2), np.arange(1, n, 2), "split-half",
                               threshold, log)


def test_retest(power: np.ndarray, *, threshold: float = 0.90, log: bool = True) -> Reliability:
    """First half vs second half of the epochs (time order); an odd epoch out is dropped.

    Parameters and returns as :func:`split_half`.

    Parameters
    ----------
    power : ndarray, shape (n_epochs, n_bands, n_items)
        Per-epoch band power (µV² or any power unit), epochs in time order.
    threshold : float
        Flag bands whose uncorrected r is below this (``AnalysisConfig.reliability_threshold``).
    log : bool
        Correlate log10 power (default) rather than power.

    Returns
    -------
    Reliability
        ``kind`` ``"test-retest"``; per-band r between the first ``n_epochs // 2`` and the last
        ``n_epochs // 2`` epochs (the middle epoch of an odd count is left out).
    """
    n = np.asarray(power).shape[0]
    h = n // 2
    return _halves_reliability(power, np.arange(0, h), np.arange(n - h, n), "test-retest",
                               threshold, log)


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
    """

    n_epochs: int
    threshold: float
    features: str
    split_half: dict
    split_half_spearman_brown: dict
    test_retest: dict
    test_retest_spearman_brown: dict
    flagged_bands: tuple[str, ...]

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


def reliability_summary(power: np.ndarray, band_names, *,
                        threshold: float = 0.90) -> ReliabilitySummary:
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
        raise InputError(f"power: need shape (n_epochs, {len(names)} bands, n_items), "
                         f"got {power.shape}")
    log = bool(np.all(power > 0))
    common = dict(n_epochs=int(power.shape[0]), threshold=float(threshold),
                  features="log10 band power" if log else "band power")
    if power.shape[0] < 2 or power.shape[2] < 3:
        none = {b: None for b in names}
        return ReliabilitySummary(split_half=none, split_half_spearman_brown=dict(none),
                                  test_retest=dict(none), test_retest_spearman_brown=dict(none),
                                  flagged_bands=tuple(names), **common)
    sh = split_half(power, threshold=threshold, log=log)
    tr = test_retest(power, threshold=threshold, log=log)
    return ReliabilitySummary(
        split_half={b: _num(r) for b, r in zip(names, sh.r)},
        split_half_spearman_brown={b: _num(r) for b, r in zip(names, sh.r_spearman_brown)},
        test_retest={b: _num(r) for b, r in zip(names, tr.r)},
        test_retest_spearman_brown={b: _num(r) for b, r in zip(names, tr.r_spearman_brown)},
        flagged_bands=tuple(b for b, f in zip(names, sh.flagged) if f), **common)
