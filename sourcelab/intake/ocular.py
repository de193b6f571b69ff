"""Ocular artefact correction (ICA with frontal EOG proxies, or regression on EOG channels).

Eye movements and blinks are the largest artefact of resting EEG and project onto the frontal
sites with a topography that sLORETA places in orbitofrontal cortex (BA10/11/47/25): left in the
data they appear as frontal "delta generators".  This module

* models the ocular topographies (:func:`ocular_templates`): each eye a current dipole (the
  corneo-retinal potential, cornea positive) whose change points up for blinks and vertical
  movements and sideways for horizontal movements, in an infinite homogeneous conductor —
  a first-order model (the skull, which it ignores, would confine the pattern further to the
  front).  On the real recording of the test suite the blink and horizontal-movement
  components found by ICA match these templates with |r| = 0.97 and 0.99;
* corrects the data (:func:`correct_ocular`): ICA (FastICA, :mod:`sourcelab.intake.ica`: the
  numbers of ``mne.preprocessing.ICA``) with the Fp1/Fp2 mean as a vertical and F8 - F7 as a
  horizontal EOG proxy, components flagged by the EOG scoring of ``ICA.find_bads_eog``
  (:func:`sourcelab.intake.ica.eog_scores`) *and* whose scalp map matches the ocular templates
  are removed; when
  real EOG channels exist, least-squares EOG regression instead (Croft & Barry 2000);
* checks what is left (:func:`ocular_residual`): the dominant delta-band topography compared
  with the ocular templates.

Pure functions over arrays (µV, positions in metres, head coordinates).

References
----------
Croft RJ, Barry RJ (2000). Removal of ocular artifact from the EEG: a review. Neurophysiol Clin
30:5-19.
Jung TP, Makeig S, Humphries C, et al. (2000). Removing electroencephalographic artifacts by
blind source separation. Psychophysiology 37:163-178.
Hyvärinen A (1999). Fast and robust fixed-point algorithms for independent component analysis.
IEEE Trans Neural Netw 10:626-634.
"""

from __future__ import annotations

import logging
import threading
import time
from dataclasses import dataclass, field

import numpy as np

from .._threads import thread_limits
from ..checks import check_option
from ..errors import InputError

logger = logging.getLogger("sourcelab")
_FIT_LOCK = threading.Lock()

#: Eyeball centres relative to the nasion, metres (head coordinates: x to the right ear, y to
#: the nasion, z up).  Adult anatomy, from memory: interpupillary distance ~63 mm, the globe
#: (diameter ~24 mm) centred ~25 mm behind and ~5 mm below the nasion.
EYE_OFFSET_M = ((-0.032, -0.025, -0.005), (0.032, -0.025, -0.005))
#: A scalp pattern is called ocular when its cosine with the (2-D) ocular template subspace is at
#: least this (after average reference).  Reasoning: for a random pattern in the 18-dimensional
#: average-reference space the squared cosine with a 2-D subspace is Beta(1, 8) distributed, so
#: P(cos >= 0.8) = (1 - 0.64)**8 = 3e-4; and the cortical sources whose maps reach 0.8 are
#: (computed on the shipped head model) the orbitofrontal BA10/11/47/25 sources, median cosine
#: 0.80-0.86, i.e. exactly where eye artefact is localised.  At 19 electrodes such a pattern
#: cannot be told apart from eye activity by its topography alone.
OCULAR_R = 0.8
#: Vertical proxy: mean of these sites; horizontal proxy: right minus left site.
VEOG_SITES = ("Fp1", "Fp2")
HEOG_SITES = ("F8", "F7")
#: ``find_bads_eog`` z-score threshold (MNE's default, adaptive z-scoring of the correlations).
EOG_Z = 3.0
#: ICA is fitted on at most FIT_SAMPLES_PER_COMPONENT2 x n_components² samples, evenly strided
#: over the usable data (FastICA is instantaneous: the order of samples does not matter).  Rule
#: of thumb for stable decompositions: at least 20-30 x n² samples (Onton & Makeig 2006, Prog
#: Brain Res 159:99-120 — from memory); 40 keeps the fit well under a second.
FIT_SAMPLES_PER_COMPONENT2 = 40
#: FastICA iterations.  Real EEG converged in 30-70 (the test recording); data dominated by
#: Gaussian background (simulations) never does, and more iterations only cost time.
MAX_ITER = 100
#: Components are scored against the proxies at about this sampling rate, Hz.
SCORE_HZ = 40.0
#: Below this many samples per component² no ICA is attempted.
MIN_SAMPLES_PER_COMPONENT2 = 20


