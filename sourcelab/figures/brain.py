"""Source maps: glass brains (MNI volume projections) and inflated-surface views."""

from __future__ import annotations

import contextlib
import functools
import json
import logging
import warnings
from pathlib import Path

import matplotlib.pyplot as plt
import numpy as np
from matplotlib.figure import Figure

from ..checks import check_option
from . import geometry
from .._docs import fill_doc
from ._shared import agg_figure, kept_colourbar, kept_layout, png_options, save_if_asked
from .colours import ColourScale, add_colourbar, clipped

logger = logging.getLogger("sourcelab")

_DISPLAY_MODES = ("lyrz", "ortho", "lzry", "xz", "yz", "l", "r")
#: Surface views drawn by :func:`surface_views`: (hemisphere, view).
SURFACE_VIEWS = (("left", "lateral"), ("right", "lateral"), ("left", "medial"), ("right", "medial"))


def _check_values(values) -> np.ndarray:
    """Per-source values (n_src,) or per-surface-vertex values (20484,) -> per-source values."""
    from ..headmodel import load_head_model

    model = load_head_model()
    v = np.asarray(values, dtype=float)
    if v.shape == (geometry.N_SURFACE,):
        return model.from_surface(v)
    if v.shape != (model.n_src,):
        raise ValueError(
            f"values: need shape ({model.n_src},) (one per template source), got {v.shape}"
        )
    return v


@functools.lru_cache(maxsize=8)
def _schematic(direction: str, black_bg: bool):
    """nilearn's glass-brain outline of one view, read once: (paths, edge colours, line widths,
    data transform, bounds)."""
    from nilearn.plotting import glass_brain as gb

    json_file, transform = gb._get_json_and_transform(direction)
    content = json.loads(Path(json_file).read_text(encoding="utf-8"))
    patches = gb._get_mpl_patches(content, invert_color=black_bg)
    return (
        [pa.get_path() for pa in patches],
        [pa.get_edgecolor() for pa in patches],
        [pa.get_linewidth() for pa in patches],
        transform,
        gb._get_object_bounds(content, transform),
    )


def _outline_as_one_collection(ax, direction, **kwargs):
    """Stand-in for nilearn's ``plot_brain_schematics``: the same outline (same paths, colours,
    widths and bounds) drawn as one collection instead of ~240 patches a view, which nilearn adds
    one by one (each recomputing the data limits: most of a glass brain's drawing time)."""
    from matplotlib.collections import PathCollection
    from matplotlib.colors import to_rgba
    from nilearn.plotting import glass_brain as gb

    if set(kwargs) - {"alpha"}:  # options this stand-in does not know: nilearn's own drawing
        return gb.plot_brain_schematics(ax, direction, **kwargs)
    black_bg = to_rgba(ax.get_facecolor()) == to_rgba("k")
    paths, edges, widths, transform, bounds = _schematic(direction, black_bg)
    ax.add_collection(
        PathCollection(
            paths,
            facecolors="none",
            edgecolors=edges,
            linewidths=widths,
            transform=transform + ax.transData,
            alpha=kwargs.get("alpha"),
        ),
        autolim=False,
    )
    return bounds


@contextlib.contextmanager
def _fast_outline():
    """Swap in :func:`_outline_as_one_collection` while a glass brain is drawn (nilearn's
    function is used unchanged when its module layout differs from the one this was written
    for, nilearn 0.10-0.14)."""
    try:
        from nilearn.plotting.displays import _axes
        from nilearn.plotting import glass_brain as gb

        ok = getattr(_axes, "plot_brain_schematics", None) is gb.plot_brain_schematics and all(
            hasattr(gb, n)
            for n in ("_get_json_and_transform", "_get_mpl_patches", "_get_object_bounds")
        )
    except ImportError:
        ok = False
    if not ok:
        yield
        return
    _axes.plot_brain_schematics = _outline_as_one_collection
    try:
        yield
    finally:
        _axes.plot_brain_schematics = gb.plot_brain_schematics


