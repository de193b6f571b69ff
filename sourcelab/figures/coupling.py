"""Coupling figures: electrode pairs on a head, and ROI-by-ROI matrices of network coupling.

* :func:`pair_head_map`: one band and measure of the ``pair_table``.  Every pair that was
  considered is a faint grey chord; pairs whose |z| reaches the threshold are drawn as arcs
  coloured by z on the symmetric diverging z scale (:func:`~sourcelab.figures.colours.z_scale`),
  thicker for larger |z|.  Arcs bow outwards from the head centre so that pairs along one chain
  of electrodes stay apart and a left-right arc does not run through the midline electrodes.
* :func:`coupling_matrix`: one measure of one atlas of the ``coupling_table``, one ROI x ROI
  panel per band, left-hemisphere ROIs first.  With norms the cells show z (same z scale); a
  black frame marks |z| at or beyond the threshold.  Without norms they show the values.  A
  small dot marks an edge whose value exceeds what the inverse's blur alone can explain
  (``leakage_explained`` False).

Electrode positions are the template head's (:class:`sourcelab.headmodel.HeadModel`
``ch_pos``), drawn in an azimuthal equidistant projection about the vertex of the sphere that
fits them best (least squares), nose up.

References
----------
Snyder JP (1987).  Map projections - a working manual.  USGS Professional Paper 1395, p. 191
(azimuthal equidistant projection; from memory).
"""

from __future__ import annotations

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
from matplotlib.collections import LineCollection
from matplotlib.figure import Figure

from ..checks import check_option
from ..constants import Z_THRESHOLD
from ..errors import InputError
from ._shared import check_columns, heatmap_cells, save_if_asked
from .colours import ColourScale, add_colourbar, power_scale, z_scale
from .._docs import fill_doc

_HEMI = {"left": "L", "right": "R", "both": ""}
#: What z > 0 means for each measure (user-facing captions).
_Z_MEANING = {
    "asymmetry": "z > 0: relatively more power at the left (or anterior) site than the norm",
    "imcoh": "z > 0: more positive imaginary coherency (first site leading) than the norm",
    "lag_ms": "z > 0: the first site leads more than in the norm",
    "phase_deg": "z > 0: larger phase difference (first site ahead) than the norm",
    "phase_sd_deg": "z > 0: less consistent phase than the norm",
}


#: Columns of the pair table that :func:`pair_head_map` reads.
PAIR_FIGURE_COLUMNS = tuple(
    "pair channel_a channel_b band measure z homologous intrahemispheric".split()
)
#: Columns of the coupling table that :func:`coupling_matrix` reads.
EDGE_FIGURE_COLUMNS = tuple(
    "atlas roi_a hemisphere_a roi_b hemisphere_b band measure value z".split()
)

#: Short measure names for titles.
MEASURE_TITLES = {
    "msc": "coherence (magnitude squared)",
    "imcoh": "imaginary coherency",
    "lagcoh": "lagged coherence",
    "wpli": "weighted phase-lag index",
    "wpli2_debiased": "debiased wPLI²",
    "lps": "lagged phase synchronisation",
    "phase_deg": "phase difference",
    "lag_ms": "time lag",
    "phase_sd_deg": "phase spread",
    "asymmetry": "power asymmetry",
    "aec_orth": "orthogonalised envelope correlation",
}


def _measure_text(measure: str) -> str:
    return MEASURE_TITLES.get(measure, measure)


def electrode_layout(ch_pos: np.ndarray) -> np.ndarray:
    """2-D positions of electrodes for a head drawing, shape (n, 2), head radius 1.

    Azimuthal equidistant projection about the top of the least-squares sphere through the
    positions: the distance from the centre of the drawing is the angle from the vertex, scaled
    so that 90° falls on the unit circle (the outer ring of the 10-20 system, Fp1 ... T7 ... O1,
    lies close to it on the template head).

    Parameters
    ----------
    ch_pos : ndarray, shape (n, 3)
        Electrode positions, x to the right, y to the front, z up (any unit).

    Returns
    -------
    ndarray, shape (n, 2)
        x to the right, y to the nose.
    """
    p = np.asarray(ch_pos, dtype=float)
    # sphere |p - c|² = r²  <=>  2 p·c + (r² - |c|²) = |p|²  (linear least squares)
    a = np.column_stack([2 * p, np.ones(len(p))])
    sol, *_ = np.linalg.lstsq(a, np.sum(p * p, axis=1), rcond=None)
    u = p - sol[:3]
    u /= np.linalg.norm(u, axis=1, keepdims=True)
    theta = np.arccos(np.clip(u[:, 2], -1.0, 1.0))
    phi = np.arctan2(u[:, 1], u[:, 0])
    r = theta / (np.pi / 2)
    return np.column_stack([r * np.cos(phi), r * np.sin(phi)])


