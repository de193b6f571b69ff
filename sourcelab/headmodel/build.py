"""Build the fsaverage5 EEG head model from data shipped inside installed packages (offline).

Ingredients (all inside installed wheels, nothing downloaded):

* inner skull: ``mne/data/fsaverage/fsaverage-inner_skull-bem.fif`` (an ico-5 mesh), decimated
  to ico-``ico`` (ico-4: 2,562 vertices);
* scalp: rays from the inner-skull centre through each inner-skull vertex, intersected with
  ``mne/data/fsaverage/fsaverage-head.fif``; outer skull on the same rays at the inner radius
  plus ``min(6 mm, gap / 2)``.  All three layers share one triangulation, so they never cross;
* conductivities (0.3, 0.006, 0.3) S/m (brain, skull, scalp; MNE's ``make_bem_model`` defaults);
* sources: every fsaverage5 white-surface vertex (nilearn's packaged meshes), left first;
* electrodes: the 19 sites of MNE's fsaverage-fitted 10-20 montage;
* head <-> MRI transform: ``mne/data/fsaverage/fsaverage-trans.fif``.

The free-orientation leadfield from :func:`mne.make_forward_solution` is stored *without*
re-referencing; the inverse applies the average-reference projector.

Run ``python -m sourcelab.headmodel.build --out PATH`` to rebuild (about 1-2 min, < 3 GB).

References
----------
Mosher JC, Leahy RM, Lewis PS (1999). EEG and MEG: forward solutions for inverse methods.
IEEE Trans Biomed Eng 46:245-259.
Hämäläinen MS, Sarvas J (1989). Realistic conductivity geometry model of the human head for
interpretation of neuromagnetic data. IEEE Trans Biomed Eng 36:165-171.
"""

from __future__ import annotations

import argparse
import json
import logging
import os
import sys
import tempfile
import time
from pathlib import Path

import mne
import nibabel as nib
import numpy as np

from ..checks import check_option
from ..constants import SITES_1020
from ..provenance import sha256_file
from .ingredients import (
    fsaverage5_source_space,
    inner_skull_ico,
    mne_fsaverage_dir,
    read_trans,
    write_fsaverage5_subject,
)
from .mne_bridge import eeg_forward
from .model import FILE_FORMAT, N_PER_HEMI
from .sites import MONTAGE_NAME, make_info

logger = logging.getLogger("sourcelab")

#: (brain, skull, scalp) conductivities in S/m (MNE's make_bem_model defaults).
CONDUCTIVITY = (0.3, 0.006, 0.3)
#: Nominal skull thickness, metres; reduced to half the inner-skull-to-scalp gap where thinner.
SKULL_THICKNESS_M = 0.006
_SUBJECT = "fsaverage"


# ----------------------------------------------------------------------------- meshes
def ray_surface_distance(origin, dirs, rr, tris) -> np.ndarray:
    """Distance along rays to their farthest intersection with a closed triangle mesh.

    Möller-Trumbore ray/triangle intersection, vectorised in chunks of rays.

    Parameters
    ----------
    origin : array, shape (3,)
    dirs : array, shape (n_rays, 3)
        Unit directions.
    rr : array, shape (n_vert, 3)
    tris : array, shape (n_tri, 3)

    Returns
    -------
    t : ndarray, shape (n_rays,)
        Distance (units of ``rr``) to the farthest hit at ``t > 0``; NaN where a ray misses.

    References
    ----------
    Möller T, Trumbore B (1997). Fast, minimum storage ray-triangle intersection. J Graph Tools
    2:21-28.
    """
    origin = np.asarray(origin, float)
    dirs = np.asarray(dirs, float)
    v0 = rr[tris[:, 0]]
    e1 = rr[tris[:, 1]] - v0
    e2 = rr[tris[:, 2]] - v0
    s = origin - v0  # (n_tri, 3)
    q = np.cross(s, e1)  # (n_tri, 3)
    out = np.full(len(dirs), np.nan)
    eps = 1e-12
    for start in range(0, len(dirs), 256):
        d = dirs[start : start + 256]  # (n, 3)
        p = np.cross(d[:, None, :], e2[None])  # (n, n_tri, 3)
        det = np.einsum("ntk,tk->nt", p, e1)
        parallel = np.abs(det) <= eps  # ray parallel to the triangle plane: no hit
        inv = 1.0 / np.where(parallel, 1.0, det)
        u = np.einsum("ntk,tk->nt", p, s) * inv
        v = (d @ q.T) * inv
        t = np.einsum("tk,tk->t", e2, q)[None] * inv
        ok = ~parallel & (u >= -1e-9) & (v >= -1e-9) & (u + v <= 1 + 1e-9) & (t > 0)
        t = np.where(ok, t, -np.inf).max(axis=1)
        out[start : start + len(d)] = np.where(np.isfinite(t), t, np.nan)
    return out


