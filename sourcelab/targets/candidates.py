"""Ranked candidate regions and networks from a z-scored analysis.

A *candidate* is an ROI (or network) x band x measure whose value deviates from the norm.  The list
is a statistical summary to support a practitioner's reasoning; it is not a recommendation.

Neighbours and blur
-------------------
sLORETA's estimate of one focal source is a blob whose half-maximum region covers ~3 % of the
template cortex with 19 electrodes (sourcelab head-model validation; HEADMODEL-NOTES).  The
fsaverage5 white surface is ~133,000 mm² (20,484 sources x ~6.5 mm² each, measured by the atlas
builder), so 3 % is ~4,000 mm², a disc of radius ~36 mm.  Two ROIs are therefore *neighbours* when
they share a mesh edge, or when their centroids lie within :data:`NEIGHBOUR_MM` = 35 mm of each
other: a focal generator in one inflates the other.  A candidate whose neighbours deviate the same
way is more likely a blurred (or broad) pattern than a focal source; ``neighbours_same`` counts
them.

Networks
--------
A network ROI's value is the mean power over *all* its sources, so its z is the pooled network
power against norms of that same pooled quantity: in the reference cohort it is standard normal by
construction, and thresholds such as |z| > 1.96 mean what they say.  An average of member z-scores
is not: member areas are correlated (shared sLORETA blur, shared physiology), so its SD lies
somewhere between 1/sqrt(k) and 1 depending on unknown correlations, and it weighs a 30-source area
like a 600-source one.  Member information is kept as a count: ``members_deviating`` of
``n_members`` Brodmann areas whose sources lie mostly (> 50 %) inside the network deviate in the
same direction with |z| >= :data:`DEVIATION_Z`.

References
----------
Pascual-Marqui RD (2002) Methods Find Exp Clin Pharmacol 24 Suppl D:5-12.
Benjamini Y, Hochberg Y (1995) J R Stat Soc B 57:289-300.
"""

from __future__ import annotations

import html
import json
import logging
from dataclasses import dataclass
from pathlib import Path
from typing import Mapping

import numpy as np
import pandas as pd

from .._docs import fill_doc
from ..tsv import table_text
from ..cautions import CAUTIONS
from ..constants import ROI_KEY, Z_THRESHOLD
from ..errors import InputError
from ..provenance import Fingerprint, atomic_write_text

log = logging.getLogger("sourcelab")

#: Centroid distance (mm) within which two ROIs count as neighbours (see module docstring).
NEIGHBOUR_MM = 35.0
#: |z| from which an ROI counts as deviating (two-sided p < 0.05; common practice).
DEVIATION_Z = Z_THRESHOLD
#: Atlases whose ROIs are networks (their rows are pooled network power).
NETWORK_ATLASES = ("networks", "yeo7")
#: Atlas whose areas are counted as network members.
MEMBER_ATLAS = "brodmann"
#: A member area must have more than this fraction of its sources inside the network.
MEMBER_OVERLAP = 0.5

CANDIDATE_COLUMNS = (
    "rank",
    "kind",
    *ROI_KEY,
    "value",
    "z",
    "direction",
    "p",
    "fdr_q",
    "fdr",
    "n_vertices",
    "small",
    "neighbours_same",
    "n_neighbours",
    "neighbours",
    "members_deviating",
    "n_members",
)
#: Columns ``sourcelab targets list`` prints (the numbers behind the rank, not p, q or names).
CANDIDATE_LIST_COLUMNS = tuple(
    c for c in CANDIDATE_COLUMNS if c not in ("value", "p", "fdr_q", "neighbours")
)
#: Columns of the report's candidate table: the listed ones, with each count shown as
#: "k of n" in its deviating-count column.
CANDIDATE_HTML_COLUMNS = tuple(
    c for c in CANDIDATE_LIST_COLUMNS if c not in ("n_neighbours", "n_members")
)


@dataclass(frozen=True, eq=False)
class ResultFolder:
    """What the targets module reads from an analysis folder.

    Attributes
    ----------
    path : Path
    roi_table : DataFrame
        ``roi_table.tsv``.
    provenance : dict
        ``provenance.json``.
    fingerprint : Fingerprint
    """

    path: Path
    roi_table: pd.DataFrame
    provenance: dict
    fingerprint: Fingerprint