def _draw_head(ax, radius: float) -> None:
    t = np.linspace(0, 2 * np.pi, 200)
    ax.plot(radius * np.cos(t), radius * np.sin(t), color="0.35", lw=1.2, zorder=1)
    nose = np.array([[-0.09, radius * 0.995], [0.0, radius * 1.1], [0.09, radius * 0.995]])
    ax.plot(nose[:, 0], nose[:, 1], color="0.35", lw=1.2, zorder=1)
    for side in (-1, 1):
        ear_t = np.linspace(-0.5 * np.pi, 0.5 * np.pi, 40)
        ax.plot(
            side * (radius + 0.05 * np.cos(ear_t)),
            0.16 * np.sin(ear_t),
            color="0.35",
            lw=1.2,
            zorder=1,
        )


def _arc(p0, p1, *, bow: float = 0.14, away=None, n: int = 24) -> np.ndarray:
    """Quadratic Bézier from p0 to p1 bowing by ``bow`` x the chord, away from the point
    ``away`` (default: the head centre)."""
    p0, p1 = np.asarray(p0, float), np.asarray(p1, float)
    mid = (p0 + p1) / 2
    d = p1 - p0
    normal = np.array([-d[1], d[0]])
    if np.linalg.norm(normal) == 0:
        return np.vstack([p0, p1])
    normal /= np.linalg.norm(normal)
    ref = np.zeros(2) if away is None else np.asarray(away, float)
    if np.dot(normal, mid - ref) < 0:
        normal = -normal
    if away is None and np.linalg.norm(mid) < 0.05:  # a chord through the centre: forwards
        normal = np.array([0.0, 1.0]) if abs(d[0]) >= abs(d[1]) else np.array([1.0, 0.0])
    ctrl = mid + bow * np.linalg.norm(d) * normal
    t = np.linspace(0, 1, n)[:, None]
    return (1 - t) ** 2 * p0 + 2 * (1 - t) * t * ctrl + t**2 * p1


def _near_point(p0, p1, points: np.ndarray, tol: float):
    """The point of ``points`` (n, 2) nearest the segment p0-p1 if within ``tol``, else None."""
    d = p1 - p0
    u = np.clip(((points - p0) @ d) / max(float(d @ d), 1e-12), 0.0, 1.0)
    dist = np.linalg.norm(points - (p0 + u[:, None] * d), axis=1)
    dist[(u <= 0.05) | (u >= 0.95)] = np.inf
    k = int(np.argmin(dist)) if len(dist) else -1
    return points[k] if k >= 0 and dist[k] < tol else None


def _pair_rows(pair_table: pd.DataFrame, band: str, measure: str, pairs: str) -> pd.DataFrame:
    check_columns(pair_table, "pair_table", PAIR_FIGURE_COLUMNS)
    check_option("pairs", pairs, ("figure", "all"))
    t = pair_table[(pair_table["band"] == band) & (pair_table["measure"] == measure)]
    if t.empty:
        raise InputError(f"pair_table: no rows for band={band!r}, measure={measure!r}")
    if pairs == "figure" and measure != "asymmetry":
        keep = t["homologous"].fillna(False).astype(bool) | t["intrahemispheric"].fillna(
            False
        ).astype(bool)
        t = t[keep.to_numpy()]
    return t