def glass_brain(
    values: np.ndarray,
    *,
    scale: ColourScale,
    title: str | None = None,
    display_mode: str = "lyrz",
    resolution: int = 2,
    figsize=(9.5, 2.6),
    dpi: int = 90,
    output_file=None,
) -> Figure:
    """Glass-brain projections of a per-source map.

    The map is projected into an MNI152 volume by :func:`geometry.sources_to_volume` (nearest
    source in grey matter) and drawn with :func:`nilearn.plotting.plot_glass_brain`: for each
    projection the voxel of largest magnitude along the line of sight is shown.

    Parameters
    ----------
    values : ndarray, shape (n_src,)
        Per-source values, left hemisphere first (power or z).
    scale : ColourScale
        From :func:`~sourcelab.figures.colours.z_scale` or
        :func:`~sourcelab.figures.colours.power_scale`; sets map, limits, threshold, label.
    title : str | None
    display_mode : {"lyrz", "ortho", "lzry", "xz", "yz", "l", "r"}
        nilearn projection set; ``"lyrz"`` = left, coronal, right, axial.
    resolution : {2, 3}
        Voxel size of the projection, mm.
    figsize : (float, float)
        Figure width and height, inches.
    dpi : int
        Resolution of the figure and of ``output_file``, dots per inch.
    output_file : str | Path | None
        If given, the figure is also saved there (PNG at ``dpi``).

    Returns
    -------
    fig : matplotlib.figure.Figure
    """
    v = _check_values(values)
    check_option("display_mode", display_mode, _DISPLAY_MODES)
    fig = plt.figure(figsize=figsize, dpi=dpi)
    w = figsize[0]
    ax = fig.add_axes((0.0, 0.0, 1.0 - 1.6 / w, 0.88 if title else 1.0))
    cax = fig.add_axes(_glass_cax_rect(w))
    _draw_glass(fig, ax, cax, v, scale, title, display_mode, resolution)
    save_if_asked(fig, output_file, dpi)
    return fig


def _glass_cax_rect(width: float) -> tuple:
    return (1.0 - 1.45 / width, 0.1, 0.14 / width, 0.74)


def _draw_glass(fig, ax, cax, v, scale, title, display_mode, resolution) -> None:
    """The projections of per-source values ``v`` into ``ax``, the colour bar into ``cax``."""
    from nilearn import plotting

    raw = v
    v = clipped(v, scale)  # beyond the limits: end colours (the colour bar's arrows say so)
    v = np.where(np.isfinite(v), v, 0.0)
    img = geometry.sources_to_volume(v, resolution=resolution)
    signed = scale.diverging
    with _fast_outline(), warnings.catch_warnings():
        # a z map with nothing beyond the mask is a valid answer, not a problem to warn about
        warnings.filterwarnings("ignore", message="empty mask", category=UserWarning)
        plotting.plot_glass_brain(
            img,
            display_mode=display_mode,
            figure=fig,
            axes=ax,
            cmap=scale.cmap,
            vmin=scale.vmin,
            vmax=scale.vmax,
            plot_abs=not signed,
            colorbar=False,
            # voxels left empty (0: no source within reach) stay clear, also for z maps
            # without a mask (else they show as boxes in the map's centre colour)
            threshold=scale.threshold if scale.threshold else _SHOWN,
            black_bg=False,
            annotate=True,
            symmetric_cbar=signed,
        )
    add_colourbar(fig, scale, cax=cax, data=raw)
    if title:
        fig.suptitle(title, x=0.45, y=0.99, va="top", fontsize=11)


#: Glass-brain figures kept for reuse by :func:`glass_brain_png`, by layout (this process's).
_GLASS_LAYOUTS: dict = {}


