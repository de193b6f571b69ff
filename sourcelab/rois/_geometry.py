"""Template geometry shared by the atlas builders and the run-time ROI code.

The 20,484 template sources are the fsaverage5 vertices packaged with nilearn, left hemisphere
first (source ``i`` < 10,242 is left vertex ``i``; source ``10,242 + v`` is right vertex ``v``).
Coordinates are fsaverage surface RAS, which is MNI305 space, in millimetres.

References
----------
FreeSurfer wiki, "CoordinateSystems", item 8 (MNI305 -> MNI152 matrix, derived from
``$FREESURFER_HOME/average/mni152.register.dat``); the same matrix is FieldTrip's
``fsaverage2mni`` transform.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

#: Vertices per hemisphere of fsaverage5 (ico-5).
N_PER_HEMI = 10242
#: Number of template sources (both hemispheres).
N_SRC = 2 * N_PER_HEMI
HEMIS = ("left", "right")

#: Affine from MNI305 (fsaverage surface RAS) to MNI152 RAS, millimetres.
#: FreeSurfer wiki "CoordinateSystems" (8); its check: (10, -20, 35) -> (10.695, -18.409, 36.137).
MNI305_TO_MNI152 = np.array(
    [
        [0.9975, -0.0073, 0.0176, -0.0429],
        [0.0146, 1.0009, -0.0024, 1.5496],
        [-0.0130, -0.0093, 0.9971, 1.1840],
        [0.0, 0.0, 0.0, 1.0],
    ]
)


def _apply(affine: np.ndarray, xyz: np.ndarray) -> np.ndarray:
    xyz = np.asarray(xyz, dtype=float)
    return xyz @ affine[:3, :3].T + affine[:3, 3]


def mni305_to_mni152(xyz: np.ndarray) -> np.ndarray:
    """Map points from MNI305 (fsaverage) to MNI152 millimetres.

    Parameters
    ----------
    xyz : ndarray, shape (..., 3)
        Points in MNI305 mm.

    Returns
    -------
    ndarray, shape (..., 3)
        Points in MNI152 mm.
    """
    return _apply(MNI305_TO_MNI152, xyz)


def mni152_to_mni305(xyz: np.ndarray) -> np.ndarray:
    """Inverse of :func:`mni305_to_mni152`; shapes as there."""
    return _apply(np.linalg.inv(MNI305_TO_MNI152), xyz)


@dataclass(frozen=True, eq=False)
class TemplateSurface:
    """fsaverage5 meshes for both hemispheres, sources stacked left then right.

    Attributes
    ----------
    white, pial, mid, inflated : ndarray, shape (20484, 3)
        Vertex positions in MNI305 mm (``mid`` is (white + pial) / 2, the mid-thickness surface;
        ``inflated`` is for display only).
    faces : ndarray, shape (40960, 3)
        Triangles indexing the stacked sources (right-hemisphere faces offset by 10,242).
    """

    white: np.ndarray
    pial: np.ndarray
    mid: np.ndarray
    inflated: np.ndarray
    faces: np.ndarray

    def hemi_faces(self, hemi: str) -> np.ndarray:
        """Triangles of one hemisphere with local (0..10,241) vertex indices, shape (20480, 3)."""
        h = HEMIS.index(hemi)
        half = self.faces.shape[0] // 2
        return self.faces[h * half:(h + 1) * half] - h * N_PER_HEMI


@lru_cache(maxsize=1)
def template_surface() -> TemplateSurface:
    """Load nilearn's packaged fsaverage5 meshes (offline) as a :class:`TemplateSurface`."""
    from nilearn.datasets import load_fsaverage

    fs = load_fsaverage("fsaverage5")

    def stack(key):
        parts = fs[key].parts
        return np.vstack([np.asarray(parts[h].coordinates, dtype=float) for h in HEMIS])

    white, pial, infl = stack("white_matter"), stack("pial"), stack("inflated")
    parts = fs["white_matter"].parts
    faces = np.vstack([np.asarray(parts[h].faces, dtype=np.int64) + i * N_PER_HEMI
                       for i, h in enumerate(HEMIS)])
    if white.shape != (N_SRC, 3):  # pragma: no cover - guards a changed nilearn package
        raise RuntimeError(f"nilearn fsaverage5 has {white.shape[0]} vertices, expected {N_SRC}")
    for arr in (white, pial, infl, faces):
        arr.setflags(write=False)
    mid = (white + pial) / 2.0
    mid.setflags(write=False)
    return TemplateSurface(white=white, pial=pial, mid=mid, inflated=infl, faces=faces)


def hemisphere_of(sources: np.ndarray) -> np.ndarray:
    """Hemisphere name per source index, ndarray of str with the shape of ``sources``."""
    sources = np.asarray(sources)
    return np.where(sources < N_PER_HEMI, "left", "right")
