"""A small analytic test head: sources on a spherical shell, a dipole leadfield, patch ROIs.

For tests and demonstrations of the trust tools without the template head.  The
leadfield is the potential of a current dipole in an infinite homogeneous conductor,
``V(r) = p · (r - r0) / (4 π σ |r - r0|³)`` (e.g. Sarvas 1987, Phys Med Biol 32:11-22, eq. for the
unbounded medium; from memory) - not a head, but smooth, full-rank and local, which is what the
leakage and bootstrap properties need.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..headmodel.model import fixed_gain
from ..rois.atlas import ROI, Atlas


def fibonacci_sphere(n: int) -> np.ndarray:
    """``n`` nearly uniform unit vectors, shape (n, 3).

    Parameters
    ----------
    n : int
        Number of points (golden-angle spiral, equal-area steps in z).

    Returns
    -------
    ndarray, shape (n, 3)
        Unit vectors ordered from the north pole (z near 1) to the south pole (z near -1).
    """
    i = np.arange(n) + 0.5
    z = 1.0 - 2.0 * i / n
    phi = np.pi * (1.0 + 5**0.5) * i
    r = np.sqrt(1.0 - z**2)
    return np.column_stack([r * np.cos(phi), r * np.sin(phi), z])


@dataclass(frozen=True, eq=False)
class SphereHead:
    """gain (n_ch, 3 n_src) V/(A·m), src_pos (n_src, 3) m, src_nn (n_src, 3), ch_pos (n_ch, 3) m.

    Attributes
    ----------
    gain : ndarray, shape (n_ch, 3 * n_src)
        Free-orientation leadfield, V per A·m, the x, y, z columns of each source adjacent.
    src_pos : ndarray, shape (n_src, 3)
        Source positions, m.
    src_nn : ndarray, shape (n_src, 3)
        Unit source normals (radial).
    ch_pos : ndarray, shape (n_ch, 3)
        Electrode positions, m.
    """

    gain: np.ndarray
    src_pos: np.ndarray
    src_nn: np.ndarray
    ch_pos: np.ndarray

    @property
    def n_src(self) -> int:
        return self.src_pos.shape[0]

    @property
    def gain_fixed(self) -> np.ndarray:
        return fixed_gain(self.gain, self.src_nn)


def sphere_head(
    n_src: int = 400,
    n_ch: int = 19,
    *,
    r_src: float = 0.07,
    r_ch: float = 0.09,
    sigma: float = 0.33,
) -> SphereHead:
    """Sources on the upper 80 % of a shell of radius ``r_src``, electrodes on the upper cap.

    Parameters
    ----------
    n_src : int
        Number of sources (nearly uniform over the shell where ``z/r > -0.6``).
    n_ch : int
        Number of electrodes (nearly uniform where ``z/r > 0.05``).
    r_src : float
        Radius of the source shell, m.
    r_ch : float
        Radius of the electrode sphere, m.
    sigma : float
        Conductivity of the unbounded medium, S/m.

    Returns
    -------
    SphereHead
        Radial normals; infinite-medium dipole leadfield in V/(A·m) (invented test geometry,
        not a head).
    """
    u = fibonacci_sphere(int(n_src / 0.8))
    u = u[u[:, 2] > -0.6][:n_src]
    e = fibonacci_sphere(2 * n_ch + 2)
    e = e[e[:, 2] > 0.05][:n_ch]
    src = u * r_src
    ch = e * r_ch
    d = ch[:, None, :] - src[None, :, :]  # (n_ch, n_src, 3)
    gain = d / (4 * np.pi * sigma * np.linalg.norm(d, axis=-1, keepdims=True) ** 3)
    return SphereHead(gain=gain.reshape(n_ch, -1), src_pos=src, src_nn=u.copy(), ch_pos=ch)


def patch_atlas(
    head: SphereHead, n_rois: int = 16, *, unlabelled_below: float = -0.4, name: str = "patches"
) -> Atlas:
    """ROIs from nearest-seed patches; sources with ``z/r < unlabelled_below`` stay unlabelled.

    Parameters
    ----------
    head : SphereHead
        From :func:`sphere_head`.
    n_rois : int
        Number of seeds requested; the ROIs may be fewer (seeds with no source are left out).
    unlabelled_below : float
        Sources whose normal has ``z`` below this stay in no ROI; seeds lie above it + 0.1.
    name : str
        Atlas name.

    Returns
    -------
    Atlas
        ROIs ``"P0"``, ``"P1"`` ... (hemisphere ``"left"`` for a seed with ``x < 0``, else
        ``"right"``), centroids in mm of the sphere frame (not MNI).
    """
    u = head.src_nn
    keep = u[:, 2] >= unlabelled_below
    seeds = fibonacci_sphere(int(n_rois / 0.7) + 1)
    seeds = seeds[seeds[:, 2] > unlabelled_below + 0.1][:n_rois]
    lab = np.argmax(u @ seeds.T, axis=1)
    rois = []
    for k in range(seeds.shape[0]):
        v = np.flatnonzero((lab == k) & keep)
        if v.size == 0:
            continue
        c = head.src_pos[v].mean(0) * 1000.0
        rois.append(
            ROI(
                name=f"P{k}",
                hemisphere="left" if seeds[k, 0] < 0 else "right",
                vertices=v,
                centroid_mni=(float(c[0]), float(c[1]), float(c[2])),
                small=False,
            )
        )
    return Atlas(name=name, description="synthetic patches", citation="none", rois=tuple(rois))
