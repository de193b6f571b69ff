"""Template geometry for figures and exports: fsaverage5 meshes and source → MNI volume projection.

Sources are the cortical fsaverage5 vertices of the shipped head model (the medial wall is not a
source); per-source maps are drawn on the 20,484-vertex surface with the medial wall left
uncoloured.  The meshes ship inside the head-model file (from nilearn's packaged fsaverage5).

Volume projection (for glass brains and NIfTI exports): each source is placed at its
mid-thickness position ((white + pial) / 2) in fsaverage surface RAS, which is MNI305 space,
mapped to MNI152 with FreeSurfer's published MNI305 → MNI152 affine (a ~1-2 mm correction), and
every voxel of nilearn's MNI152 2009 grey-matter template whose grey-matter probability is at least
``gm_threshold`` and which lies within ``max_dist_mm`` of a source takes that nearest source's value
(nearest-vertex fill).  Grey-matter voxels further than that from the cortical sheet (deep nuclei,
most of the cerebellum) stay empty.  The packaged template is uint8 0-255 on disk; it is rescaled
to 0-1 here.
"""

from __future__ import annotations

import logging

import numpy as np

from .._docs import fill_doc
from ..checks import check_option
from ..headmodel import load_head_model
from ..headmodel.geometry import MNI305_TO_MNI152, mni305_to_mni152  # noqa: F401  (re-exported)
from ..headmodel.model import HEMIS, N_PER_HEMI, N_SURFACE

logger = logging.getLogger("sourcelab")

N_LEFT = N_PER_HEMI

_SURFACES = {"pial": "pial", "white_matter": "white", "inflated": "inflated"}


def mesh(surface: str, hemi: str) -> tuple[np.ndarray, np.ndarray]:
    """Coordinates (10242, 3) mm and faces (20480, 3) of one fsaverage5 hemisphere.

    Parameters
    ----------
    surface : {"pial", "white_matter", "inflated"}
        Which surface.
    hemi : {"left", "right"}
        Which hemisphere.

    Returns
    -------
    coords : ndarray of float, shape (10242, 3)
        Vertex positions, mm (fsaverage surface RAS).
    faces : ndarray of int64, shape (20480, 3)
        Vertex indices (0-based, within the hemisphere) of each triangle.
    """
    check_option("surface", surface, _SURFACES)
    check_option("hemi", hemi, HEMIS)
    surf = load_head_model().surface
    coords = getattr(surf, _SURFACES[surface])[surf.hemi_slice(hemi)]
    return np.array(coords, dtype=float), np.array(surf.hemi_faces(hemi), dtype=np.int64)


def sulcal_depth() -> tuple[np.ndarray, np.ndarray]:
    """Sulcal depth per vertex (left, right), each shape (10242,), for surface shading.

    Returns
    -------
    left, right : ndarray of float, shape (10242,)
        FreeSurfer ``sulc`` values of each hemisphere's vertices.
    """
    surf = load_head_model().surface
    return tuple(np.asarray(surf.sulc[surf.hemi_slice(h)], float) for h in HEMIS)


def source_positions_mni305() -> np.ndarray:
    """Mid-thickness positions of the cortical sources, shape (n_src, 3), MNI305 mm.

    Returns
    -------
    ndarray, shape (n_src, 3)
        ``(white + pial) / 2`` at each source vertex, left hemisphere first, mm.
    """
    model = load_head_model()
    return model.surface.mid[model.vertno]


def to_surface(values: np.ndarray) -> np.ndarray:
    """Per-source values (n_src,) on the 20,484 surface vertices; NaN on the medial wall.

    Values already given per surface vertex (20,484) are returned as float arrays.

    Parameters
    ----------
    values : array-like, shape (n_src,) or (20484,)
        Per-source (left hemisphere first) or per-surface-vertex values.

    Returns
    -------
    ndarray of float, shape (20484,)
        Values per fsaverage5 vertex (left then right hemisphere).
    """
    v = np.asarray(values, dtype=float)
    if v.shape == (N_SURFACE,):
        return v
    return load_head_model().to_surface(v)


def _grey_matter(resolution: int):
    import nibabel as nib
    from nilearn import datasets

    img = datasets.load_mni152_gm_template(resolution=resolution)
    data = np.asarray(img.dataobj, dtype=np.float32)
    if data.max() > 1.0:  # the packaged file is uint8 0-255
        data = data / 255.0
    return nib.Nifti1Image(data, img.affine)


#: Voxel -> nearest-source lookups by (resolution, gm_threshold, max_dist_mm), this process's
#: (filled by :func:`_volume_map`, or by a figure set's helper process before drawing).
VOLUME_MAPS: dict = {}


