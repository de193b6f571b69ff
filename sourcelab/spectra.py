"""Cross-spectra of clean epochs (Welch), the only sensor-level input the inverse needs.

Source band power is a quadratic form of the sensor cross-spectrum, so it is computed from these
19 x 19 matrices rather than sample by sample.  :func:`epoch_cross_spectra` keeps the real part
summed over each band (band power); :func:`epoch_bin_cross_spectra` keeps the complex
cross-spectrum of every bin inside the bands (phase-based coupling measures).
"""

from __future__ import annotations

import numpy as np

from ._docs import fill_doc
from .config import BROADBAND_HZ, Bands
from .errors import InputError


def _band_bins(n_times: int, sfreq: float, lo: float, hi: float) -> np.ndarray:
    freqs = np.fft.rfftfreq(n_times, 1.0 / sfreq)
    return np.flatnonzero((freqs >= lo) & (freqs < hi))


#: Epochs Fourier-transformed at once (bounds the windowed copy held in memory).
_EPOCH_CHUNK = 64


def _check_bands(n_t: int, sfreq: float, bands: Bands) -> None:
    nyq = sfreq / 2.0
    for name, (lo, hi) in zip(bands.names, bands.edges):
        if hi > nyq:
            raise InputError(
                f"band {name!r} ({lo}-{hi} Hz) exceeds the Nyquist frequency "
                f"{nyq:g} Hz of this recording"
            )
        if _band_bins(n_t, sfreq, lo, hi).size == 0:
            raise InputError(
                f"band {name!r} ({lo}-{hi} Hz) holds no frequency bin at "
                f"{sfreq / n_t:g} Hz resolution; lengthen the epochs"
            )


def analysed_bins(n_times: int, sfreq: float, bands: Bands) -> tuple[np.ndarray, np.ndarray]:
    """FFT bins that lie in at least one band (``lo <= f < hi``).

    Parameters
    ----------
    n_times : int
        Epoch length, samples.
    sfreq : float
        Sampling rate, Hz.
    bands : Bands

    Returns
    -------
    bins : ndarray of int, shape (n_bins,)
        Indices into ``numpy.fft.rfftfreq(n_times, 1 / sfreq)``, increasing.
    freqs : ndarray, shape (n_bins,)
        Their frequencies, Hz.
    """
    _check_bands(n_times, sfreq, bands)
    sel = np.unique(np.concatenate([_band_bins(n_times, sfreq, lo, hi) for lo, hi in bands.edges]))
    return sel, np.fft.rfftfreq(n_times, 1.0 / sfreq)[sel]


def band_bin_indices(freqs: np.ndarray, bands: Bands) -> list[np.ndarray]:
    """Positions in ``freqs`` of each band's bins (``lo <= f < hi``), one int array per band.

    Parameters
    ----------
    freqs : ndarray, shape (n_bins,)
        Bin frequencies, Hz (e.g. from :func:`analysed_bins`).
    bands : Bands
        Band names and ``[low, high)`` edges in Hz.

    Returns
    -------
    list of ndarray of int, length n_bands
        Indices into ``freqs``; empty for a band without a bin.
    """
    freqs = np.asarray(freqs, dtype=float)
    return [np.flatnonzero((freqs >= lo) & (freqs < hi)) for lo, hi in bands.edges]


