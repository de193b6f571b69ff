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
import resource
import sys
import tempfile
import time
import zipfile
from pathlib import Path

import mne
import nibabel as nib
import numpy as np

from ..config import SITES_1020
from ..provenance import atomic_write_text, sha256_file
from .sites import MONTAGE_NAME, make_info

logger = logging.getLogger("sourcelab")

#: (brain, skull, scalp) conductivities in S/m (MNE's make_bem_model defaults).
CONDUCTIVITY = (0.3, 0.006, 0.3)
#: Nominal skull thickness, metres; reduced to half the inner-skull-to-scalp gap where thinner.
SKULL_THICKNESS_M = 0.006
#: Format version of the shipped file (bump when keys or conventions change).
FILE_FORMAT = 1
_SUBJECT = "fsaverage"


# ----------------------------------------------------------------------------- ingredients
def mne_fsaverage_dir() -> Path:
    """Folder of the fsaverage files shipped inside the MNE wheel."""
    return Path(mne.__file__).parent / "data" / "fsaverage"


def nilearn_fsaverage5_dir() -> Path:
    """Folder of the fsaverage5 meshes shipped inside the nilearn wheel (located without import
    side effects)."""
    import nilearn

    return Path(nilearn.__file__).parent / "datasets" / "data" / "fsaverage5"


def read_trans() -> mne.transforms.Transform:
    """The fsaverage head -> MRI transform shipped with MNE."""
    return mne.read_trans(mne_fsaverage_dir() / "fsaverage-trans.fif", verbose="error")


def read_white_surfaces() -> tuple[tuple[np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray]]:
    """fsaverage5 white surfaces (left, right), each ``(rr_mm, tris)``.

    Returns
    -------
    left, right : tuple of (ndarray (10242, 3) float64, ndarray (20480, 3) int)
        Vertex positions in fsaverage surface RAS (MNI305), millimetres, and triangles.
    """
    out = []
    for hemi in ("left", "right"):
        img = nib.load(nilearn_fsaverage5_dir() / f"white_{hemi}.gii.gz")
        rr = np.asarray(img.darrays[0].data, dtype=np.float64)
        tris = np.asarray(img.darrays[1].data, dtype=np.int64)
        out.append((rr, tris))
    return out[0], out[1]


def inner_skull_ico(ico: int = 4) -> tuple[np.ndarray, np.ndarray]:
    """The shipped fsaverage inner skull decimated to an ico-``ico`` mesh.

    Returns
    -------
    rr : ndarray, shape (10 * 4**ico + 2, 3)
        Vertices, metres, MRI (surface RAS) frame.
    tris : ndarray, shape (20 * 4**ico, 3)
    """
    from mne.bem import _ico_downsample  # private but pinned (mne < 1.14); checks isomorphism

    surf = mne.read_bem_surfaces(
        mne_fsaverage_dir() / "fsaverage-inner_skull-bem.fif", verbose="error"
    )[0]
    with mne.utils.use_log_level("error"):
        dec = _ico_downsample(surf, ico)
    return np.asarray(dec["rr"], float), np.asarray(dec["tris"], np.int64)


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
        d = dirs[start:start + 256]  # (n, 3)
        p = np.cross(d[:, None, :], e2[None])  # (n, n_tri, 3)
        det = np.einsum("ntk,tk->nt", p, e1)
        parallel = np.abs(det) <= eps  # ray parallel to the triangle plane: no hit
        inv = 1.0 / np.where(parallel, 1.0, det)
        u = np.einsum("ntk,tk->nt", p, s) * inv
        v = (d @ q.T) * inv
        t = np.einsum("tk,tk->t", e2, q)[None] * inv
        ok = ~parallel & (u >= -1e-9) & (v >= -1e-9) & (u + v <= 1 + 1e-9) & (t > 0)
        t = np.where(ok, t, -np.inf).max(axis=1)
        out[start:start + len(d)] = np.where(np.isfinite(t), t, np.nan)
    return out


