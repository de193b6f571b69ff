"""Band power of clean epochs: the small Welch helper shared by intake checks and reliability.

Convention (the same as the spectra module's cross-spectra): one Hann window over the whole
epoch, constant detrend, one-sided power spectral density; band power = sum of the density at
the bins in [low, high) times the frequency resolution df = sfreq / n_times.  With this density
scaling a sine of amplitude A carries A²/2 in a band that covers its main lobe (Parseval;
Welch 1967, IEEE Trans Audio Electroacoust 15:70-73).
"""

from __future__ import annotations

import numpy as np

from .._docs import fill_doc
from ..errors import InputError


def _edges(bands) -> list[tuple[float, float]]:
    """Accept a :class:`sourcelab.config.Bands`, a mapping name -> (lo, hi) or pairs."""
    if hasattr(bands, "edges"):
        return [tuple(map(float, e)) for e in bands.edges]
    if isinstance(bands, dict):
        return [tuple(map(float, e)) for e in bands.values()]
    out = [tuple(map(float, e)) for e in bands]
    if not out or any(len(e) != 2 for e in out):
        raise InputError("bands: need (low, high) pairs in Hz")
    return out


#: Segments transformed at once by :func:`welch_psd` (bounds its working memory).
_WELCH_BLOCK_BYTES = 32 << 20