@fill_doc
def epoch_fourier(
    epochs: np.ndarray, sfreq: float, bands: Bands, *, taper: bool = True, dtype=np.complex128
) -> tuple[np.ndarray, np.ndarray]:
    """Scaled Fourier coefficients of each epoch at the analysed bins.

    Each epoch is mean-removed, optionally Hann-windowed (periodic Hann, Welch's default) and
    Fourier transformed; only the bins inside the bands are kept.  Coefficients are scaled so that
    ``X Xᴴ`` is the one-sided cross-spectral density times the bin width: summed over a band's
    bins, the diagonal is band power in the data's squared unit (µV² for µV input), exactly as
    :func:`epoch_cross_spectra`.  Epochs are transformed in chunks, so only a chunk's windowed copy
    and full spectrum are held at once.

    Parameters
    ----------
    %(spectra_epochs_sfreq)s
    bands : Bands
    taper : bool
        Hann window (True, for spectra) or none (False: the plain DFT, e.g. to band-pass epochs
        without imposing the window's envelope on them; then the scaling uses ``n_times``).
    dtype : numpy complex dtype
        ``complex64`` halves the memory; band power needs ``complex128`` to stay exact.

    Returns
    -------
    spec : ndarray, shape (n_epochs, n_ch, n_bins), complex
        Scaled so that ``X Xᴴ`` summed over a band's bins is band power (µV² for µV data).
    freqs : ndarray, shape (n_bins,)
        Hz.
    """
    epochs = np.asarray(epochs)
    if epochs.ndim != 3:
        raise InputError(f"epochs: need shape (n_epochs, n_ch, n_times), got {epochs.shape}")
    n_ep, n_ch, n_t = epochs.shape
    bins, freqs = analysed_bins(n_t, sfreq, bands)
    win = _hann(n_t) if taper else np.ones(n_t)
    # one-sided density scaling (as scipy.signal.welch, scaling="density"), times bin width
    scale = 1.0 / (sfreq * np.sum(win**2)) * (sfreq / n_t)
    weight = np.where((bins == 0) | ((n_t % 2 == 0) & (bins == n_t // 2)), 1.0, 2.0)
    factor = np.sqrt(weight * scale)
    out = np.empty((n_ep, n_ch, bins.size), dtype=dtype)
    for s in range(0, n_ep, _EPOCH_CHUNK):
        x = np.asarray(epochs[s : s + _EPOCH_CHUNK], dtype=float)
        x = (x - x.mean(axis=-1, keepdims=True)) * win
        out[s : s + _EPOCH_CHUNK] = np.fft.rfft(x, axis=-1)[..., bins] * factor
    return out, freqs


@fill_doc
def epoch_bin_cross_spectra(
    epochs: np.ndarray, sfreq: float, bands: Bands, *, dtype=np.complex64
) -> tuple[np.ndarray, np.ndarray]:
    """Complex cross-spectra per epoch and frequency bin (Hann-windowed FFT, one segment each).

    ``C[e, f] = X_e(f) X_e(f)ᴴ`` with the scaled coefficients of :func:`epoch_fourier`, for every
    bin inside the bands.  The real diagonal summed over a band's bins is band power, identical to
    :func:`epoch_cross_spectra`; the complex off-diagonals carry the phase that coupling measures
    need.  Convention: ``C[e, f, a, b] = X_a conj(X_b)``, so a positive phase means site ``a``
    leads site ``b``.

    Parameters
    ----------
    %(spectra_epochs_sfreq)s
    bands : Bands
        Only bins inside a band (``lo <= f < hi``) are kept, so memory grows with the top band
        edge, not the Nyquist frequency.
    dtype : numpy complex dtype
        ``complex64`` (default; 10 minutes of 2-s epochs, 19 sites, 1-30 Hz: 50 MB) or
        ``complex128``.

    Returns
    -------
    csd : ndarray, shape (n_epochs, n_bins, n_ch, n_ch), complex, Hermitian in the last two axes
        Squared data unit (e.g. µV²) per bin.
    freqs : ndarray, shape (n_bins,)
        Bin frequencies, Hz.

    References
    ----------
    Welch P (1967) IEEE Trans Audio Electroacoust 15:70-73.
    Bendat JS, Piersol AG (2010) Random Data, 4th ed., Wiley, ch. 11 (cross-spectral density
    estimates from segment Fourier transforms; from memory).
    """
    spec, freqs = epoch_fourier(epochs, sfreq, bands, dtype=dtype)
    spec = np.ascontiguousarray(spec.transpose(0, 2, 1))  # (n_ep, n_bins, n_ch)
    return spec[..., :, None] * spec[..., None, :].conj(), freqs


@fill_doc
def epoch_cross_spectra(
    epochs: np.ndarray, sfreq: float, bands: Bands, *, fourier_out: np.ndarray | None = None
) -> np.ndarray:
    """Per-epoch band cross-spectral matrices (real part), one Welch segment per epoch.

    Each epoch is mean-removed, Hann-windowed and Fourier transformed; the one-sided cross-spectral
    density is summed over the band's bins ``lo <= f < hi`` and multiplied by the bin width, so the
    diagonal is band power in the data's squared unit (µV² for µV input).  Averaging over epochs
    gives Welch's estimate (non-overlapping segments, Hann window).  Equal to the real part of
    :func:`epoch_bin_cross_spectra` summed over each band's bins (to rounding), computed without
    the per-bin matrices: that sum of ``X_a conj(X_b)`` is ``A Aᵀ`` with ``A = [Re X, Im X]`` over
    the band's bins, one real matrix product per epoch and band (a chunk of epochs at a time).

    Parameters
    ----------
    %(spectra_epochs_sfreq)s
    bands : Bands
    fourier_out : ndarray, shape (n_epochs, n_ch, n_bins), complex, optional
        Also store the Fourier coefficients of :func:`epoch_fourier` (Hann taper) here, cast to
        this array's dtype: the values ``epoch_fourier(..., dtype=fourier_out.dtype)`` gives,
        without a second transform (the analysis passes them on to coupling).

    Returns
    -------
    csd : ndarray, shape (n_epochs, n_bands, n_ch, n_ch)
        Real, symmetric positive semi-definite band cross-spectra.

    References
    ----------
    Welch P (1967) IEEE Trans Audio Electroacoust 15:70-73.
    """
    epochs = np.asarray(epochs)
    if epochs.ndim != 3:
        raise InputError(f"epochs: need shape (n_epochs, n_ch, n_times), got {epochs.shape}")
    n_ep, n_ch, n_t = epochs.shape
    _check_bands(n_t, sfreq, bands)
    if fourier_out is not None:
        want = (n_ep, n_ch, analysed_bins(n_t, sfreq, bands)[0].size)
        if fourier_out.shape != want or not np.iscomplexobj(fourier_out):
            raise InputError(f"fourier_out: need a complex array of shape {want}")
    out = np.empty((n_ep, len(bands), n_ch, n_ch))
    for s in range(0, n_ep, _EPOCH_CHUNK):
        spec, freqs = epoch_fourier(epochs[s : s + _EPOCH_CHUNK], sfreq, bands)
        if fourier_out is not None:
            fourier_out[s : s + _EPOCH_CHUNK] = spec
        for b, idx in enumerate(band_bin_indices(freqs, bands)):
            x = spec[..., idx]
            a = np.concatenate([x.real, x.imag], axis=-1)
            m = a @ a.transpose(0, 2, 1)
            # exactly symmetric, as the per-bin products were (a blocked product may round
            # the two triangles differently)
            out[s : s + _EPOCH_CHUNK, b] = 0.5 * (m + m.transpose(0, 2, 1))
    return out


def _hann(n: int) -> np.ndarray:
    """Periodic Hann window (as ``scipy.signal.get_window('hann', n)``, Welch's default)."""
    return 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(n) / n)


def average_reference_projector(n_ch: int) -> np.ndarray:
    """The average-reference projector ``P = I - 11ᵀ/n``, shape (n_ch, n_ch).

    Re-referencing to the average is a projection: it must be applied to the data model (leadfield
    and data alike) for inverse modelling, never by subtracting a noisy mean from one of them only.

    Parameters
    ----------
    n_ch : int
        Number of channels.

    Returns
    -------
    ndarray, shape (n_ch, n_ch)
        Symmetric and idempotent, rank ``n_ch - 1``.
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
        ``P C P``, same unit as ``csd``.
    """
    p = average_reference_projector(csd.shape[-1])
    return p @ csd @ p


@fill_doc
def broadband_cross_spectra(
    epochs: np.ndarray, sfreq: float, *, total: tuple[float, float] = BROADBAND_HZ
) -> np.ndarray:
    """Per-epoch cross-spectra of the fixed broadband range relative power divides by.

    Parameters
    ----------
    %(spectra_epochs_sfreq)s
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
    """Refuse bands reaching outside the broadband total (their relative power is undefined).

    Parameters
    ----------
    bands : Bands
        Band names and ``[low, high)`` edges in Hz.
    total : (float, float)
        Broadband range, Hz; default :data:`sourcelab.config.BROADBAND_HZ` (1-45 Hz).

    Raises
    ------
    InputError
        Naming the first band with ``low < total[0]`` or ``high > total[1]``.
    """
    lo_t, hi_t = total
    for name, (lo, hi) in zip(bands.names, bands.edges):
        if lo < lo_t or hi > hi_t:
            raise InputError(
                f"band {name!r} ({lo:g}-{hi:g} Hz) reaches outside the "
                f"{lo_t:g}-{hi_t:g} Hz broadband total that relative power "
                "divides by"
            )


def sensor_band_power(
    csd: np.ndarray, total_csd: np.ndarray | None = None
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
        Absolute band power, e.g. µV².
    total : ndarray, shape (1, ...) or (...), optional
        Power over the fixed broadband range (:data:`sourcelab.config.BROADBAND_HZ`), same unit.
        The pipeline always passes it.  Without it the sum over the given bands is used (the
        pre-0.2 definition, which depends on the band list; kept for callers that have no
        broadband spectrum).

    Returns
    -------
    ndarray, shape (n_bands, ...)
        Dimensionless fraction; NaN where the total is not > 0.
    """
    if total is None:
        total = absolute.sum(axis=0, keepdims=True)
    total = np.asarray(total)
    if total.ndim == absolute.ndim - 1:
        total = total[None]
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(total > 0, absolute / total, np.nan)
