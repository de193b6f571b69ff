"""ROI charts from the tidy ROI table: ranked z bars, band × ROI heatmap, network summary."""

from __future__ import annotations

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from ..errors import InputError
from ..rois.names import area_name, brodmann_number, natural_key
from ._shared import (
    agg_figure,
    check_columns,
    heatmap_cells,
    kept_colourbar,
    kept_layout,
    png_options,
    save_if_asked,
)
from .colours import Z_THRESHOLD, ColourScale, add_colourbar, z_scale
from .._docs import fill_doc

_HEMI_ABBR = {"left": "L", "right": "R", "both": ""}
_HEMI_ORDER = {"left": 0, "right": 1, "both": 2}


def _label(row, *, names: bool = True) -> str:
    """``"BA17 L primary visual"`` (Brodmann areas get their names), ``"visual L"``."""
    h = _HEMI_ABBR.get(row.hemisphere, str(row.hemisphere))
    name = area_name(row.roi) if names else ""
    return f"{row.roi} {h} {name}".strip().replace("  ", " ")


def _labelled(roi_table, *, atlas, measure, bands, names: bool = True):
    """Rows of one atlas and measure with a display label; bands in table order, ROIs in table
    order except Brodmann areas, which are sorted by hemisphere and then by number (BA1, BA2,
    ..., BA10)."""
    t = _select(roi_table, atlas=atlas, measure=measure)
    if all(brodmann_number(r) is not None for r in t["roi"]):
        order = sorted(
            {(r.hemisphere, r.roi) for r in t.itertuples()},
            key=lambda hr: (_HEMI_ORDER.get(hr[0], 3), natural_key(hr[1])),
        )
        rank = {k: i for i, k in enumerate(order)}
        t = t.iloc[np.argsort([rank[(r.hemisphere, r.roi)] for r in t.itertuples()], kind="stable")]
    t = t.assign(_label=[_label(r, names=names) for r in t.itertuples()])
    labels = list(dict.fromkeys(t["_label"]))
    bands = list(bands) if bands is not None else list(dict.fromkeys(t["band"]))
    return t, labels, bands


def _select(
    roi_table: pd.DataFrame, *, atlas: str | None, measure: str, band: str | None = None
) -> pd.DataFrame:
    check_columns(roi_table, "roi_table", ("atlas", "roi", "hemisphere", "band", "measure", "z"))
    t = roi_table[roi_table["measure"] == measure]
    if atlas is not None:
        t = t[t["atlas"] == atlas]
    if band is not None:
        t = t[t["band"] == band]
    if t.empty:
        raise InputError(
            f"roi_table: no rows for atlas={atlas!r}, measure={measure!r}, band={band!r}"
        )
    return t


@fill_doc
def roi_bars(
    roi_table: pd.DataFrame,
    *,
    band: str,
    measure: str = "absolute",
    atlas: str | None = None,
    top: int = 30,
    scale: ColourScale | None = None,
    guide: float = Z_THRESHOLD,
    dpi: int = 90,
    output_file=None,
) -> Figure:
    """Horizontal bars of ROI z-scores for one band, sorted by |z| (largest at the top).

    Parameters
    ----------
    roi_table : DataFrame
        Tidy ROI table (:data:`sourcelab.result.ROI_COLUMNS`).
    band, measure : str
        Rows to show.
    atlas : str | None
        Atlas name; None keeps all atlases.
    top : int
        Number of ROIs shown (largest |z|).
    scale : ColourScale | None
        z scale colouring the bars (default :func:`z_scale`); the x axis spans its limits
        (or further when a z exceeds them).
    guide : float
        Dashed guides at ±guide (default 1.96, the two-sided 5 %% normal point: common practice).
    %(figure_output_returns)s
    """
    scale = scale or z_scale()
    z, labels, label_w = _bars_data(roi_table, band=band, measure=measure, atlas=atlas, top=top)
    fig = plt.figure(figsize=_bars_size(len(z), label_w), dpi=dpi)
    state = _bars_layout(fig, len(z), label_w, guide)
    _bars_update(state, z, labels, scale, f"{band} · {measure}", guide)
    save_if_asked(fig, output_file, dpi)
    return fig


