"""Reading the template ingredients shipped inside installed packages (MNE, nilearn).

Used when the head model is (re)built and when MNE objects are made from the shipped gain
(:mod:`.mne_bridge`); never on the ordinary analysis path, which reads only the shipped file.

* MNE-Python's ``mne/data/fsaverage/`` (inner skull, scalp, head <-> MRI transform);
* nilearn's ``nilearn/datasets/data/fsaverage5/`` (white, pial, inflated meshes and sulcal depth,
  2 x 10,242 vertices), read with nibabel without importing nilearn.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np

from .model import HEMIS, N_PER_HEMI

_SUBJECT = "fsaverage"


def mne_fsaverage_dir() -> Path:
    """Folder of the fsaverage files shipped inside the MNE wheel.

    Returns
    -------
    pathlib.Path
        ``<mne package>/data/fsaverage`` (BEM surfaces, head surface, head -> MRI transform).
    """
    import mne

    return Path(mne.__file__).parent / "data" / "fsaverage"


def nilearn_fsaverage5_dir() -> Path:
    """Folder of the fsaverage5 meshes shipped inside the nilearn wheel (nilearn not imported).

    Returns
    -------
    pathlib.Path
        ``<nilearn package>/datasets/data/fsaverage5``.

    Raises
    ------
    RuntimeError
        If nilearn is not installed.
    """
    spec = importlib.util.find_spec("nilearn")
    if spec is None or not spec.submodule_search_locations:
        raise RuntimeError("nilearn is not installed: it provides the fsaverage5 meshes")
    return Path(spec.submodule_search_locations[0]) / "datasets" / "data" / "fsaverage5"


def read_trans():
    """The fsaverage head -> MRI transform shipped with MNE.

    Returns
    -------
    mne.transforms.Transform
        Head to MRI (surface RAS) transform, metres.
    """
    import mne

    return mne.read_trans(mne_fsaverage_dir() / "fsaverage-trans.fif", verbose="error")


def read_fsaverage5() -> dict[str, np.ndarray]:
    """nilearn's fsaverage5 meshes and sulcal depth, both hemispheres stacked (left first).

    Returns
    -------
    dict
        ``white``, ``pial``, ``inflated``: (20484, 3) float64, MNI305 mm; ``faces``: (40960, 3)
        int64 over the stacked vertices (right-hemisphere faces offset by 10,242); ``sulc``:
        (20484,) float64.  The three meshes share one triangulation (checked).
    """
    import nibabel as nib

    d = nilearn_fsaverage5_dir()
    out: dict[str, list] = {k: [] for k in ("white", "pial", "inflated", "faces", "sulc")}
    for h, hemi in enumerate(HEMIS):
        tris = None
        for key, stem in (("white", "white"), ("pial", "pial"), ("inflated", "infl")):
            img = nib.load(d / f"{stem}_{hemi}.gii.gz")
            out[key].append(np.asarray(img.darrays[0].data, dtype=np.float64))
            t = np.asarray(img.darrays[1].data, dtype=np.int64)
            if tris is not None and not np.array_equal(t, tris):
                raise RuntimeError(f"nilearn fsaverage5 {stem}_{hemi}: triangles differ")
            tris = t
        out["faces"].append(tris + h * N_PER_HEMI)
        out["sulc"].append(
            np.asarray(
                nib.load(d / f"sulc_{hemi}.gii.gz").darrays[0].data, dtype=np.float64
            ).ravel()
        )
    res = {k: np.concatenate(v) for k, v in out.items()}
    if res["white"].shape != (2 * N_PER_HEMI, 3):
        raise RuntimeError(f"nilearn fsaverage5 has {res['white'].shape[0]} vertices")
    return res


def inner_skull_ico(ico: int = 4) -> tuple[np.ndarray, np.ndarray]:
    """The shipped fsaverage inner skull decimated to an ico-``ico`` mesh.

    Parameters
    ----------
    ico : int
        Icosahedral subdivision level (MNE's ``_ico_downsample``; the surface must be isomorphic to
        an ico-``ico`` sphere).

    Returns
    -------
    rr : ndarray, shape (10 * 4**ico + 2, 3)
        Vertices, metres, MRI (surface RAS) frame.
    tris : ndarray, shape (20 * 4**ico, 3)
        Triangles, int64.
    """
    import mne
    from mne.bem import _ico_downsample  # private but pinned (mne < 1.14); checks isomorphism

    surf = mne.read_bem_surfaces(
        mne_fsaverage_dir() / "fsaverage-inner_skull-bem.fif", verbose="error"
    )[0]
    with mne.utils.use_log_level("error"):
        dec = _ico_downsample(surf, ico)
    return np.asarray(dec["rr"], float), np.asarray(dec["tris"], np.int64)


def write_fsaverage5_subject(subjects_dir) -> dict[str, np.ndarray]:
    """Write nilearn's fsaverage5 white surfaces as ``subjects_dir/fsaverage/surf/?h.white``.

    Parameters
    ----------
    subjects_dir : path-like
        A writable (temporary) FreeSurfer subjects folder; ``fsaverage/surf`` is created in it.

    Returns
    -------
    dict
        :func:`read_fsaverage5`'s meshes (MNI305 mm).
    """
    import nibabel as nib

    surf_dir = Path(subjects_dir) / _SUBJECT / "surf"
    surf_dir.mkdir(parents=True, exist_ok=True)
    meshes = read_fsaverage5()
    for h, hemi in enumerate(("lh", "rh")):
        sl = slice(h * N_PER_HEMI, (h + 1) * N_PER_HEMI)
        half = meshes["faces"].shape[0] // 2
        tris = meshes["faces"][h * half : (h + 1) * half] - h * N_PER_HEMI
        nib.freesurfer.write_geometry(
            str(surf_dir / f"{hemi}.white"), meshes["white"][sl], tris.astype(np.int32)
        )
    return meshes


def fsaverage5_source_space(subjects_dir, vertno=None):
    """fsaverage5 white-surface vertices as an MNE surface source space (MRI frame).

    ``write_fsaverage5_subject(subjects_dir)`` must have been called first.

    Parameters
    ----------
    subjects_dir : path-like
    vertno : ndarray of int, optional
        Surface indices (0..20,483, left first) of the vertices to use; default all.

    Returns
    -------
    mne.SourceSpaces
        Two hemispheres; ``inuse``/``vertno`` restricted to ``vertno`` when given.
    """
    import mne

    src = mne.setup_source_space(
        _SUBJECT,
        spacing="all",
        surface="white",
        subjects_dir=subjects_dir,
        add_dist=False,
        verbose="error",
    )
    if vertno is not None:
        vertno = np.asarray(vertno, dtype=np.int64)
        for h, s in enumerate(src):
            local = vertno[(vertno >= h * N_PER_HEMI) & (vertno < (h + 1) * N_PER_HEMI)]
            local = local - h * N_PER_HEMI
            inuse = np.zeros(s["np"], dtype=np.int32)
            inuse[local] = 1
            s["inuse"] = inuse
            s["vertno"] = np.flatnonzero(inuse)
            s["nuse"] = int(inuse.sum())
            s["nuse_tri"] = 0
            s["use_tris"] = None
    return src