def glass_brain_png(values: np.ndarray, **options) -> bytes:
    """PNG of :func:`glass_brain`, drawn on a figure kept for its layout.

    nilearn builds a glass brain's projection axes and outlines for every map (most of its
    time); here they are built once per layout (projections, size, resolution, signed or not,
    titled or not) and each map replaces only the overlay images, annotations, colour bar and
    title, through nilearn's own :func:`~nilearn.plotting.plot_glass_brain`.  The pixels are
    those of ``figure_png(glass_brain(...))`` (see the tests).  Without the nilearn layout
    this relies on (0.10-0.14), the figure is drawn afresh.

    Parameters
    ----------
    values : ndarray, shape (n_src,)
        Per-source values, left hemisphere first (power or z).
    **options
        The keywords of :func:`glass_brain` but ``output_file``: ``scale`` (required),
        ``title``, ``display_mode``, ``resolution``, ``figsize`` (inches), ``dpi``.

    Returns
    -------
    bytes
        The PNG file's content.
    """
    from .figure_set import figure_png

    opts = png_options(glass_brain, (values,), options, "glass_brain_png")
    v = _check_values(opts.pop("values"))
    check_option("display_mode", opts["display_mode"], _DISPLAY_MODES)
    scale, title, figsize, dpi = opts["scale"], opts["title"], opts["figsize"], opts["dpi"]
    key = (opts["display_mode"], int(opts["resolution"]), tuple(figsize), int(dpi), bool(title))
    key += (scale.diverging,)
    try:
        from nilearn.plotting.image import img_plotting
    except ImportError:  # another nilearn layout: drawn afresh
        img_plotting = None
    if img_plotting is None or not hasattr(img_plotting, "get_projector"):
        return figure_png(glass_brain(v, **opts), dpi=dpi)
    kept = _GLASS_LAYOUTS.get(key)
    if kept is None:
        from matplotlib.backends.backend_agg import FigureCanvasAgg

        fig = Figure(figsize=figsize, dpi=dpi)
        FigureCanvasAgg(fig)
        w = figsize[0]
        ax = fig.add_axes((0.0, 0.0, 1.0 - 1.6 / w, 0.88 if title else 1.0))
        kept = _GLASS_LAYOUTS[key] = {"fig": fig, "ax": ax, "display": None}
    fig = kept["fig"]
    for a in fig.axes:
        if a is not kept["ax"] and (kept["display"] is None or a not in kept["axes"]):
            a.remove()  # the previous colour bar
    cax = fig.add_axes(_glass_cax_rect(figsize[0]))
    original = img_plotting.get_projector

    def projector(mode):
        make = original(mode)

        def reuse(*args, **kwargs):
            if kept["display"] is None:
                display = make(*args, **kwargs)
                _keep_glass_state(kept, display)
                return display
            _restore_glass_state(kept)
            return kept["display"]

        return reuse

    img_plotting.get_projector = projector
    try:
        _draw_glass(fig, kept["ax"], cax, v, scale, title, opts["display_mode"], opts["resolution"])
    finally:
        img_plotting.get_projector = original
    return figure_png(fig, dpi=dpi, close=False)


def _keep_glass_state(kept: dict, display) -> None:
    """Remember a new display's artists, limits and object bounds (before any overlay)."""
    axes = [d.ax for d in display.axes.values()]
    kept["display"] = display
    kept["axes"] = axes
    kept["state"] = [
        (
            d,
            list(d.ax.get_children()),
            d.ax.get_xlim(),
            d.ax.get_ylim(),
            list(getattr(d, "_object_bounds", [])),
        )
        for d in display.axes.values()
    ]


def _restore_glass_state(kept: dict) -> None:
    """Back to the state :func:`_keep_glass_state` saw: overlays and annotations removed."""
    for d, children, xlim, ylim, bounds in kept["state"]:
        own = {id(a) for a in children}
        for a in d.ax.get_children():
            if id(a) not in own:
                a.remove()
        d.ax.set_xlim(xlim)
        d.ax.set_ylim(ylim)
        if hasattr(d, "_object_bounds"):
            d._object_bounds = list(bounds)


#: Smallest magnitude drawn on the surface: finite values are lifted to it so that no cortical
#: vertex falls under the plotting threshold that hides the medial wall.
_SHOWN = 1e-12