def read_result_folder(path: str | Path) -> ResultFolder:
    """Read ``roi_table.tsv`` and ``provenance.json`` of an analysis folder.

    Parameters
    ----------
    path : str or pathlib.Path
        An analysis folder written by sourcelab.

    Returns
    -------
    folder : ResultFolder
        The ROI table (label columns as str) with the provenance and its pipeline fingerprint.

    Raises
    ------
    sourcelab.errors.InputError
        When the folder or one of the two files is missing or unreadable, the provenance has no
        fingerprint, or the table lacks a needed column.
    """
    path = Path(path)
    if not path.is_dir():
        raise InputError("not an analysis folder (no such directory)", path=path)
    tsv, prov = path / "roi_table.tsv", path / "provenance.json"
    for f in (tsv, prov):
        if not f.is_file():
            raise InputError(f"analysis folder lacks {f.name}", path=path)
    try:
        provenance = json.loads(prov.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"not valid JSON ({exc})", path=prov) from None
    if not isinstance(provenance, dict) or "fingerprint" not in provenance:
        raise InputError("provenance lacks the pipeline fingerprint", path=prov)
    try:
        table = pd.read_csv(tsv, sep="\t", keep_default_na=False, na_values=[""])
    except (pd.errors.ParserError, UnicodeDecodeError, ValueError) as exc:
        raise InputError(f"cannot read the ROI table ({exc})", path=tsv) from None
    missing = sorted(
        {"atlas", "roi", "hemisphere", "band", "measure", "value", "z"} - set(table.columns)
    )
    if missing:
        raise InputError(f"ROI table lacks columns {missing}", path=tsv)
    for c in ("atlas", "roi", "hemisphere", "band", "measure"):
        table[c] = table[c].astype(str)
    return ResultFolder(
        path=path,
        roi_table=table,
        provenance=provenance,
        fingerprint=Fingerprint.from_dict(provenance["fingerprint"]),
    )


def roi_adjacency(
    vertex_sets,
    centroids: np.ndarray,
    *,
    edges: np.ndarray | None = None,
    max_centroid_mm: float = NEIGHBOUR_MM,
) -> np.ndarray:
    """Which ROIs are neighbours: a shared mesh edge or centroids within ``max_centroid_mm``.

    Parameters
    ----------
    vertex_sets : sequence of ndarray of int
        Sources of each ROI.
    centroids : ndarray, shape (n_rois, 3)
        mm.
    edges : ndarray, shape (n_edges, 2), optional
        Mesh edges over the sources (see :func:`mesh_edges`).
    max_centroid_mm : float
        ROIs whose centroids lie within this distance, mm, are neighbours.

    Returns
    -------
    ndarray of bool, shape (n_rois, n_rois)
        Symmetric, False on the diagonal and for ROIs that share sources (overlapping ROIs, such
        as a network and its one-hemisphere part, are nested rather than neighbouring).
    """
    c = np.asarray(centroids, dtype=float)
    n = len(vertex_sets)
    d = np.linalg.norm(c[:, None] - c[None], axis=-1)
    adj = np.nan_to_num(d, nan=np.inf) <= max_centroid_mm
    if n:
        n_v = max((int(v.max()) for v in vertex_sets if v.size), default=0) + 1
        if edges is not None:
            n_v = max(n_v, int(edges.max()) + 1)
        member = np.zeros((n_v, n), dtype=np.float32)
        for r, v in enumerate(vertex_sets):
            member[v, r] = 1.0
        if edges is not None:
            cross = (member[edges[:, 0]].T @ member[edges[:, 1]]) > 0  # float BLAS: fast
            adj |= cross | cross.T
        # ROIs sharing sources (a network and its one-hemisphere part) are not neighbours
        adj &= ~((member.T @ member) > 0)
    np.fill_diagonal(adj, False)
    return adj


