"""Butterworth low-pass applied forwards and backwards, with numpy (no ``scipy.signal``).

The reference is ``scipy.signal.sosfiltfilt(butter(order, cutoff, fs=sfreq, output="sos"), x)``
with its defaults (odd extension of ``3 * (2 * n_sections + 1)`` samples at each end, each pass
started in the steady state of its first sample, ``sosfilt_zi``).  The design is the same
bilinear transform of the analog prototype (poles ``-exp(i pi (2k - N - 1) / 2N)``, frequency
pre-warped); the recursion is run a block of samples at a time through the filter's state-space
form (each block: the zero-state response by one matrix product, plus the response to the state
the previous block left), which gives the recursion's numbers to rounding without a loop over
samples.  The tests compare with scipy to ~1e-12 of the data's scale.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

#: Samples per block of the state-space recursion (cost per sample grows with it; the number of
#: Python steps falls with it).
_BLOCK = 32


def butter_lowpass_sos(order: int, cutoff_hz: float, sfreq: float) -> np.ndarray:
    """Second-order sections of a digital Butterworth low-pass (``scipy.signal.butter``).

    Parameters
    ----------
    order : int
        Filter order (even or odd).
    cutoff_hz : float
        -3 dB frequency, Hz (below Nyquist).
    sfreq : float
        Sampling rate, Hz.

    Returns
    -------
    ndarray, shape (ceil(order / 2), 6)
        Rows ``[b0, b1, b2, 1, a1, a2]``; the overall gain in the first section.  The same
        filter as ``butter(order, cutoff_hz, fs=sfreq, output="sos")`` (sections may be paired
        in another order: all zeros are at z = -1).
    """
    order = int(order)
    wn = 2.0 * float(cutoff_hz) / float(sfreq)
    if order < 1 or not 0 < wn < 1:
        raise ValueError(f"need order >= 1 and 0 < cutoff < Nyquist, got {order}, {cutoff_hz}")
    p = -np.exp(1j * np.pi * np.arange(-order + 1, order, 2) / (2 * order))  # analog, unit
    warped = 2 * 2.0 * np.tan(np.pi * wn / 2.0)  # fs = 2 after normalising, as scipy
    p = warped * p
    k = warped**order
    pd = (4.0 + p) / (4.0 - p)  # bilinear transform, fs = 2
    k = float(np.real(k / np.prod(4.0 - p)))
    sections = []
    upper = pd[pd.imag > 0]
    for z in upper[np.argsort(np.abs(upper))]:
        sections.append([1.0, 2.0, 1.0, 1.0, -2.0 * z.real, abs(z) ** 2])
    if order % 2:
        real = float(pd[np.argmin(np.abs(pd.imag))].real)
        sections.append([1.0, 1.0, 0.0, 1.0, -real, 0.0])
    sos = np.array(sections)
    sos[0, :3] *= k
    return sos


def _state_space(sos: np.ndarray):
    """(A, B, C, D) of the cascade of transposed direct-form II sections (state: 2 per section)."""
    n = 2 * len(sos)

    def step(state, u):
        new = np.empty(n)
        for i, (b0, b1, b2, _, a1, a2) in enumerate(sos):
            z0, z1 = state[2 * i], state[2 * i + 1]
            y = b0 * u + z0
            new[2 * i] = b1 * u - a1 * y + z1
            new[2 * i + 1] = b2 * u - a2 * y
            u = y
        return new, u

    a = np.empty((n, n))
    c = np.empty(n)
    for j in range(n):
        a[:, j], c[j] = step(np.eye(n)[j], 0.0)
    b, d = step(np.zeros(n), 1.0)
    return a, b, c, d


@lru_cache(maxsize=8)
def _block_operators(sos_bytes: bytes, n_sections: int, m: int):
    """Per-block matrices of the state-space recursion (cached per filter)."""
    sos = np.frombuffer(sos_bytes).reshape(n_sections, 6)
    a, b, c, d = _state_space(sos)
    pw = [np.eye(len(a))]  # powers of A
    for _ in range(m):
        pw.append(a @ pw[-1])
    h = np.r_[d, [c @ pw[k] @ b for k in range(m - 1)]]  # impulse response
    t = np.zeros((m, m))  # zero-state response of one block: y = x @ t
    for k in range(m):
        t[: m - k, k:] += np.diag(np.full(m - k, h[k]))
    obs = np.array([c @ pw[k] for k in range(m)])  # (m, n_state): output from the block's state
    ctrl = np.array([pw[m - 1 - j] @ b for j in range(m)])  # (m, n_state): input -> end state
    return t, obs, ctrl, pw[m], _steady_state(a, b)


def _lfilter_blocks(x: np.ndarray, sos: np.ndarray, zi_scale: np.ndarray) -> np.ndarray:
    """Run the recursion over the rows of ``x`` (n_rows, n), starting in the steady state of a
    constant input ``zi_scale`` (n_rows, 1)."""
    m = _BLOCK
    t, obs, ctrl, am, zi = _block_operators(np.ascontiguousarray(sos).tobytes(), len(sos), m)
    n_rows, n = x.shape
    n_blocks = -(-n // m)
    xp = np.zeros((n_rows, n_blocks * m))
    xp[:, :n] = x
    xb = xp.reshape(n_rows, n_blocks, m)
    # state at the start of each block: v[k+1] = A^m v[k] + (input of block k -> state), a
    # linear recurrence over blocks solved by a prefix scan (log2(n_blocks) vector steps)
    v = np.empty((n_rows, n_blocks, len(am)))
    v[:, 0] = zi_scale * zi
    v[:, 1:] = xb[:, :-1] @ ctrl
    p, d = am, 1
    while d < n_blocks:
        v[:, d:] = v[:, d:] + v[:, :-d] @ p.T
        p, d = p @ p, 2 * d
    y = xb @ t + v @ obs.T
    return y.reshape(n_rows, -1)[:, :n]


def _steady_state(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """State reached under a constant unit input (``sosfilt_zi`` in state-space form)."""
    return np.linalg.solve(np.eye(len(a)) - a, b)


def sosfiltfilt(sos: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Zero-phase IIR filtering of each row (``scipy.signal.sosfiltfilt`` defaults).

    Parameters
    ----------
    sos : ndarray, shape (n_sections, 6)
        Second-order sections (:func:`butter_lowpass_sos`), ``a0 = 1``.
    x : ndarray, shape (n_times,) or (n_rows, n_times)
        Data (any unit); longer than the padding, ``3 * (2 * n_sections + 1)`` samples.

    Returns
    -------
    ndarray, same shape as ``x``
        Filtered forwards and backwards; each end oddly extended (``2 x[0] - x[k]``) by the
        padding, each pass started in the steady state of its first sample.
    """
    sos = np.asarray(sos, float)
    x = np.asarray(x, float)
    one = x.ndim == 1
    x = np.atleast_2d(x)
    ntaps = 2 * len(sos) + 1
    ntaps -= min(int((sos[:, 2] == 0).sum()), int((sos[:, 5] == 0).sum()))
    edge = 3 * ntaps
    if x.shape[1] <= edge:
        raise ValueError(f"x: need more than {edge} samples, got {x.shape[1]}")
    ext = np.concatenate(
        [
            2 * x[:, :1] - x[:, edge:0:-1],
            x,
            2 * x[:, -1:] - x[:, -2 : -(edge + 2) : -1],
        ],
        axis=1,
    )
    y = _lfilter_blocks(ext, sos, ext[:, :1])[:, ::-1]
    y = _lfilter_blocks(y, sos, y[:, :1])[:, ::-1][:, edge:-edge]
    return y[0] if one else y


__all__ = ["butter_lowpass_sos", "sosfiltfilt"]
