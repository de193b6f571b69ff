"""Band cross-spectra of clean epochs (Welch), the only sensor-level input the inverse needs.

Source band power is a quadratic form of the sensor cross-spectrum, so it is computed from these
19 x 19 matrices rather than sample by sample.
"""

from __future__ import annotations

import numpy as np

from .errors import InputError


def _band_bins(n_times: int, sfreq: float, lo: float, hi: float) -> np.ndarray:
    freqs = np.fft.rfftfreq(n_times, 1.0 / sfreq)
    return np.flatnonzero((freqs >= lo) & (freqs < hi))


def epoch_cross_spectra(epochs: np.ndarray, sfreq: float, bands) -> np.ndarray:
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


def average_reference_projector(n_ch: int) -> np.ndarray:
    """The average-reference projector ``P = I - 11ᵀ/n``, shape (n_ch, n_ch).

    Re-referencing to the average is a projection: it must be applied to the data model (leadfield
    and data alike) for inverse modelling, never by subtracting a noisy mean from one of them only.
    """
    return np.eye(n_ch) - 1.0 / n_ch


def average_reference(csd: np.ndarray) -> np.ndarray:
    """Apply the average-reference projector to cross-spectra: ``P C P``.

    Parameters
    ----------
    csd : ndarray, shape (..., n_ch, n_ch)

    Returns
    -------
    ndarray, shape (..., n_ch, n_ch)
    """
    p = average_reference_projector(csd.shape[-1])
    return p @ csd @ p


def sensor_band_power(csd: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Absolute and relative sensor band power from average-referenced mean cross-spectra.

    Parameters
    ----------
    csd : ndarray, shape (n_bands, n_ch, n_ch)

    Returns
    -------
    absolute : ndarray, shape (n_bands, n_ch)
        Diagonal (squared data unit, e.g. µV²).
    relative : ndarray, shape (n_bands, n_ch)
        Absolute divided by the sum over the analysed bands.
    """
    absolute = np.einsum("bcc->bc", csd).copy()
    return absolute, relative_power(absolute)


def relative_power(absolute: np.ndarray) -> np.ndarray:
    """Band power divided by its sum over bands (axis 0), per item."""
    total = absolute.sum(axis=0, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(total > 0, absolute / total, np.nan)