def pair_head_map(
    pair_table: pd.DataFrame,
    *,
    band: str,
    measure: str,
    ch_pos: np.ndarray | None = None,
    ch_names=None,
    z_threshold: float = Z_THRESHOLD,
    scale: ColourScale | None = None,
    pairs: str = "figure",
    band_label: str | None = None,
    dpi: int = 90,
    output_file=None,
) -> Figure:
    """Electrode pairs deviating from the norm, drawn as coloured arcs on a head.

    Parameters
    ----------
    pair_table : DataFrame
        z-scored pair table (:data:`sourcelab.coupling.PAIR_COLUMNS`).
    band, measure : str
        Rows to draw (``measure`` one of the pair measures or ``"asymmetry"``).
    ch_pos : ndarray, shape (n_ch, 3), optional
        Electrode positions (default: the shipped template head's); with ``ch_names``.
    ch_names : sequence of str, optional
        Names of ``ch_pos`` rows (default: the template head's sites).
    z_threshold : float
        Pairs with |z| at or above this are drawn in colour (default 1.96, the two-sided 5 %
        normal point: common practice).
    scale : ColourScale, optional
        z colour scale (default :func:`~sourcelab.figures.colours.z_scale`: symmetric ±3).
    pairs : {"figure", "all"}
        ``"figure"``: homologous and intrahemispheric pairs (64 of the 171 of 10-20;
        asymmetry: its homologous and anterior-posterior pairs); ``"all"``: every pair.
    band_label : str, optional
        Band as shown in the title (e.g. ``"alpha (8-12 Hz)"``).
    dpi : int
    output_file : str | Path, optional

    Returns
    -------
    matplotlib.figure.Figure
        ``fig.axes[0]`` holds the head: its first :class:`~matplotlib.collections.LineCollection`
        the grey chords of all pairs considered, the second (when any pair deviates) the
        coloured arcs, one per deviating pair, with ``get_array()`` their z.
    """
    t, where, scale = _pair_inputs(pair_table, band, measure, ch_pos, ch_names, scale, pairs)
    fig = plt.figure(figsize=(5.6, 6.2), dpi=dpi)
    state = _pairs_layout(fig, where, t)
    _pairs_update(state, t, where, band_label or band, measure, z_threshold, scale, pairs)
    save_if_asked(fig, output_file, dpi)
    return fig


@fill_doc
def pair_head_map_png(pair_table: pd.DataFrame, **options) -> bytes:
    """PNG of :func:`pair_head_map`, drawn on a figure kept for its layout.

    The head, the grey chords, the electrodes and their names are made once per layout
    (electrode positions, pairs considered); each map sets the coloured arcs, which electrodes
    are bold, the texts and the colour bar.  The pixels are those of
    ``figure_png(pair_head_map(...))`` (see the tests).

    Parameters
    ----------
    pair_table : DataFrame
    %(png_twin_returns)s
    """
    from ._shared import agg_figure, kept_layout, png_options
    from .figure_set import figure_png

    o = png_options(pair_head_map, (pair_table,), options, "pair_head_map_png")
    t, where, scale = _pair_inputs(
        pair_table, o["band"], o["measure"], o["ch_pos"], o["ch_names"], o["scale"], o["pairs"]
    )
    dpi = int(o["dpi"])
    key = (tuple((n, tuple(p)) for n, p in where.items()), _chord_key(t), dpi)
    state = kept_layout("pairs", key, lambda: _pairs_layout(agg_figure((5.6, 6.2), dpi), where, t))
    _pairs_update(
        state,
        t,
        where,
        o["band_label"] or o["band"],
        o["measure"],
        o["z_threshold"],
        scale,
        o["pairs"],
    )
    return figure_png(state["fig"], dpi=dpi, close=False)


def _chord_key(t: pd.DataFrame) -> tuple:
    return tuple(zip(t["channel_a"], t["channel_b"]))


def _pair_inputs(pair_table, band, measure, ch_pos, ch_names, scale, pairs):
    """The rows drawn, the 2-D position of each electrode by name, and the z scale."""
    scale = scale or z_scale()
    if not scale.diverging or scale.vmin != -scale.vmax:
        raise InputError("scale: need a symmetric z scale (z_scale)")
    t = _pair_rows(pair_table, band, measure, pairs)
    if ch_pos is None:
        from ..headmodel import load_head_model

        model = load_head_model()
        ch_pos, ch_names = model.ch_pos, model.ch_names
    names = list(ch_names)
    xy = electrode_layout(ch_pos)
    where = {n: xy[i] for i, n in enumerate(names)}
    unknown = sorted((set(t["channel_a"]) | set(t["channel_b"])) - set(where))
    if unknown:
        raise InputError(f"pair_table: no position for sites {unknown}")
    return t, where, scale