def welch_psd(data: np.ndarray, sfreq: float, nperseg: int) -> tuple[np.ndarray, np.ndarray]:
    """Welch power spectral density of long signals in bounded memory.

    The same estimate as ``scipy.signal.welch(data, fs=sfreq, nperseg=nperseg, axis=-1)`` with
    its defaults (periodic Hann window, 50 % overlap, constant detrend per segment, one-sided
    density, mean over segments; Welch 1967), computed a block of segments at a time instead
    of materialising every segment at once (which for an hour of 19 channels takes several
    hundred MB).

    Parameters
    ----------
    data : ndarray, shape (n_channels, n_times)
    sfreq : float
        Hz.
    nperseg : int
        Segment length, samples (at most ``n_times``).

    Returns
    -------
    freqs : ndarray, shape (nperseg // 2 + 1,)
        Hz.
    psd : ndarray, shape (n_channels, nperseg // 2 + 1)
        Unit² / Hz.
    """
    x = np.asarray(data, dtype=float)
    n = int(nperseg)
    if x.ndim != 2 or not 1 <= n <= x.shape[1]:
        raise InputError(f"data: need shape (n_channels, n_times >= {n}), got {x.shape}")
    step = n - n // 2
    n_seg = (x.shape[1] - n) // step + 1
    win = 0.5 - 0.5 * np.cos(2 * np.pi * np.arange(n) / n)  # periodic Hann
    segs = np.lib.stride_tricks.sliding_window_view(x, n, axis=1)[:, ::step]
    block = max(1, _WELCH_BLOCK_BYTES // (16 * n * x.shape[0]))
    acc = np.zeros((x.shape[0], n // 2 + 1))
    for s in range(0, n_seg, block):
        seg = segs[:, s : s + block]
        seg = seg - seg.mean(axis=-1, keepdims=True)
        spec = np.fft.rfft(seg * win, axis=-1)
        acc += (spec.real**2 + spec.imag**2).sum(axis=1)
    psd = acc / (n_seg * sfreq * np.sum(win * win))
    psd[:, 1 : -1 if n % 2 == 0 else None] *= 2
    return np.fft.rfftfreq(n, 1 / sfreq), psd


def long_welch(data: np.ndarray, sfreq: float) -> tuple[np.ndarray, np.ndarray]:
    """:func:`welch_psd` with 2-s segments (or the whole signal when shorter): the spectrum the
    intake's mains checks use (line-noise sites when reading, mains detection when cleaning).

    Parameters
    ----------
    data : ndarray, shape (n_channels, n_times)
        Signals, e.g. µV.
    sfreq : float
        Hz.

    Returns
    -------
    freqs : ndarray, shape (n_freqs,)
        Hz, resolution 0.5 Hz for signals of at least 2 s.
    psd : ndarray, shape (n_channels, n_freqs)
        Unit² / Hz.
    """
    return welch_psd(data, sfreq, int(min(np.shape(data)[1], round(2 * sfreq))))


@fill_doc
def epoch_spectra(epochs: np.ndarray, sfreq: float) -> tuple[np.ndarray, np.ndarray]:
    """One-sided PSD of each epoch with a single Hann window over the epoch.

    Parameters
    ----------
    %(epochs_sfreq)s

    Returns
    -------
    freqs : ndarray, shape (n_freqs,)
        Hz, resolution sfreq / n_times.
    psd : ndarray, shape (n_epochs, n_channels, n_freqs)
        µV²/Hz.
    """
    epochs = np.asarray(epochs, float)
    if epochs.ndim != 3:
        raise InputError(f"epochs: need shape (n_epochs, n_channels, n_times), got {epochs.shape}")
    # scipy.signal.welch(epochs, fs=sfreq, window="hann", nperseg=n, noverlap=0,
    # detrend="constant", scaling="density") with one segment, in numpy (importing scipy.signal
    # costs ~0.8 s): periodic Hann window, mean removed, |FFT|² / (fs Σw²), doubled except at
    # 0 Hz and (even n) Nyquist
    n = epochs.shape[-1]
    win = 0.5 + 0.5 * np.cos(np.linspace(-np.pi, np.pi, n + 1))[:-1]  # scipy's hann(n, sym=False)
    spec = np.fft.rfft((epochs - epochs.mean(axis=-1, keepdims=True)) * win, axis=-1)
    psd = (np.conjugate(spec) * spec).real / (float(sfreq) * (win * win).sum())
    if n % 2:
        psd[..., 1:] *= 2
    else:
        psd[..., 1:-1] *= 2
    return np.fft.rfftfreq(n, 1.0 / float(sfreq)), psd


@fill_doc
def epoch_band_power(epochs: np.ndarray, sfreq: float, bands) -> np.ndarray:
    """Band power of every epoch.

    %(band_power_parameters)s

    Returns
    -------
    ndarray, shape (n_epochs, n_bands, n_channels)
        µV².
    """
    freqs, psd = epoch_spectra(epochs, sfreq)
    df = freqs[1] - freqs[0]
    out = np.empty((psd.shape[0], len(_edges(bands)), psd.shape[1]))
    for i, (lo, hi) in enumerate(_edges(bands)):
        sel = (freqs >= lo) & (freqs < hi)
        out[:, i] = psd[..., sel].sum(-1) * df
    return out


@fill_doc
def band_power(epochs: np.ndarray, sfreq: float, bands) -> np.ndarray:
    """Band power averaged over epochs (Welch's method, one Hann segment per epoch).

    %(band_power_parameters)s

    Returns
    -------
    ndarray, shape (n_bands, n_channels)
        µV².

    References
    ----------
    Welch PD (1967) IEEE Trans Audio Electroacoust 15:70-73.
    """
    return epoch_band_power(epochs, sfreq, bands).mean(axis=0)


@fill_doc
def peak_frequency(
    epochs: np.ndarray, sfreq: float, *, fmin: float = 7.0, fmax: float = 14.0
) -> np.ndarray:
    """Frequency of the largest mean-PSD bin in [fmin, fmax) per channel, Hz.

    Parameters
    ----------
    %(epochs_sfreq)s
    fmin, fmax : float
        Search range, Hz (``fmin`` included, ``fmax`` excluded); default 7-14 Hz.

    Returns
    -------
    ndarray, shape (n_channels,)
        Peak frequency per channel, Hz, on the epoch's frequency grid (resolution 1/epoch s),
        from the Hann-window PSD of :func:`epoch_spectra` averaged over epochs.

    Raises
    ------
    InputError
        No frequency bin in the range.
    """
    freqs, psd = epoch_spectra(epochs, sfreq)
    sel = (freqs >= fmin) & (freqs < fmax)
    if not sel.any():
        raise InputError(f"peak_frequency: no bins in [{fmin}, {fmax}) Hz")
    mean = psd.mean(0)[:, sel]
    return freqs[sel][np.argmax(mean, axis=1)]