def surface_plot_values(values: np.ndarray, scale: ColourScale) -> tuple[np.ndarray, float]:
    """Values and threshold handed to nilearn for one surface map.

    Values beyond the colour limits are clipped to them (drawn in the end colours, never hidden);
    |z| below the scale's threshold and NaN (the medial wall) become 0 and fall under the
    returned threshold, so they are the only uncoloured vertices.

    Parameters
    ----------
    values : ndarray, shape (n,)
        Per-vertex values (NaN: not cortex).
    scale : ColourScale

    Returns
    -------
    data : ndarray, shape (n,)
    threshold : float
        nilearn's ``threshold`` (values of smaller magnitude are not coloured).
    """
    v = clipped(values, scale)
    ok = np.isfinite(v)
    small = ok & (np.abs(v) < _SHOWN)
    v[small] = np.where(v[small] < 0, -_SHOWN, _SHOWN)
    v[~ok] = 0.0
    return v, float(scale.threshold) if scale.threshold else _SHOWN


def surface_views(
    values: np.ndarray,
    *,
    scale: ColourScale,
    title: str | None = None,
    surface: str = "inflated",
    outline=None,
    figsize=(8.0, 6.0),
    dpi: int = 90,
    raster: bool = True,
    output_file=None,
) -> Figure:
    """Lateral and medial views of both hemispheres on the fsaverage5 surface.

    Sulcal depth shades the surface (dark = sulci); values are drawn with
    :func:`nilearn.plotting.plot_surf_stat_map` (matplotlib engine).

    Parameters
    ----------
    values : ndarray, shape (n_src,)
        Per-source values, left hemisphere first.  NaN (and |z| below the scale's threshold) is
        not coloured.
    scale : ColourScale
    title : str | None
    surface : {"inflated", "pial", "white_matter"}
    outline : Atlas | ndarray of int, shape (20484,) | None
        Optional parcellation: an :class:`~sourcelab.rois.atlas.Atlas` or a label per source
        (-1 = none); parcel borders are drawn as thin black lines.
    figsize : (float, float)
        Figure width and height, inches.
    dpi : int
        Resolution of the figure and of ``output_file``, dots per inch.
    raster : bool
        Paint the views as one image from a cached face-index raster of the layout (default;
        the same pixels as matplotlib's 3-D drawing in nilearn's face colours, several times
        faster for a set of maps); False draws the 3-D collections themselves.
    output_file : str | Path | None
        If given, the figure is also saved there (format from the extension).

    Returns
    -------
    fig : matplotlib.figure.Figure
        One image axes holding the four views (left lateral, right lateral, left medial, right
        medial; each titled) and a colour bar; with ``raster=False`` four 3-D axes instead of
        the image.
    """
    raw, v, outline, top = _surface_inputs(values, outline, title)
    img, anchors = (
        _raster_image(v, scale, surface, outline, top, figsize, dpi) if raster else (None, None)
    )
    fig = plt.figure(figsize=figsize, dpi=dpi)
    state = {"fig": fig}
    if img is None:
        _draw_views(fig, v, scale, surface, outline, top)
    else:
        state["image"] = _paint_views(fig, img, anchors)
    _surface_frame(state, scale, raw, title, top)
    save_if_asked(fig, output_file, dpi)
    return fig


