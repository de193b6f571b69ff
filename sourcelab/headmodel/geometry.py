"""Template geometry shared by atlases, localisation, figures and exports.

* :data:`MNI305_TO_MNI152` and the two point mappings between fsaverage surface RAS (MNI305) and
  MNI152 millimetres;
* :func:`mesh_edges` and :func:`source_edges`: the cortical mesh as a graph over the sources.

References
----------
FreeSurfer wiki, "CoordinateSystems", item 8 (MNI305 -> MNI152 matrix, derived from
``$FREESURFER_HOME/average/mni152.register.dat``); the same matrix is FieldTrip's
``fsaverage2mni`` transform.
"""

from __future__ import annotations

import numpy as np

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
MNI305_TO_MNI152.setflags(write=False)


def _apply(affine: np.ndarray, xyz) -> np.ndarray:
    xyz = np.asarray(xyz, dtype=float)
    return xyz @ affine[:3, :3].T + affine[:3, 3]


def mni305_to_mni152(xyz) -> np.ndarray:
    """Map points from MNI305 (fsaverage) to MNI152 millimetres.

    Parameters
    ----------
    xyz : array_like, shape (..., 3)
        Points in MNI305 mm.

    Returns
    -------
    ndarray, shape (..., 3)
        Points in MNI152 mm.
    """
    return _apply(MNI305_TO_MNI152, xyz)


def mni152_to_mni305(xyz) -> np.ndarray:
    """Inverse of :func:`mni305_to_mni152`: MNI152 mm to MNI305 (fsaverage) mm.

    Parameters
    ----------
    xyz : array-like, shape (..., 3)
        Points in MNI152 mm.

    Returns
    -------
    ndarray, shape (..., 3)
        Points in MNI305 mm.
    """
    return _apply(np.linalg.inv(MNI305_TO_MNI152), xyz)


def mesh_edges(faces: np.ndarray) -> np.ndarray:
    """Unique undirected edges of a triangle mesh.

    Parameters
    ----------
    faces : ndarray of int, shape (n_faces, 3)

    Returns
    -------
    ndarray of int, shape (n_edges, 2)
        Sorted pairs ``(a, b)`` with ``a < b``.
    """
    faces = np.asarray(faces, dtype=np.int64)
    e = np.vstack([faces[:, [0, 1]], faces[:, [1, 2]], faces[:, [2, 0]]])
    return np.unique(np.sort(e, axis=1), axis=0)


def source_edges(model) -> np.ndarray:
    """Mesh edges between cortical sources, in source indices.

    Parameters
    ----------
    model : HeadModel

    Returns
    -------
    ndarray of int, shape (n_edges, 2)
        Edges of the fsaverage5 white mesh whose two ends are both sources, renumbered to source
        indices (``0..n_src-1``).
    """
    edges = mesh_edges(model.surface.faces)
    index = np.full(model.surface.white.shape[0], -1, dtype=np.int64)
    index[model.vertno] = np.arange(model.n_src)
    e = index[edges]
    return e[(e >= 0).all(axis=1)]