def network_members(networks, members, *, min_overlap: float = MEMBER_OVERLAP) -> list[list[int]]:
    """Indices of member ROIs lying mostly inside each network ROI.

    Parameters
    ----------
    networks, members : sequence of ndarray of int
        Vertex sets.
    min_overlap : float
        A member needs more than this fraction of its sources inside the network (0..1).

    Returns
    -------
    list of list of int
        Per network, in order, the indices into ``members`` of the member ROIs.
    """
    out = []
    for net in networks:
        inside = [
            j
            for j, m in enumerate(members)
            if m.size and np.isin(m, net, assume_unique=True).mean() > min_overlap
        ]
        out.append(inside)
    return out


def _direction(z: float) -> str:
    return "above norm" if z > 0 else "below norm"


def rank_candidates(
    roi_table: pd.DataFrame,
    *,
    atlases: Mapping | None = None,
    edges: np.ndarray | None = None,
    include: tuple[str, ...] | None = None,
    max_n: int | None = None,
    deviation_z: float = DEVIATION_Z,
    min_abs_z: float = DEVIATION_Z,
) -> pd.DataFrame:
    """Rank deviating ROIs and networks: FDR-significant first, then by |z|.

    Parameters
    ----------
    roi_table : DataFrame
        An analysis ROI table z-scored by :func:`sourcelab.norms.apply_norms` (columns ``atlas,
        roi, hemisphere, band, measure, value, z`` and, when present, ``p, fdr_q, fdr,
        n_vertices, small``).
    atlases : mapping of str -> Atlas, optional
        Atlas objects by name, for neighbours and network members; atlases missing here get
        NaN neighbour/member counts.
    edges : ndarray, shape (n_edges, 2), optional
        Mesh edges between sources (:func:`sourcelab.headmodel.geometry.source_edges`; adds
        shared-edge neighbours to the centroid criterion).
    include : tuple of str, optional
        Atlases to rank (default: all in the table).
    max_n : int, optional
        Keep the first ``max_n`` rows.
    deviation_z : float
        |z| from which a neighbour or member counts as deviating.
    min_abs_z : float
        Candidates need |z| >= this, or an FDR flag.

    Returns
    -------
    DataFrame
        Columns :data:`CANDIDATE_COLUMNS`; ``kind`` is ``"network"`` for rows of
        :data:`NETWORK_ATLASES`, else ``"roi"``.
    """
    t = roi_table.copy()
    if "z" not in t or not np.isfinite(pd.to_numeric(t["z"], errors="coerce")).any():
        raise InputError(
            "the ROI table has no z-scores: analyse with norms (--norms, --age) to list candidates"
        )
    t["z"] = pd.to_numeric(t["z"], errors="coerce")
    for c, default in (
        ("p", np.nan),
        ("fdr_q", np.nan),
        ("fdr", False),
        ("n_vertices", -1),
        ("small", False),
    ):
        if c not in t:
            t[c] = default
    t["fdr"] = t["fdr"].astype(str).str.lower().isin(("true", "1"))
    t["small"] = t["small"].astype(str).str.lower().isin(("true", "1"))
    if include is not None:
        unknown = sorted(set(include) - set(t["atlas"]))
        if unknown:
            raise InputError(
                f"atlases {unknown} are not in the ROI table ({sorted(set(t['atlas']))})"
            )
        t = t[t["atlas"].isin(include)]
    atlases = dict(atlases or {})
    full = roi_table[["atlas", "roi", "hemisphere", "band", "measure", "z"]]
    zs = pd.to_numeric(full["z"], errors="coerce")
    zlook = {
        (str(a), str(n), str(h), str(b), str(m)): float(z)
        for a, n, h, b, m, z in zip(
            full["atlas"], full["roi"], full["hemisphere"], full["band"], full["measure"], zs
        )
    }

    keep = t[np.isfinite(t["z"]) & ((t["z"].abs() >= min_abs_z) | t["fdr"])].copy()
    ctx = {
        name: _atlas_context(atlases[name], atlases.get(MEMBER_ATLAS), edges)
        for name in set(keep["atlas"])
        if name in atlases
    }
    rows = []
    for r in keep.itertuples(index=False):
        z = float(r.z)
        sign = np.sign(z)
        kind = "network" if r.atlas in NETWORK_ATLASES else "roi"
        nb_same = n_nb = m_dev = n_mem = np.nan
        nb_names = ""
        c = ctx.get(r.atlas)
        key = (r.roi, r.hemisphere)
        if c is not None and key in c["index"]:
            i = c["index"][key]
            if kind == "roi" or r.hemisphere != "both":
                # two-hemisphere ROIs duplicate their one-hemisphere parts: not counted
                nbrs = [
                    c["names"][j] for j in np.flatnonzero(c["adj"][i]) if c["names"][j][1] != "both"
                ]
                same = [
                    f"{n}-{h}"
                    for n, h in nbrs
                    if _deviates(zlook.get((r.atlas, n, h, r.band, r.measure)), sign, deviation_z)
                ]
                nb_same, n_nb, nb_names = len(same), len(nbrs), ";".join(same)
            if kind == "network" and c["members"] is not None:
                mem = [c["member_names"][j] for j in c["members"][i]]
                n_mem = len(mem)
                m_dev = sum(
                    _deviates(zlook.get((MEMBER_ATLAS, n, h, r.band, r.measure)), sign, deviation_z)
                    for n, h in mem
                )
        rows.append(
            dict(
                kind=kind,
                atlas=r.atlas,
                roi=r.roi,
                hemisphere=r.hemisphere,
                band=r.band,
                measure=r.measure,
                value=float(r.value),
                z=z,
                direction=_direction(z),
                p=float(r.p),
                fdr_q=float(r.fdr_q),
                fdr=bool(r.fdr),
                n_vertices=int(r.n_vertices),
                small=bool(r.small),
                neighbours_same=nb_same,
                n_neighbours=n_nb,
                neighbours=nb_names,
                members_deviating=m_dev,
                n_members=n_mem,
            )
        )
    out = pd.DataFrame(rows, columns=[c for c in CANDIDATE_COLUMNS if c != "rank"])
    if len(out):
        out["_absz"] = out["z"].abs()
        out = out.sort_values(["fdr", "_absz"], ascending=[False, False], kind="stable")
        out = out.drop(columns="_absz").reset_index(drop=True)
    out.insert(0, "rank", np.arange(1, len(out) + 1))
    for c in ("neighbours_same", "n_neighbours", "members_deviating", "n_members"):
        out[c] = out[c].astype("Int64") if len(out) else out[c]
    if max_n is not None:
        if max_n < 1:
            raise InputError(f"--max: need a positive number of rows, got {max_n}")
        out = out.head(max_n)
    return out