@fill_doc
def roi_bars_png(roi_table: pd.DataFrame, **options) -> bytes:
    """PNG of :func:`roi_bars`, drawn on a figure kept for its layout.

    The axes, bar rectangles, guides and tick objects are made once per layout (number of
    bars, label width, guide); each chart sets the bars' lengths and colours, the labels,
    limits, title and colour bar label.  The pixels are those of ``figure_png(roi_bars(...))``
    (see the tests).

    Parameters
    ----------
    roi_table : DataFrame
    %(png_twin_returns)s
    """
    from .figure_set import figure_png

    o = png_options(roi_bars, (roi_table,), options, "roi_bars_png")
    scale = o["scale"] or z_scale()
    z, labels, label_w = _bars_data(
        roi_table, band=o["band"], measure=o["measure"], atlas=o["atlas"], top=o["top"]
    )
    n, dpi, guide = len(z), int(o["dpi"]), o["guide"]

    def build():
        fig = agg_figure(_bars_size(n, label_w), dpi)
        return _bars_layout(fig, n, label_w, guide)

    state = kept_layout("roi-bars", (n, label_w, float(guide), dpi), build)
    _bars_update(state, z, labels, scale, f"{o['band']} · {o['measure']}", guide)
    return figure_png(state["fig"], dpi=dpi, close=False)


def _bars_data(roi_table, *, band, measure, atlas, top):
    """z of the ``top`` ROIs by |z| (smallest first: drawn from the bottom), their labels and
    the labels' width (inches)."""
    t = _select(roi_table, atlas=atlas, measure=measure, band=band)
    t = t[np.isfinite(t["z"].astype(float))]
    if t.empty:
        raise InputError(f"roi_table: no finite z for band={band!r}, measure={measure!r}")
    t = t.assign(_abs=t["z"].abs()).sort_values("_abs", ascending=False).head(top)
    t = t.iloc[::-1]
    labels = [_label(r) for r in t.itertuples()]
    label_w = 0.25 + 0.062 * max(len(s) for s in labels)  # inches for the area labels
    return t["z"].to_numpy(float), labels, label_w


def _bars_size(n: int, label_w: float) -> tuple[float, float]:
    return label_w + 5.2, 0.9 + 0.2 * n


def _bars_layout(fig, n: int, label_w: float, guide: float) -> dict:
    """The static parts of a bar chart of ``n`` ROIs: axes, bars (zero length), guides."""
    w, h = _bars_size(n, label_w)
    ax = fig.add_axes((label_w / w, 0.54 / h, 3.8 / w, 0.2 * n / h))
    bars = ax.barh(np.arange(n), np.zeros(n), edgecolor="0.3", linewidth=0.4)
    for g in (-guide, guide):
        ax.axvline(g, color="0.25", ls="--", lw=0.8)
    ax.axvline(0, color="k", lw=0.8)
    ax.set_ylim(-0.6, n - 0.4)
    pos = ax.get_position()
    cax = ((label_w + 4.0) / w, pos.y0, 0.14 / w, pos.height)
    return {"fig": fig, "ax": ax, "bars": list(bars), "cax": cax}


def _bars_update(state: dict, z, labels, scale: ColourScale, what: str, guide: float) -> None:
    """One chart's data on a bar-chart layout: bar lengths and colours, labels, limits, title,
    colour bar."""
    ax = state["ax"]
    colours = scale.scalar_mappable().to_rgba(np.clip(z, scale.vmin, scale.vmax))
    for bar, value, colour in zip(state["bars"], z, colours):
        bar.set_width(value)
        bar.set_facecolor(colour)
    ax.set_yticks(np.arange(len(z)), labels, fontsize=8)
    lim = max(scale.vmax, float(np.abs(z).max()) * 1.05)
    ax.set_xlim(-lim, lim)
    ax.set_xlabel(scale.label)
    ax.set_title(  # y given: no search for top decorations (there are none), ~0.05 s a figure
        f"{what} · ROIs ranked by |z| (dashed: ±{guide:g})", fontsize=10, y=1.0
    )
    kept_colourbar(state, state["fig"], scale, state["cax"], data=z)


