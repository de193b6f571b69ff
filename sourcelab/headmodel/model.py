"""The template head model: frozen dataclasses around the shipped fsaverage5 leadfield and meshes.

Contract (shared by the inverse, simulation, atlases, figures and exports):

* the **surface** is fsaverage5 with 2 x 10,242 vertices, left hemisphere first (surface index
  ``s < 10,242`` is left vertex ``s``; ``10,242 + v`` is right vertex ``v``);
* the **sources** are the cortical surface vertices only: FreeSurfer's medial wall (the cut through
  corpus callosum, hippocampus and brainstem, label 0 of Yeo et al. 2011's fsaverage
  parcellation) is not cortex and is left out.  Source ``i`` sits at surface vertex
  ``vertno[i]``; sources are ordered by surface index, so the left hemisphere comes first;
* ``gain`` is the free-orientation leadfield, **not** re-referenced (the inverse applies the
  average-reference projector), in V per A·m, three columns (x, y, z) per source, expressed in the
  same frame as ``src_nn``;
* ``src_mni`` are the white-surface source positions in fsaverage surface RAS (MNI305), mm.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

#: Format version of the shipped head-model file (bump when keys or conventions change).
FILE_FORMAT = 2
#: Vertices per hemisphere of the fsaverage5 surface.
N_PER_HEMI = 10242
#: Surface vertices, both hemispheres.
N_SURFACE = 2 * N_PER_HEMI
HEMIS = ("left", "right")


def fixed_gain(gain: np.ndarray, normals: np.ndarray) -> np.ndarray:
    """Project a free-orientation leadfield onto surface normals.

    Parameters
    ----------
    gain : ndarray, shape (n_ch, 3 * n_src)
        Columns ``3*i + (0, 1, 2)`` are source ``i``'s x, y, z components.
    normals : ndarray, shape (n_src, 3)
        Unit normals in the frame of ``gain``.

    Returns
    -------
    ndarray, shape (n_ch, n_src)
        Leadfield of unit dipoles along the normals.
    """
    gain = np.asarray(gain)
    normals = np.asarray(normals, dtype=float)
    n_src = normals.shape[0]
    if gain.shape[1] != 3 * n_src:
        raise ValueError(f"gain: {gain.shape[1]} columns do not match 3 x {n_src} normals")
    return np.einsum("csk,sk->cs", gain.reshape(gain.shape[0], n_src, 3), normals)


@dataclass(frozen=True, eq=False)
class TemplateSurface:
    """fsaverage5 meshes of both hemispheres (surface vertices stacked left, right).

    Attributes
    ----------
    white, pial, inflated : ndarray, shape (20484, 3)
        Vertex positions, MNI305 mm (``inflated`` is for display only).
    faces : ndarray, shape (40960, 3)
        Triangles over the stacked vertices (right-hemisphere faces offset by 10,242).
    sulc : ndarray, shape (20484,)
        Sulcal depth, for shading.
    cortex : ndarray of bool, shape (20484,)
        True for cortical vertices (the sources); False on the medial wall.
    """

    white: np.ndarray
    pial: np.ndarray
    inflated: np.ndarray
    faces: np.ndarray
    sulc: np.ndarray
    cortex: np.ndarray

    @cached_property
    def mid(self) -> np.ndarray:
        """Mid-thickness positions ``(white + pial) / 2``, shape (20484, 3), MNI305 mm."""
        out = (self.white + self.pial) / 2.0
        out.setflags(write=False)
        return out

    def hemi_slice(self, hemi: str) -> slice:
        """Surface indices of one hemisphere.

        Parameters
        ----------
        hemi : {"left", "right"}

        Returns
        -------
        slice
            ``0:10242`` for the left, ``10242:20484`` for the right hemisphere.
        """
        h = HEMIS.index(hemi)
        return slice(h * N_PER_HEMI, (h + 1) * N_PER_HEMI)

    def hemi_faces(self, hemi: str) -> np.ndarray:
        """Triangles of one hemisphere with local (0..10,241) indices, shape (20480, 3).

        Parameters
        ----------
        hemi : {"left", "right"}

        Returns
        -------
        ndarray of int, shape (20480, 3)
            Triangles indexing the hemisphere's own vertices (``white[hemi_slice(hemi)]``).
        """
        h = HEMIS.index(hemi)
        half = self.faces.shape[0] // 2
        return self.faces[h * half : (h + 1) * half] - h * N_PER_HEMI


@dataclass(frozen=True, eq=False)
class HeadModel:
    """Template EEG head model for the 19 10-20 sites.

    Attributes
    ----------
    ch_names : tuple of str, length n_ch
        Electrode names in :data:`sourcelab.constants.SITES_1020` order.
    ch_pos : ndarray, shape (n_ch, 3)
        Electrode positions, metres, in the frame of ``gain``.
    gain : ndarray, shape (n_ch, 3 * n_src)
        Free-orientation leadfield, V/(A·m), columns ``3*i + (0, 1, 2)`` for source ``i``.
    src_pos : ndarray, shape (n_src, 3)
        Source positions, metres, in the frame of ``gain``.
    src_nn : ndarray, shape (n_src, 3)
        Unit outward surface normals, same frame.
    vertno : ndarray of int, shape (n_src,)
        Surface vertex (0..20,483, left hemisphere first) of each source, increasing.
    surface : TemplateSurface
        The fsaverage5 meshes the sources lie on.
    sha256 : str
        sha256 of the shipped head-model file; part of every pipeline fingerprint.
    meta : dict
        Build metadata (conductivities, mesh sizes, software versions).
    """

    ch_names: tuple[str, ...]
    ch_pos: np.ndarray
    gain: np.ndarray
    src_pos: np.ndarray
    src_nn: np.ndarray
    vertno: np.ndarray
    surface: TemplateSurface
    sha256: str
    meta: dict = field(default_factory=dict)

    @property
    def n_src(self) -> int:
        """Number of (cortical) sources."""
        return self.src_pos.shape[0]

    @cached_property
    def n_left(self) -> int:
        """Number of left-hemisphere sources (they come first)."""
        return int(np.searchsorted(self.vertno, N_PER_HEMI))

    @cached_property
    def src_mni(self) -> np.ndarray:
        """White-surface source positions, MNI305 mm, shape (n_src, 3)."""
        out = self.surface.white[self.vertno]
        out.setflags(write=False)
        return out

    @cached_property
    def gain_fixed(self) -> np.ndarray:
        """Leadfield for surface-normal sources, shape (n_ch, n_src)."""
        out = fixed_gain(self.gain, self.src_nn)
        out.setflags(write=False)
        return out

    def hemisphere_of(self, sources) -> np.ndarray:
        """``"left"``/``"right"`` for each source index, same shape as ``sources``.

        Parameters
        ----------
        sources : array-like of int
            Source indices (0..n_src-1; left-hemisphere sources come first).

        Returns
        -------
        ndarray of str, same shape as ``sources``
            ``"left"`` where the index is below :attr:`n_left`, else ``"right"``.
        """
        return np.where(np.asarray(sources) < self.n_left, "left", "right")

    def to_surface(self, values, *, fill: float = np.nan) -> np.ndarray:
        """Per-source values on all 20,484 surface vertices (``fill`` on the medial wall).

        Parameters
        ----------
        values : array_like, shape (..., n_src)
            Values per source, in any unit.
        fill : float
            Value for surface vertices that are not sources.

        Returns
        -------
        ndarray, shape (..., 20484), float
            ``values`` at :attr:`vertno`, ``fill`` elsewhere; at least float32.
        """
        v = np.asarray(values)
        if v.shape[-1] != self.n_src:
            raise ValueError(
                f"values: need {self.n_src} sources on the last axis, got shape {v.shape}"
            )
        out = np.full(v.shape[:-1] + (N_SURFACE,), fill, dtype=np.result_type(v.dtype, np.float32))
        out[..., self.vertno] = v
        return out

    def from_surface(self, values) -> np.ndarray:
        """Per-surface-vertex values (..., 20484) reduced to the sources (..., n_src).

        Parameters
        ----------
        values : array_like, shape (..., 20484)
            Values on every fsaverage5 vertex, left hemisphere first.

        Returns
        -------
        ndarray, shape (..., n_src)
            The values at :attr:`vertno`.
        """
        v = np.asarray(values)
        if v.shape[-1] != N_SURFACE:
            raise ValueError(
                f"values: need {N_SURFACE} surface vertices on the last axis, got shape {v.shape}"
            )
        return v[..., self.vertno]