def _deviates(z, sign, threshold) -> bool:
    return z is not None and np.isfinite(z) and abs(z) >= threshold and np.sign(z) == sign


def _atlas_context(atlas, member_atlas, edges) -> dict:
    sets = [r.vertices for r in atlas.rois]
    names = [(r.name, r.hemisphere) for r in atlas.rois]
    cent = np.array([r.centroid_mni for r in atlas.rois], dtype=float)
    ctx = {
        "names": names,
        "index": {k: i for i, k in enumerate(names)},
        "adj": roi_adjacency(sets, cent, edges=edges),
        "members": None,
    }
    if atlas.name in NETWORK_ATLASES and member_atlas is not None:
        ctx["members"] = network_members(sets, [r.vertices for r in member_atlas.rois])
        ctx["member_names"] = [(r.name, r.hemisphere) for r in member_atlas.rois]
    return ctx


@fill_doc
def candidates_for_table(
    roi_table: pd.DataFrame, *, max_n: int | None = None, include: tuple[str, ...] | None = None
) -> pd.DataFrame:
    """Candidates of a z-scored ROI table with the shipped atlases and template mesh edges.

    For the report: ``candidates_html(candidates_for_table(result.roi_table))``.

    Parameters
    ----------
    roi_table : DataFrame
        An analysis ROI table z-scored against norms (see :func:`rank_candidates`).
    %(max_n_include)s

    Returns
    -------
    DataFrame
        Columns :data:`CANDIDATE_COLUMNS`, as :func:`rank_candidates`; ROIs of atlases that
        are not shipped (custom ROI sets) get no neighbour counts.
    """
    from ..headmodel import load_head_model
    from ..headmodel.geometry import source_edges
    from ..rois import load_atlas

    names = sorted(set(roi_table["atlas"].astype(str)) | {MEMBER_ATLAS})
    atlases = {}
    for n in names:
        try:
            atlases[n] = load_atlas(n)
        except InputError:  # a custom ROI set: ranked, but without neighbours
            log.info("atlas %s is not shipped: no neighbour counts for it", n)
    edges = source_edges(load_head_model())
    return rank_candidates(roi_table, atlases=atlases, edges=edges, include=include, max_n=max_n)