@fill_doc
def surface_views_png(values: np.ndarray, **options) -> bytes:
    """PNG of :func:`surface_views`, drawn on a figure kept for its layout.

    The figure, its image axes and the view titles are made once per layout (surface, size,
    resolution, outline, titled or not); each map replaces the image's pixels, the colour bar
    (kept when its scale and ends are the same, with a new label) and the title.  The pixels
    are those of ``figure_png(surface_views(...))`` (see the tests).  Drawn afresh with
    ``raster=False`` or when the cached raster does not fit.

    Parameters
    ----------
    values : ndarray, shape (n_src,)
    %(png_twin_returns)s
    """
    from .figure_set import figure_png

    o = png_options(surface_views, (values,), options, "surface_views_png")
    dpi, figsize, surface, scale = int(o["dpi"]), tuple(o["figsize"]), o["surface"], o["scale"]
    if not o["raster"]:
        return figure_png(surface_views(**o), dpi=dpi)
    raw, v, outline, top = _surface_inputs(o["values"], o["outline"], o["title"])
    img, anchors = _raster_image(v, scale, surface, outline, top, figsize, dpi)
    if img is None:
        return figure_png(surface_views(**o), dpi=dpi)
    key = (surface, top, figsize, dpi, None if outline is None else outline.tobytes())

    def build():
        fig = agg_figure(figsize, dpi)
        return {"fig": fig, "image": _paint_views(fig, img, anchors)}

    state = kept_layout("surface", key, build)
    state["image"].set_data(img)
    _surface_frame(state, scale, raw, o["title"], top)
    return figure_png(state["fig"], dpi=dpi, close=False)


def _surface_inputs(values, outline, title):
    """Per-source and per-vertex values, the outline as a label per vertex (or None) and the
    views' top edge (figure fraction)."""
    raw = _check_values(values)
    v = geometry.to_surface(raw)
    if outline is not None:
        outline = (
            geometry.atlas_labels(outline) if hasattr(outline, "rois") else np.asarray(outline)
        )
        if outline.shape != (geometry.N_SURFACE,):
            raise ValueError(f"outline: need shape ({geometry.N_SURFACE},), got {outline.shape}")
    return raw, v, outline, 0.92 if title else 0.98


def _surface_frame(state: dict, scale, raw, title, top) -> None:
    """The colour bar and title of a surface figure."""
    kept_colourbar(state, state["fig"], scale, (0.87, 0.15, 0.02, top * 0.7), data=raw)
    if title:
        state["fig"].suptitle(title, x=0.43, y=0.995, va="top", fontsize=11)


def warm_caches(func, kwargs) -> None:
    """Fill the caches a queued glass-brain or surface figure will use (the volume lookup, the
    face-index raster of its layout), so that forked drawing workers share them instead of
    each building its own.

    Parameters
    ----------
    func : callable
        :func:`glass_brain` or :func:`surface_views` (anything else is ignored).
    kwargs : dict
        The keyword arguments the figure will be drawn with.
    """
    if func is glass_brain:
        n_src = geometry.load_head_model().n_src
        geometry.sources_to_volume(np.zeros(n_src), resolution=kwargs.get("resolution", 2))
        mode = kwargs.get("display_mode", "lyrz")
        for direction in "xyz" if mode == "ortho" else mode:  # the outlines, read once
            _schematic(direction, False)
    elif func is surface_views and kwargs.get("raster", True):
        _scratch_axes()
        outline = kwargs.get("outline")
        if outline is not None:
            outline = (
                geometry.atlas_labels(outline) if hasattr(outline, "rois") else np.asarray(outline)
            )
        key = None if outline is None else np.asarray(outline, np.int64).tobytes()
        _face_raster(
            kwargs.get("surface", "inflated"),
            0.92 if kwargs.get("title") else 0.98,
            tuple(kwargs.get("figsize", (8.0, 6.0))),
            int(kwargs.get("dpi", 90)),
            key,
        )


def _view_rects(top: float) -> list[tuple[float, float, float, float]]:
    return [
        (0.0, top / 2, 0.43, top / 2),
        (0.43, top / 2, 0.43, top / 2),
        (0.0, 0.0, 0.43, top / 2),
        (0.43, 0.0, 0.43, top / 2),
    ]


def _draw_views(fig, v, scale, surface, outline, top, axes=None) -> list:
    """The four views with nilearn (matplotlib engine), in new 3-D axes of ``fig`` or in the
    given ``axes``; returns per view (axes, surface collection, outline collection or None)."""
    views = []
    for k, ((hemi, view), rect) in enumerate(zip(SURFACE_VIEWS, _view_rects(top))):
        ax = fig.add_axes(rect, projection="3d") if axes is None else axes[k]
        coords, faces, sl = _plot_view(ax, fig, v, scale, surface, hemi, view)
        surf_coll = ax.collections[-1]
        lines = None
        if outline is not None:
            ax.computed_zorder = False  # borders are drawn over the (culled) surface
            n = len(ax.collections)
            _draw_outline(ax, coords, faces, outline[sl])
            lines = ax.collections[n] if len(ax.collections) > n else None
        ax.set_box_aspect(None, zoom=1.45)
        ax.set_title(f"{hemi} {view}", fontsize=9, y=0.92)
        views.append((ax, surf_coll, lines))
    return views