def three_layer_meshes(*, ico: int = 4) -> dict:
    """Inner skull, outer skull and scalp meshes sharing one ico triangulation.

    Parameters
    ----------
    ico : int
        Icosahedral subdivision of fsaverage's inner-skull surface used for all three layers.

    Returns
    -------
    layers : dict
        ``inner_skull``, ``outer_skull``, ``outer_skin`` : ndarray (n_vert, 3), metres, MRI frame;
        ``tris`` : ndarray (n_tri, 3); ``centre`` : ndarray (3,), metres;
        ``min_gap_mm`` : dict of the smallest radial gaps between neighbouring layers.

    Raises
    ------
    RuntimeError
        If a ray from the centre misses the scalp or meets it inside the inner skull.
    """
    inner, tris = inner_skull_ico(ico)
    centre = inner.mean(axis=0)
    radial = inner - centre
    r_in = np.linalg.norm(radial, axis=1)
    dirs = radial / r_in[:, None]
    head = mne.read_bem_surfaces(mne_fsaverage_dir() / "fsaverage-head.fif", verbose="error")[0]
    r_scalp = ray_surface_distance(centre, dirs, head["rr"], head["tris"])
    if np.isnan(r_scalp).any() or (r_scalp <= r_in).any():
        raise RuntimeError("scalp ray casting failed: some rays miss the scalp or hit inside")
    gap = r_scalp - r_in
    r_out = r_in + np.minimum(SKULL_THICKNESS_M, gap / 2.0)
    return {
        "inner_skull": centre + dirs * r_in[:, None],
        "outer_skull": centre + dirs * r_out[:, None],
        "outer_skin": centre + dirs * r_scalp[:, None],
        "tris": tris,
        "centre": centre,
        "min_gap_mm": {
            "inner_to_outer_skull": float((r_out - r_in).min() * 1e3),
            "outer_skull_to_scalp": float((r_scalp - r_out).min() * 1e3),
        },
    }


def bem_solution_from_layers(
    layers, tris, *, subjects_dir, subject: str = _SUBJECT, conductivity=CONDUCTIVITY
) -> mne.bem.ConductorModel:
    """Three-layer linear-collocation BEM solution from meshes sharing a triangulation.

    The meshes are written as FreeSurfer surfaces to ``subjects_dir/subject/bem/`` and passed
    through :func:`mne.make_bem_model` (``ico=None``) and :func:`mne.make_bem_solution`.  The
    same function builds the head model and the concentric-sphere validation model.

    Parameters
    ----------
    layers : sequence of 3 arrays, each shape (n_vert, 3)
        Inner skull, outer skull, scalp vertices, metres, MRI frame.
    tris : array, shape (n_tri, 3)
        Triangles (outward, counter-clockwise), shared by all layers.
    subjects_dir : path-like
        A writable (temporary) FreeSurfer subjects folder.
    subject : str
    conductivity : tuple of 3 float
        S/m, innermost first.

    Returns
    -------
    bem : mne.bem.ConductorModel
        Linear-collocation BEM solution of the three layers (MRI frame).

    References
    ----------
    Mosher JC, Leahy RM, Lewis PS (1999). IEEE Trans Biomed Eng 46:245-259.
    """
    bem_dir = Path(subjects_dir) / subject / "bem"
    bem_dir.mkdir(parents=True, exist_ok=True)
    for name, rr in zip(("inner_skull", "outer_skull", "outer_skin"), layers):
        nib.freesurfer.write_geometry(
            str(bem_dir / f"{name}.surf"), np.asarray(rr, float) * 1e3, np.asarray(tris, np.int32)
        )
    model = mne.make_bem_model(
        subject,
        ico=None,
        conductivity=tuple(conductivity),
        subjects_dir=subjects_dir,
        verbose="error",
    )
    return mne.make_bem_solution(model, verbose="error")


# ----------------------------------------------------------------------------- writing
def write_npz(path, arrays: dict) -> None:
    """Write an uncompressed ``.npz`` with fixed zip timestamps, so equal arrays give equal bytes.

    Parameters
    ----------
    path : path-like
        Output file; overwritten.
    arrays : dict of str to ndarray
        Arrays to store, serialised by :func:`sourcelab.provenance.npz_bytes`.
    """
    from ..provenance import npz_bytes

    Path(path).write_bytes(npz_bytes(arrays))