def _pairs_layout(fig, where: dict, t: pd.DataFrame) -> dict:
    """The static parts of a pair head map: head, grey chords of the pairs considered,
    electrodes and their names, limits, the texts (empty until :func:`_pairs_update`)."""
    ax = fig.add_axes((0.04, 0.17, 0.78, 0.71))
    xy = np.array(list(where.values()))
    radius = max(1.0, float(np.max(np.linalg.norm(xy, axis=1)))) * 1.06
    _draw_head(ax, radius)
    chords = [np.vstack([where[a], where[b]]) for a, b in _chord_key(t)]
    ax.add_collection(LineCollection(chords, colors="0.82", linewidths=0.6, zorder=2))
    # one collection for all electrodes (one per electrode: ~0.1 s a figure more)
    dots = ax.scatter(xy[:, 0], xy[:, 1], s=290, facecolor="white", zorder=4)
    names = [
        ax.text(x, y, n, ha="center", va="center", fontsize=7, zorder=5)
        for n, (x, y) in where.items()
    ]
    lim = radius * 1.14
    ax.set_xlim(-lim, lim)
    ax.set_ylim(-lim, lim)
    ax.set_aspect("equal")
    ax.axis("off")
    subset = fig.text(0.43, 0.915, "", ha="center", fontsize=8.5, color="0.3")
    notes = fig.text(0.04, 0.02, "", fontsize=7.5, va="bottom", color="0.15")
    return {"fig": fig, "ax": ax, "dots": dots, "names": names, "subset": subset, "notes": notes}


def _pairs_update(state, t, where, band_text, measure, z_threshold, scale, pairs) -> None:
    """One map's data on a pair head-map layout: arcs, bold electrodes, texts, colour bar."""
    from ._shared import kept_colourbar

    fig, ax = state["fig"], state["ax"]
    z = t["z"].to_numpy(dtype=float)
    has_z = bool(np.isfinite(z).any())
    dev = np.isfinite(z) & (np.abs(z) >= z_threshold)
    if state.get("arcs") is not None:
        state.pop("arcs").remove()
    order = np.argsort(np.abs(np.where(dev, z, 0.0)))  # strongest drawn on top
    sel = [i for i in order if dev[i]]
    if sel:
        arcs = []
        for i in sel:
            a, b = where[t["channel_a"].iloc[i]], where[t["channel_b"].iloc[i]]
            # a chord running through another electrode (F3-P3 through C3) bows further
            others = np.array(
                [
                    p
                    for q, p in where.items()
                    if q not in (t["channel_a"].iloc[i], t["channel_b"].iloc[i])
                ]
            )
            near = _near_point(a, b, others, 0.12)
            arcs.append(_arc(a, b, bow=0.14) if near is None else _arc(a, b, bow=0.3, away=near))
        widths = 1.0 + 1.2 * np.clip(np.abs(z[sel]) - z_threshold, 0.0, 2.5)
        lc = LineCollection(
            arcs, cmap=scale.cmap, norm=scale.norm, linewidths=widths, capstyle="round", zorder=3
        )
        lc.set_array(z[sel])
        state["arcs"] = ax.add_collection(lc)
    involved = set(t["channel_a"].to_numpy()[dev]) | set(t["channel_b"].to_numpy()[dev])
    bold = np.array([n in involved for n in where])
    state["dots"].set_edgecolor(np.where(bold, "0.1", "0.55").tolist())
    state["dots"].set_linewidths(np.where(bold, 1.4, 0.7))
    for text, strong in zip(state["names"], bold):
        text.set_color("0.05" if strong else "0.35")
        text.set_fontweight("bold" if strong else "normal")
    kept_colourbar(state, fig, scale, (0.84, 0.25, 0.035, 0.55), data=z[sel] if sel else None)
    fig.suptitle(f"{band_text} · {_measure_text(measure)}", fontsize=11, y=0.975)
    state["subset"].set_text(
        "homologous and anterior-posterior pairs"
        if measure == "asymmetry"
        else "homologous and within-hemisphere pairs"
        if pairs == "figure"
        else "all pairs"
    )
    n = len(t)
    if has_z:
        lines = [
            f"{int(dev.sum())} of {n} pairs with |z| ≥ {z_threshold:g} in colour "
            f"(about {0.05 * n:.0f} expected by chance alone)"
        ]
    else:
        lines = ["no norms: nothing to compare with, no pair is coloured"]
    lines.append(_Z_MEANING.get(measure, "z > 0: above the norm (red); z < 0: below (blue)"))
    lines.append("grey: pairs considered; average reference; template head, 19 electrodes")
    state["notes"].set_text("\n".join(lines))


