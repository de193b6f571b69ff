"""Zero-phase FIR filtering with numpy: MNE-Python's default filter, without importing scipy.signal.

The reference is MNE-Python's ``mne.filter.filter_data`` / ``mne.filter.notch_filter`` with their
defaults (``method="fir"``, ``phase="zero"``, ``fir_window="hamming"``, ``fir_design="firwin"``,
``filter_length``, ``l_trans_bandwidth`` and ``h_trans_bandwidth`` ``"auto"``,
``pad="reflect_limited"``): the same transition bands and filter length, the same windowed-sinc
coefficients (``mne.filter.create_filter``; each gain step a Hamming-windowed low-pass as
``scipy.signal.firwin`` designs it), the same edge padding and overlap-add FFT length.  The tests
compare coefficients (to 1e-12) and filtered data (to 1e-10) with MNE.  MNE's own design
imports ``scipy.signal``, which pulls in ``scipy.stats``, ``scipy.interpolate`` and
``scipy.optimize`` (about a second of start-up for every analysis).

Only the defaults sourcelab uses are offered; MNE's warnings (filter longer than the signal,
attenuation below 20 dB) are not repeated: the pipeline ran MNE with ``verbose="error"``.
"""

from __future__ import annotations

import math

import numpy as np

#: Filter length per unit transition bandwidth of the Hamming window, s·Hz (MNE's
#: ``_length_factors["hamming"]``).
HAMMING_LENGTH_FACTOR = 3.3


def _auto_trans(freq, sfreq: float, *, low: bool):
    """MNE's automatic transition bandwidth of a high-pass (``low``) or low-pass edge, Hz."""
    if low:
        return np.minimum(np.maximum(0.25 * freq, 2.0), freq)
    return np.minimum(np.maximum(0.25 * freq, 2.0), sfreq / 2.0 - freq)


def _n_taps(trans_hz, sfreq: float) -> int:
    """Odd filter length for the narrowest transition band (MNE's ``filter_length="auto"``)."""
    seconds = float(f"{HAMMING_LENGTH_FACTOR / float(trans_hz)}")  # MNE goes through "<x>s"
    n = max(int(np.ceil(seconds * 1.0 * sfreq)), 1)
    n += (n - 1) % 2
    return n


def _hamming(m: int) -> np.ndarray:
    """Symmetric Hamming window (``scipy.signal.windows.hamming(m)``)."""
    if m <= 1:
        return np.ones(m)
    fac = np.linspace(-np.pi, np.pi, m)
    return 0.54 + (1.0 - 0.54) * np.cos(fac)  # scipy's general_hamming(m, 0.54)


def _firwin_lowpass(n: int, cutoff: float) -> np.ndarray:
    """``scipy.signal.firwin(n, cutoff, window="hamming", fs=2)``: unit DC gain low-pass."""
    m = np.arange(0, n) - 0.5 * (n - 1)
    h = cutoff * np.sinc(cutoff * m)
    h *= _hamming(n)
    return h / np.sum(h)


