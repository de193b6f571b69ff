"""Band cross-spectra of clean epochs (Welch), the only sensor-level input the inverse needs.

Source band power is a quadratic form of the sensor cross-spectrum, so it is computed from these
19 x 19 matrices rather than sample by sample.
"""

from __future__ import annotations

import numpy as np

from .config import BROADBAND_HZ, Bands
from .errors import InputError


def _band_bins(n_times: int, sfreq: float, lo: float, hi: float) -> np.ndarray:
    freqs = np.fft.rfftfreq(n_times, 1.0 / sfreq)
    return np.flatnonzero((freqs >= lo) & (freqs < hi))


def epoch_cross_spectra(epochs: np.ndarray, sfreq: float, bands: Bands) -> np.ndarray:
    """Per-epoch band cross-spectral matrices (real part), one Welch segment per epoch.

    Each epoch is mean-removed, Hann-windowed and Fourier transformed; the one-sided cross-spectral
    density is summed over the band's bins ``lo <= f < hi`` and multiplied by the bin width, so the
    diagonal is band power in the data's squared unit (µV² for µV input).  Averaging over epochs
    gives Welch's estimate (non-overlapping segments, Hann window).

    Parameters
    ----------
    epochs : ndarray, shape (n_epochs, n_ch, n_times)
        Clean epochs, e.g. in µV.
    sfreq : float
        Sampling rate, Hz.
    bands : Bands

    Returns
    -------
    csd : ndarray, shape (n_epochs, n_bands, n_ch, n_ch)
        Real, symmetric positive semi-definite band cross-spectra.

    References
    ----------
    Welch P (1967) IEEE Trans Audio Electroacoust 15:70-73.
    """
    epochs = np.asarray(epochs, dtype=float)
    if epochs.ndim != 3:
        raise InputError(f"epochs: need shape (n_epochs, n_ch, n_times), got {epochs.shape}")
    n_ep, n_ch, n_t = epochs.shape
    nyq = sfreq / 2.0
    for name, (lo, hi) in zip(bands.names, bands.edges):
        if hi > nyq:
            raise InputError(f"band {name!r} ({lo}-{hi} Hz) exceeds the Nyquist frequency "
                             f"{nyq:g} Hz of this recording")
        if _band_bins(n_t, sfreq, lo, hi).size == 0:
            raise InputError(f"band {name!r} ({lo}-{hi} Hz) holds no frequency bin at "
                             f"{sfreq / n_t:g} Hz resolution; lengthen the epochs")
    win = _hann(n_t)
    x = (epochs - epochs.mean(axis=-1, keepdims=True)) * win
    spec = np.fft.rfft(x, axis=-1)
    # one-sided density scaling (as scipy.signal.welch, scaling="density"), times bin width
    scale = 1.0 / (sfreq * np.sum(win**2)) * (sfreq / n_t)
    weight = np.full(spec.shape[-1], 2.0)
    weight[0] = 1.0
    if n_t % 2 == 0:
        weight[-1] = 1.0
    out = np.empty((n_ep, len(bands), n_ch, n_ch))
    for b, (lo, hi) in enumerate(bands.edges):
        sel = _band_bins(n_t, sfreq, lo, hi)
        s = spec[..., sel] * np.sqrt(weight[sel] * scale)
        out[:, b] = np.einsum("ecf,edf->ecd", s, s.conj()).real
    return out


def _hann(n: int) -> np.ndarray:
    """Periodic Hann window (as ``scipy.signal.get_window('hann', n)``, Welch's default)."""
    return 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(n) / n)


def average_reference(csd: np.ndarray) -> np.ndarray:
    """Apply the average-reference projector ``P = I - 11ᵀ/n`` to cross-spectra ``P C P``.

    Parameters
    ----------
    csd : ndarray, shape (..., n_ch, n_ch)
    """
    n = csd.shape[-1]
    p = np.eye(n) - 1.0 / n
    return p @ csd @ p


def broadband_cross_spectra(epochs: np.ndarray, sfreq: float, *,
                            total: tuple[float, float] = BROADBAND_HZ) -> np.ndarray:
    """Per-epoch cross-spectra of the fixed broadband range relative power divides by.

    Parameters
    ----------
    epochs : ndarray, shape (n_epochs, n_ch, n_times)
    sfreq : float
    total : (float, float)
        Range in Hz, ``[low, high)``; default :data:`sourcelab.config.BROADBAND_HZ` (1-45 Hz).

    Returns
    -------
    ndarray, shape (n_epochs, n_ch, n_ch)
        Same scaling as :func:`epoch_cross_spectra` (its diagonal is broadband power).
    """
    band = Bands(names=("broadband",), edges=(tuple(float(f) for f in total),))
    return epoch_cross_spectra(epochs, sfreq, band)[:, 0]


def check_bands_within(bands: Bands, total: tuple[float, float] = BROADBAND_HZ) -> None:
    """Refuse bands reaching outside the broadband total (their relative power is undefined)."""
    lo_t, hi_t = total
    for name, (lo, hi) in zip(bands.names, bands.edges):
        if lo < lo_t or hi > hi_t:
            raise InputError(f"band {name!r} ({lo:g}-{hi:g} Hz) reaches outside the "
                             f"{lo_t:g}-{hi_t:g} Hz broadband total that relative power "
                             "divides by")


def sensor_band_power(csd: np.ndarray, total_csd: np.ndarray | None = None
                      ) -> tuple[np.ndarray, np.ndarray]:
    """Absolute and relative sensor band power from average-referenced mean cross-spectra.

    Parameters
    ----------
    csd : ndarray, shape (n_bands, n_ch, n_ch)
    total_csd : ndarray, shape (n_ch, n_ch), optional
        Average-referenced broadband (1-45 Hz) cross-spectrum; see :func:`relative_power`.

    Returns
    -------
    absolute : ndarray, shape (n_bands, n_ch)
        Diagonal (squared data unit, e.g. µV²).
    relative : ndarray, shape (n_bands, n_ch)
        Absolute divided by the broadband power (or, without ``total_csd``, by the band sum).
    """
    absolute = np.einsum("bcc->bc", csd).copy()
    total = None if total_csd is None else np.einsum("cc->c", total_csd)[None]
    return absolute, relative_power(absolute, total)


def relative_power(absolute: np.ndarray, total: np.ndarray | None = None) -> np.ndarray:
    """Band power divided by broadband power, per item.

    Parameters
    ----------
    absolute : ndarray, shape (n_bands, ...)
    total : ndarray, shape (1, ...) or (...), optional
        Power over the fixed broadband range (:data:`sourcelab.config.BROADBAND_HZ`).  The
        pipeline always passes it.  Without it the sum over the given bands is used (the
        pre-0.2 definition, which depends on the band list; kept for callers that have no
        broadband spectrum).
    """
    if total is None:
        total = absolute.sum(axis=0, keepdims=True)
    total = np.asarray(total)
    if total.ndim == absolute.ndim - 1:
        total = total[None]
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(total > 0, absolute / total, np.nan)