def _roi_order(t: pd.DataFrame) -> list[tuple[str, str]]:
    rois = list(
        dict.fromkeys(
            list(zip(t["roi_a"], t["hemisphere_a"])) + list(zip(t["roi_b"], t["hemisphere_b"]))
        )
    )
    rank = {"left": 0, "both": 1, "right": 2}
    return sorted(rois, key=lambda r: (rank.get(r[1], 1), rois.index(r)))


@fill_doc
def coupling_matrix(
    coupling_table: pd.DataFrame,
    *,
    measure: str,
    atlas: str | None = None,
    bands=None,
    band_labels: dict | None = None,
    z_threshold: float = Z_THRESHOLD,
    scale: ColourScale | None = None,
    dpi: int = 90,
    output_file=None,
) -> Figure:
    """ROI-by-ROI matrices of one coupling measure, one panel per band.

    Parameters
    ----------
    coupling_table : DataFrame
        :data:`sourcelab.coupling.EDGE_COLUMNS` (z-scored or not).
    measure : str
        One of :data:`sourcelab.coupling.EDGE_MEASURES`.
    atlas : str, optional
        Atlas of the edges (default: ``networks`` if present, else the first in the table).
    bands : sequence of str, optional
        Panels (default: the table's bands in order).
    band_labels : dict, optional
        Band -> title (e.g. ``{"alpha": "alpha 8-12 Hz"}``).
    z_threshold : float
        Cells with |z| at or beyond it are framed (default 1.96: common practice).
    scale : ColourScale, optional
        With z: a symmetric z scale (default :func:`~sourcelab.figures.colours.z_scale`).
        Without z: default a value scale over all bands (symmetric for signed measures).
    %(figure_output)s

    Returns
    -------
    matplotlib.figure.Figure
        One image axes per band (``fig.axes[:n_bands]``), then the colour bar.  Each image holds
        the symmetric matrix (NaN diagonal); for ``imcoh`` and ``lag_ms`` the lower triangle is
        the upper one negated (b leading a).
    """
    check_columns(coupling_table, "coupling_table", EDGE_FIGURE_COLUMNS)
    atlases = list(dict.fromkeys(coupling_table["atlas"]))
    if atlas is None:
        from ..rois import DEFAULT_NETWORK_ATLAS

        atlas = (
            DEFAULT_NETWORK_ATLAS
            if DEFAULT_NETWORK_ATLAS in atlases
            else (atlases[0] if atlases else None)
        )
    t = coupling_table[(coupling_table["atlas"] == atlas) & (coupling_table["measure"] == measure)]
    if t.empty:
        raise InputError(f"coupling_table: no rows for atlas={atlas!r}, measure={measure!r}")
    bands = list(bands) if bands is not None else list(dict.fromkeys(t["band"]))
    rois = _roi_order(t)
    idx = {r: i for i, r in enumerate(rois)}
    n = len(rois)
    has_z = bool(np.isfinite(t["z"].to_numpy(dtype=float)).any())
    col = "z" if has_z else "value"
    odd = -1.0 if measure in ("imcoh", "lag_ms") else 1.0
    mats, flags, frames = [], [], []
    for band in bands:
        g = t[t["band"] == band]
        m = np.full((n, n), np.nan)
        leak = np.zeros((n, n), dtype=bool)
        frame = np.zeros((n, n), dtype=bool)
        ia = np.array([idx[r] for r in zip(g["roi_a"], g["hemisphere_a"])], dtype=int)
        ib = np.array([idx[r] for r in zip(g["roi_b"], g["hemisphere_b"])], dtype=int)
        v = g[col].to_numpy(dtype=float)
        m[ia, ib], m[ib, ia] = v, odd * v
        if "leakage_explained" in g:
            beyond = (g["leakage_explained"] == False).fillna(False).to_numpy(dtype=bool)  # noqa: E712
            leak[ia, ib] = leak[ib, ia] = beyond
        if has_z:
            frame[ia, ib] = frame[ib, ia] = np.abs(v) >= z_threshold
        mats.append(m)
        flags.append(leak)
        frames.append(frame)
    if scale is None:
        if has_z:
            scale = z_scale()
        else:
            from ..coupling import MEASURE_UNITS

            allv = np.concatenate([x[np.isfinite(x)] for x in mats] or [np.zeros(1)])
            unit = MEASURE_UNITS.get(measure, measure)
            if odd < 0 or measure == "aec_orth" or (allv.size and allv.min() < 0):
                lim = float(np.percentile(np.abs(allv), 99)) if allv.size else 1.0
                scale = ColourScale("RdBu_r", -lim or -1.0, lim or 1.0, unit, None, True)
            else:
                scale = power_scale(allv, label=unit)
    elif has_z and (not scale.diverging or scale.vmin != -scale.vmax):
        raise InputError("scale: need a symmetric z scale (z_scale) for z")
    labels = [f"{r} {_HEMI.get(h, h)}".strip() for r, h in rois]
    n_b = len(bands)
    ncol = min(3, n_b)
    nrow = int(np.ceil(n_b / ncol))
    side = max(2.4, 0.22 * n)  # panel size, inches
    lab = 0.25 + 0.062 * max(len(s) for s in labels)  # room for ROI labels
    gap, title_h, row_h, notes_h, cbar_w = 0.3, 0.55, side + 0.4, 0.55, 1.3
    w = lab + ncol * side + (ncol - 1) * gap + cbar_w
    h = title_h + lab + nrow * row_h + notes_h
    fig = plt.figure(figsize=(w, h), dpi=dpi)
    cmap = plt.get_cmap(scale.cmap).with_extremes(bad="0.93")
    n_left = sum(1 for _, hh in rois if hh == "left")
    for k, band in enumerate(bands):
        r_, c_ = divmod(k, ncol)
        x0 = (lab + c_ * (side + gap)) / w
        y0 = 1 - (title_h + lab + r_ * row_h + side) / h
        ax = fig.add_axes((x0, y0, side / w, side / h))
        heatmap_cells(ax, mats[k], cmap=cmap, norm=scale.norm)
        yy, xx = np.nonzero(flags[k])
        if yy.size:
            ax.scatter(xx, yy, s=9, c="k", marker="o", edgecolors="white", linewidths=0.5, zorder=3)
        for yv, xv in zip(*np.nonzero(frames[k])):
            ax.add_patch(
                plt.Rectangle((xv - 0.5, yv - 0.5), 1, 1, fill=False, ec="k", lw=1.1, zorder=4)
            )
        if 0 < n_left < n:
            for f in (ax.axhline, ax.axvline):
                f(n_left - 0.5, color="0.2", lw=0.8)
        # ROI labels once: across the top of the first row, down the left of the first column
        ax.xaxis.tick_top()
        ax.set_xticks(np.arange(n), labels if r_ == 0 else [""] * n, rotation=90, fontsize=6.5)
        ax.set_yticks(np.arange(n), labels if c_ == 0 else [""] * n, fontsize=6.5)
        ax.set_xlabel((band_labels or {}).get(band, band), fontsize=10, fontweight="bold")
    top = 1 - (title_h + lab) / h
    cax = fig.add_axes((1 - 0.95 / w, top - 0.8 * side / h, 0.16 / w, 0.8 * side / h))
    add_colourbar(fig, scale, cax=cax, data=np.concatenate([np.ravel(m) for m in mats]))
    what = _measure_text(measure)
    from ..rois import atlas_title

    fig.suptitle(
        f"{atlas_title(atlas)}: {what}" + (" · z against the norm" if has_z else " · values"),
        fontsize=11,
        y=1 - 0.12 / h,
        va="top",
    )
    notes = []
    if has_z:
        notes.append(f"framed: |z| ≥ {z_threshold:g}")
    notes.append("dot: more coupling than the inverse's blur alone explains")
    notes.append(
        "lines separate left- from right-hemisphere ROIs; template head, "
        "19 electrodes: ROI coupling is blurred"
    )
    fig.text(
        0.01,
        0.01,
        "; ".join(notes[:-1]) + "\n" + notes[-1],
        fontsize=7.5,
        color="0.15",
        va="bottom",
    )
    save_if_asked(fig, output_file, dpi)
    return fig