@fill_doc
def roi_heatmap(
    roi_table: pd.DataFrame,
    *,
    measure: str = "absolute",
    atlas: str | None = None,
    bands=None,
    scale: ColourScale | None = None,
    max_columns: int = 30,
    dpi: int = 90,
    output_file=None,
) -> Figure:
    """Band × ROI heatmap of z (rows: bands; columns: ROIs in table order).

    With more than ``max_columns`` ROIs the map is turned: ROIs become rows, split into
    side-by-side panels of at most 42 rows, so that every label stays readable.

    Parameters
    ----------
    roi_table : DataFrame
    measure : str
    atlas : str | None
    bands : sequence of str | None
        Row order; default: order of first appearance in the table.
    scale : ColourScale | None
        z scale (default :func:`z_scale`, symmetric ±3); NaN cells are grey.
    max_columns : int
        Most ROIs drawn as columns; more turn the map (see above).
    %(figure_output_returns)s
    """
    scale = scale or z_scale()
    t, rois, bands = _labelled(roi_table, atlas=atlas, measure=measure, bands=bands)
    raw_z = t["z"].to_numpy(float)
    grid = (
        t.pivot_table(index="band", columns="_label", values="z", aggfunc="first", dropna=False)
        .reindex(index=bands, columns=rois)
        .to_numpy(float)
    )
    grid_shown = np.where(np.abs(grid) < (scale.threshold or 0), np.nan, grid)
    cmap = plt.get_cmap(scale.cmap).with_extremes(bad="0.85")
    title = f"{measure} power: z by band and ROI" + (f" ({atlas})" if atlas else "")
    if len(rois) > max_columns:
        fig = _heatmap_tall(
            grid_shown.T, rois, bands, cmap=cmap, scale=scale, title=title, dpi=dpi, data=raw_z
        )
        save_if_asked(fig, output_file, dpi)
        return fig
    left, right, top_m = 1.0, 1.4, 0.45  # margins, inches
    bottom = 0.25 + 0.065 * max(len(r) for r in rois)  # room for rotated ROI labels
    w = max(6.0, 0.2 * len(rois)) + left + right
    h = bottom + top_m + 0.32 * len(bands)
    fig = plt.figure(figsize=(w, h), dpi=dpi)
    ax = fig.add_axes((left / w, bottom / h, 1 - (left + right) / w, 1 - (bottom + top_m) / h))
    heatmap_cells(ax, grid_shown, cmap=cmap, norm=scale.norm, aspect="auto")
    ax.set_yticks(np.arange(len(bands)), bands, fontsize=9)
    ax.set_xticks(np.arange(len(rois)), rois, rotation=90, fontsize=7)
    ax.set_title(title, fontsize=10, y=1.0)  # ticks below: where matplotlib would put it
    pos = ax.get_position()
    cax = fig.add_axes((pos.x1 + 0.2 / w, pos.y0, 0.15 / w, pos.height))
    add_colourbar(fig, scale, cax=cax, data=raw_z)
    save_if_asked(fig, output_file, dpi)
    return fig