def three_layer_meshes(*, ico: int = 4) -> dict:
    """Inner skull, outer skull and scalp meshes sharing one ico triangulation.

    Returns
    -------
    layers : dict
        ``inner_skull``, ``outer_skull``, ``outer_skin`` : ndarray (n_vert, 3), metres, MRI frame;
        ``tris`` : ndarray (n_tri, 3); ``centre`` : ndarray (3,), metres;
        ``min_gap_mm`` : dict of the smallest radial gaps between neighbouring layers.
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
        subject, ico=None, conductivity=tuple(conductivity), subjects_dir=subjects_dir,
        verbose="error",
    )
    return mne.make_bem_solution(model, verbose="error")


def write_fsaverage5_subject(subjects_dir) -> tuple[np.ndarray, np.ndarray]:
    """Write nilearn's fsaverage5 white surfaces as ``subjects_dir/fsaverage/surf/?h.white``.

    Returns
    -------
    lh_rr, rh_rr : ndarray, shape (10242, 3)
        White-surface vertices, fsaverage surface RAS (MNI305), millimetres.
    """
    surf_dir = Path(subjects_dir) / _SUBJECT / "surf"
    surf_dir.mkdir(parents=True, exist_ok=True)
    out = []
    for hemi, (rr, tris) in zip(("lh", "rh"), read_white_surfaces()):
        nib.freesurfer.write_geometry(str(surf_dir / f"{hemi}.white"), rr, tris.astype(np.int32))
        out.append(rr)
    return out[0], out[1]


def fsaverage5_source_space(subjects_dir) -> mne.SourceSpaces:
    """All 2 x 10,242 fsaverage5 white-surface vertices as an MNE surface source space (MRI frame).

    ``write_fsaverage5_subject(subjects_dir)`` must have been called first.
    """
    return mne.setup_source_space(
        _SUBJECT, spacing="all", surface="white", subjects_dir=subjects_dir, add_dist=False,
        verbose="error",
    )


# ----------------------------------------------------------------------------- writing
def write_npz(path, arrays: dict) -> None:
    """Write an uncompressed ``.npz`` with fixed zip timestamps, so equal arrays give equal bytes.

    Parameters
    ----------
    path : path-like
    arrays : dict of str -> ndarray
        No object arrays (the loader reads with ``allow_pickle=False``).
    """
    with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_STORED, allowZip64=True) as zf:
        for key, arr in arrays.items():
            info = zipfile.ZipInfo(f"{key}.npy", date_time=(1980, 1, 1, 0, 0, 0))
            with zf.open(info, "w", force_zip64=True) as f:
                np.lib.format.write_array(f, np.asanyarray(arr), allow_pickle=False)


def _versions() -> dict:
    import nilearn
    import scipy

    return {
        "mne": mne.__version__, "nilearn": nilearn.__version__, "nibabel": nib.__version__,
        "numpy": np.__version__, "scipy": scipy.__version__, "python": sys.version.split()[0],
    }


def _peak_rss_mb() -> float:
    """Peak resident set size of this process (Linux ru_maxrss is in KiB), MB."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