def _plot_view(ax, fig, v, scale, surface, hemi, view):
    """One view of per-surface-vertex values ``v`` through nilearn's ``plot_surf_stat_map``;
    returns the mesh's coordinates, its culled faces and the hemisphere's slice of ``v``."""
    from nilearn import plotting

    coords, _ = geometry.mesh(surface, hemi)
    faces = _culled_faces(surface, hemi, view)
    h = geometry.HEMIS.index(hemi)
    sl = slice(h * geometry.N_LEFT, (h + 1) * geometry.N_LEFT)
    data, threshold = surface_plot_values(v[sl], scale)
    plotting.plot_surf_stat_map(
        (coords, faces),
        stat_map=data,
        bg_map=geometry.sulcal_depth()[h],
        hemi=hemi,
        view=view,
        engine="matplotlib",
        axes=ax,
        figure=fig,
        cmap=scale.cmap,
        vmin=scale.vmin,
        vmax=scale.vmax,
        colorbar=False,
        threshold=threshold,
        symmetric_cbar=scale.diverging,
        bg_on_data=True,
    )
    return coords, faces, sl


#: What nilearn's matplotlib surface backend must offer for :func:`_view_colours` (0.12-0.14).
_SURF_BACKEND_NAMES = (
    "_plot_surf",
    "_compute_facecolors",
    "_compute_surf_map_faces",
    "_threshold_and_rescale",
    "mix_colormaps",
    "load_surf_mesh",
)


def _view_colours(v, scale, surface) -> np.ndarray | None:
    """RGBA per culled face of the four views, view after view, as nilearn colours them, without
    drawing: ``plot_surf_stat_map`` runs as for a drawing (same inputs, limits, threshold) and
    only its backend's last step, which builds the 3-D collection and sets these colours on
    it, is replaced by the same colour computation alone (None: another nilearn layout)."""
    try:
        import nilearn.plotting.surface._matplotlib_backend as mb
    except ImportError:
        return None
    if not all(hasattr(mb, n) for n in _SURF_BACKEND_NAMES):
        return None
    got = []

    def colours_only(
        surf_mesh,
        surf_map=None,
        bg_map=None,
        cmap=None,
        avg_method=None,
        threshold=None,
        alpha=None,
        bg_on_data=False,
        vmin=None,
        vmax=None,
        **_,
    ):
        # nilearn's _plot_surf (matplotlib engine), its colour lines only
        if cmap is None or isinstance(cmap, str):
            cmap = plt.get_cmap(cmap or plt.rcParamsDefault["image.cmap"])
        coords, faces = mb.load_surf_mesh(surf_mesh)
        bg = mb._compute_facecolors(
            bg_map, faces, coords.shape[0], "auto" if alpha is None else alpha
        )
        values = mb._compute_surf_map_faces(
            surf_map, faces, avg_method or "mean", coords.shape[0], bg.shape[0]
        )
        values, kept, vmin, vmax = mb._threshold_and_rescale(values, threshold, vmin, vmax)
        colours = cmap(values)
        colours[~kept, 3] = 0
        if bg_on_data:
            colours[kept, 3] = 0.7
        colours = mb.mix_colormaps(colours, bg)
        colours[colours > 1] = 1
        got.append(colours)

    original = mb._plot_surf
    mb._plot_surf = colours_only
    try:
        for hemi, view in SURFACE_VIEWS:
            _plot_view(None, None, v, scale, surface, hemi, view)
    finally:
        mb._plot_surf = original
    return np.concatenate(got)