def _firwin_design(n: int, freq: np.ndarray, gain: np.ndarray) -> np.ndarray:
    """MNE's ``_firwin_design``: a sum of windowed low-passes, one per gain step.

    ``freq`` is normalised to the Nyquist frequency (0 ... 1); each step gets the shortest odd
    length its own transition band needs, centred in the ``n`` taps.
    """
    h = np.zeros(n)
    prev_freq, prev_gain = freq[-1], gain[-1]
    if gain[-1] == 1:
        h[n // 2] = 1  # start with "all pass"
    for this_freq, this_gain in zip(freq[::-1][1:], gain[::-1][1:]):
        if this_gain != prev_gain:
            transition = (prev_freq - this_freq) / 2.0
            this_n = int(round(HAMMING_LENGTH_FACTOR / transition))
            this_n += 1 - this_n % 2  # odd
            if this_n > n:
                raise ValueError(f"filter length {n} too short for a transition band")
            this_h = _firwin_lowpass(this_n, (prev_freq + this_freq) / 2.0)
            offset = (n - this_n) // 2
            if this_gain == 0:
                h[offset : n - offset] -= this_h
            else:
                h[offset : n - offset] += this_h
        prev_gain, prev_freq = this_gain, this_freq
    return h


def _bandpass_points(l_stop, l_freq, h_freq, h_stop, nyq):
    """MNE's gain points of a band-pass, Hz: 0 below ``l_stop``, 1 from ``l_freq`` to ``h_freq``,
    0 from ``h_stop``, with 0 Hz and Nyquist added when not already edges."""
    freq, gain = [l_stop, l_freq, h_freq, h_stop], [0, 1, 1, 0]
    if h_stop != nyq:
        freq, gain = freq + [nyq], gain + [0]
    if l_stop != 0:
        freq, gain = [0] + freq, [0] + gain
    return freq, gain


def fir_coefficients(sfreq: float, l_freq: float | None, h_freq: float | None) -> np.ndarray:
    """Coefficients of MNE's default zero-phase FIR high-, low- or band-pass.

    Parameters
    ----------
    sfreq : float
        Sampling rate, Hz.
    l_freq, h_freq : float or None
        Pass-band edges, Hz (``l_freq < h_freq``); None (or an ``l_freq`` of 0) leaves that side
        open.  Transition bands as MNE's ``"auto"``: ``min(max(0.25 f, 2), f)`` below,
        ``min(max(0.25 f, 2), Nyquist - f)`` above.

    Returns
    -------
    ndarray, shape (n_taps,)
        The same coefficients as ``mne.filter.create_filter(None, sfreq, l_freq, h_freq)``
        (odd length; ``[1.0]`` when both edges are open).
    """
    sfreq = float(sfreq)
    nyq = sfreq / 2.0
    if l_freq is not None and float(l_freq) == 0:
        l_freq = None
    if l_freq is None and h_freq is None:
        return np.ones(1)
    trans = []
    if l_freq is not None:
        l_freq = float(l_freq)
        l_trans = _auto_trans(l_freq, sfreq, low=True)
        l_stop = l_freq - l_trans
        trans.append(l_trans)
    if h_freq is not None:
        h_freq = float(h_freq)
        if h_freq >= nyq:
            raise ValueError(f"h_freq {h_freq} Hz must be below Nyquist ({nyq} Hz)")
        h_trans = _auto_trans(h_freq, sfreq, low=False)
        h_stop = h_freq + h_trans
        trans.append(h_trans)
    if l_freq is None:  # low-pass
        freq, gain = [0, h_freq, h_stop], [1, 1, 0]
        if h_stop != nyq:
            freq, gain = freq + [nyq], gain + [0]
    elif h_freq is None:  # high-pass
        freq, gain = [l_stop, l_freq, nyq], [0, 1, 1]
        if l_stop != 0:
            freq, gain = [0] + freq, [0] + gain
    else:
        if not l_freq < h_freq:
            raise ValueError(f"l_freq {l_freq} Hz must be below h_freq {h_freq} Hz")
        freq, gain = _bandpass_points(l_stop, l_freq, h_freq, h_stop, nyq)
    n = _n_taps(min(trans), sfreq)
    return _firwin_design(n, np.array(freq) / nyq, np.array(gain))


def notch_coefficients(sfreq: float, freqs) -> np.ndarray:
    """Coefficients of MNE's default FIR notch filter (``mne.filter.notch_filter``).

    Parameters
    ----------
    sfreq : float
        Sampling rate, Hz.
    freqs : array_like of float
        Notch frequencies, Hz (e.g. mains and its harmonics below Nyquist); each notch is
        ``f / 200`` wide with 0.5 Hz transition bands on either side (MNE's defaults).

    Returns
    -------
    ndarray, shape (n_taps,)
        The band-stop coefficients ``notch_filter`` applies.
    """
    sfreq = float(sfreq)
    nyq = sfreq / 2.0
    freqs = np.atleast_1d(np.asarray(freqs, float))
    widths = freqs / 200.0
    tb_2 = 1 / 2.0
    lows = np.array([f - w / 2.0 - tb_2 for f, w in zip(freqs, widths)], float)
    highs = np.array([f + w / 2.0 + tb_2 for f, w in zip(freqs, widths)], float)
    t = np.array(tb_2, float).ravel()
    # MNE's band-stop bookkeeping, in its order of operations (the stop edges move by the
    # transition and back: the same floating-point values as MNE's)
    f_p1 = lows - t  # pass edge below each notch
    f_p1 += t
    f_s1 = lows + t  # stop band of each notch
    f_s2 = highs - t
    f_p2 = highs + t  # pass edge above
    f_p2 -= t
    freq = np.r_[f_p1, f_s1, f_s2, f_p2]
    gain = np.r_[np.ones_like(f_p1), np.zeros_like(f_s1), np.zeros_like(f_s2), np.ones_like(f_p2)]
    order = np.argsort(freq)
    freq, gain = freq[order], gain[order]
    if freq[0] != 0:
        freq, gain = np.r_[[0.0], freq], np.r_[[1.0], gain]
    if freq[-1] != nyq:
        freq, gain = np.r_[freq, [nyq]], np.r_[gain, [1.0]]
    if np.any(np.abs(np.diff(gain, 2)) > 1):
        raise ValueError("notch frequencies too close together")
    n = _n_taps(min(t), sfreq)
    return _firwin_design(n, freq / nyq, gain)


def _n_fft(n_h: int, n_x: int) -> int:
    """MNE's overlap-add FFT length: the power of two of least estimated cost."""
    min_fft = 2 * n_h - 1
    if n_x < min_fft:
        n = min_fft  # one block: the next 5-smooth length (as MNE's next_fast_len)
        while True:
            m = n
            for p in (2, 3, 5):
                while m % p == 0:
                    m //= p
            if m == 1:
                return n
            n += 1
    sizes = 2 ** np.arange(np.ceil(np.log2(min_fft)), np.ceil(np.log2(n_x)) + 1, dtype=int)
    cost = np.ceil(n_x / (sizes - n_h + 1).astype(np.float64)) * sizes * (np.log2(sizes) + 1)
    cost += 4e-5 * sizes * n_x
    return int(sizes[np.argmin(cost)])


def apply_fir(x: np.ndarray, h: np.ndarray, *, double: bool = False) -> np.ndarray:
    """Zero-phase FIR filter each row of ``x`` in place, as MNE's overlap-add filter.

    Parameters
    ----------
    x : ndarray, shape (..., n_times)
        Float64 data, filtered in place (row by row: one padded row in memory at a time).
    h : ndarray, shape (n_taps,)
        Symmetric coefficients (:func:`fir_coefficients`, :func:`notch_coefficients`: odd
        length; :func:`firwin2_bandpass`).
    double : bool
        Apply ``h`` forwards and backwards (MNE's ``phase="zero-double"``: ``h`` convolved with
        its reverse, the padding of ``h`` itself).

    Returns
    -------
    ndarray, shape (..., n_times)
        ``x`` itself.  Each row is padded at both ends by ``n_taps - 1`` samples reflected about
        the end samples (MNE's ``"reflect_limited"``), convolved block by block by FFT and
        shifted by half the filter length (zero phase).
    """
    if x.dtype != np.float64:
        raise TypeError(f"x: need float64 data, got {x.dtype}")
    if len(h) == 1:
        x *= h[0] ** 2 if double else h[0]
        return x
    rows = x.reshape(-1, x.shape[-1])  # a view of contiguous data (else a copy, put back below)
    n_times = rows.shape[1]
    n_edge = max(min(len(h), n_times) - 1, 0)
    if double:
        h = np.convolve(h, h[::-1])
    n_h = len(h)
    n_x = n_times + 2 * n_edge
    n_fft = _n_fft(n_h, n_x)
    h_fft = np.fft.rfft(h, n=n_fft)
    n_seg = n_fft - n_h + 1
    n_blocks = -(-n_x // n_seg)
    shift = (n_h - 1) // 2 + n_edge
    blocks = np.zeros((n_blocks, n_fft))
    flat = np.zeros(n_blocks * n_seg)
    full = np.zeros((n_blocks + 1) * n_seg)
    for row in rows:
        flat[:n_edge] = 2 * row[0] - row[n_edge:0:-1]
        flat[n_edge : n_edge + n_times] = row
        flat[n_edge + n_times : n_x] = 2 * row[-1] - row[-2 : -n_edge - 2 : -1]
        blocks[:, :n_seg] = flat.reshape(n_blocks, n_seg)
        prod = np.fft.irfft(np.fft.rfft(blocks, axis=1) * h_fft, n_fft, axis=1)
        # overlap-add: each block's head, then the previous block's tail (n_h - 1 < n_seg
        # samples) added onto the next head; the sums are MNE's (a + b, in either order)
        full[: n_blocks * n_seg] = prod[:, :n_seg].ravel()
        full[n_blocks * n_seg :] = 0.0
        full[n_seg:].reshape(n_blocks, n_seg)[:, : n_h - 1] += prod[:, n_seg:]
        row[:] = full[shift : shift + n_times]
    if not np.shares_memory(rows, x):
        x[...] = rows.reshape(x.shape)
    return x


def _hann(m: int) -> np.ndarray:
    """Symmetric Hann window (``scipy.signal.windows.hann(m)``)."""
    if m <= 1:
        return np.ones(m)
    return 0.5 + 0.5 * np.cos(np.linspace(-np.pi, np.pi, m))  # scipy's general_cosine order


def _firwin2(n: int, freq: np.ndarray, gain: np.ndarray) -> np.ndarray:
    """``scipy.signal.firwin2(n, freq, gain, window="hann")``, ``freq`` normalised to Nyquist.

    Frequency sampling: the gain interpolated on ``1 + 2**ceil(log2 n)`` points from 0 to
    Nyquist, delayed by ``(n - 1) / 2`` samples, inverse real FFT, the first ``n`` taps
    windowed.  Symmetric filters only (types I and II).
    """
    freq = np.array(freq, float)
    gain = np.asarray(gain, float)
    if n % 2 == 0 and gain[-1] != 0:
        raise ValueError("a type II filter (even length) needs zero gain at Nyquist")
    n_freqs = 1 + 2 ** int(math.ceil(math.log(n, 2)))
    d = np.diff(freq)
    if np.any(d == 0):  # repeated frequencies: nudged apart by eps, as scipy does
        eps = np.finfo(np.float64).eps
        for k in range(len(freq) - 1):
            if freq[k] == freq[k + 1]:
                freq[k] -= eps
                freq[k + 1] += eps
    x = np.linspace(0.0, 1.0, n_freqs)
    fx = np.interp(x, freq, gain)
    shift = np.exp(-(n - 1) / 2.0 * 1j * np.pi * x / 1.0)
    return np.fft.irfft(fx * shift)[:n] * _hann(n)


def firwin2_bandpass(
    sfreq: float, l_freq: float, h_freq: float, *, trans_hz: float = 0.5, length_s: float = 10.0
) -> np.ndarray:
    """The band-pass MNE's ICA scoring applies (``mne.preprocessing.ica._band_pass_filter``).

    Parameters
    ----------
    sfreq : float
        Sampling rate, Hz.
    l_freq, h_freq : float
        Pass band, Hz.
    trans_hz : float
        Both transition bandwidths, Hz (MNE's 0.5).
    length_s : float
        Filter length, s (MNE's ``"10s"``; with ``phase="zero-double"`` MNE rounds the sample
        count up to a power of two).

    Returns
    -------
    ndarray, shape (n_taps,)
        The coefficients of ``mne.filter.create_filter(None, sfreq, l_freq, h_freq,
        filter_length="10s", l_trans_bandwidth=0.5, h_trans_bandwidth=0.5, fir_window="hann",
        fir_design="firwin2", phase="zero-double")``; apply with ``apply_fir(..., double=True)``.
    """
    sfreq = float(sfreq)
    nyq = sfreq / 2.0
    l_freq, h_freq = float(l_freq), float(h_freq)
    if not 0 < l_freq < h_freq < nyq:
        raise ValueError(f"need 0 < l_freq < h_freq < Nyquist ({nyq} Hz), got {l_freq}, {h_freq}")
    l_stop, h_stop = l_freq - float(trans_hz), h_freq + float(trans_hz)
    if l_stop < 0 or h_stop > nyq:
        raise ValueError(f"transition bands of {trans_hz} Hz do not fit in 0 ... {nyq} Hz")
    freq, gain = _bandpass_points(l_stop, l_freq, h_freq, h_stop, nyq)
    n = max(int(np.ceil(float(f"{length_s}") * sfreq)), 1)
    n = 2 ** int(np.ceil(np.log2(n)))
    return _firwin2(n, np.array(freq) / nyq, np.array(gain))


def filter_data(x: np.ndarray, sfreq: float, l_freq, h_freq) -> np.ndarray:
    """Band-, high- or low-pass ``x`` in place (``mne.filter.filter_data`` defaults).

    Parameters
    ----------
    x : ndarray, shape (..., n_times)
        Float64 data (any unit), filtered in place.
    sfreq : float
        Sampling rate, Hz.
    l_freq, h_freq : float or None
        Pass-band edges, Hz (see :func:`fir_coefficients`).

    Returns
    -------
    ndarray, shape (..., n_times)
        ``x``, filtered (within 1e-10 of MNE's output, relative to the data's scale).
    """
    return apply_fir(x, fir_coefficients(sfreq, l_freq, h_freq))


def notch_filter(x: np.ndarray, sfreq: float, freqs) -> np.ndarray:
    """Notch ``freqs`` out of ``x`` in place (``mne.filter.notch_filter`` defaults, FIR).

    Parameters
    ----------
    x : ndarray, shape (..., n_times)
        Float64 data, filtered in place.
    sfreq : float
        Sampling rate, Hz.
    freqs : array_like of float
        Notch frequencies, Hz.

    Returns
    -------
    ndarray, shape (..., n_times)
        ``x``, filtered.
    """
    return apply_fir(x, notch_coefficients(sfreq, freqs))