# ----------------------------------------------------------------------------- build
def build_head_model(out_path, *, ico: int = 4) -> Path:
    """Rebuild the shipped head model file and its sha256 sidecar.

    Parameters
    ----------
    out_path : path-like
        The ``.npz`` to write; ``<stem>.json`` beside it receives its sha256 and the build
        metadata.  Both are written to a temporary name and renamed.
    ico : int
        Icosahedral subdivision of the BEM layers (4: 2,562 vertices per layer; 3: 642).

    Returns
    -------
    path : Path
        ``out_path``.

    Notes
    -----
    The gain is not re-referenced (the inverse applies the average-reference projector).
    """
    out_path = Path(out_path)
    if ico not in (2, 3, 4, 5):
        raise ValueError(f"ico must be one of 2, 3, 4, 5, got {ico!r}")
    t0 = time.perf_counter()
    layers = three_layer_meshes(ico=ico)
    logger.info("BEM layers: %d vertices each, min gaps %s", len(layers["tris"]) // 2 + 2,
                layers["min_gap_mm"])
    trans = read_trans()
    info = make_info(250.0)
    with tempfile.TemporaryDirectory(prefix="sourcelab-hm-") as subjects_dir:
        lh_mm, rh_mm = write_fsaverage5_subject(subjects_dir)
        src = fsaverage5_source_space(subjects_dir)
        t_bem = time.perf_counter()
        bem = bem_solution_from_layers(
            (layers["inner_skull"], layers["outer_skull"], layers["outer_skin"]),
            layers["tris"], subjects_dir=subjects_dir,
        )
        t_bem = time.perf_counter() - t_bem
        fwd = mne.make_forward_solution(
            info, trans=trans, src=src, bem=bem, eeg=True, meg=False, mindist=0.0, n_jobs=1,
            verbose="error",
        )
        del bem
    n_src = len(lh_mm) + len(rh_mm)
    if fwd["nsource"] != n_src or list(fwd["sol"]["row_names"]) != list(SITES_1020):
        raise RuntimeError(
            f"forward dropped sources or reordered channels ({fwd['nsource']} of {n_src})"
        )
    if fwd["coord_frame"] != mne.io.constants.FIFF.FIFFV_COORD_HEAD:
        raise RuntimeError("forward is not in head coordinates")
    gain = np.asarray(fwd["sol"]["data"], dtype=np.float32)
    src_pos = np.concatenate([s["rr"][s["vertno"]] for s in fwd["src"]])
    src_nn = np.concatenate([s["nn"][s["vertno"]] for s in fwd["src"]])
    src_mni = np.concatenate([lh_mm, rh_mm])
    ch_pos = np.array([ch["loc"][:3] for ch in fwd["info"]["chs"]])
    build_s = time.perf_counter() - t0
    meta = {
        "file_format": FILE_FORMAT,
        "description": "fsaverage5 3-layer BEM EEG leadfield, 19 10-20 sites, free orientation, "
                       "not re-referenced (apply the average-reference projector in the inverse)",
        "coord_frame": "MNE head coordinates (metres) for gain, ch_pos, src_pos, src_nn; "
                       "src_mni in fsaverage surface RAS (MNI305) millimetres",
        "units": {"gain": "V/(A*m)", "ch_pos": "m", "src_pos": "m", "src_mni": "mm"},
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
        "sources": {"surface": "fsaverage5 white", "n_left": len(lh_mm), "n_right": len(rh_mm)},
        "montage": MONTAGE_NAME,
        "trans": "mne/data/fsaverage/fsaverage-trans.fif",
        "head_to_mri": np.asarray(trans["trans"]).round(10).tolist(),
        "versions": _versions(),
        "build_seconds": round(build_s, 1),
        "bem_solution_seconds": round(t_bem, 1),
    }
    arrays = {
        "gain": gain,
        "ch_names": np.array(SITES_1020),
        "ch_pos": ch_pos.astype(np.float64),
        "src_pos": src_pos.astype(np.float64),
        "src_nn": src_nn.astype(np.float64),
        "src_mni": src_mni.astype(np.float64),
        "n_left": np.array(len(lh_mm)),
        "meta_json": np.array(json.dumps(meta, sort_keys=True)),
    }
    out_path.parent.mkdir(parents=True, exist_ok=True)
    tmp = out_path.with_name(f".{out_path.name}.{os.getpid()}.tmp")
    try:
        write_npz(tmp, arrays)
        digest = sha256_file(tmp)
        os.replace(tmp, out_path)
    finally:
        if tmp.exists():
            tmp.unlink()
    sidecar = {"file": out_path.name, "sha256": digest, "bytes": out_path.stat().st_size,
               "meta": meta}
    atomic_write_text(sidecar_path(out_path), json.dumps(sidecar, indent=2, sort_keys=True) + "\n")
    os.chmod(sidecar_path(out_path), 0o644)  # mkstemp creates 0600; the file ships in the wheel
    logger.info("wrote %s (%.1f MB, sha256 %s) in %.1f s", out_path, out_path.stat().st_size / 1e6,
                digest, build_s)
    return out_path


def sidecar_path(npz_path) -> Path:
    """The ``.json`` beside a head-model ``.npz`` that records its sha256."""
    return Path(npz_path).with_suffix(".json")


# ----------------------------------------------------------------------------- command line
def _get_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="python -m sourcelab.headmodel.build",
        description="Rebuild the fsaverage5 19-electrode EEG head model from installed packages.",
    )
    p.add_argument("--out", required=True, help="output .npz path (a .json sidecar is written "
                                                "beside it)")
    p.add_argument("--ico", type=int, default=4, choices=(3, 4),
                   help="icosahedral subdivision of the BEM layers (default 4)")
    return p


def main(argv=None) -> int:
    """Command-line entry point; returns the exit code."""
    args = _get_parser().parse_args(argv)
    t0 = time.perf_counter()
    path = build_head_model(args.out, ico=args.ico)
    digest = json.loads(sidecar_path(path).read_text())["sha256"]
    print(f"wrote {path} ({path.stat().st_size / 1e6:.2f} MB), sha256 {digest}")
    print(f"build time {time.perf_counter() - t0:.1f} s, peak memory {_peak_rss_mb():.0f} MB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