def _volume_map(resolution: int, gm_threshold: float, max_dist_mm: float):
    """Cached voxel → nearest-source lookup: (shape, affine, flat voxel indices, source indices)."""
    key = (int(resolution), float(gm_threshold), float(max_dist_mm))
    if key not in VOLUME_MAPS:
        VOLUME_MAPS[key] = _build_volume_map(*key)
    return VOLUME_MAPS[key]


def _build_volume_map(resolution: int, gm_threshold: float, max_dist_mm: float):
    import nibabel as nib
    from scipy.spatial import cKDTree

    gm = _grey_matter(resolution)
    data = np.asarray(gm.dataobj)
    ijk = np.argwhere(data >= gm_threshold)
    xyz = nib.affines.apply_affine(gm.affine, ijk)
    tree = cKDTree(mni305_to_mni152(source_positions_mni305()))
    dist, src = tree.query(xyz, k=1, distance_upper_bound=max_dist_mm)
    keep = np.isfinite(dist)
    flat = np.ravel_multi_index(ijk[keep].T, data.shape)
    logger.debug(
        "volume map %d mm: %d of %d grey-matter voxels filled", resolution, keep.sum(), len(keep)
    )
    return data.shape, gm.affine, flat, src[keep]


def sources_to_volume(
    values: np.ndarray,
    *,
    resolution: int = 2,
    gm_threshold: float = 0.2,
    max_dist_mm: float = 5.0,
    fill: float = 0.0,
):
    """Project per-source values into an MNI152 volume by nearest-source fill in grey matter.

    Parameters
    ----------
    values : ndarray, shape (n_src,) or (n_maps, n_src)
        Per-source values (left hemisphere first).  NaN propagates to the voxels it fills.
    resolution : {2, 3}
        Voxel size, mm.
    gm_threshold : float
        Minimum grey-matter probability (0-1) of a filled voxel.
    max_dist_mm : float
        Largest voxel-to-source distance filled, mm.
    fill : float
        Value of voxels outside the filled set.

    Returns
    -------
    img : Nifti1Image, float32, shape (nx, ny, nz) or (nx, ny, nz, n_maps)
        MNI152 space, ``resolution`` mm voxels.
    """
    check_option("resolution", resolution, (2, 3))
    v = np.asarray(values, dtype=np.float32)
    single = v.ndim == 1
    v2 = v[None] if single else v
    n_src = load_head_model().n_src
    if v2.ndim != 2 or v2.shape[1] != n_src:
        raise ValueError(f"values: need shape ({n_src},) or (n_maps, {n_src}), got {v.shape}")
    shape, affine, flat, src = _volume_map(int(resolution), float(gm_threshold), float(max_dist_mm))
    out = np.full((v2.shape[0], int(np.prod(shape))), fill, dtype=np.float32)
    out[:, flat] = v2[:, src]
    out = out.reshape((v2.shape[0],) + tuple(shape))
    import nibabel as nib

    data = out[0] if single else np.moveaxis(out, 0, -1)
    img = nib.Nifti1Image(data, affine)
    img.header.set_xyzt_units("mm")
    img.header.set_qform(affine, code=4)  # 4 = MNI152
    img.header.set_sform(affine, code=4)
    return img


@fill_doc
def atlas_labels(atlas) -> np.ndarray:
    """ROI number per surface vertex from an :class:`~sourcelab.rois.atlas.Atlas`.

    Used for parcel outlines; where ROIs overlap the later ROI wins.

    %(atlas_parameters)s

    Returns
    -------
    ndarray of int64, shape (20484,)
        Index into ``atlas.rois`` per surface vertex; -1 = none (the medial wall and unlabelled
        cortex).
    """
    return paint_rois(atlas, range(len(atlas.rois)), fill=-1, dtype=np.int64)


@fill_doc
def paint_rois(atlas, codes, *, fill: int, dtype) -> np.ndarray:
    """A code per surface vertex: each ROI's vertices take its code, in ROI order (the later
    ROI wins where ROIs overlap).

    %(atlas_parameters)s
    codes : iterable of int | None, one per ROI of ``atlas.rois``
        The ROI's code; None leaves its vertices as they are.
    fill : int
        Code of vertices in no painted ROI.
    dtype : numpy dtype

    Returns
    -------
    ndarray, shape (20484,)
        Left hemisphere first.
    """
    vertno = load_head_model().vertno
    lab = np.full(N_SURFACE, fill, dtype=dtype)
    for r, code in zip(atlas.rois, codes):
        if code is not None:
            lab[vertno[np.asarray(r.vertices, dtype=np.int64)]] = code
    return lab