@fill_doc
def candidates_from_folder(
    result_dir: str | Path, *, max_n: int | None = None, include: tuple[str, ...] | None = None
) -> pd.DataFrame:
    """Candidates of an analysis folder (``roi_table.tsv``); see :func:`candidates_for_table`.

    Parameters
    ----------
    result_dir : str or pathlib.Path
        An analysis folder (analysed with norms).
    %(max_n_include)s

    Returns
    -------
    DataFrame
        Columns :data:`CANDIDATE_COLUMNS`.
    """
    return candidates_for_table(
        read_result_folder(result_dir).roi_table, max_n=max_n, include=include
    )


def read_candidates(result_dir: str | Path) -> pd.DataFrame | None:
    """The candidates an analysis wrote (``candidates.tsv``), or None when it wrote none.

    Parameters
    ----------
    result_dir : str | Path
        An analysis folder.

    Returns
    -------
    DataFrame | None
        The table as written (``n/a`` read as missing), or None when the folder has no
        ``candidates.tsv``.
    """
    path = Path(result_dir) / "candidates.tsv"
    if not path.is_file():
        return None
    try:
        with open(path, encoding="utf-8") as f:  # tables of sourcelab <= 0.2 began with '#' lines
            skip = 0
            for line in f:
                if not line.startswith("#"):
                    break
                skip += 1
        return pd.read_csv(
            path, sep="\t", skiprows=skip, keep_default_na=False, na_values=["", "n/a"]
        )
    except (pd.errors.ParserError, UnicodeDecodeError, ValueError) as exc:
        raise InputError(f"cannot read the candidate table ({exc})", path=path) from None


#: Descriptions of the candidate-table columns (its JSON sidecar).
CANDIDATE_COLUMN_NOTES = {
    "rank": "rank of the candidate (1: largest |z| after the ranking rules)",
    "kind": "area, or network (pooled power of a network's areas)",
    "atlas": "atlas of the region",
    "roi": "region of interest",
    "hemisphere": "left, right or both",
    "band": "frequency band",
    "measure": "absolute or relative band power",
    "z": "z-score against the norms",
    "direction": "above or below the norm",
    "fdr": "survives the false-discovery-rate correction over the table",
    "n_vertices": "cortical sources in the region",
    "small": "the region has fewer sources than sourcelab's minimum for a stable mean",
    "neighbours_same": "neighbouring areas deviating in the same direction",
    "n_neighbours": "neighbouring areas",
    "members_deviating": "member areas deviating in the same direction (networks)",
    "n_members": "member areas (networks)",
    "role": "what the row is (a peak, or a network summary)",
    "area": "Brodmann area named for the peak (highest template-match evidence within 35 mm)",
    "lobe": "lobe of that area",
    "peak_z": "z-score at the peak",
    "fit": (
        "correlation of the deviation map with the map a focal patch in the named area predicts "
        "(candidates rank by |peak z| x fit)"
    ),
    "x_mni152": "x of the peak, MNI152",
    "y_mni152": "y of the peak, MNI152",
    "z_mni152": "z of the peak, MNI152",
    "border_mm": "distance from the peak to the named area's border (negative: peak outside it)",
    "own_share": "share of the peak's deviation that arises in the area itself",
    "probability": "probability that the deviation lies in this area",
}