def _versions() -> dict:
    import nilearn
    import scipy

    return {
        "mne": mne.__version__,
        "nilearn": nilearn.__version__,
        "nibabel": nib.__version__,
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "python": sys.version.split()[0],
    }


def _peak_rss_mb() -> float:
    """Peak resident set size of this process (Linux ru_maxrss is in KiB), MB."""
    import resource  # POSIX only: imported here so the package imports on every platform

    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def cortex_mask() -> np.ndarray:
    """Cortical surface vertices of fsaverage5, shape (20484,) bool.

    False on FreeSurfer's medial wall (label 0 of Yeo et al. 2011's fsaverage parcellation, the
    shipped ``yeo7_fsaverage5.npz``): the cut through corpus callosum, hippocampus and brainstem,
    which is not cortex (1,769 vertices).

    Returns
    -------
    mask : ndarray of bool, shape (20484,)
        Left hemisphere first (10,242 vertices each); True on cortex.

    References
    ----------
    Yeo BTT et al. (2011). J Neurophysiol 106:1125-1165.
    """
    import io

    from ..data import shipped_bytes

    with np.load(io.BytesIO(shipped_bytes("yeo7_fsaverage5.npz")[0]), allow_pickle=False) as z:
        labels = np.asarray(z["labels"])
    if labels.shape != (2 * N_PER_HEMI,):
        raise RuntimeError(f"yeo7 labels have shape {labels.shape}")
    return labels > 0


