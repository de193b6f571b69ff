"""sLORETA as pure array functions: kernel, standardisation and source power from cross-spectra.

Notation (Pascual-Marqui 2002): whitened, average-referenced leadfield ``G`` (r x n_cols),
Tikhonov-regularised minimum-norm kernel ``K = Gᵀ (G Gᵀ + α I)⁻¹`` with ``α = λ² · tr(G Gᵀ)/r``
(the same relative regularisation as MNE-Python), resolution matrix ``R = K G``.  The sLORETA
standardised power of source ``i`` is ``ĵ_iᵀ [R_ii]⁻¹ ĵ_i``, where ``R_ii`` is the 1x1 (fixed
orientation) or 3x3 (free orientation) diagonal block of ``R``.  Noise-free single sources are
localised with zero error for both forms; MNE's free-orientation sLORETA replaces the 3x3 block by
the scalar trace and loses that property, which is why sourcelab computes the kernel itself.

The kernel is that of the trace-normalised gain, so the standardised power is expressed in
whitened-data units (squared data unit of the white-noise model, e.g. µV²) whatever the
leadfield's absolute calibration.  MNE's sLORETA noise normalisation divides by
``sqrt(diag(R) / λ²)`` in the same units: for fixed orientation MNE's power equals sourcelab's
times ``λ²``.

References
----------
Pascual-Marqui RD (2002) Standardized low-resolution brain electromagnetic tomography (sLORETA):
technical details. Methods Find Exp Clin Pharmacol 24 Suppl D:5-12.
Hämäläinen MS, Ilmoniemi RJ (1994) Interpreting magnetic fields of the brain: minimum norm
estimates. Med Biol Eng Comput 32:35-42.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..checks import check_option
from ..constants import ORIENTATIONS
from ..errors import InputError
from ..headmodel.model import fixed_gain
from ..spectra import average_reference_projector


def whitener(noise_cov: np.ndarray | None, n_ch: int, *, rtol: float = 1e-10) -> np.ndarray:
    """Whitener for average-referenced data, shape (rank, n_ch).

    Rows span the data space left by the average-reference projector, scaled so that the projected
    noise covariance becomes the identity.  ``noise_cov=None`` means white sensor noise of 1 (data
    unit)², e.g. 1 µV².

    Parameters
    ----------
    noise_cov : ndarray, shape (n_ch, n_ch), or None
        Symmetric sensor noise covariance in (data unit)², e.g. µV²; ``None`` for the identity.
    n_ch : int
        Number of sensor channels.
    rtol : float
        Eigenvalues of the projected covariance below ``rtol`` times the largest are dropped (the
        average reference removes one dimension, so ``rank <= n_ch - 1``).

    Returns
    -------
    w : ndarray, shape (rank, n_ch)
        Whitening matrix; ``w @ noise_cov @ w.T`` is the identity, in 1/(data unit).

    Raises
    ------
    InputError
        If ``noise_cov`` has the wrong shape or is not symmetric.
    """
    p = average_reference_projector(n_ch)
    c = np.eye(n_ch) if noise_cov is None else np.asarray(noise_cov, dtype=float)
    if c.shape != (n_ch, n_ch):
        raise InputError(f"noise_cov: need shape ({n_ch}, {n_ch}), got {c.shape}")
    if not np.allclose(c, c.T, rtol=1e-8, atol=1e-12 * np.abs(c).max()):
        raise InputError("noise_cov: must be symmetric")
    eig, vec = np.linalg.eigh(p @ c @ p)
    keep = eig > rtol * eig.max()
    return (vec[:, keep] / np.sqrt(eig[keep])).T


@dataclass(frozen=True, eq=False)
class SourceOperator:
    """A ready source operator (sLORETA here; eLORETA/dSPM kernels from MNE use it too).

    Attributes
    ----------
    kernel : ndarray, shape (n_rows, n_ch)
        Standardised kernel: applied to (raw-referenced) sensor data it gives sLORETA-standardised
        source components; ``n_rows = n_src`` (fixed) or ``3 * n_src`` (free).  It includes the
        average-reference projector and the whitener.
    orientation : {"fixed", "free"}
    lambda2 : float
    n_src : int
    """

    kernel: np.ndarray
    orientation: str
    lambda2: float
    n_src: int
    method: str = "sLORETA"

    @property
    def n_comp(self) -> int:
        return 1 if self.orientation == "fixed" else 3

    def power(self, csd: np.ndarray) -> np.ndarray:
        """Source power from cross-spectra; see :func:`source_power`.

        Parameters
        ----------
        csd : ndarray, shape (n_ch, n_ch) or (n_bands, n_ch, n_ch)
            Real sensor cross-spectra in (data unit)², e.g. µV² per band.

        Returns
        -------
        power : ndarray, shape (n_src,) or (n_bands, n_src)
            sLORETA-standardised source power in whitened-data units.
        """
        return source_power(self, csd)


def _svd_whitened(gain: np.ndarray, noise_cov: np.ndarray | None, lambda2: float):
    n_ch = gain.shape[0]
    w = whitener(noise_cov, n_ch)
    gw = w @ gain
    r = gw.shape[0]
    scale2 = r / np.einsum("ij,ij->", gw, gw)  # makes tr(G Gᵀ) = r after scaling (as MNE)
    u, s, vt = np.linalg.svd(gw * np.sqrt(scale2), full_matrices=False)
    f = s**2 / (s**2 + lambda2)  # resolution eigenvalues
    return w, u, s, vt, f, scale2


def sloreta_operator(
    gain: np.ndarray,
    *,
    lambda2: float,
    orientation: str = "fixed",
    normals: np.ndarray | None = None,
    noise_cov: np.ndarray | None = None,
) -> SourceOperator:
    """Build the sLORETA source operator (the standardised kernel and its metadata).

    Parameters
    ----------
    gain : ndarray, shape (n_ch, 3 * n_src) or (n_ch, n_src)
        Leadfield, not re-referenced.  Free-orientation columns ``3i..3i+2`` are source ``i``'s
        x, y, z.  With ``orientation="fixed"`` either a fixed gain (n_ch, n_src) or a free gain plus
        ``normals``.
    lambda2 : float
        Regularisation λ² = 1/SNR², SNR an amplitude ratio (e.g. 1/9 for SNR 3).
    orientation : {"fixed", "free"}
    normals : ndarray, shape (n_src, 3), optional
        Unit surface normals, to reduce a free gain to fixed orientation.
    noise_cov : ndarray, shape (n_ch, n_ch), optional
        Sensor noise covariance; default white noise (identity).

    Returns
    -------
    SourceOperator
        Standardised kernel (n_src or 3 n_src rows, n_ch columns) with the average-reference
        projector and the whitener folded in.

    References
    ----------
    Pascual-Marqui RD (2002) Methods Find Exp Clin Pharmacol 24 Suppl D:5-12.
    """
    check_option("orientation", orientation, ORIENTATIONS)
    if not lambda2 > 0:
        raise InputError(f"lambda2: must be > 0, got {lambda2}")
    gain = np.asarray(gain, dtype=float)
    if orientation == "fixed" and normals is not None:
        n_src = normals.shape[0]
        if gain.shape[1] != 3 * n_src:
            raise InputError(f"gain: {gain.shape[1]} columns do not match 3 x {n_src} normals")
        gain = fixed_gain(gain, normals)
    if orientation == "free" and gain.shape[1] % 3:
        raise InputError("gain: free orientation needs 3 columns per source")
    w, u, s, vt, f, scale2 = _svd_whitened(gain, noise_cov, lambda2)
    # K = V diag(s/(s²+λ²)) Uᵀ W: the minimum-norm kernel of the trace-normalised gain, so the
    # standardised power is in whitened-data units (e.g. µV² of the 1 µV² white noise model) and
    # does not depend on the leadfield's absolute calibration.
    kernel = (vt.T * (s / (s**2 + lambda2))) @ u.T @ w
    v = vt.T
    if orientation == "fixed":
        r_diag = np.einsum("ik,k,ik->i", v, f, v)
        kernel = kernel / np.sqrt(r_diag)[:, None]
        n_src = gain.shape[1]
    else:
        n_src = gain.shape[1] // 3
        v3 = v.reshape(n_src, 3, -1)
        blocks = np.einsum("sak,k,sbk->sab", v3, f, v3)
        eig, vec = np.linalg.eigh(blocks)
        inv_sqrt = np.einsum("sak,sk,sbk->sab", vec, 1.0 / np.sqrt(eig), vec)
        kernel = np.einsum("sab,sbc->sac", inv_sqrt, kernel.reshape(n_src, 3, -1))
        kernel = kernel.reshape(3 * n_src, -1)
    return SourceOperator(
        kernel=kernel, orientation=orientation, lambda2=float(lambda2), n_src=n_src
    )


def source_power(op: SourceOperator, csd: np.ndarray) -> np.ndarray:
    """sLORETA standardised source power from sensor cross-spectra.

    ``power_i = Σ_rows(i) diag(K C Kᵀ)``: one quadratic form per source, no time samples.

    Parameters
    ----------
    op : SourceOperator
        Operator from :func:`sloreta_operator` (or an MNE kernel wrapped in one).
    csd : ndarray, shape (n_ch, n_ch) or (n_bands, n_ch, n_ch)
        Real sensor cross-spectra in (data unit)², e.g. µV² per band (any reference: the kernel
        projects to the average).

    Returns
    -------
    power : ndarray, shape (n_src,) or (n_bands, n_src)
        Standardised power per source (free orientation: summed over the 3 components), in
        whitened-data units; the band axis is present only when ``csd`` has one.
    """
    csd = np.asarray(csd, dtype=float)
    single = csd.ndim == 2
    c = csd[None] if single else csd
    k = op.kernel
    # (K C) row by row against K: one matrix product and a row-wise dot (15x faster than the
    # three-operand einsum, whose contraction path forms a larger intermediate; equal to 4e-15)
    out = np.einsum("brd,rd->br", np.matmul(k, c), k)
    if op.n_comp == 3:
        out = out.reshape(out.shape[0], op.n_src, 3).sum(-1)
    return out[0] if single else out


def point_source_peaks(
    gain: np.ndarray,
    *,
    lambda2: float,
    orientation: str = "fixed",
    normals: np.ndarray | None = None,
    orientations=None,
    chunk: int = 512,
) -> np.ndarray:
    """For each source, where a noise-free unit source there has its sLORETA peak.

    Pushes a unit source at every location through forward and inverse (column ``j`` of the
    resolution matrix, in chunks) and returns the index of the maximal standardised power.

    Parameters
    ----------
    gain : ndarray, shape (n_ch, 3 * n_src) or (n_ch, n_src)
        Leadfield, as for :func:`sloreta_operator`.
    lambda2 : float
        Regularisation λ² = 1/SNR², SNR an amplitude ratio.
    orientation : {"fixed", "free"}
        Orientation model of the inverse.
    normals : ndarray, shape (n_src, 3), optional
        Unit surface normals, to reduce a free gain to fixed orientation.
    orientations : ndarray, shape (n_src, 3), optional
        Unit orientation of each test source for ``orientation="free"``.
    chunk : int
        Number of test sources pushed through at once (memory only; the result does not depend
        on it).

    Returns
    -------
    peaks : ndarray of int, shape (n_src,)
        ``peaks[j]`` is the source index where the unit source at ``j`` has its maximum; ``j``
        itself for zero localisation error.
    """
    op = sloreta_operator(gain, lambda2=lambda2, orientation=orientation, normals=normals)
    g = fixed_gain(gain, normals) if orientation == "fixed" and normals is not None else gain
    n_src = op.n_src
    peaks = np.empty(n_src, dtype=int)
    for start in range(0, n_src, chunk):
        idx = np.arange(start, min(start + chunk, n_src))
        if orientation == "fixed":
            data = g[:, idx]
        else:
            data = np.einsum(
                "cjk,jk->cj", g.reshape(g.shape[0], n_src, 3)[:, idx], orientations[idx]
            )
        peaks[idx] = _peak_sources(op.kernel @ data, op.n_comp)
    return peaks


def _peak_sources(est: np.ndarray, n_comp: int, block: int = 1024) -> np.ndarray:
    """Source of maximal power in each column of a finite estimate (the first one on ties).

    The same as ``power.argmax(axis=0)`` with ``power`` the sum of squares over each source's
    ``n_comp`` rows, computed over blocks of ``block`` sources that stay in cache (a running
    maximum, replaced only by a strictly larger power): ~2x faster for 18,715 sources.

    Parameters
    ----------
    est : ndarray, shape (n_comp * n_src, n_test)
        Source estimates, one test source per column.
    n_comp : int
        Rows per source (1 fixed, 3 free orientation).
    block : int
        Sources per block (speed only).

    Returns
    -------
    peaks : ndarray of int, shape (n_test,)
    """
    cols = np.arange(est.shape[1])
    best = arg = None
    for start in range(0, est.shape[0] // n_comp, block):
        e = est[start * n_comp : (start + block) * n_comp]
        power = (e**2).reshape(-1, 3, e.shape[1]).sum(1) if n_comp == 3 else e**2
        a = power.argmax(axis=0)
        v = power[a, cols]
        if best is None:
            best, arg = v, a
        else:
            larger = v > best
            best, arg = np.where(larger, v, best), np.where(larger, a + start, arg)
    return arg