@dataclass(frozen=True)
class OcularCorrection:
    """What ocular correction did.

    Attributes
    ----------
    method : {"ica", "regression", "off", "none found"}
        The route taken (``"off"`` also when ICA could not run; ``"none found"``: ICA ran and
        removed nothing).
    data : ndarray, shape (n_ch, n_times)
        Corrected signals, µV.
    removed : tuple of int
        Removed ICA component indices.
    mixing : ndarray, shape (n_ch, n_removed)
        Scalp maps (mixing-matrix columns, µV per unit source) of the removed components, or the
        regression weights (n_ch, n_eog) for ``"regression"``.
    template_r : tuple of float
        Cosine of each removed map with the ocular template subspace.
    eog_scores : dict
        Proxy -> correlation of every component's time course with it (``find_bads_eog``).
    n_components : int
        ICA components fitted (0 for regression or no ICA).
    fit_s : float
        Seconds of data the decomposition was fitted on.
    seconds : float
        Wall time of the correction.
    notes : tuple of str
        Warnings for the user (e.g. why no correction was possible).
    """

    method: str
    data: np.ndarray
    removed: tuple[int, ...] = ()
    mixing: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    template_r: tuple[float, ...] = ()
    eog_scores: dict = field(default_factory=dict)
    n_components: int = 0
    fit_s: float = 0.0
    seconds: float = 0.0
    notes: tuple[str, ...] = ()

    def summary(self) -> dict:
        """JSON-serialisable provenance (maps as lists, one per removed component).

        Returns
        -------
        dict
            ``method``, ``removed_components``, ``component_maps_uv`` (one list of n_ch values
            per column of ``mixing``, µV per unit source), ``template_r`` (4 decimals),
            ``n_components``, ``fit_s`` and ``seconds`` (s, 3 decimals) and ``notes``.
        """
        return {
            "method": self.method,
            "removed_components": [int(i) for i in self.removed],
            "component_maps_uv": [[float(v) for v in col] for col in self.mixing.T],
            "template_r": [round(float(r), 4) for r in self.template_r],
            "n_components": int(self.n_components),
            "fit_s": round(float(self.fit_s), 3),
            "seconds": round(float(self.seconds), 3),
            "notes": list(self.notes),
        }


def ocular_templates(ch_pos: np.ndarray, nasion: np.ndarray) -> np.ndarray:
    """Average-referenced scalp maps of vertical and horizontal eye activity.

    Parameters
    ----------
    ch_pos : ndarray, shape (n_ch, 3)
        Electrode positions, metres, head coordinates (x right, y nasion, z up).
    nasion : ndarray, shape (3,)
        Nasion position, same frame.

    Returns
    -------
    ndarray, shape (n_ch, 2)
        Unit-norm columns: vertical (both eye dipoles changing upwards; blinks and vertical
        movements, positive at Fp1/Fp2) and horizontal (both changing towards the right; F8
        positive, F7 negative).  Potential of a dipole p at r0 in an infinite homogeneous
        conductor: V(r) ∝ p·(r - r0) / |r - r0|³.
    """
    pos = np.asarray(ch_pos, float)
    out = np.zeros((len(pos), 2))
    for off in EYE_OFFSET_M:
        r = pos - (np.asarray(nasion, float) + np.asarray(off))
        d3 = np.linalg.norm(r, axis=1) ** 3
        out[:, 0] += r[:, 2] / d3
        out[:, 1] += r[:, 0] / d3
    out -= out.mean(axis=0)
    return out / np.linalg.norm(out, axis=0)


def subspace_cosine(patterns: np.ndarray, templates: np.ndarray) -> np.ndarray:
    """Cosine between average-referenced patterns and the span of ``templates``.

    Parameters
    ----------
    patterns : ndarray, shape (n_ch,) or (n_ch, n)
        Scalp maps (one per column), any unit; the channel mean is removed.
    templates : ndarray, shape (n_ch, k)
        Columns spanning the subspace, e.g. :func:`ocular_templates`; the channel mean is
        removed.

    Returns
    -------
    float or ndarray, shape (n,)
        A float for a 1-d ``patterns``; 0 for an all-constant pattern.
        1 when a pattern lies in the template subspace, 0 when orthogonal to it.
    """
    p = np.asarray(patterns, float)
    single = p.ndim == 1
    p = p.reshape(len(p), -1)
    p = p - p.mean(axis=0)
    q, _ = np.linalg.qr(np.asarray(templates, float) - np.asarray(templates).mean(axis=0))
    norm = np.linalg.norm(p, axis=0)
    c = np.linalg.norm(q.T @ p, axis=0) / np.where(norm > 0, norm, np.inf)
    return float(c[0]) if single else c