def candidates_sidecar(candidates: pd.DataFrame) -> dict:
    """The JSON sidecar of ``candidates.tsv``: column descriptions (BIDS style) and, under
    ``Cautions``, what the table can and cannot say.

    Parameters
    ----------
    candidates : DataFrame
        The candidate table as written (its columns are described).

    Returns
    -------
    sidecar : dict
        ``{column: {"Description": ..., "Units": ...}}`` (units for z in standard deviations
        of the norm and for MNI coordinates and border distances in mm), plus ``Cautions``
        and ``GeneratedBy``.
    """
    out = {
        c: {"Description": CANDIDATE_COLUMN_NOTES.get(c, c.replace("_", " "))}
        for c in candidates.columns
    }
    from .. import __version__

    for c in ("z", "peak_z"):
        if c in out:
            out[c]["Units"] = "standard deviations of the norm"
    for c in ("x_mni152", "y_mni152", "z_mni152", "border_mm"):
        if c in out:
            out[c]["Units"] = "mm"
    return {
        **out,
        "Cautions": list(CAUTIONS),
        "GeneratedBy": [{"Name": "sourcelab", "Version": __version__}],
    }


def write_candidates(candidates: pd.DataFrame, path: str | Path) -> Path:
    """Write the candidate table as a plain TSV (atomically; header row first) and its sidecar
    ``<stem>.json`` (column descriptions and the cautions).

    Parameters
    ----------
    candidates : DataFrame
        The candidate table; missing values are written as ``n/a``, floats with 4 significant
        digits.
    path : str or pathlib.Path
        TSV file to write; the sidecar goes beside it with the suffix ``.json``.

    Returns
    -------
    path : pathlib.Path
        The TSV written.
    """
    path = Path(path)
    body = table_text(candidates, na_rep="n/a", float_format="%.4g")
    atomic_write_text(
        path.with_suffix(".json"),
        json.dumps(candidates_sidecar(candidates), indent=2, ensure_ascii=False) + "\n",
    )
    atomic_write_text(path, body)
    return path


def candidates_html(candidates: pd.DataFrame, *, max_rows: int = 20) -> str:
    """An HTML fragment (a ``<section>``) for the report: the ranked table and the cautions.

    Parameters
    ----------
    candidates : DataFrame
        Ranked candidates (:data:`CANDIDATE_COLUMNS`).
    max_rows : int
        Rows shown at most (the first ``max_rows`` rows of ``candidates``).

    Returns
    -------
    html : str
        The ``<section class="sourcelab-candidates">`` fragment, text escaped.
    """
    e = html.escape
    cols = CANDIDATE_HTML_COLUMNS
    heads = "".join(f"<th>{e(c.replace('_', ' '))}</th>" for c in cols)
    body = []
    for r in candidates.head(max_rows).to_dict("records"):
        cells = []
        for c in cols:
            v = r.get(c)
            if c == "z":
                s = f"{v:+.2f}"
            elif c == "members_deviating" and not pd.isna(v):
                s = f"{int(v)} of {int(r['n_members'])}"
            elif c == "neighbours_same" and not pd.isna(v):
                s = f"{int(v)} of {int(r['n_neighbours'])}"
            elif v is None or (not isinstance(v, str) and pd.isna(v)):
                s = "–"
            elif isinstance(v, (bool, np.bool_)):
                s = "yes" if v else "no"
            else:
                s = str(v)
            cells.append(f"<td>{e(s)}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    if not body:
        body = [
            f'<tr><td colspan="{len(cols)}">No ROI or network deviates beyond '
            f"|z| = {DEVIATION_Z}.</td></tr>"
        ]
    cautions = "".join(f"<li>{e(c)}</li>" for c in CAUTIONS)
    return (
        '<section class="sourcelab-candidates">\n'
        "<h2>Regions and networks that deviate from the norm</h2>\n"
        "<p>Statistical deviation only: each row is a region or network whose band power lies "
        "outside the reference range, ranked FDR-significant first, then by |z|. Whether any of "
        "them is worth training is for a licensed practitioner to decide, correlating with the "
        "person's symptoms and history. Neighbours deviating the same way suggest sLORETA blur "
        "or a broad pattern rather than a focal source; small regions are unreliable.</p>\n"
        f"<table>\n<thead><tr>{heads}</tr></thead>\n<tbody>\n"
        + "\n".join(body)
        + f'\n</tbody>\n</table>\n<ul class="cautions">{cautions}</ul>\n</section>\n'
    )