def _raster_image(v, scale, surface, outline, top, figsize, dpi):
    """The four views as one RGBA image of the figure (None: the cached layout does not fit),
    and where each view's title stands (figure fractions, title baseline centre).

    The face colours are nilearn's (computed by :func:`plotting.plot_surf_stat_map` in the
    never-drawn axes of :func:`_scratch_axes`); only the rasterisation moves: pixel ``p`` shows
    the colour of the face drawn last at ``p`` in the same 3-D drawing, parcel borders are
    blended over it with their drawn coverage.
    """
    key = None if outline is None else np.asarray(outline, np.int64).tobytes()
    ids, cover, anchors = _face_raster(surface, float(top), tuple(figsize), int(dpi), key)
    colours = _view_colours(v, scale, surface)
    if colours is None:  # nilearn draws the views in never-drawn axes, the colours are read
        fig, axes = _scratch_axes()
        views = _draw_views(fig, v, scale, surface, None, top, axes=axes)
        colours = np.concatenate([_face_colours(c) for _, c, _ in views])
        for _, coll, _ in views:
            coll.remove()
    if ids.max() >= len(colours):  # layout differs from the cached one: keep the 3-D drawing
        return None, anchors
    if cover is None:  # one look-up per pixel in a table of 8-bit face colours (0: none)
        table = np.zeros((len(colours) + 1, 4), dtype=np.uint8)
        table[1:, :3] = colours[:, :3] * 255.0 + 0.5
        table[1:, 3] = 255
        return table[ids + 1], anchors
    img = np.zeros(ids.shape + (4,), dtype=float)
    inside = ids >= 0
    img[inside] = colours[ids[inside]]
    img[inside, 3] = 1.0
    if cover is not None:
        a = _OUTLINE_ALPHA * cover
        img[..., :3] *= (1.0 - a)[..., None]
        img[..., 3] = np.where(inside, img[..., 3], a)
    # as 8-bit RGBA, what Agg draws anyway: resampled 8x faster than float64
    return (img * 255.0 + 0.5).astype(np.uint8), anchors


@functools.lru_cache(maxsize=1)
def _scratch_axes():
    """A figure that is never drawn with four 3-D axes, in which nilearn computes the face
    colours of each map (this process's own; creating 3-D axes is most of a view's cost)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    fig = Figure()
    FigureCanvasAgg(fig)
    return fig, [fig.add_axes(rect, projection="3d") for rect in _view_rects(0.98)]


def _paint_views(fig, img: np.ndarray, anchors):
    """``img`` over the whole figure (the AxesImage is returned), and each view's title where
    its 3-D axes put it."""
    over = fig.add_axes((0.0, 0.0, 1.0, 1.0))
    image = over.imshow(
        img, interpolation="nearest", aspect="auto", extent=(0, 1, 0, 1), origin="upper"
    )
    over.set_axis_off()
    for (hemi, view), (x, y) in zip(SURFACE_VIEWS, anchors):
        fig.text(x, y, f"{hemi} {view}", fontsize=9, ha="center", va="baseline")
    return image


def _face_colours(coll) -> np.ndarray:
    """RGBA per face of a 3-D surface collection, in face order (matplotlib keeps the colours
    as set in ``_facecolor3d`` and reorders a copy by depth when drawing)."""
    c = getattr(coll, "_facecolor3d", None)
    return np.asarray(coll.get_facecolor() if c is None else c, float)


#: Opacity of parcel borders (see :func:`_draw_outline`).
_OUTLINE_ALPHA = 0.8


@functools.lru_cache(maxsize=8)
def _face_raster(surface: str, top: float, figsize: tuple, dpi: int, outline_key):
    """Face index per figure pixel of the four views (-1: no face), faces numbered view by
    view in drawing order, the parcel borders' coverage per pixel (0-1; None without an
    outline), from one drawing of the layout with colours that encode face indices, and where
    each view's title stands in that drawing (figure fractions)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    outline = None if outline_key is None else np.frombuffer(outline_key, np.int64)
    n_src = geometry.load_head_model().n_src
    fig = Figure(figsize=figsize, dpi=dpi)
    FigureCanvasAgg(fig)
    fig.patch.set_alpha(0.0)
    views = _draw_views(
        fig, geometry.to_surface(np.zeros(n_src)), _id_scale(), surface, outline, top
    )
    offset = 0
    for ax, coll, lines in views:
        n = len(_face_colours(coll))
        k = np.arange(offset + 1, offset + n + 1)  # 0 = background
        rgb = np.c_[(k >> 16) & 255, (k >> 8) & 255, k & 255] / 255.0
        ids = np.c_[rgb, np.ones(n)]
        coll.set_facecolor(ids)
        coll.set_edgecolor(ids)
        ax.title.set_visible(False)
        ax.patch.set_visible(False)
        if lines is not None:
            lines.set_visible(False)
        offset += n
    fig.canvas.draw()
    size = fig.bbox.size
    anchors = tuple(
        tuple(ax.title.get_transform().transform(ax.title.get_position()) / size)
        for ax, _, _ in views
    )
    buf = np.asarray(fig.canvas.buffer_rgba()).astype(np.int64)
    ids = ((buf[..., 0] << 16) | (buf[..., 1] << 8) | buf[..., 2]) - 1
    ids[buf[..., 3] < 255] = -1
    cover = None
    if outline is not None:
        for _, coll, lines in views:
            coll.set_visible(False)
            if lines is not None:
                lines.set_visible(True)
                lines.set_color("k")
                lines.set_alpha(1.0)
        fig.canvas.draw()
        cover = np.asarray(fig.canvas.buffer_rgba())[..., 3] / 255.0
    return ids, cover, anchors


