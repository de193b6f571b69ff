"""Localise deviations by their peaks on the cortical mesh (pure array functions).

A per-source map (``|z|`` against per-source norms, or band power without norms) is searched for
local maxima on the cortical surface mesh: a source is a peak when its value is at least that of
every mesh neighbour (ties go to the lower index) and above a threshold.  The supra-threshold
sources form clusters (connected components along mesh edges); each peak belongs to one cluster.
For every peak the functions report the MNI coordinate, the area and lobe containing it, its
distance along the mesh to the border of that area, and the areas its cluster spans.

Why peaks and not area means: sLORETA's estimate of one focal source is a blob covering a few
per cent of the cortex.  The blob's *maximum* sits at (noise-free: exactly at; Pascual-Marqui
2002) the generator, but the blob's *mean over an area* favours small areas lying inside the
blob over the large area that holds the generator.  Areas are therefore ranked by the highest
map value they contain (:func:`rank_areas`): the area holding the global peak comes first.

All functions take the mesh and labels as arrays, so they work on any source subset (e.g. the
cortex-only source space; vertices keep their template numbers in ``vertices`` arrays).

References
----------
Pascual-Marqui RD (2002).  Methods Find Exp Clin Pharmacol 24 Suppl D:5-12.
Dijkstra EW (1959).  A note on two problems in connexion with graphs.  Numer Math 1:269-271.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError

#: Columns of :func:`peak_table`.
PEAK_COLUMNS = (
    "peak",
    "source",
    "vertex",
    "value",
    "sign",
    "x_mni152",
    "y_mni152",
    "z_mni152",
    "area",
    "lobe",
    "border_mm",
    "cluster",
    "cluster_size",
    "cluster_areas",
)


@dataclass(frozen=True, eq=False)
class CorticalMesh:
    """A surface mesh over a source subset.

    Attributes
    ----------
    graph : scipy.sparse.csr_matrix, shape (n_src, n_src)
        Symmetric; entry (i, j) is the edge length in mm between neighbouring sources.
    pos_mm : ndarray, shape (n_src, 3)
        Positions used for edge lengths and reported coordinates (MNI305 mm).
    vertices : ndarray of int, shape (n_src,)
        Template vertex number of each source (0..20,483 for fsaverage5).
    """

    graph: object
    pos_mm: np.ndarray
    vertices: np.ndarray

    @property
    def n_src(self) -> int:
        return self.pos_mm.shape[0]


def cortical_mesh(
    faces: np.ndarray, pos_mm: np.ndarray, vertices: np.ndarray | None = None
) -> CorticalMesh:
    """Mesh graph restricted to ``vertices``.

    Parameters
    ----------
    faces : ndarray, shape (n_faces, 3)
        Triangles over the template vertices (both hemispheres stacked, as
        ``TemplateSurface.faces``).
    pos_mm : ndarray, shape (n_template, 3)
        Template vertex positions, mm (e.g. the mid-thickness surface).
    vertices : array of int, optional
        Template vertices to keep, in source order (default all).  Edges with a removed end are
        dropped; triangles are not needed for the graph.

    Returns
    -------
    CorticalMesh
        Edge lengths in mm between the kept vertices, positions ``pos_mm[vertices]``.
    """
    from scipy import sparse

    faces = np.asarray(faces, dtype=np.int64)
    pos_mm = np.asarray(pos_mm, dtype=float)
    n_t = pos_mm.shape[0]
    vertices = np.arange(n_t) if vertices is None else np.asarray(vertices, dtype=np.int64)
    if faces.max() >= n_t or vertices.max() >= n_t:
        raise InputError("faces/vertices index beyond the positions given")
    new = np.full(n_t, -1)
    new[vertices] = np.arange(vertices.size)
    e = np.vstack([faces[:, [0, 1]], faces[:, [1, 2]], faces[:, [2, 0]]])
    e = np.sort(e, axis=1)
    # unique rows through one int64 key per edge (ascending key = the rows in lexicographic
    # order, as np.unique(e, axis=0) gives them; ~10x faster than its structured-row path)
    key = np.unique(e[:, 0] * n_t + e[:, 1])
    e = np.stack([key // n_t, key % n_t], axis=1)
    a, b = new[e[:, 0]], new[e[:, 1]]
    ok = (a >= 0) & (b >= 0)
    a, b, e = a[ok], b[ok], e[ok]
    w = np.linalg.norm(pos_mm[e[:, 0]] - pos_mm[e[:, 1]], axis=1)
    n = vertices.size
    g = sparse.coo_matrix((np.r_[w, w], (np.r_[a, b], np.r_[b, a])), shape=(n, n)).tocsr()
    return CorticalMesh(graph=g, pos_mm=pos_mm[vertices], vertices=vertices)


def local_maxima(
    values: np.ndarray, mesh: CorticalMesh, *, threshold: float = -np.inf
) -> np.ndarray:
    """Sources whose value is >= every mesh neighbour's and > ``threshold``.

    Ties between neighbours go to the lower source index (so a plateau gives one peak per
    connected tie, up to shape).

    Parameters
    ----------
    values : ndarray, shape (n_src,)
        Map over the mesh's sources (e.g. ``|z|`` or power); non-finite values are never peaks.
    mesh : CorticalMesh
        Supplies the neighbours.
    threshold : float
        Peaks need ``value > threshold``.

    Returns
    -------
    ndarray of int
        Source indices, sorted by decreasing value.
    """
    v = np.asarray(values, dtype=float)
    if v.shape != (mesh.n_src,):
        raise InputError(f"values: need shape ({mesh.n_src},), got {v.shape}")
    g = mesh.graph.tocoo()
    i, j = g.row, g.col
    # j beats i if larger, or equal with a lower index
    beats = (v[j] > v[i]) | ((v[j] == v[i]) & (j < i))
    loser = np.zeros(mesh.n_src, dtype=bool)
    loser[i[beats]] = True
    peaks = np.flatnonzero(~loser & np.isfinite(v) & (v > threshold))
    return peaks[np.argsort(-v[peaks], kind="stable")]


def clusters(values: np.ndarray, mesh: CorticalMesh, threshold: float) -> np.ndarray:
    """Connected supra-threshold clusters along mesh edges.

    Parameters
    ----------
    values : ndarray, shape (n_src,)
        Map (``|z|`` or power); non-finite values count as below threshold.
    mesh : CorticalMesh
        Supplies the edges along which sources connect.
    threshold : float
        Sources need ``value > threshold``.

    Returns
    -------
    ndarray of int, shape (n_src,)
        Cluster number per source (0, 1, ... by decreasing cluster maximum), -1 below threshold.
    """
    from scipy.sparse.csgraph import connected_components

    v = np.asarray(values, dtype=float)
    above = np.isfinite(v) & (v > threshold)
    idx = np.flatnonzero(above)
    out = np.full(mesh.n_src, -1)
    if idx.size == 0:
        return out
    sub = mesh.graph[idx][:, idx]
    _, lab = connected_components(sub, directed=False)
    peak_of = np.full(lab.max() + 1, -np.inf)
    np.maximum.at(peak_of, lab, v[idx])
    order = np.argsort(-peak_of, kind="stable")
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    out[idx] = rank[lab]
    return out


def border_distance(labels: np.ndarray, mesh: CorticalMesh) -> np.ndarray:
    """Distance along the mesh (mm) from each source to the border of its own area.

    A *border source* has a mesh neighbour with a different label (another area, or an
    unlabelled source, label 0); its distance is 0.  Any path from inside an area to outside it
    passes a border source of that same area first, so one multi-source Dijkstra from all border
    sources gives every source's distance to its own area's border.  Sources of an area with no
    border (a whole hemisphere) get ``inf``.

    Parameters
    ----------
    labels : ndarray of int, shape (n_src,)
        Area code per source (0 = none).
    mesh : CorticalMesh
        Edge lengths in mm.

    Returns
    -------
    ndarray, shape (n_src,)
        Distance along mesh edges to the own area's border, mm (0 on the border, ``inf``
        for an area without a border).
    """
    from scipy.sparse.csgraph import dijkstra

    lab = np.asarray(labels)
    g = mesh.graph.tocoo()
    border = np.zeros(mesh.n_src, dtype=bool)
    border[g.row[lab[g.row] != lab[g.col]]] = True
    if not border.any():
        return np.full(mesh.n_src, np.inf)
    return dijkstra(mesh.graph, directed=False, indices=np.flatnonzero(border), min_only=True)


def signed_border_distance(
    labels: np.ndarray, mesh: CorticalMesh, border_mm: np.ndarray, source: int, area: int
) -> float:
    """Signed distance (mm) from ``source`` to the border of ``area``, along the mesh.

    Inside the area: its :func:`border_distance` (>= 0).  Outside: minus the mesh distance to
    the nearest source of the area (minus the straight-line distance when no mesh path
    of at most 100 mm reaches it).

    Parameters
    ----------
    labels : ndarray of int, shape (n_src,)
        Area code per source.
    mesh : CorticalMesh
        Edge lengths in mm.
    border_mm : ndarray, shape (n_src,)
        :func:`border_distance` of ``labels``.
    source : int
        Source index (e.g. a peak).
    area : int
        Area code (e.g. the area named for the peak; must have sources).

    Returns
    -------
    d : float
        mm; positive inside the area, negative outside.
    """
    from scipy.sparse.csgraph import dijkstra

    lab = np.asarray(labels)
    source = int(source)
    if lab[source] == area:
        return float(border_mm[source])
    members = np.flatnonzero(lab == area)
    if members.size == 0:
        raise InputError(f"area code {area} has no sources")
    d = dijkstra(mesh.graph, directed=False, indices=source, limit=100.0)[members].min()
    if not np.isfinite(d):
        d = np.linalg.norm(mesh.pos_mm[members] - mesh.pos_mm[source], axis=1).min()
    return -float(d)


def area_maxima(
    values: np.ndarray, labels: np.ndarray, n_areas: int
) -> tuple[np.ndarray, np.ndarray]:
    """Highest value in each area and the source where it is reached.

    Parameters
    ----------
    values : ndarray, shape (n_src,)
        Map over the sources (e.g. ``|z|`` or power).
    labels : ndarray of int, shape (n_src,)
        Area code 1..n_areas per source (0 = none, ignored).
    n_areas : int
        Highest area code.

    Returns
    -------
    vmax : ndarray, shape (n_areas + 1,)
        ``vmax[k]`` for area code ``k`` (``-inf`` for empty areas and for code 0).
    arg : ndarray of int, shape (n_areas + 1,)
        Source of the maximum (-1 when empty).
    """
    v = np.asarray(values, dtype=float)
    lab = np.asarray(labels, dtype=np.int64)
    order = np.lexsort((-v, lab))  # by label, then decreasing value
    first = np.r_[True, lab[order][1:] != lab[order][:-1]]
    vmax = np.full(n_areas + 1, -np.inf)
    arg = np.full(n_areas + 1, -1)
    top = order[first]
    vmax[lab[top]] = v[top]
    arg[lab[top]] = top
    vmax[0], arg[0] = -np.inf, -1
    return vmax, arg


def rank_areas(
    values: np.ndarray, labels: np.ndarray, n_areas: int, *, exclude: np.ndarray | None = None
) -> np.ndarray:
    """Area codes ordered by the highest map value they contain (the peak ranking).

    Parameters
    ----------
    values : ndarray, shape (n_src,)
        E.g. ``|z|`` or power.
    labels : ndarray of int, shape (n_src,)
        Area code per source (0 = none).
    n_areas : int
        Highest area code.
    exclude : array of int, optional
        Area codes left out (e.g. areas not resolvable from 19 electrodes).

    Returns
    -------
    ndarray of int
        Area codes, best first (empty areas last are dropped).
    """
    vmax, _ = area_maxima(values, labels, n_areas)
    if exclude is not None:
        vmax[np.asarray(exclude, dtype=np.int64)] = -np.inf
    order = np.argsort(-vmax[1:], kind="stable") + 1
    return order[np.isfinite(vmax[order])]


def rank_areas_by_mean(values: np.ndarray, labels: np.ndarray, n_areas: int) -> np.ndarray:
    """Area codes ordered by their mean value (the ROI-mean ranking, for comparison).

    Parameters
    ----------
    values : ndarray, shape (n_src,)
        E.g. ``|z|`` or power.
    labels : ndarray of int, shape (n_src,)
        Area code per source (0 = none, ignored).
    n_areas : int
        Highest area code.

    Returns
    -------
    ndarray of int
        Area codes, highest mean first; areas without sources are dropped.
    """
    lab = np.asarray(labels, dtype=np.int64)
    s = np.bincount(lab, weights=np.asarray(values, float), minlength=n_areas + 1)
    c = np.bincount(lab, minlength=n_areas + 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        m = np.where(c > 0, s / c, -np.inf)
    m[0] = -np.inf
    order = np.argsort(-m[1:], kind="stable") + 1
    return order[np.isfinite(m[order])]


def peak_margin(values: np.ndarray, labels: np.ndarray, area: int, peak_value: float) -> float:
    """``1 - (highest value outside ``area``) / peak_value``: how clearly the area wins (0..1).

    0 means another area reaches the same height; values near 1 a peak far above everything
    outside the named area.  For non-negative maps (|z|, power).

    Parameters
    ----------
    values : ndarray, shape (n_src,)
        Non-negative map.
    labels : ndarray of int, shape (n_src,)
        Area code per source.
    area : int
        The named area's code.
    peak_value : float
        The highest value inside ``area``.

    Returns
    -------
    margin : float
        In [0, 1]; 0 when ``peak_value`` is not positive.
    """
    v = np.asarray(values, dtype=float)
    outside = v[np.asarray(labels) != area]
    other = float(np.nanmax(outside)) if outside.size else 0.0
    if not peak_value > 0:
        return 0.0
    return float(np.clip(1.0 - max(other, 0.0) / peak_value, 0.0, 1.0))


def peak_table(
    values: np.ndarray,
    mesh: CorticalMesh,
    labels: np.ndarray,
    area_names,
    lobe_names,
    *,
    threshold: float,
    signs: np.ndarray | None = None,
    max_peaks: int = 20,
    border_mm: np.ndarray | None = None,
):
    """Peaks of a map with their location, area, lobe, border distance and cluster extent.

    Parameters
    ----------
    values : ndarray, shape (n_src,)
        Non-negative map (``|z|`` or power).
    mesh : CorticalMesh
        ``pos_mm`` in MNI305 mm (reported in MNI152 through the FreeSurfer affine).
    labels : ndarray of int, shape (n_src,)
        Area code per source, 0 = none.
    area_names : sequence of str
        Name of area code ``k`` at ``area_names[k]`` (``area_names[0]`` for "no area").
    lobe_names : sequence of str
        Lobe of area code ``k``.
    threshold : float
        Peaks and clusters need ``value > threshold``.
    signs : ndarray, shape (n_src,), optional
        Sign of the underlying signed map (z), reported per peak.
    max_peaks : int
        Peaks reported at most (the highest).
    border_mm : ndarray, shape (n_src,), optional
        Precomputed :func:`border_distance`.

    Returns
    -------
    DataFrame
        Columns :data:`PEAK_COLUMNS`; ``cluster_areas`` lists ``name:count`` of the cluster's
        sources, largest first.
    """
    import pandas as pd

    from ..headmodel.geometry import mni305_to_mni152

    v = np.asarray(values, dtype=float)
    lab = np.asarray(labels, dtype=np.int64)
    peaks = local_maxima(v, mesh, threshold=threshold)[: int(max_peaks)]
    cl = clusters(v, mesh, threshold)
    bd = border_distance(lab, mesh) if border_mm is None else border_mm
    xyz = mni305_to_mni152(mesh.pos_mm[peaks]) if peaks.size else np.zeros((0, 3))
    rows = []
    for k, s in enumerate(peaks):
        members = np.flatnonzero(cl == cl[s])
        codes, counts = np.unique(lab[members], return_counts=True)
        o = np.argsort(-counts, kind="stable")
        spans = ";".join(f"{area_names[c]}:{n}" for c, n in zip(codes[o], counts[o]))
        rows.append(
            dict(
                peak=k + 1,
                source=int(s),
                vertex=int(mesh.vertices[s]),
                value=float(v[s]),
                sign=int(np.sign(signs[s])) if signs is not None else 1,
                x_mni152=round(float(xyz[k, 0]), 1),
                y_mni152=round(float(xyz[k, 1]), 1),
                z_mni152=round(float(xyz[k, 2]), 1),
                area=area_names[lab[s]],
                lobe=lobe_names[lab[s]],
                border_mm=round(float(bd[s]), 1),
                cluster=int(cl[s]),
                cluster_size=int(members.size),
                cluster_areas=spans,
            )
        )
    return pd.DataFrame(rows, columns=list(PEAK_COLUMNS))
