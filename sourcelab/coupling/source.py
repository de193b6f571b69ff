"""Coupling between cortical networks and lobes from fixed ROI spatial filters.

Why networks and lobes, not 84 areas: average-referenced 19-channel data have at most 18
independent signals, so 84 area signals are linear combinations of 18 and their pairwise coupling
is mostly the inverse's blur.  The default atlases here are partitions with 12-16 ROIs.

ROI filters
-----------
For ROI ``r`` with kernel rows ``K_r`` (all sLORETA rows of its sources, ``|r| n_comp`` x
``n_ch``), the filter ``w_r`` (1 x ``n_ch``) is the leading right singular vector of ``K_r``
scaled by ``σ_1 / sqrt(|r|)``.  It is the sensor combination that carries most of the ROI's
mean standardised power for spatially white data: ``‖w_r‖² = σ_1² / |r|`` against the ROI mean
power ``tr(M_r) = Σσ_k² / |r|`` (``M_r`` of :func:`sourcelab.inverse.roi_power_matrices`); the
fraction ``σ_1² / Σ σ_k²`` is reported as ``filter_share``.  This is the PCA ROI signal used for
ROI connectivity (e.g. MNE's ``extract_label_time_course(mode="pca_flip")``), computed once from
the kernel instead of from the data, so every recording and every norm uses the same filters.
Sign: a singular vector's sign is arbitrary, and cortical sources of one ROI point in different
directions; the sign is chosen so that the filter correlates positively with the ROI's sources
after flipping those whose normal opposes the ROI's dominant normal (MNE's ``label_sign_flip``
idea): ``Σ_i s_i (n_i · K_i) w_rᵀ > 0``, ``s_i = sign(n_i · n̄)``.  Only the phase and lag of an
edge depend on the sign.

ROI Fourier coefficients are ``W X`` (``W`` = stacked filters), so ROI cross-spectra are
``W C Wᵀ`` (:func:`roi_cross_spectra`; ``W`` is real) and every sensor measure of
:mod:`.measures` applies unchanged.

Leakage expected at each edge
-----------------------------
*Coherence.*  If every cortical source carried independent unit-variance activity (the prior of
the minimum-norm kernel), the sensor cross-spectrum would be
the real ``C₀ = s P G Gᵀ P`` (``s = (n_ch - 1)/tr(P G Gᵀ P)``, the trace normalisation of
:mod:`sourcelab.inverse.sloreta`; :func:`independent_source_covariance`; noise-free, which gives
the largest coherence blur of white sources can produce), the ROI cross-spectrum
``W C₀ Wᵀ`` and the edge coherence ``(w_a C₀ w_bᵀ)² / ((w_a C₀ w_aᵀ)(w_b C₀ w_bᵀ))``: the
magnitude-squared coherence that cross-talk alone produces (``leakage_expected`` of ``msc``).
*Lagged measures.*  ``C₀`` is real: leakage never makes an imaginary part, so lagged coherence,
lagged phase synchronisation and the imaginary coherency are zero in expectation under any
instantaneous mixing; their finite-sample null is the conjugation randomisation of
:func:`sourcelab.coupling.measures.conjugation_null` (mean and 95th percentile).
*Orthogonalised envelope correlation.*  For jointly Gaussian ROI signals with real cross-spectrum
(leakage of independent sources), the part of ``b`` orthogonal to ``a``, ``Im(b ā/|a|)``, is
independent of ``|a|``, so the expected value is 0; its sampling spread is estimated from the
per-epoch contributions (epochs as independent blocks), and ``leakage_q95`` is 1.96 of those
standard errors.  Amplitude-modulated (non-Gaussian) sources can leave "ghost" envelope coupling
after orthogonalisation when three or more sources mix (Palva et al. 2018), which this expectation
does not include.

References
----------
Pascual-Marqui RD et al. (2011).  Phil Trans R Soc A 369:3768-3784 (lagged phase
synchronisation and lagged coherence between ROI signals).
Hipp JF, Hawellek DJ, Corbetta M, Siegel M, Engel AK (2012).  Large-scale cortical correlation
structure of spontaneous oscillatory activity.  Nat Neurosci 15:884-890.
Brookes MJ, Woolrich MW, Barnes GR (2012).  Measuring functional connectivity in MEG: a
multivariate approach insensitive to linear source leakage.  NeuroImage 63:910-920 (from memory).
Palva JM, Wang SH, Palva S, et al. (2018).  Ghost interactions in MEG/EEG source space.
NeuroImage 173:632-643 (from memory).
Hauk O, Stenroos M, Treder MS (2019).  NeuroImage 186 (cross-talk of linear inverses; from
memory).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from dataclasses import dataclass

import weakref

import numpy as np

if TYPE_CHECKING:  # pandas is imported where tables are built
    import pandas as pd

from ..config import Bands
from .._docs import fill_doc
from ..errors import InputError
from ..spectra import band_bin_indices
from .measures import (
    LAGGED_MEASURES,
    CouplingResult,
    _quantile,
    band_coupling,
    bootstrap_weights,
    one_blas_thread,
    pair_statistics_from_fourier,
)
from .sensor import (
    ESTIMATE_COLUMNS,
    LEAKAGE_COLUMNS,
    MEASURE_UNITS,
    _boolean,
    leakage_arrays,
    msc_from_covariance,
)

#: Atlases coupled by default (partitions; ``networks`` per hemisphere, bilateral ROIs dropped).
COUPLING_ATLASES = ("lobes", "yeo7", "networks")
#: Edge measures, in table order.
EDGE_MEASURES = ("msc", "imcoh", "lagcoh", "lps", "lag_ms", "aec_orth")
#: The columns naming an edge's two ROIs.
EDGE_ROI_COLUMNS = ("roi_a", "hemisphere_a", "roi_b", "hemisphere_b")
#: Columns of :func:`coupling_table`, in order.
EDGE_COLUMNS = (
    "atlas",
    "edge",
    *EDGE_ROI_COLUMNS,
    *ESTIMATE_COLUMNS,
    *LEAKAGE_COLUMNS,
    "filter_share_a",
    "filter_share_b",
    "shared_sources",
    "n_epochs",
    "z",
)
#: What each column of :func:`coupling_table` holds.
EDGE_COLUMN_NOTES = {
    "atlas": "atlas of the two ROIs",
    "edge": "'roi_a.hemisphere_a|roi_b.hemisphere_b'",
    "roi_a": "first ROI (a) of the edge",
    "hemisphere_a": "hemisphere of ROI a",
    "roi_b": "second ROI (b) of the edge",
    "hemisphere_b": "hemisphere of ROI b",
    "unit": "unit or range of value",
    "band": "frequency band",
    "measure": "coupling measure (see unit)",
    "value": "estimate from all clean epochs",
    "value_lo": "lower end of the bootstrap interval over epochs",
    "value_hi": "upper end of the bootstrap interval over epochs",
    "leakage_expected": "value expected from the inverse's blur alone (independent sources)",
    "leakage_q95": "95th percentile of the value under blur alone",
    "leakage_explained": "blur alone can explain the value",
    "filter_share_a": "share of ROI a's power captured by its spatial filter",
    "filter_share_b": "share of ROI b's power captured by its spatial filter",
    "shared_sources": "number of sources belonging to both ROIs",
    "n_epochs": "clean epochs behind the estimate",
    "z": "z-score against norms",
}


@dataclass(frozen=True, eq=False)
class RoiFilters:
    """Fixed spatial filters of one atlas's ROIs.

    Attributes
    ----------
    atlas : str
    names, hemispheres : tuple of str
    weights : ndarray, shape (n_rois, n_ch)
        ``W``: ROI signal = ``W x`` for sensor data ``x`` (any reference).
    share : ndarray, shape (n_rois,)
        ``σ_1² / Σ σ_k²`` of each ROI's kernel rows.
    vertices : tuple of int arrays
    """

    atlas: str
    names: tuple[str, ...]
    hemispheres: tuple[str, ...]
    weights: np.ndarray
    share: np.ndarray
    vertices: tuple

    def shared_sources(self) -> np.ndarray:
        """Sources common to ROI a and ROI b, shape (n_rois, n_rois) (diagonal: ROI sizes).

        Returns
        -------
        ndarray of int64, shape (n_rois, n_rois)
            Symmetric; entry ``(a, b)`` counts the sources in both ROIs.
        """
        from scipy import sparse

        rows = np.concatenate([np.full(len(v), i) for i, v in enumerate(self.vertices)])
        cols = np.concatenate(self.vertices)
        m = sparse.csr_matrix(
            (np.ones(rows.size), (rows, cols)), shape=(len(self.vertices), int(cols.max()) + 1)
        )
        return np.asarray((m @ m.T).toarray(), dtype=np.int64)


def _fixed_gain(gain: np.ndarray, n_src: int, normals) -> np.ndarray:
    gain = np.asarray(gain, dtype=float)
    if gain.shape[1] == n_src:
        return gain
    if gain.shape[1] == 3 * n_src and normals is not None:
        return np.einsum("csk,sk->cs", gain.reshape(gain.shape[0], n_src, 3), normals)
    raise InputError(
        f"gain: {gain.shape[1]} columns do not fit {n_src} fixed sources "
        "(pass normals with a free-orientation gain)"
    )


def independent_source_covariance(gain: np.ndarray, *, noise: float = 0.0) -> np.ndarray:
    """Sensor covariance of independent unit-variance cortical sources (volume conduction).

    ``C₀ = s P G Gᵀ P + noise · P`` with ``s = (n_ch - 1) / tr(P G Gᵀ P)``: the trace
    normalisation of :func:`sourcelab.inverse.sloreta.sloreta_operator`, in which the inverse's own
    prior is ``noise = λ²``.  The default ``noise = 0`` gives the largest coherence that blur of
    spatially white independent sources can produce (added independent noise only lowers
    coherence), which makes ``leakage_explained`` of ``msc`` a conservative flag.

    Parameters
    ----------
    gain : ndarray, shape (n_ch, n_cols)
        Leadfield of the activity model (fixed: one column per source, e.g.
        ``HeadModel.gain_fixed``; free: three per source).
    noise : float
        White sensor-noise variance relative to the normalised signal (e.g. λ² = 1/SNR²).

    Returns
    -------
    ndarray, shape (n_ch, n_ch), real symmetric
        ``C₀``, in the trace-normalised units above (not µV²); rank ``n_ch - 1``.  For a
        read-only gain (the head model's) it is computed once and returned read-only, like the
        inverse operator: it is fixed per head model.
    """
    key = (id(gain), float(noise))
    hit = _C0_CACHE.get(key)
    if hit is not None and hit[0]() is gain:
        return hit[1]
    g = np.asarray(gain, dtype=float)
    n = g.shape[0]
    p = np.eye(n) - 1.0 / n
    pg = p @ g
    c = pg @ pg.T
    c0 = c * ((n - 1) / np.trace(c)) + float(noise) * p
    if isinstance(gain, np.ndarray) and not gain.flags.writeable:
        c0.setflags(write=False)
        _C0_CACHE[key] = (weakref.ref(gain), c0)
    return c0


#: Volume-conduction covariances of read-only leadfields: (id, noise) -> (weakref, C₀).
_C0_CACHE: dict = {}


#: Per-operator cache of ROI filters (operators are immutable; filters depend only on them).
_FILTER_CACHE: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()


def roi_filters(
    op, atlas, *, normals: np.ndarray | None = None, drop_bilateral: bool = True
) -> RoiFilters:
    """Leading-singular-vector spatial filters of an atlas's ROIs (see the module docstring).

    Parameters
    ----------
    op : SourceOperator
        ``kernel`` (n_src * n_comp, n_ch), ``n_src``, ``n_comp``.
    atlas : Atlas
        ``rois`` with ``name``, ``hemisphere``, ``vertices`` (indices into the operator's
        sources).
    normals : ndarray, shape (n_src, 3), optional
        Source normals for the sign convention (without them: sign of the plain row sum).
    drop_bilateral : bool
        Leave out ROIs with ``hemisphere == "both"`` (they overlap their halves).

    Returns
    -------
    RoiFilters
        Cached per operator and atlas object.
    """
    key = (id(atlas), bool(drop_bilateral), normals is None)
    try:
        hit = _FILTER_CACHE[op].get(key)
        if hit is not None and hit[0] is atlas:
            return hit[1]
    except (KeyError, TypeError):
        pass
    k = np.asarray(op.kernel, dtype=float).reshape(op.n_src, op.n_comp, -1)
    rois = [r for r in atlas.rois if not (drop_bilateral and r.hemisphere == "both")]
    if not rois:
        raise InputError(f"atlas {atlas.name!r}: no ROIs to couple")
    w = np.empty((len(rois), k.shape[-1]))
    share = np.empty(len(rois))
    for i, roi in enumerate(rois):
        v = np.asarray(roi.vertices, dtype=np.int64)
        if v.size == 0 or v.max() >= op.n_src:
            raise InputError(f"ROI {roi.name!r}: vertices outside the operator's sources")
        kr = k[v].reshape(-1, k.shape[-1])
        ev, vec = np.linalg.eigh(kr.T @ kr)  # right singular vectors of K_r
        sv2 = np.clip(ev[::-1], 0.0, None)
        wi = vec[:, -1] * np.sqrt(sv2[0] / v.size)
        if normals is not None:
            nn = np.asarray(normals, dtype=float)[v]
            nbar = np.linalg.svd(nn, full_matrices=False)[2][0]
            flip = np.sign(nn @ nbar)
            flip[flip == 0] = 1.0
            rows = k[v, 0] if op.n_comp == 1 else np.einsum("sk,skc->sc", nn, k[v])
            score = np.sum(flip * (rows @ wi))
        else:
            score = np.sum(kr @ wi)
        w[i] = wi if score >= 0 else -wi
        share[i] = sv2[0] / np.sum(sv2)
    w.setflags(write=False)
    out = RoiFilters(
        atlas=atlas.name,
        names=tuple(r.name for r in rois),
        hemispheres=tuple(r.hemisphere for r in rois),
        weights=w,
        share=share,
        vertices=tuple(np.asarray(r.vertices) for r in rois),
    )
    try:
        _FILTER_CACHE.setdefault(op, {})[key] = (atlas, out)
    except TypeError:  # an operator that cannot be weakly referenced: no caching
        pass
    return out


def roi_cross_spectra(csd: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """``W C Wᵀ`` per epoch and bin.

    Parameters
    ----------
    csd : ndarray, shape (..., n_ch, n_ch), complex
    weights : ndarray, shape (n_rois, n_ch), real

    Returns
    -------
    ndarray, shape (..., n_rois, n_rois), complex
        ``W C Wᵀ``, in the unit of ``csd`` times the squared filter unit.
    """
    w = np.asarray(weights)
    return np.einsum("rc,...cd,sd->...rs", w, csd, w, optimize=True)


def roi_fourier(spec: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """ROI Fourier coefficients ``W X``.

    Parameters
    ----------
    spec : ndarray, shape (n_epochs, n_ch, n_bins), complex
        Scaled sensor coefficients (:func:`sourcelab.spectra.epoch_fourier`).
    weights : ndarray, shape (n_rois, n_ch), real
        ROI spatial filters (:attr:`RoiFilters.weights`).

    Returns
    -------
    ndarray, shape (n_epochs, n_rois, n_bins), same complex dtype as ``spec``
        ROI coefficients for :func:`sourcelab.coupling.pair_statistics_from_fourier`.
    """
    spec = np.asarray(spec)
    w = np.asarray(weights, dtype=np.float32 if spec.dtype == np.complex64 else float)
    return np.matmul(w.astype(spec.dtype), spec)


def edge_leakage_msc(weights: np.ndarray, null_cov: np.ndarray) -> np.ndarray:
    """Coherence expected from leakage alone, ``(w_a C₀ w_bᵀ)² / (w_a C₀ w_aᵀ w_b C₀ w_bᵀ)``.

    Parameters
    ----------
    weights : ndarray, shape (n_rois, n_ch)
        ROI spatial filters.
    null_cov : ndarray, shape (n_ch, n_ch)
        Sensor covariance of independent sources (:func:`independent_source_covariance`).

    Returns
    -------
    ndarray, shape (n_rois, n_rois)
        In [0, 1]; the diagonal is 1.
    """
    c = np.asarray(weights) @ np.asarray(null_cov) @ np.asarray(weights).T
    d = np.diag(c)
    return c * c / np.outer(d, d)


# --------------------------------------------------------------------------------------------
# orthogonalised amplitude-envelope correlation


def band_analytic(
    spec_plain: np.ndarray, band_bins: np.ndarray, *, samples_per_epoch: int | None = None
) -> np.ndarray:
    """Band-limited analytic signals of each epoch from its (untapered) Fourier coefficients.

    The analytic signal of the epoch band-passed to the band's bins (an FFT brick-wall filter,
    circular within the epoch) is ``a(t) = Σ_k X_k e^{i 2π k t / N}`` over the band's bins.
    Shifting every signal by the band's lowest bin leaves ``|a|`` and ``Im(b ā)`` unchanged, so
    envelopes and orthogonalisation can be evaluated on ``M`` points per epoch, exactly at those
    instants, with an M-point inverse FFT: ``M = n_times`` reproduces the full-rate signal;
    the default ``M = 4 n_bins`` (at least 16) samples the envelope at twice the rate of its
    highest frequency (``|a|²`` has bandwidth ``< n_bins`` cycles per epoch).

    Parameters
    ----------
    spec_plain : ndarray, shape (n_epochs, n_nodes, n_bins_all), complex
        Untapered coefficients (:func:`sourcelab.spectra.epoch_fourier` with ``taper=False``)
        or ROI coefficients ``W X`` of them.
    band_bins : ndarray of int
        Positions of the band's bins in the last axis (contiguous).
    samples_per_epoch : int, optional
        ``M``.

    Returns
    -------
    ndarray, shape (n_epochs, n_nodes, M), complex
        Analytic signals up to a constant scale; single precision for single-precision
        input.  A transposed view of node-major memory (``.transpose(1, 0, 2)`` is contiguous).
    """
    idx = np.asarray(band_bins, dtype=np.int64)
    nb = idx.size
    m = int(samples_per_epoch) if samples_per_epoch else max(16, 4 * nb)
    if m < nb:
        raise InputError(f"samples_per_epoch: need at least {nb} for this band")
    # node-major memory (n_nodes, n_epochs, M), the layout envelope_moments works in; each row's
    # transform is the same in any layout
    n_ep, n = spec_plain.shape[:2]
    x = np.zeros((n, n_ep, m), dtype=np.result_type(spec_plain.dtype, np.complex64))
    x[..., :nb] = spec_plain.transpose(1, 0, 2)[..., idx]
    return (np.fft.ifft(x, axis=-1) * m).astype(x.dtype, copy=False).transpose(1, 0, 2)


#: Elements of the (nodes, epochs, samples) temporaries of :func:`envelope_moments` per block
#: (1 MB of single precision: cache-sized).
_ENVELOPE_BLOCK = 256_000


def envelope_moments(analytic: np.ndarray) -> dict[str, np.ndarray]:
    """Per-epoch sums behind the orthogonalised envelope correlation of every directed pair.

    For the ordered pair (``i`` orthogonalised to ``j``): ``o = |Im(a_i ā_j / |a_j|)|`` and
    ``y = |a_j|``; per epoch the sums of ``o``, ``o²``, ``y``, ``y²``, ``o y`` and the count.

    Parameters
    ----------
    analytic : ndarray, shape (n_epochs, n_nodes, M), complex

    Returns
    -------
    dict
        ``so, soo, soy``: shape (n_epochs, n_nodes i, n_nodes j); ``sy, syy``: shape
        (n_epochs, n_nodes j); ``m``: samples per epoch.
    """
    a = np.asarray(analytic)
    n_ep, n, m = a.shape
    # node-major (n, n_ep, M): the nodes j > i of node i are one contiguous slab
    at = np.ascontiguousarray(a.transpose(1, 0, 2))
    mag = np.abs(at)
    # the phase factor a/|a| (0 where a = 0) as real parts times 1/|a|: numpy's complex division
    # by a real multiplies by the reciprocal, so the same numbers, ~3x faster than a masked
    # complex division
    with np.errstate(divide="ignore", invalid="ignore"):
        inv = np.divide(np.ones((), dtype=mag.dtype), mag)
    inv[~(mag > 0)] = 0.0
    ur, ui = np.multiply(at.real, inv), np.multiply(at.imag, inv)  # contiguous outputs
    del inv, at
    # o_ij = |Im(a_i conj(u_j))| = |a_i| s_ij with s_ij = |sin(phase_i - phase_j)| symmetric, so
    # one pass over the upper triangle (i < j) gives both directions (o_ji = |a_j| s_ij), and
    # Σ o_ij |a_j| = Σ o_ji |a_i| = Σ |a_i| |a_j| s_ij: half the products of all ordered pairs.
    # Node i against the nodes j > i (a contiguous slab in the node-major layout: no copies),
    # a block of epochs at a time whose (j, e, M) arrays stay cache-sized
    # (:data:`_ENVELOPE_BLOCK`); each per-epoch sum runs over one contiguous row of M samples, as
    # in any layout (the same numbers).  Per-epoch sums of at most a few hundred samples in the
    # input precision, epochs pooled in float64.
    so, soo, soy = (np.zeros((n, n, n_ep)) for _ in range(3))  # (i, j, epoch)
    step = max(1, _ENVELOPE_BLOCK // max(1, (n - 1) * m))
    for s0 in range(0, n_ep, step):
        e = slice(s0, s0 + step)
        for i in range(n - 1):
            j = slice(i + 1, n)
            o = ui[i, e] * ur[j, e]
            o -= ur[i, e] * ui[j, e]
            np.abs(o, out=o)  # s_ij
            mj = mag[j, e]
            t = o * mag[i, e]  # o_ij
            so[i, j, e] = t.sum(-1)
            soo[i, j, e] = np.einsum("jem,jem->je", t, t)
            soy[i, j, e] = np.einsum("jem,jem->je", t, mj)
            np.multiply(o, mj, out=o)  # o_ji
            so[j, i, e] = o.sum(-1)
            soo[j, i, e] = np.einsum("jem,jem->je", o, o)
    iu, ju = np.triu_indices(n, 1)
    soy[ju, iu] = soy[iu, ju]
    # back to epoch-major, contiguous (a node orthogonalised to itself: o = 0, never used)
    so, soo, soy = (np.ascontiguousarray(x.transpose(2, 0, 1)) for x in (so, soo, soy))
    sy, syy = (np.ascontiguousarray(x.sum(-1, dtype=float).T) for x in (mag, mag * mag))
    return {"so": so, "soo": soo, "soy": soy, "sy": sy, "syy": syy, "m": m}


def aec_from_moments(mom: dict, weights: np.ndarray | None = None) -> np.ndarray:
    """Orthogonalised envelope correlation from per-epoch moments, symmetrised.

    The Pearson correlation over all samples of the (weighted) epochs between ``|a_j|`` and the
    envelope of ``a_i`` orthogonalised to ``a_j``, then averaged over the two directions
    (Hipp et al. 2012).  Signed (MNE's ``absolute=False``).

    Parameters
    ----------
    mom : dict
        From :func:`envelope_moments`.
    weights : ndarray, shape (n_rep, n_epochs), optional
        Epoch weights summing to 1 (bootstrap); default equal weights.

    Returns
    -------
    ndarray, shape (n_rep, n_nodes, n_nodes)
        Symmetric correlations in [-1, 1]; diagonal NaN.
    """
    n_ep, n = mom["so"].shape[:2]
    w = np.full((1, n_ep), 1.0 / n_ep) if weights is None else np.asarray(weights, float)
    # all five weighted sums in one matrix product
    names = ("so", "soo", "soy", "sy", "syy")
    stacked = np.concatenate([mom[k].reshape(n_ep, -1) for k in names], axis=1)
    parts = np.split(w @ stacked, np.cumsum([n * n, n * n, n * n, n])[:4], axis=1)
    so, soo, soy = (x.reshape(-1, n, n) for x in parts[:3])
    sy, syy = parts[3][:, None, :], parts[4][:, None, :]
    m = float(mom["m"])
    cov = soy / m - (so / m) * (sy / m)
    vo = soo / m - (so / m) ** 2
    vy = syy / m - (sy / m) ** 2
    with np.errstate(invalid="ignore", divide="ignore"):
        r = cov / np.sqrt(vo * vy)
    r = (r + r.transpose(0, 2, 1)) / 2.0
    idx = np.arange(r.shape[1])
    r[:, idx, idx] = np.nan
    return r


def aec_block_se(mom: dict) -> np.ndarray:
    """Standard error of the symmetrised orthogonalised AEC with epochs as independent blocks.

    The pooled correlation is ``r = Σ_e c_e`` with ``c_e`` epoch ``e``'s share of the centred
    cross-product (global means and SDs); with independent epochs ``var(r) ≈ Σ_e (c_e - r/K)²``
    (a delta-method, block-wise variance; Bartlett 1935's point that autocorrelated samples
    widen a correlation's spread is honoured because whole epochs are the units).

    Parameters
    ----------
    mom : dict
        Per-epoch sums from :func:`envelope_moments`.

    Returns
    -------
    ndarray, shape (n_nodes, n_nodes)
        Standard error of the correlation (dimensionless), symmetric.
    """
    n_ep = mom["so"].shape[0]
    m = float(mom["m"])
    tot = n_ep * m
    so_t, soo_t, soy_t = (mom[k].sum(0) for k in ("so", "soo", "soy"))
    sy_t, syy_t = mom["sy"].sum(0)[None, :], mom["syy"].sum(0)[None, :]
    mo, my = so_t / tot, sy_t / tot
    vo = soo_t / tot - mo**2
    vy = syy_t / tot - my**2
    # c_e = [soy_e - mo sy_e - my so_e + m mo my] / (tot sqrt(vo vy))
    with np.errstate(invalid="ignore", divide="ignore"):  # the unused diagonal: 0 / 0
        ce = (
            mom["soy"]
            - mo[None] * mom["sy"][:, None, :]
            - my[None] * mom["so"]
            + m * mo[None] * my[None]
        ) / (tot * np.sqrt(vo * vy))[None]
    ce = (ce + ce.transpose(0, 2, 1)) / 2.0
    r = ce.sum(0)
    return np.sqrt(np.sum((ce - r[None] / n_ep) ** 2, axis=0))


# --------------------------------------------------------------------------------------------
# one atlas, all edges


@dataclass(frozen=True, eq=False)
class EdgeCoupling(CouplingResult):
    """Network/lobe coupling of one recording on one atlas (see :class:`CouplingResult`).

    ``values`` holds :data:`EDGE_MEASURES`; ``values``, ``null``, ``leakage_msc`` and
    ``intervals`` run over ``edges``.

    Attributes
    ----------
    filters : RoiFilters
    edges : ndarray of int, shape (n_edges, 2)
        ROI index pairs ``a < b``.
    """

    filters: RoiFilters
    edges: np.ndarray

    def to_frame(self) -> pd.DataFrame:
        """The tidy edge table of this atlas (:func:`coupling_table`).

        Returns
        -------
        DataFrame
            Columns :data:`EDGE_COLUMNS`.
        """
        return coupling_table([self])

    def matrix(self, measure: str, band: str) -> np.ndarray:
        """ROI x ROI matrix of one measure and band (symmetric; NaN diagonal), for figures.

        Directed measures (``imcoh``, ``lag_ms``) are antisymmetric: entry ``(b, a)`` is
        ``-(a, b)``.

        Parameters
        ----------
        measure : str
            A key of :attr:`values`.
        band : str
            One of :attr:`band_names`.

        Returns
        -------
        ndarray, shape (n_rois, n_rois)
            In the measure's unit (:data:`MEASURE_UNITS`).
        """
        n = len(self.filters.names)
        out = np.full((n, n), np.nan)
        v = self.values[measure][self.band_names.index(band)]
        out[self.edges[:, 0], self.edges[:, 1]] = v
        out[self.edges[:, 1], self.edges[:, 0]] = -v if measure in ("imcoh", "lag_ms") else v
        return out


@fill_doc
@one_blas_thread
def edge_coupling(
    spec: np.ndarray,
    spec_plain: np.ndarray | None,
    freqs: np.ndarray,
    bands: Bands,
    filters: RoiFilters,
    *,
    null_cov: np.ndarray | None = None,
    null_method: str | None = "analytic",
    n_null: int = 500,
    n_boot: int = 0,
    seed: int = 0,
    ci: float = 0.95,
    samples_per_epoch: int | None = None,
) -> EdgeCoupling:
    """All edge measures of one atlas (see the module docstring).

    Parameters
    ----------
    spec : ndarray, shape (n_epochs, n_ch, n_bins), complex
        Hann-tapered scaled sensor coefficients (:func:`sourcelab.spectra.epoch_fourier`).
    spec_plain : ndarray, shape (n_epochs, n_ch, n_bins), complex, or None
        Untapered coefficients (``taper=False``) for the envelope correlation; None skips
        ``aec_orth``.
    freqs : ndarray, shape (n_bins,)
    bands : Bands
    filters : RoiFilters
    null_cov : ndarray, shape (n_ch, n_ch), optional
        :func:`independent_source_covariance` for the coherence expected from leakage.
    %(coupling_uncertainty)s
    samples_per_epoch : int, optional
        Envelope samples per epoch (:func:`band_analytic`).

    Returns
    -------
    EdgeCoupling
        Edge measures of every ROI pair ``a < b``, shape (n_bands, n_edges) each.
    """
    band_idx = band_bin_indices(freqs, bands)
    w = filters.weights
    n = w.shape[0]
    iu, ju = np.triu_indices(n, 1)
    edges = np.column_stack([iu, ju])
    ps = pair_statistics_from_fourier(roi_fourier(spec, w), freqs, edges)
    spectral = tuple(m for m in EDGE_MEASURES if m != "aec_orth")
    unc = {"null_method": null_method, "n_null": n_null, "n_boot": n_boot, "seed": seed, "ci": ci}
    values, null, intervals = band_coupling(ps, band_idx, measures=spectral, **unc)
    if spec_plain is not None:
        roi_plain = roi_fourier(spec_plain, w)
        aec = np.empty((len(band_idx), edges.shape[0]))
        se = np.empty_like(aec)
        lo = np.empty_like(aec)
        hi = np.empty_like(aec)
        wb = bootstrap_weights(ps.n_epochs, n_boot=n_boot, seed=seed) if n_boot else None
        for b, idx in enumerate(band_idx):
            mom = envelope_moments(
                band_analytic(roi_plain, idx, samples_per_epoch=samples_per_epoch)
            )
            aec[b] = aec_from_moments(mom)[0][iu, ju]
            se[b] = aec_block_se(mom)[iu, ju]
            if wb is not None:
                reps = aec_from_moments(mom, wb)[:, iu, ju]
                lo[b], hi[b] = _quantile(reps, [(1 - ci) / 2, (1 + ci) / 2])
        values["aec_orth"] = aec
        null["aec_orth"] = (np.zeros_like(aec), 1.959963984540054 * se)
        if wb is not None:
            intervals["aec_orth"] = (lo, hi)
    leak = edge_leakage_msc(w, null_cov)[iu, ju] if null_cov is not None else None
    return EdgeCoupling(
        filters=filters,
        band_names=tuple(bands.names),
        edges=edges,
        values=values,
        null=null,
        leakage_msc=leak,
        intervals=intervals,
        n_epochs=ps.n_epochs,
    )


def coupling_table(results) -> pd.DataFrame:
    """Tidy table: one row per atlas x edge x band x measure (columns :data:`EDGE_COLUMNS`).

    ``leakage_explained``: lagged measures and ``aec_orth``: ``|value| <= leakage_q95``;
    ``msc``: ``value <= leakage_expected``.  ``z`` is NaN until norms are applied (norms kind
    ``"edge"``, keyed by ``atlas``, ``edge``, ``band``, ``measure``).  Column meanings:
    :data:`EDGE_COLUMN_NOTES`.  Rows: atlas, then measure (:data:`EDGE_MEASURES` order), band,
    edge.

    Parameters
    ----------
    results : sequence of EdgeCoupling
        One per atlas (non-empty).

    Returns
    -------
    DataFrame
        Columns :data:`EDGE_COLUMNS`; edge labels ``"roi.hemisphere|roi.hemisphere"``.
    """
    import pandas as pd

    frames = []
    for ec in results:
        f = ec.filters
        a, b = ec.edges[:, 0], ec.edges[:, 1]
        names, hemis = np.asarray(f.names), np.asarray(f.hemispheres)
        label = np.char.add(
            np.char.add(np.char.add(np.char.add(names[a], "."), hemis[a]), "|"),
            np.char.add(np.char.add(names[b], "."), hemis[b]),
        )
        shared = f.shared_sources()[a, b]
        ms = [m for m in EDGE_MEASURES if m in ec.values]
        n_e, n_b = len(label), len(ec.band_names)
        block = n_e * n_b
        cols = {k: [] for k in ("value", "lo", "hi", "exp", "q95", "expl")}
        for m in ms:
            v = np.asarray(ec.values[m], dtype=float)  # (n_bands, n_edges)
            if m == "aec_orth" and m in ec.null:
                exp, q95 = ec.null[m]
                expl = np.where(np.isfinite(v), np.abs(v) <= q95, np.nan)
            else:
                exp, q95, expl = leakage_arrays(m, v, ec.null, ec.leakage_msc)
            lo, hi = ec.intervals.get(m, (np.full_like(v, np.nan), np.full_like(v, np.nan)))
            for k, x in zip(cols, (v, lo, hi, exp, q95, expl)):
                cols[k].append(np.broadcast_to(np.asarray(x, dtype=float), v.shape).ravel())
        n_m = len(ms)
        frames.append(
            pd.DataFrame(
                {
                    "atlas": f.atlas,
                    "edge": np.tile(label, n_m * n_b),
                    "roi_a": np.tile(names[a], n_m * n_b),
                    "hemisphere_a": np.tile(hemis[a], n_m * n_b),
                    "roi_b": np.tile(names[b], n_m * n_b),
                    "hemisphere_b": np.tile(hemis[b], n_m * n_b),
                    "band": np.tile(np.repeat(np.asarray(ec.band_names), n_e), n_m),
                    "measure": np.repeat(np.asarray(ms), block),
                    "value": np.concatenate(cols["value"]),
                    "unit": np.repeat(np.asarray([MEASURE_UNITS[m] for m in ms]), block),
                    "value_lo": np.concatenate(cols["lo"]),
                    "value_hi": np.concatenate(cols["hi"]),
                    "leakage_expected": np.concatenate(cols["exp"]),
                    "leakage_q95": np.concatenate(cols["q95"]),
                    "leakage_explained": _boolean(np.concatenate(cols["expl"])),
                    "filter_share_a": np.tile(f.share[a], n_m * n_b),
                    "filter_share_b": np.tile(f.share[b], n_m * n_b),
                    "shared_sources": np.tile(shared, n_m * n_b),
                    "n_epochs": ec.n_epochs,
                    "z": np.nan,
                }
            )
        )
    return pd.concat(frames, ignore_index=True)[list(EDGE_COLUMNS)]


@one_blas_thread
def network_coupling(
    spec: np.ndarray,
    spec_plain: np.ndarray | None,
    freqs: np.ndarray,
    bands: Bands,
    op,
    atlases,
    *,
    gain: np.ndarray | None = None,
    normals: np.ndarray | None = None,
    null_cov: np.ndarray | None = None,
    **options,
) -> list[EdgeCoupling]:
    """:func:`edge_coupling` for several atlases with filters built from ``op``.

    Parameters
    ----------
    spec, spec_plain, freqs, bands
        As for :func:`edge_coupling` (coefficients (n_epochs, n_ch, n_bins); ``freqs`` in Hz).
    op : SourceOperator
    atlases : sequence of Atlas
    gain : ndarray, optional
        Leadfield (free or fixed) for the leakage coherence; with a free gain and a fixed
        operator pass ``normals``.
    normals : ndarray, shape (n_src, 3), optional
    null_cov : ndarray, shape (n_ch, n_ch), optional
        :func:`independent_source_covariance`, if already computed (then ``gain`` is not
        needed).
    **options
        Passed to :func:`edge_coupling`.

    Returns
    -------
    list of EdgeCoupling
        One per atlas, in ``atlases`` order.
    """
    if null_cov is None and gain is not None:
        g = _fixed_gain(gain, op.n_src, normals) if op.n_comp == 1 else np.asarray(gain)
        null_cov = independent_source_covariance(g)
    return [
        edge_coupling(
            spec,
            spec_plain,
            freqs,
            bands,
            roi_filters(op, at, normals=normals),
            null_cov=null_cov,
            **options,
        )
        for at in atlases
    ]


__all__ = [
    "COUPLING_ATLASES",
    "EDGE_COLUMNS",
    "EDGE_COLUMN_NOTES",
    "EDGE_MEASURES",
    "EDGE_ROI_COLUMNS",
    "EdgeCoupling",
    "LAGGED_MEASURES",
    "RoiFilters",
    "aec_block_se",
    "aec_from_moments",
    "band_analytic",
    "coupling_table",
    "edge_coupling",
    "edge_leakage_msc",
    "envelope_moments",
    "independent_source_covariance",
    "msc_from_covariance",
    "network_coupling",
    "roi_cross_spectra",
    "roi_filters",
    "roi_fourier",
]
