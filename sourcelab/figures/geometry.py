"""Template geometry for figures and exports: fsaverage5 meshes and source → MNI volume projection.

Sources are the 20,484 fsaverage5 cortical vertices, left hemisphere first (source ``i`` < 10,242
is left vertex ``i``; ``10,242 + v`` is right vertex ``v``).  Meshes come from nilearn's packaged
fsaverage5 (offline).

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

import functools
import logging

import nibabel as nib
import numpy as np

logger = logging.getLogger("sourcelab")

N_LEFT = 10242
N_SRC = 2 * N_LEFT

#: MNI305 (fsaverage surface RAS) → MNI152 affine, mm.  FreeSurfer wiki "CoordinateSystems",
#: section "MNI305 to MNI152" (from memory).
MNI305_TO_MNI152 = np.array([
    [0.9975, -0.0073, 0.0176, -0.0429],
    [0.0146, 1.0009, -0.0024, 1.5496],
    [-0.0130, -0.0093, 0.9971, 1.1840],
    [0.0, 0.0, 0.0, 1.0],
])

HEMIS = ("left", "right")


@functools.lru_cache(maxsize=1)
def _fsaverage5():
    from nilearn import datasets

    return datasets.load_fsaverage("fsaverage5")


def mesh(surface: str, hemi: str) -> tuple[np.ndarray, np.ndarray]:
    """Coordinates (10242, 3) mm and faces (20480, 3) of one fsaverage5 hemisphere.

    Parameters
    ----------
    surface : {"pial", "white_matter", "inflated", "sphere"}
    hemi : {"left", "right"}
    """
    fs = _fsaverage5()
    if surface not in ("pial", "white_matter", "inflated", "sphere"):
        raise ValueError(f"surface: {surface!r} is not one of pial, white_matter, inflated, sphere")
    if hemi not in HEMIS:
        raise ValueError(f"hemi: {hemi!r} is not one of left, right")
    m = fs[surface].parts[hemi]
    return np.asarray(m.coordinates, float), np.asarray(m.faces, np.int64)


@functools.lru_cache(maxsize=1)
def sulcal_depth() -> tuple[np.ndarray, np.ndarray]:
    """Sulcal depth per vertex (left, right), each shape (10242,), for surface shading."""
    from nilearn import datasets

    d = datasets.load_fsaverage_data("fsaverage5", data_type="sulcal")
    return tuple(np.asarray(d.data.parts[h], float).ravel() for h in HEMIS)


@functools.lru_cache(maxsize=1)
def source_positions_mni305() -> np.ndarray:
    """Mid-thickness positions of the 20,484 sources, shape (20484, 3), MNI305 mm."""
    parts = []
    for h in HEMIS:
        white, _ = mesh("white_matter", h)
        pial, _ = mesh("pial", h)
        parts.append((white + pial) / 2.0)
    return np.concatenate(parts)


def mni305_to_mni152(xyz: np.ndarray) -> np.ndarray:
    """Apply :data:`MNI305_TO_MNI152` to points of shape (n, 3), mm."""
    xyz = np.asarray(xyz, float)
    return xyz @ MNI305_TO_MNI152[:3, :3].T + MNI305_TO_MNI152[:3, 3]


def _grey_matter(resolution: int) -> nib.Nifti1Image:
    from nilearn import datasets

    img = datasets.load_mni152_gm_template(resolution=resolution)
    data = np.asarray(img.dataobj, dtype=np.float32)
    if data.max() > 1.0:  # the packaged file is uint8 0-255
        data = data / 255.0
    return nib.Nifti1Image(data, img.affine)


@functools.lru_cache(maxsize=4)
def _volume_map(resolution: int, gm_threshold: float, max_dist_mm: float):
    """Cached voxel → nearest-source lookup: (shape, affine, flat voxel indices, source indices)."""
    from scipy.spatial import cKDTree

    gm = _grey_matter(resolution)
    data = np.asarray(gm.dataobj)
    ijk = np.argwhere(data >= gm_threshold)
    xyz = nib.affines.apply_affine(gm.affine, ijk)
    tree = cKDTree(mni305_to_mni152(source_positions_mni305()))
    dist, src = tree.query(xyz, k=1, distance_upper_bound=max_dist_mm)
    keep = np.isfinite(dist)
    flat = np.ravel_multi_index(ijk[keep].T, data.shape)
    logger.debug("volume map %d mm: %d of %d grey-matter voxels filled", resolution, keep.sum(),
                 len(keep))
    return data.shape, gm.affine, flat, src[keep]


def sources_to_volume(values: np.ndarray, *, resolution: int = 2, gm_threshold: float = 0.2,
                      max_dist_mm: float = 5.0, fill: float = 0.0) -> nib.Nifti1Image:
    """Project per-source values into an MNI152 volume by nearest-source fill in grey matter.

    Parameters
    ----------
    values : ndarray, shape (20484,) or (n_maps, 20484)
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
    if resolution not in (2, 3):
        raise ValueError(f"resolution: {resolution!r} is not one of 2, 3 (mm)")
    v = np.asarray(values, dtype=np.float32)
    single = v.ndim == 1
    v2 = v[None] if single else v
    if v2.ndim != 2 or v2.shape[1] != N_SRC:
        raise ValueError(f"values: need shape ({N_SRC},) or (n_maps, {N_SRC}), got {v.shape}")
    shape, affine, flat, src = _volume_map(int(resolution), float(gm_threshold), float(max_dist_mm))
    out = np.full((v2.shape[0], int(np.prod(shape))), fill, dtype=np.float32)
    out[:, flat] = v2[:, src]
    out = out.reshape((v2.shape[0],) + tuple(shape))
    data = out[0] if single else np.moveaxis(out, 0, -1)
    img = nib.Nifti1Image(data, affine)
    img.header.set_xyzt_units("mm")
    img.header.set_qform(affine, code=4)  # 4 = MNI152
    img.header.set_sform(affine, code=4)
    return img


def atlas_labels(atlas) -> np.ndarray:
    """Label per source from an :class:`~sourcelab.rois.atlas.Atlas`, shape (20484,), -1 = none.

    Used for parcel outlines; where ROIs overlap the later ROI wins.
    """
    lab = np.full(N_SRC, -1, dtype=np.int64)
    for k, r in enumerate(atlas.rois):
        lab[np.asarray(r.vertices, dtype=np.int64)] = k
    return lab