def _heatmap_tall(
    grid: np.ndarray, rois, bands, *, cmap, scale, title, dpi, rows_per_panel: int = 42, data=None
) -> Figure:
    """ROI x band heatmap with ROIs as rows, in side-by-side panels of ``rows_per_panel``."""
    n_panels = int(np.ceil(len(rois) / rows_per_panel))
    rows = int(np.ceil(len(rois) / n_panels))
    label_w = 0.25 + 0.07 * max(len(r) for r in rois)
    panel_w = label_w + 0.42 * len(bands)
    w = n_panels * panel_w + 1.6
    h = 0.17 * rows + 1.3  # 0.3 in below, 1.0 in above for band labels and title
    fig = plt.figure(figsize=(w, h), dpi=dpi)
    for p in range(n_panels):
        sl = slice(p * rows, min((p + 1) * rows, len(rois)))
        x0 = (p * panel_w + label_w) / w
        ax = fig.add_axes((x0, 0.3 / h, 0.42 * len(bands) / w, 0.17 * rows / h))
        part = np.full((rows, len(bands)), np.nan)
        part[: sl.stop - sl.start] = grid[sl]
        heatmap_cells(ax, part, cmap=cmap, norm=scale.norm, aspect="auto")
        labels = list(rois[sl]) + [""] * (rows - (sl.stop - sl.start))
        ax.set_yticks(np.arange(rows), labels, fontsize=7)
        ax.set_xticks(np.arange(len(bands)), bands, rotation=45, ha="right", fontsize=8)
        ax.xaxis.tick_top()
        ax.tick_params(axis="x", labelrotation=45)
    fig.suptitle(title, fontsize=10, y=1 - 0.08 / h, va="top")
    cax = fig.add_axes((1 - 1.3 / w, 0.3 / h, 0.15 / w, 0.17 * rows / h))
    add_colourbar(fig, scale, cax=cax, data=data)
    return fig


@fill_doc
def network_chart(
    roi_table: pd.DataFrame,
    *,
    atlas: str,
    measure: str = "absolute",
    bands=None,
    scale: ColourScale | None = None,
    guide: float = Z_THRESHOLD,
    dpi: int = 90,
    output_file=None,
) -> Figure:
    """Network summary: z of each network (rows) for every band (markers), with ±guide band.

    Parameters
    ----------
    roi_table : DataFrame
    atlas : str
        Name of the network atlas in the table (one ROI per network and hemisphere, or "both").
    measure : str
    bands : sequence of str | None
    scale : ColourScale | None
        z scale; marker colours follow it, the x axis spans its limits.
    guide : float
        Shaded region |z| < guide (default 1.96: common practice).
    %(figure_output_returns)s
    """
    scale = scale or z_scale()
    t, nets, bands = _labelled(roi_table, atlas=atlas, measure=measure, bands=bands)
    height = 1.5 + 0.32 * len(nets)
    fig = plt.figure(figsize=(7.0, height), dpi=dpi)
    ax = fig.add_axes((0.3, 0.6 / height, 0.52, 1.0 - 1.0 / height))
    ax.axvspan(-guide, guide, color="0.92", zorder=0)
    ax.axvline(0, color="k", lw=0.8)
    markers = "osD^vP*X"
    sm = scale.scalar_mappable()
    zmax = scale.vmax
    n_b = max(len(bands), 1)
    for j, band in enumerate(bands):
        sel = t[t["band"] == band].set_index("_label")["z"].reindex(nets).to_numpy(float)
        y = np.arange(len(nets)) + (j - (n_b - 1) / 2) * 0.7 / n_b
        ok = np.isfinite(sel)
        ax.scatter(
            sel[ok],
            y[ok],
            c=sm.to_rgba(np.clip(sel[ok], scale.vmin, scale.vmax)),
            marker=markers[j % len(markers)],
            edgecolors="k",
            linewidths=0.5,
            s=36,
            label=band,
            zorder=3,
        )
        if ok.any():
            zmax = max(zmax, float(np.abs(sel[ok]).max()) * 1.05)
    ax.set_xlim(-zmax, zmax)
    ax.set_yticks(np.arange(len(nets)), nets, fontsize=8)
    ax.set_ylim(-0.6, len(nets) - 0.4)
    ax.invert_yaxis()
    ax.set_xlabel(scale.label)
    from ..rois import atlas_title

    ax.set_title(
        f"{atlas_title(atlas)}, {measure} power: z per band (grey: |z| < {guide:g})",
        fontsize=10,
        y=1.0,  # no top decorations: where matplotlib would put it, without searching
    )
    leg = ax.legend(
        loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, title="band", frameon=False
    )
    for h in leg.legend_handles:
        h.set_facecolor("0.6")
    save_if_asked(fig, output_file, dpi)
    return fig