# ----------------------------------------------------------------------------- build
def build_head_model(out_path, *, ico: int = 4, update_manifest: bool | None = None) -> Path:
    """Rebuild the head-model file.

    Parameters
    ----------
    out_path : path-like
        The ``.npz`` to write (temporary name, then rename).
    ico : int
        Icosahedral subdivision of the BEM layers (4: 2,562 vertices per layer; 3: 642).
    update_manifest : bool, optional
        Record the file's sha256 in the shipped ``MANIFEST.json``; default: when ``out_path`` is
        the shipped file.

    Returns
    -------
    path : Path
        ``out_path``.

    Notes
    -----
    The gain is not re-referenced (the inverse applies the average-reference projector).  Only
    cortical vertices are sources (:func:`cortex_mask`).
    """
    from ..data import DATA_DIR
    from ..data import update_manifest as _update_manifest

    out_path = Path(out_path)
    check_option("ico", ico, (2, 3, 4, 5))
    t0 = time.perf_counter()
    layers = three_layer_meshes(ico=ico)
    logger.info(
        "BEM layers: %d vertices each, min gaps %s",
        len(layers["tris"]) // 2 + 2,
        layers["min_gap_mm"],
    )
    trans = read_trans()
    info = make_info(250.0)
    cortex = cortex_mask()
    vertno = np.flatnonzero(cortex)
    with tempfile.TemporaryDirectory(prefix="sourcelab-hm-") as subjects_dir:
        meshes = write_fsaverage5_subject(subjects_dir)
        src = fsaverage5_source_space(subjects_dir, vertno=vertno)
        t_bem = time.perf_counter()
        bem = bem_solution_from_layers(
            (layers["inner_skull"], layers["outer_skull"], layers["outer_skin"]),
            layers["tris"],
            subjects_dir=subjects_dir,
        )
        t_bem = time.perf_counter() - t_bem
        fwd = eeg_forward(info, src=src, bem=bem, trans=trans)
        del bem
    n_src = vertno.size
    if fwd["nsource"] != n_src or list(fwd["sol"]["row_names"]) != list(SITES_1020):
        raise RuntimeError(
            f"forward dropped sources or reordered channels ({fwd['nsource']} of {n_src})"
        )
    if fwd["coord_frame"] != mne.io.constants.FIFF.FIFFV_COORD_HEAD:
        raise RuntimeError("forward is not in head coordinates")
    got = np.concatenate([s["vertno"] + h * N_PER_HEMI for h, s in enumerate(fwd["src"])])
    if not np.array_equal(got, vertno):
        raise RuntimeError("forward sources differ from the cortical vertices")
    gain = np.asarray(fwd["sol"]["data"], dtype=np.float32)
    src_pos = np.concatenate([s["rr"][s["vertno"]] for s in fwd["src"]])
    src_nn = np.concatenate([s["nn"][s["vertno"]] for s in fwd["src"]])
    ch_pos = np.array([ch["loc"][:3] for ch in fwd["info"]["chs"]])
    build_s = time.perf_counter() - t0
    meta = {
        "file_format": FILE_FORMAT,
        "description": "fsaverage5 3-layer BEM EEG leadfield, 19 10-20 sites, free orientation, "
        "cortical sources only, not re-referenced (apply the average-reference "
        "projector in the inverse)",
        "coord_frame": "MNE head coordinates (metres) for gain, ch_pos, src_pos, src_nn; "
        "surface meshes in fsaverage surface RAS (MNI305) millimetres",
        "units": {"gain": "V/(A*m)", "ch_pos": "m", "src_pos": "m", "surf_*": "mm"},
        "reference": "none (raw electrode potentials)",
        "bem": {
            "layers": ["inner_skull", "outer_skull", "outer_skin"],
            "conductivity_S_per_m": list(CONDUCTIVITY),
            "ico": ico,
            "n_vertices_per_layer": len(layers["inner_skull"]),
            "skull_thickness_mm": f"min({SKULL_THICKNESS_M * 1e3:g}, half inner-to-scalp gap)",
            "min_gap_mm": layers["min_gap_mm"],
            "centre_mri_mm": [round(float(c) * 1e3, 3) for c in layers["centre"]],
        },
        "sources": {
            "surface": "fsaverage5 white",
            "n_sources": int(n_src),
            "n_left": int(np.sum(vertno < N_PER_HEMI)),
            "excluded": f"medial wall (Yeo 2011 label 0), {int((~cortex).sum())} vertices",
        },
        "montage": MONTAGE_NAME,
        "trans": "mne/data/fsaverage/fsaverage-trans.fif",
        "head_to_mri": np.asarray(trans["trans"]).round(10).tolist(),
        "versions": _versions(),
    }
    logger.info("head model built in %.1f s (BEM solution %.1f s)", build_s, t_bem)
    arrays = {
        "gain": gain,
        "ch_names": np.array(SITES_1020),
        "ch_pos": ch_pos.astype(np.float64),
        "src_pos": src_pos.astype(np.float64),
        "src_nn": src_nn.astype(np.float64),
        "vertno": vertno.astype(np.int32),
        "surf_white": meshes["white"].astype(np.float32),
        "surf_pial": meshes["pial"].astype(np.float32),
        "surf_inflated": meshes["inflated"].astype(np.float32),
        "surf_faces": meshes["faces"].astype(np.int32),
        "surf_sulc": meshes["sulc"].astype(np.float32),
        "meta_json": np.array(json.dumps(meta, sort_keys=True)),
    }
    out_path.parent.mkdir(parents=True, exist_ok=True)
    tmp = out_path.with_name(f".{out_path.name}.{os.getpid()}.tmp")
    try:
        write_npz(tmp, arrays)
        digest = sha256_file(tmp)
        os.chmod(tmp, 0o644)
        os.replace(tmp, out_path)
    finally:
        if tmp.exists():
            tmp.unlink()
    if update_manifest is None:
        update_manifest = out_path.resolve() == (DATA_DIR / SHIPPED_NAME).resolve()
    if update_manifest:
        _update_manifest({out_path.name: digest})
    logger.info("wrote %s (%.1f MB, sha256 %s)", out_path, out_path.stat().st_size / 1e6, digest)
    return out_path


#: File name of the shipped head model inside ``sourcelab/data``.
SHIPPED_NAME = "fsaverage5_eeg19.npz"


# ----------------------------------------------------------------------------- command line
def _get_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="python -m sourcelab.headmodel.build",
        description="Rebuild the fsaverage5 19-electrode EEG head model from installed packages.",
    )
    p.add_argument(
        "--out",
        default=None,
        help="output .npz path (default: the shipped file, whose sha256 is then "
        "recorded in sourcelab/data/MANIFEST.json)",
    )
    p.add_argument(
        "--ico",
        type=int,
        default=4,
        choices=(3, 4),
        help="icosahedral subdivision of the BEM layers (default 4)",
    )
    return p


def main(argv=None) -> int:
    """Command-line entry point of the head-model builder; returns the exit code.

    Parameters
    ----------
    argv : list of str, optional
        Arguments without the program name; default ``sys.argv[1:]``.

    Returns
    -------
    int
        Exit code, 0 on success.
    """
    from ..data import DATA_DIR

    args = _get_parser().parse_args(argv)
    t0 = time.perf_counter()
    path = build_head_model(args.out or DATA_DIR / SHIPPED_NAME, ico=args.ico)
    print(f"wrote {path} ({path.stat().st_size / 1e6:.2f} MB), sha256 {sha256_file(path)}")
    print(f"build time {time.perf_counter() - t0:.1f} s, peak memory {_peak_rss_mb():.0f} MB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
