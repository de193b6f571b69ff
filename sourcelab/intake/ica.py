"""FastICA and EOG scoring with numpy: what sourcelab asked of ``mne.preprocessing.ICA``.

The reference is MNE-Python's ``ICA(method="fastica", n_components=n, max_iter=m, rng=seed)``
fitted on one channel type without noise covariance or projectors, and its ``find_bads_eog``:

* :func:`fit_ica`: MNE's pre-whitening (every channel divided by the standard deviation of all
  samples of the type), its PCA (``mne.utils.numerics._PCA``: centred SVD, sign flip on the
  largest entry of each left singular vector, scores scaled to unit variance), then
  scikit-learn's ``FastICA(whiten=False, algorithm="parallel", fun="logcosh", tol=1e-4,
  max_iter=m, random_state=seed)`` on the first ``n`` PCA scores (the starting matrix drawn as
  ``RandomState(seed).normal(size=(n, n))``, symmetric decorrelation by ``eigh``), and MNE's
  scaling of the unmixing matrix by the PCA standard deviations, ``pinv`` for the mixing
  matrix and its ordering of the components by the variance they explain.  The same
  operations in the same order and the same LAPACK calls (``scipy.linalg``): the tests find
  MNE's matrices to rounding (1e-10 asked; equal on this machine).
* :func:`eog_scores`: ``ICA.find_bads_eog`` — sources and proxies band-passed 1-10 Hz
  (MNE's ``_band_pass_filter``: firwin2 design, Hann window, 10 s, applied twice), Pearson
  correlation of every source with each proxy, components flagged by iterated z-scoring of the
  correlations (:func:`find_outliers`, MNE's ``_find_outliers``).

Importing ``mne.preprocessing`` imports ``scipy.signal`` and ``scipy.stats`` and fitting
imports scikit-learn (together about a second of start-up); this module needs numpy and
``scipy.linalg`` only (already imported by MNE's file readers).

References
----------
Hyvärinen A (1999). Fast and robust fixed-point algorithms for independent component analysis.
IEEE Trans Neural Netw 10:626-634.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .fir import apply_fir, firwin2_bandpass

#: FastICA convergence tolerance on ``max |(|diag(W1 W')| - 1)|`` (scikit-learn's default).
FASTICA_TOL = 1e-4


@dataclass(frozen=True, eq=False)
class FittedICA:
    """A fitted ICA decomposition (the attribute names of ``mne.preprocessing.ICA``).

    Attributes
    ----------
    pre_whitener_ : ndarray, shape (n_ch, 1)
        Scale each channel was divided by (the data's unit).
    pca_mean_ : ndarray, shape (n_ch,)
        Mean of the pre-whitened data.
    pca_components_ : ndarray, shape (n_ch, n_ch)
        PCA axes (rows), in the pre-whitened space.
    pca_explained_variance_ : ndarray, shape (n_ch,)
        Variance of each PCA score.
    n_components_ : int
        ICA components (the first PCA scores used).
    unmixing_matrix_ : ndarray, shape (n_components_, n_components_)
        From PCA scores to sources.
    mixing_matrix_ : ndarray, shape (n_components_, n_components_)
        Its pseudo-inverse.
    n_iter_ : int
        FastICA iterations run.
    """

    pre_whitener_: np.ndarray
    pca_mean_: np.ndarray
    pca_components_: np.ndarray
    pca_explained_variance_: np.ndarray
    n_components_: int
    unmixing_matrix_: np.ndarray
    mixing_matrix_: np.ndarray
    n_iter_: int

    def get_components(self) -> np.ndarray:
        """Scalp maps of the components (``ICA.get_components``).

        Returns
        -------
        ndarray, shape (n_ch, n_components_)
            Data unit per unit source.
        """
        n = self.n_components_
        return np.dot(self.mixing_matrix_[:, :n].T, self.pca_components_[:n]).T

    def sources(self, data: np.ndarray) -> np.ndarray:
        """Component time courses of ``data`` (``ICA.get_sources``).

        Parameters
        ----------
        data : ndarray, shape (n_ch, n_times)
            In the unit the decomposition was fitted in.

        Returns
        -------
        ndarray, shape (n_components_, n_times)
        """
        return _sources(
            self.pre_whitener_, self.pca_mean_, self.pca_components_, self.unmixing_matrix_, data
        )


def _sources(pre_whitener, mean, pca, unmixing, data):
    """MNE's ``ICA._transform``: pre-whiten, centre, PCA, unmix."""
    x = np.array(data, float) / pre_whitener
    x -= mean[:, None]
    return np.dot(np.dot(unmixing, pca[: len(unmixing)]), x)


def _sym_decorrelation(w: np.ndarray) -> np.ndarray:
    """``(W W')^{-1/2} W`` (scikit-learn's ``_sym_decorrelation``)."""
    from scipy import linalg

    s, u = linalg.eigh(np.dot(w, w.T))
    s = np.clip(s, a_min=np.finfo(w.dtype).tiny, a_max=None)
    return np.linalg.multi_dot([u * (1.0 / np.sqrt(s)), u.T, w])


def _logcosh(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """G(u) = log cosh(u): g = tanh (in place) and the row means of g' (alpha 1)."""
    gx = np.tanh(x, x)
    g_x = np.empty(x.shape[0], dtype=x.dtype)
    for i, gx_i in enumerate(gx):
        g_x[i] = (1 - gx_i**2).mean()
    return gx, g_x


def _fastica_parallel(x: np.ndarray, w_init: np.ndarray, *, max_iter: int, tol: float):
    """Symmetric FastICA of white ``x`` (n_components, n_samples); scikit-learn's ``_ica_par``."""
    w = _sym_decorrelation(w_init)
    p_ = float(x.shape[1])
    ii = 0
    for ii in range(max_iter):
        gwtx, g_wtx = _logcosh(np.dot(w, x))
        w1 = _sym_decorrelation(np.dot(gwtx, x.T) / p_ - g_wtx[:, np.newaxis] * w)
        del gwtx, g_wtx
        lim = max(abs(abs(np.einsum("ij,ij->i", w1, w)) - 1))
        w = w1
        if lim < tol:
            break
    return w, ii + 1


def _pinv(a: np.ndarray) -> np.ndarray:
    """Pseudo-inverse by SVD (``mne.utils.linalg.pinv``)."""
    from scipy import linalg

    u, s, vh = linalg.svd(a, full_matrices=False)
    rtol = max(vh.shape + u.shape) * np.finfo(u.dtype).eps
    rank = np.sum(s > np.max(s) * rtol)
    u = u[:, :rank]
    u /= s[:rank]
    return (u @ vh[:rank]).conj().T


def fit_ica(
    data: np.ndarray, *, n_components: int, max_iter: int = 1000, seed: int = 0
) -> FittedICA:
    """FastICA of one channel type, as ``mne.preprocessing.ICA(method="fastica").fit``.

    Parameters
    ----------
    data : ndarray, shape (n_ch, n_samples)
        Signals of one channel type (any unit; MNE fits EEG in volts), samples in any order.
    n_components : int
        Components to unmix (at most the data's rank).
    max_iter : int
        FastICA iterations at most (MNE's ``max_iter``; its ``"auto"`` is 1000).
    seed : int
        Random state of the starting matrix (MNE's ``rng`` / scikit-learn's ``random_state``).

    Returns
    -------
    FittedICA
        The decomposition.  Not converging within ``max_iter`` is not an error (scikit-learn
        warns; the pipeline silenced that warning).

    Raises
    ------
    ValueError
        When ``data`` holds NaN or Inf, or ``n_components`` is out of range.
    """
    from scipy import linalg

    orig = np.asarray(data, dtype=np.float64)
    data = np.array(orig)  # a copy, as raw.get_data
    if not np.isfinite(data).all():
        raise ValueError("data: contains non-finite values (NaN/Inf)")
    n_ch, n_samples = data.shape
    if not 1 <= int(n_components) <= min(n_ch, n_samples):
        raise ValueError(f"n_components: need 1 ... {min(n_ch, n_samples)}, got {n_components}")
    n_comp = int(n_components)
    # MNE's pre-whitener: one standard deviation for the channel type
    pre_whitener = np.empty([n_ch, 1])
    pre_whitener[np.arange(n_ch)] = np.std(data[np.arange(n_ch)])
    data /= pre_whitener
    # MNE's _PCA(whiten=True).fit_transform(data.T)
    x = data.T.copy()
    del data
    mean = np.mean(x, axis=0)
    x -= mean
    u, s, v = linalg.svd(x, full_matrices=False)
    signs = np.sign(u[np.argmax(np.abs(u), axis=0), np.arange(u.shape[1])])
    u *= signs
    v *= signs[:, np.newaxis]
    explained = (s**2) / (n_samples - 1)
    u = u[:, : min(x.shape)]
    u *= np.sqrt(x.shape[0] - 1)
    del x
    # scikit-learn's FastICA(whiten=False) on the first n_comp scores
    xt = u[:, :n_comp].T
    w_init = np.asarray(np.random.RandomState(seed).normal(size=(n_comp, n_comp)), dtype=xt.dtype)
    w, n_iter = _fastica_parallel(xt, w_init, max_iter=int(max_iter), tol=FASTICA_TOL)
    norms = np.sqrt(explained[:n_comp])
    norms[norms == 0] = 1.0
    w /= norms
    mix = _pinv(w)
    # MNE then orders the components by the variance they explain in the fitted data
    # (``_ica_explained_variance``: column power of the mixing matrix times source power)
    src = _sources(pre_whitener, mean, v, w, orig)
    var = np.sum(mix**2, axis=0) * np.sum(src**2, axis=1) / (src.shape[0] * src.shape[1] - 1)
    order = var.argsort()[::-1]
    return FittedICA(
        pre_whitener, mean, v, explained, n_comp, w[order, :], mix[:, order], int(n_iter)
    )


def find_outliers(scores: np.ndarray, *, threshold: float = 3.0, max_iter: int = 2) -> np.ndarray:
    """Indices whose |z-score| exceeds ``threshold``, z-scoring again without them.

    Parameters
    ----------
    scores : ndarray, shape (n,)
        E.g. correlations of components with a proxy.
    threshold : float
        |z| above which a score is an outlier.
    max_iter : int
        Rounds at most (each round z-scores the scores not yet flagged; stops when a round
        flags none).

    Returns
    -------
    ndarray of int
        Flagged indices, ascending (MNE's ``mne.preprocessing.bads._find_outliers``, two-sided,
        population standard deviation).
    """
    x = np.asarray(scores, float)
    mask = np.zeros(len(x), bool)
    for _ in range(max_iter):
        keep = x[~mask]
        with np.errstate(invalid="ignore", divide="ignore"):  # all equal: z NaN, none flagged
            z = np.abs(x - keep.mean()) / keep.std()
        bad = (z > threshold) & ~mask
        mask |= bad
        if not bad.any():
            break
    return np.flatnonzero(mask)


def _pearson_rows(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Pearson r of each row of ``a`` with the 1-d ``b`` (as ``scipy.stats.pearsonr``)."""
    am = a - a.mean(axis=1, keepdims=True)
    bm = b - b.mean()
    with np.errstate(invalid="ignore", divide="ignore"):  # a constant row: r NaN, as scipy
        am /= np.abs(am).max(axis=1, keepdims=True)
        bm /= np.abs(bm).max()
        r = (am / np.linalg.norm(am, axis=1, keepdims=True)) @ (bm / np.linalg.norm(bm))
    return np.clip(r, -1.0, 1.0)


def eog_scores(
    ica: FittedICA,
    data: np.ndarray,
    proxies: np.ndarray,
    sfreq: float,
    *,
    threshold: float = 3.0,
    l_freq: float = 1.0,
    h_freq: float = 10.0,
) -> tuple[list[int], np.ndarray]:
    """Components that follow EOG proxies (``ICA.find_bads_eog`` on continuous data).

    Parameters
    ----------
    ica : FittedICA
        From :func:`fit_ica`.
    data : ndarray, shape (n_ch, n_times)
        The fitted channels, same unit as the fit.
    proxies : ndarray, shape (n_proxies, n_times)
        EOG signals (e.g. vertical and horizontal).
    sfreq : float
        Sampling rate of ``data``, Hz.
    threshold : float
        z-score threshold of :func:`find_outliers` (MNE's default 3).
    l_freq, h_freq : float
        Band both are filtered to before correlating, Hz (MNE's defaults 1 and 10; 0.5 Hz
        transition bands, a 10-s firwin2 filter applied forwards and backwards).

    Returns
    -------
    flagged : list of int
        Flagged components, largest |r| first, each once (MNE's order).
    scores : ndarray, shape (n_proxies, n_components)
        Pearson r of every component with each proxy.
    """
    h = firwin2_bandpass(sfreq, l_freq, h_freq)
    sources = apply_fir(ica.sources(data), h, double=True)
    targets = apply_fir(np.array(proxies, dtype=np.float64, ndmin=2), h, double=True)
    scores = np.array([_pearson_rows(sources, t) for t in targets])
    idx = [find_outliers(sc, threshold=threshold) for sc in scores]
    flat = np.concatenate([sc[i] for sc, i in zip(scores, idx)])
    order = np.concatenate(idx)[np.abs(flat).argsort()[::-1]]
    flagged: list[int] = []
    for i in order:
        if int(i) not in flagged:
            flagged.append(int(i))
    return flagged, scores


__all__ = ["FittedICA", "fit_ica", "find_outliers", "eog_scores", "FASTICA_TOL"]