def _id_scale():
    from .colours import ColourScale

    return ColourScale("gray", -1.0, 1.0, "index")


@functools.lru_cache(maxsize=16)
def _culled_faces(surface: str, hemi: str, view: str) -> np.ndarray:
    """:func:`_front_faces` of one template mesh and view, computed once (read-only)."""
    coords, faces = geometry.mesh(surface, hemi)
    out = _front_faces(coords, faces, hemi=hemi, view=view)
    out.flags.writeable = False
    return out


def _front_faces(coords: np.ndarray, faces: np.ndarray, *, hemi: str, view: str) -> np.ndarray:
    """Faces turned towards a lateral/medial camera (back-face culling: halves drawing time).

    The camera looks along x: from -x for left-lateral and right-medial views, from +x otherwise.
    Faces are kept when their outward normal has a non-negligible component towards the camera
    (a small margin keeps silhouette faces).
    """
    cam = -1.0 if (hemi == "left") == (view == "lateral") else 1.0
    a, b, c = (coords[faces[:, k]] for k in range(3))
    n = np.cross(b - a, c - a)
    # orient normals outward: most faces of a closed surface point away from its centre
    out = np.sign(np.sum(n * ((a + b + c) / 3.0 - coords.mean(0)), axis=1).sum()) or 1.0
    nx = out * n[:, 0] / np.maximum(np.linalg.norm(n, axis=1), 1e-12)
    return faces[cam * nx > -0.2]


def _draw_outline(ax, coords: np.ndarray, faces: np.ndarray, labels: np.ndarray) -> None:
    """Draw edges between vertices with different labels (parcel borders) of the given faces.

    Only faces turned to the camera are passed in, so hidden borders are not drawn.
    """
    fl = labels[faces]
    border = ~((fl[:, 0] == fl[:, 1]) & (fl[:, 1] == fl[:, 2]))
    segs = []
    for f in faces[border]:
        a, b, c = f
        for p, q in ((a, b), (b, c), (c, a)):
            if labels[p] != labels[q]:
                segs.append((coords[p], coords[q]))
    if not segs:
        return
    from mpl_toolkits.mplot3d.art3d import Line3DCollection

    ax.add_collection3d(Line3DCollection(segs, colors="k", linewidths=0.5, alpha=0.8, zorder=10))