def _data_rank(x: np.ndarray) -> int:
    s = np.linalg.svd(x - x.mean(axis=1, keepdims=True), compute_uv=False)
    return int(np.sum(s > s[0] * 1e-6))


def correct_ocular(
    data_uv: np.ndarray,
    sfreq: float,
    ch_names,
    ch_pos: np.ndarray,
    nasion: np.ndarray,
    *,
    fit_mask: np.ndarray | None = None,
    eog_uv: np.ndarray | None = None,
    method: str = "auto",
    seed: int = 0,
    highpass_hz: float | None = None,
    overwrite: bool = False,
) -> OcularCorrection:
    """Remove ocular artefacts from continuous, band-passed EEG.

    Parameters
    ----------
    data_uv : ndarray, shape (n_ch, n_times)
        Filtered EEG, µV (any common reference).
    sfreq : float
        Hz.
    ch_names : sequence of str
        Must contain Fp1, Fp2, F7 and F8 for the ICA route.
    ch_pos : ndarray, shape (n_ch, 3)
        Electrode positions, head coordinates, metres.
    nasion : ndarray, shape (3,)
        Head coordinates, metres (for :func:`ocular_templates`).
    fit_mask : ndarray of bool, shape (n_times,), optional
        Samples to learn from (outside procedures, bad spans and gross artefact); all if None.
    eog_uv : ndarray, shape (n_eog, n_times), optional
        Real EOG channels, µV (filtered like ``data_uv``).
    method : {"auto", "ica", "regression", "off"}
        ``"auto"``: regression when ``eog_uv`` is given, else ICA.
    seed : int
        ICA random state (results are reproducible).
    highpass_hz : float, optional
        High-pass edge already applied to ``data_uv``, Hz (accepted for callers; MNE used it
        only to advise >= 1 Hz, a warning the pipeline silenced).
    overwrite : bool
        Remove ICA components from ``data_uv`` in place (the caller's own float64 array: no
        second copy of the recording); by default ``data_uv`` is left unchanged.

    Returns
    -------
    OcularCorrection
        The corrected data (µV) and what was done.  ``method="off"``, and an ICA route that
        cannot run (Fp1/Fp2/F7/F8 missing, data rank below 3, too few samples), return the
        data unchanged with ``method`` ``"off"`` (the reason in ``notes``).

    Raises
    ------
    InputError
        When ``method`` is unknown, or ``"regression"`` without ``eog_uv``.

    Notes
    -----
    ICA: FastICA (Hyvärinen 1999) as ``mne.preprocessing.ICA`` computes it
    (:func:`sourcelab.intake.ica.fit_ica`, the same matrices) on as many components as
    the data's rank, fitted on evenly strided samples of ``fit_mask`` (at most 40 n²).
    A component is removed when ``find_bads_eog`` flags it against a proxy (|z| > 3 of the
    correlations, MNE's adaptive rule) and its scalp map is ocular (cosine with the template
    subspace ≥ :data:`OCULAR_R`); the second test keeps frontal brain components that merely
    correlate with the proxies.  Regression: ordinary least squares of every site on the EOG
    channels over ``fit_mask`` (the regression family reviewed by Croft & Barry 2000), the
    fitted EOG contribution is subtracted everywhere.
    """
    t0 = time.perf_counter()
    data = np.asarray(data_uv, float)
    n_ch, n_t = data.shape
    mask = np.ones(n_t, bool) if fit_mask is None else np.asarray(fit_mask, bool)
    check_option("method", method, ("auto", "ica", "regression", "off"))
    if method == "off":
        return OcularCorrection("off", data)
    if method == "regression" or (method == "auto" and eog_uv is not None and len(eog_uv)):
        if eog_uv is None or not len(eog_uv):
            raise InputError("method: 'regression' needs EOG channels (eog_uv)", field="method")
        return _regress(data, np.asarray(eog_uv, float), mask, sfreq, t0)
    names = list(ch_names)
    missing = [s for s in VEOG_SITES + HEOG_SITES if s not in names]
    if missing:
        return OcularCorrection(
            "off",
            data,
            notes=(f"no ocular correction: sites {missing} missing for the EOG proxies",),
        )
    templates = ocular_templates(ch_pos, nasion)
    idx = np.flatnonzero(mask)
    n_comp = min(_data_rank(data[:, idx[:: max(1, len(idx) // 20000)]]), n_ch)
    min_samples = MIN_SAMPLES_PER_COMPONENT2 * n_comp**2
    if n_comp < 3:
        return OcularCorrection(
            "off",
            data,
            notes=(f"no ocular correction: the data have rank {n_comp}, too low for ICA",),
        )
    if len(idx) < min_samples:
        return OcularCorrection(
            "off",
            data,
            notes=(
                f"no ocular correction: {len(idx)} samples to learn from, ICA of {n_comp} "
                f"components needs about {min_samples}",
            ),
        )
    from .ica import eog_scores, fit_ica
    from .iir import butter_lowpass_sos, sosfiltfilt

    step = max(1, len(idx) // (FIT_SAMPLES_PER_COMPONENT2 * n_comp**2))
    # the usable samples are taken row by row, never as a copy of every row at once (memory)
    veog = data[[names.index(s) for s in VEOG_SITES]][:, idx].mean(axis=0)
    heog = data[names.index(HEOG_SITES[0]), idx] - data[names.index(HEOG_SITES[1]), idx]
    # fitted on evenly strided samples (FastICA ignores the order of samples), in volts as MNE
    fit_v = data[:, idx[::step]] * 1e-6
    # ... and scored on a low-passed, decimated copy (the scoring filters to 1-10 Hz anyway;
    # this makes its filtering ~20x cheaper)
    q = max(1, int(sfreq // SCORE_HZ))
    sos = butter_lowpass_sos(4, min(12.0, 0.4 * sfreq / q), sfreq)
    # row by row (each row is filtered independently: the same numbers, without holding the
    # filter's padded copies of every row at once)
    # filtered and decimated into one preallocated array (a decimated view of each filtered
    # row would keep the whole filtered row alive: 21 full-length rows at once, memory)
    rows = (*(data[c, idx] for c in range(n_ch)), veog, heog)
    low = np.empty((n_ch + 2, -(-len(idx) // q)))
    for i, row in enumerate(rows):
        low[i] = sosfiltfilt(sos, row)[::q]
    low *= 1e-6
    del veog, heog
    # one BLAS thread: the matrices are small (n_comp x ~15,000) and several threads spin
    # against each other on a shared machine (measured: 4.4 s -> 0.9 s wall for 100 iterations)
    # the lock: the thread limit is process-wide, so two threads (Dask's threaded workers) must
    # not interleave theirs, or one restores the other's pools mid-fit
    with _FIT_LOCK, thread_limits():
        ica = fit_ica(fit_v, n_components=n_comp, max_iter=MAX_ITER, seed=seed)
        flagged, scores = eog_scores(ica, low[:n_ch], low[n_ch:], sfreq / q, threshold=EOG_Z)
    maps = ica.get_components() * 1e6  # (n_ch, n_comp), µV per unit source
    cos = subspace_cosine(maps, templates)
    removed = tuple(sorted(int(i) for i in flagged if cos[int(i)] >= OCULAR_R))
    notes: list[str] = []
    kept_flagged = sorted(int(i) for i in flagged if cos[int(i)] < OCULAR_R)
    if kept_flagged:
        logger.info(
            "ICA components %s correlate with the frontal EOG proxies but their scalp "
            "maps are not ocular (cosine < %g); kept",
            kept_flagged,
            OCULAR_R,
        )
    eog_scores = {
        "VEOG": [round(float(v), 4) for v in scores[0]],
        "HEOG": [round(float(v), 4) for v in scores[-1]],
    }
    if not removed:
        return OcularCorrection(
            "none found",
            data,
            (),
            np.zeros((n_ch, 0)),
            (),
            eog_scores,
            n_comp,
            len(idx) / sfreq,
            time.perf_counter() - t0,
            tuple(notes),
        )
    corrected = remove_components(ica, data, removed, out=data if overwrite else None)
    return OcularCorrection(
        "ica",
        corrected,
        removed,
        maps[:, list(removed)],
        tuple(float(cos[i]) for i in removed),
        eog_scores,
        n_comp,
        len(idx) / sfreq,
        time.perf_counter() - t0,
        tuple(notes),
    )


def remove_components(ica, data_uv: np.ndarray, removed, *, out=None) -> np.ndarray:
    """``x - A_r S_r``: the data without the ``removed`` components of a fitted ICA.

    Parameters
    ----------
    ica : sourcelab.intake.ica.FittedICA or mne.preprocessing.ICA
        Fitted on EEG in volts (all channels of one type, so one pre-whitening scale).
    data_uv : ndarray, shape (n_ch, n_times)
        µV.
    removed : sequence of int
        Component indices to remove (empty: a copy of the data).
    out : ndarray, shape (n_ch, n_times), optional
        Where to write the result (may be ``data_uv`` itself: corrected in place).

    Returns
    -------
    ndarray, shape (n_ch, n_times)
        µV.  Equal to ``ica.apply`` with ``exclude=removed`` and all PCA components kept when
        ``n_components`` is the data's rank (checked in the tests).
    """
    r = list(removed)
    if not r:
        if out is None:
            return np.array(data_uv, float)
        out[...] = data_uv
        return out
    pw = ica.pre_whitener_.ravel()
    pca = ica.pca_components_[: ica.n_components_]
    unmix = (ica.unmixing_matrix_ @ pca) / pw[None, :]  # sources from volts
    mix = pw[:, None] * (pca.T @ ica.mixing_matrix_)
    mean_uv = (ica.pca_mean_ * pw)[:, None] * 1e6
    data_uv = np.asarray(data_uv, float)
    out = np.empty_like(data_uv) if out is None else out
    # a block of samples at a time (each column is transformed on its own: the same numbers,
    # without three full-length working copies)
    for s in range(0, data_uv.shape[1], _REMOVE_BLOCK):
        x = data_uv[:, s : s + _REMOVE_BLOCK]
        out[:, s : s + _REMOVE_BLOCK] = x - mix[:, r] @ (unmix[r] @ (x - mean_uv))
    return out


#: Samples transformed at once by :func:`remove_components` (bounds its working memory).
_REMOVE_BLOCK = 65536


def _regress(
    data: np.ndarray, eog: np.ndarray, mask: np.ndarray, sfreq: float, t0: float
) -> OcularCorrection:
    e = eog[:, mask] - eog[:, mask].mean(axis=1, keepdims=True)
    x = data[:, mask] - data[:, mask].mean(axis=1, keepdims=True)
    beta = np.linalg.lstsq(e.T, x.T, rcond=None)[0].T  # (n_ch, n_eog)
    corrected = data - beta @ (eog - eog[:, mask].mean(axis=1, keepdims=True))
    return OcularCorrection(
        "regression", corrected, (), beta, (), {}, 0, mask.sum() / sfreq, time.perf_counter() - t0
    )


def principal_pattern(csd: np.ndarray) -> tuple[np.ndarray, float]:
    """Dominant topography of a band cross-spectrum after average reference.

    Parameters
    ----------
    csd : ndarray, shape (n_ch, n_ch)
        Band cross-spectral (or covariance) matrix, µV².

    Returns
    -------
    pattern : ndarray, shape (n_ch,)
        Unit-norm first eigenvector of the real part, sign chosen so the largest entry is > 0.
    share : float
        Its fraction of the band's total power (trace of the average-referenced matrix).
    """
    c = np.real(np.asarray(csd))
    n = len(c)
    p = np.eye(n) - 1.0 / n
    c = p @ c @ p
    w, v = np.linalg.eigh((c + c.T) / 2)
    vec = v[:, -1]
    vec = vec * np.sign(vec[np.argmax(np.abs(vec))])
    return vec, float(w[-1] / max(np.trace(c), 1e-30))


def ocular_residual(csd_band: np.ndarray, templates: np.ndarray) -> dict:
    """Does the dominant slow-wave topography still look ocular?

    Parameters
    ----------
    csd_band : ndarray, shape (n_ch, n_ch)
        Delta-band cross-spectrum of the clean epochs (real part used), µV².
    templates : ndarray, shape (n_ch, 2)
        From :func:`ocular_templates`.

    Returns
    -------
    dict
        ``r`` (cosine of the principal pattern with the template subspace), ``share`` (its
        fraction of band power), ``ocular`` (``r >= OCULAR_R``), ``threshold``
        (:data:`OCULAR_R`), ``pattern`` (list, unit norm).
    """
    pattern, share = principal_pattern(csd_band)
    r = subspace_cosine(pattern, templates)
    return {
        "r": round(float(r), 4),
        "share": round(share, 4),
        "ocular": bool(r >= OCULAR_R),
        "threshold": OCULAR_R,
        "pattern": [round(float(v), 5) for v in pattern],
    }


__all__ = [
    "OcularCorrection",
    "ocular_templates",
    "subspace_cosine",
    "correct_ocular",
    "principal_pattern",
    "ocular_residual",
    "OCULAR_R",
]
