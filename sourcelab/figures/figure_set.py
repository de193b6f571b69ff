"""The full figure set of one :class:`~sourcelab.result.AnalysisResult`, keyed by name.

Keys (``<band>`` from the result's bands, ``<measure>`` in ``absolute``/``relative``):

* ``glass/<band>/<measure>`` and ``surface/<band>/<measure>``: source power;
* ``glass-z/<band>/<measure>``: ROI z painted on sources (needs z and an atlas loader);
* ``surface-z/<band>/<measure>``: per-source z on the cortical surface (needs per-source norms,
  ``result.source_z``);
* ``ocular``: scalp maps of the independent components removed as eye activity (when any);
* ``topomap/<measure>`` and ``topomap-z/<measure>``: sensor power and z, all bands;
* ``roi-bars/<band>/<measure>``, ``roi-heatmap/<measure>``, ``networks/<measure>``: ROI charts;
* ``pairs/<band>/<measure>``: electrode pairs deviating from the norm on a head (needs z;
  ``<measure>`` from ``pair_measures``);
* ``coupling/<measure>``: ROI-by-ROI matrices of network coupling, one panel per band (z with
  norms, values without; ``<measure>`` from ``edge_measures``).
"""

from __future__ import annotations

import contextlib
import io
import logging

import matplotlib.pyplot as plt
import numpy as np

from .._threads import thread_limits
from ..checks import check_number, check_option
from ..errors import InputError
from . import brain, coupling, roi, sensor
from .colours import Z_LIMIT, Z_THRESHOLD, power_scale, z_scale
from .geometry import atlas_labels  # noqa: F401  (re-exported)
from .warm import figure_jobs  # noqa: F401  (re-exported)

logger = logging.getLogger("sourcelab")

MEASURES = ("absolute", "relative")
#: Pair measures drawn on head maps by default: coherence, its lag-only part (blind to volume
#: conduction), and power asymmetry.
PAIR_FIGURE_MEASURES = ("msc", "lagcoh", "asymmetry")
#: Edge measures drawn as ROI matrices by default: the two that zero-lag leakage cannot create.
EDGE_FIGURE_MEASURES = ("lagcoh", "aec_orth")
#: Resolution of the figure set's PNGs, dots per inch.
FIGURE_DPI = 90


#: zlib level of figure PNGs: 1 encodes about twice as fast as PIL's default 6 and, for
#: these flat-coloured figures, gives files no larger (measured on the demo's figure set).
PNG_COMPRESS_LEVEL = 1


def figure_png(fig, *, dpi: int = 90, close: bool = True) -> bytes:
    """Render a figure to PNG bytes (and close it).

    Drawn on :class:`~sourcelab.figures._agg.TextCacheCanvas` (strings rasterised once per
    process) when the figure has a plain Agg canvas.  An opaque figure is written as RGB
    (lossless: its alpha is 255 everywhere) at zlib level :data:`PNG_COMPRESS_LEVEL`; a
    figure with transparent pixels keeps its alpha channel.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The figure.
    dpi : int
        Resolution, dots per inch.
    close : bool
        Close the figure afterwards (frees its memory in pyplot).

    Returns
    -------
    bytes
        The PNG file's content.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    buf = io.BytesIO()
    if isinstance(fig.canvas, FigureCanvasAgg):
        import matplotlib
        from PIL import Image, PngImagePlugin

        from . import _agg

        canvas = fig.canvas
        if type(canvas) is FigureCanvasAgg and _agg.supported():
            canvas = _agg.TextCacheCanvas(fig)  # each distinct string rasterised once
        own_dpi = fig.dpi
        fig.set_dpi(dpi)  # what savefig(dpi=...) does while it draws
        try:
            canvas.draw()
            rgba = np.array(canvas.buffer_rgba())
        finally:
            fig.set_dpi(own_dpi)
        opaque = bool((rgba[..., 3] == 255).all())
        img = Image.fromarray(np.ascontiguousarray(rgba[..., :3]) if opaque else rgba)
        info = PngImagePlugin.PngInfo()
        info.add_text(
            "Software", f"Matplotlib version{matplotlib.__version__}, https://matplotlib.org/"
        )
        img.save(buf, format="png", compress_level=PNG_COMPRESS_LEVEL, pnginfo=info, dpi=(dpi, dpi))
    else:  # another canvas: matplotlib's own writer
        fig.savefig(buf, format="png", dpi=dpi, pil_kwargs={"compress_level": PNG_COMPRESS_LEVEL})
    if close:
        plt.close(fig)
    return buf.getvalue()


def _has_z(table) -> bool:
    return "z" in table.columns and bool(np.isfinite(table["z"].astype(float)).any())


def _pick_network_atlas(table) -> str | None:
    from ..rois import DEFAULT_NETWORK_ATLAS

    names = list(dict.fromkeys(table["atlas"]))
    if DEFAULT_NETWORK_ATLAS in names:
        return DEFAULT_NETWORK_ATLAS
    for name in names:
        if any(k in str(name).lower() for k in ("network", "yeo")):
            return str(name)
    return None


def result_figures(result, *, as_png: bool = False, n_jobs: int = 1, **options) -> dict:
    """Make every figure of a result.

    Parameters
    ----------
    result : AnalysisResult
    as_png : bool
        Return PNG bytes (figures closed as they are made) instead of open Figures (default).
    n_jobs : int
        Worker processes drawing figures (PNG output only; forked, so caches are shared).
        1 draws in this process.
    **options
        The figure options, passed to :func:`queued_figures` (its signature holds the
        defaults):

    measures : sequence of {"absolute", "relative"}
    bands : sequence of str | None
        Bands of the per-band figures (default: all); multi-band figures show all bands.
    z_limit : float
        Symmetric z colour limit, the same for every band (default 3).
    z_threshold : float | None | "config"
        Leave |z| below this uncoloured in z maps; None (or 0) colours every value.  Default: the
        result's ``config.z_mask`` (1.96, :data:`sourcelab.constants.Z_THRESHOLD`).
    atlas : str | None
        Atlas of the ROI bar charts and heatmap; default: the first atlas in the ROI table that is
        not a network atlas.
    network_atlas : str | None
        Atlas of the network chart; default: the first atlas whose name contains "network" or
        "yeo"; no network chart when there is none.
    z_map_atlas : str | None
        Atlas whose ROI z-scores are painted on sources for ``glass-z`` maps (through
        :meth:`AnalysisResult.roi_z_map`); skipped when the ROI table has no finite z for that
        atlas or the result lacks it.
    outline : Atlas | ndarray | None
        Optional parcel outline on the surface views (an Atlas or a label per source).
    display_mode : str
        Glass-brain projections (``"lyrz"`` or ``"ortho"`` ...).
    resolution : {2, 3}
        Glass-brain voxel size, mm.
    surfaces : bool
        Draw surface views (the slowest figures).
    dpi : int
    pair_measures : sequence of str
        Pair measures with a head map per band (``pairs/<band>/<measure>``; only with z).
    edge_measures : sequence of str
        Edge measures with an ROI matrix (``coupling/<measure>``).
    coupling_atlas : str | None
        Atlas of the ROI matrices (default ``networks`` when coupled, else the first).

    Returns
    -------
    figures : dict of str → bytes | Figure
    """
    n_jobs = check_number("n_jobs", n_jobs, kind=int, low=1)
    jobs = queued_figures(result, **options)
    return _run(jobs, as_png=as_png, dpi=options.get("dpi", FIGURE_DPI), n_jobs=n_jobs)


def queued_figures(
    result,
    *,
    measures=MEASURES,
    bands=None,
    z_limit: float = Z_LIMIT,
    z_threshold: float | None | str = "config",
    atlas: str | None = None,
    network_atlas: str | None = None,
    z_map_atlas: str | None = "brodmann",
    outline=None,
    display_mode: str = "lyrz",
    resolution: int = 2,
    surfaces: bool = True,
    dpi: int = FIGURE_DPI,
    pair_measures=PAIR_FIGURE_MEASURES,
    edge_measures=EDGE_FIGURE_MEASURES,
    coupling_atlas: str | None = None,
) -> list:
    """The figures :func:`result_figures` draws, queued but not drawn.

    Parameters
    ----------
    result : AnalysisResult
        Or an object with the attributes the queued figures read (see
        :func:`sourcelab.figures.warm.early_maps`).
    measures, bands, z_limit, z_threshold, atlas, network_atlas, z_map_atlas, outline
        As in :func:`result_figures`.
    display_mode, resolution, surfaces, dpi, pair_measures, edge_measures, coupling_atlas
        As in :func:`result_figures`.

    Returns
    -------
    list of (str, callable, tuple, dict)
        ``(name, figure function, positional arguments, keyword arguments)`` in the order of
        :func:`result_figures`' answer.
    """
    for m in measures:
        check_option("measures", m, MEASURES)
    jobs: list = []

    def keep(key, func, *args, **kwargs):
        jobs.append((key, func, args, kwargs))

    if isinstance(z_threshold, str):
        check_option("z_threshold", z_threshold, ("config",))
        z_threshold = getattr(result.config, "z_mask", None)
    z_limit = check_number("z_limit", z_limit, low=0.0, low_open=True)
    z_threshold = check_number("z_threshold", z_threshold or None, low=0.0, none_ok=True)
    z_threshold = z_threshold or None
    if z_threshold is not None and z_threshold >= z_limit:
        raise InputError(
            f"z_threshold: {z_threshold:g} must be below z_limit {z_limit:g}", field="z_threshold"
        )
    zs = z_scale(limit=z_limit, threshold=z_threshold)
    source_z = getattr(result, "source_z", None) or {}
    all_bands = list(result.bands.names)
    per_band = all_bands if bands is None else list(bands)
    for b in per_band:
        check_option("bands", b, all_bands)
    bands = all_bands
    labels = outline
    rt = result.roi_table
    has_roi_z = len(rt) > 0 and _has_z(rt)
    if z_map_atlas and not (has_roi_z and _has_z(rt[rt["atlas"] == z_map_atlas])):
        z_map_atlas = None  # no z for that atlas: a z map would be empty
    for measure in measures:
        for band in per_band:
            v = np.asarray(result.source_map(band, measure), float)
            ps = power_scale(v, measure=measure)
            title = f"{band} ({_edges(result, band)}) · {measure} source power"
            keep(
                f"glass/{band}/{measure}",
                brain.glass_brain,
                v,
                scale=ps,
                title=title,
                display_mode=display_mode,
                resolution=resolution,
                dpi=dpi,
            )
            if surfaces:
                keep(
                    f"surface/{band}/{measure}",
                    brain.surface_views,
                    v,
                    scale=ps,
                    title=title,
                    outline=labels,
                    dpi=dpi,
                )
            if surfaces and measure in source_z:
                zi = np.asarray(source_z[measure][all_bands.index(band)], float)
                keep(
                    f"surface-z/{band}/{measure}",
                    brain.surface_views,
                    zi,
                    scale=zs,
                    dpi=dpi,
                    title=f"{band} ({_edges(result, band)}) · {measure} power: z per source",
                )
            if has_roi_z and z_map_atlas:
                try:
                    zmap = result.roi_z_map(band, measure, atlas=z_map_atlas)
                except (InputError, KeyError) as exc:
                    logger.info("no source z map for atlas %r: %s", z_map_atlas, exc)
                    z_map_atlas = None
                else:
                    keep(
                        f"glass-z/{band}/{measure}",
                        brain.glass_brain,
                        zmap,
                        scale=zs,
                        display_mode=display_mode,
                        resolution=resolution,
                        dpi=dpi,
                        title=f"{band} · {measure} · ROI z ({z_map_atlas})",
                    )
        sens = np.asarray(result.sensor_abs if measure == "absolute" else result.sensor_rel)
        keep(
            f"topomap/{measure}",
            sensor.sensor_topomaps,
            sens,
            band_names=bands,
            ch_names=result.ch_names,
            dpi=dpi,
            # one scale per band: absolute power differs tenfold between bands
            scale=[power_scale(sens[i], measure=f"sensor_{measure}") for i in range(sens.shape[0])],
            title=f"sensor {measure} power (average reference)",
        )
        st = result.sensor_table
        st = st[st["measure"] == measure]
        if len(st) and _has_z(st):
            zgrid = (
                st.pivot_table(index="band", columns="channel", values="z", aggfunc="first")
                .reindex(index=bands, columns=list(result.ch_names))
                .to_numpy(float)
            )
            keep(
                f"topomap-z/{measure}",
                sensor.sensor_topomaps,
                zgrid,
                band_names=bands,
                ch_names=result.ch_names,
                scale=zs,
                dpi=dpi,
                title=f"sensor {measure} power: z",
            )
        if not has_roi_z or not (rt["measure"] == measure).any():
            continue
        net = network_atlas or _pick_network_atlas(rt)
        area_atlas = atlas or next((a for a in dict.fromkeys(rt["atlas"]) if a != net), None)
        if area_atlas is not None:
            for band in per_band:
                sel = rt[(rt.atlas == area_atlas) & (rt.band == band) & (rt.measure == measure)]
                if _has_z(sel):
                    keep(
                        f"roi-bars/{band}/{measure}",
                        roi.roi_bars,
                        rt,
                        band=band,
                        measure=measure,
                        atlas=area_atlas,
                        scale=zs,
                        dpi=dpi,
                    )
            # the heatmap keeps every cell coloured: its near-white cells already read as small z
            keep(
                f"roi-heatmap/{measure}",
                roi.roi_heatmap,
                rt,
                measure=measure,
                atlas=area_atlas,
                bands=bands,
                scale=z_scale(limit=z_limit),
                dpi=dpi,
            )
        if net is not None:
            keep(
                f"networks/{measure}",
                roi.network_chart,
                rt,
                atlas=net,
                measure=measure,
                bands=bands,
                scale=zs,
                dpi=dpi,
            )
    _coupling_figures(
        result, keep, per_band, zs, dpi, pair_measures, edge_measures, coupling_atlas, z_threshold
    )
    _ocular_figure(result, keep, dpi)
    leak = getattr(result, "leakage", None)
    if leak is not None:
        from ..trust import plot_leakage

        keep("leakage", plot_leakage, leak)
    return jobs


def _coupling_figures(
    result, keep, per_band, zs, dpi, pair_measures, edge_measures, atlas, z_threshold
) -> None:
    """Queue the pair head maps and the ROI coupling matrices."""
    labels = {b: f"{b} ({_edges(result, b)})" for b in result.bands.names}
    pt = getattr(result, "pair_table", None)
    if pt is not None and len(pt) and _has_z(pt):
        have = set(pt["measure"])
        for m in pair_measures:
            check_option("pair_measures", m, sorted(have))
            for band in per_band:
                keep(
                    f"pairs/{band}/{m}",
                    coupling.pair_head_map,
                    pt,
                    band=band,
                    measure=m,
                    scale=zs,
                    band_label=labels[band],
                    dpi=dpi,
                    z_threshold=z_threshold or Z_THRESHOLD,
                )
    ct = getattr(result, "coupling_table", None)
    if ct is not None and len(ct):
        have = set(ct["measure"])
        for m in edge_measures:
            check_option("edge_measures", m, sorted(have))
            keep(
                f"coupling/{m}",
                coupling.coupling_matrix,
                ct,
                measure=m,
                atlas=atlas,
                bands=list(result.bands.names),
                band_labels=labels,
                scale=zs if _has_z(ct) else None,
                dpi=dpi,
                z_threshold=z_threshold or Z_THRESHOLD,
            )


def _ocular_figure(result, keep, dpi) -> None:
    """Queue the scalp maps of the components removed as eye activity (when any were)."""
    oc = getattr(result.quality, "ocular", None) or {}
    maps = oc.get("component_maps_uv") or []
    comps = oc.get("removed_components") or []
    if not maps:
        return
    m = np.asarray(maps, dtype=float)
    if m.ndim != 2 or m.shape[1] != len(result.ch_names):
        logger.info("ocular component maps of shape %s not drawn", m.shape)
        return
    names = (
        [f"component {c}" for c in comps]
        if len(comps) == len(m)
        else [f"component {i + 1}" for i in range(len(m))]
    )
    r = oc.get("template_r") or []
    if len(r) == len(m):  # correlation with the eye-activity template
        names = [f"{n} (r = {float(x):.2f})" for n, x in zip(names, r)]
    scales = []
    for row in m:
        lim = float(np.nanmax(np.abs(row))) or 1.0
        scales.append(z_scale(limit=lim, label="weight (µV)"))
    keep(
        "ocular",
        sensor.sensor_topomaps,
        m,
        band_names=names,
        ch_names=result.ch_names,
        scale=scales,
        dpi=dpi,
        title="components removed as eye activity",
    )


#: Figure functions with a PNG twin that draws on a figure kept for its layout (same pixels).
_KEPT_PNG = {
    brain.glass_brain: brain.glass_brain_png,
    brain.surface_views: brain.surface_views_png,
    coupling.pair_head_map: coupling.pair_head_map_png,
    roi.roi_bars: roi.roi_bars_png,
    sensor.sensor_topomaps: sensor.sensor_topomaps_png,
}


def _render(func, args, kwargs, dpi):
    """Worker: draw one figure and return its PNG bytes (on a figure kept for its layout when
    the function has a twin in :data:`_KEPT_PNG`)."""
    if "output_file" not in kwargs and func in _KEPT_PNG:
        return _KEPT_PNG[func](*args, **kwargs)
    return figure_png(func(*args, **kwargs), dpi=dpi)


def _run(jobs, *, as_png: bool, dpi: int, n_jobs: int, drawn=None, then=None) -> dict:
    """Draw the queued figures, in this process or in ``n_jobs`` forked workers.

    Drawing runs with one BLAS thread: the small linear-algebra calls of plotting (scipy's
    Delaunay transforms behind MNE's topomap interpolation, 19 points) otherwise wake a
    BLAS thread pool each time, which costs ~0.4 CPU-s per map on a busy machine instead of
    ~0.1 ms.  The objects made before it are left out of the garbage collector's full passes
    meanwhile (:func:`_gc_frozen`).

    ``drawn`` (PNG output only): name -> ``(function, args, kwargs, png)`` of figures drawn
    before; a queued figure with the same name, function and arguments (:func:`same_job`)
    takes that PNG instead of being drawn again.  ``then`` (PNG output only): ``(names,
    callback)``; ``callback(pngs)`` runs in this process as soon as those figures are drawn
    (their PNGs by name), while forked workers draw the others, and its exception is raised
    once every figure is drawn.
    """
    with thread_limits(), _gc_frozen():
        return _run_limited(jobs, as_png=as_png, dpi=dpi, n_jobs=n_jobs, drawn=drawn, then=then)


@contextlib.contextmanager
def _gc_frozen():
    """Objects that exist before the figures are drawn (the result, the caches, kept figures)
    left out of the garbage collector's full passes while they are drawn.

    Drawing makes many short-lived objects, and each full collection pass scanned all the
    process's objects again: ~15-20 % of the figure set's CPU time (measured on the demo's
    figure set).  Frozen objects are only exempt from the scans (``gc.freeze``); they are
    released for collection again afterwards, and forked workers share them unscanned.
    """
    import gc

    gc.freeze()
    try:
        yield
    finally:
        gc.unfreeze()


def same_job(a, b) -> bool:
    """Whether two figure jobs' arguments are the same: equal types, arrays of the same dtype,
    shape and bytes, and otherwise equal values (anything else: not the same).

    Parameters
    ----------
    a, b : object
        Positional or keyword arguments of figure functions (nested tuples, lists, dicts,
        arrays, frozen dataclasses, numbers, strings, None).

    Returns
    -------
    bool
    """
    import dataclasses

    if type(a) is not type(b):
        return False
    if isinstance(a, np.ndarray):
        return a.dtype == b.dtype and a.shape == b.shape and a.tobytes() == b.tobytes()
    if isinstance(a, (list, tuple)):
        return len(a) == len(b) and all(same_job(x, y) for x, y in zip(a, b))
    if isinstance(a, dict):
        return a.keys() == b.keys() and all(same_job(a[k], b[k]) for k in a)
    if dataclasses.is_dataclass(a):
        return all(same_job(getattr(a, f.name), getattr(b, f.name)) for f in dataclasses.fields(a))
    if a is None or isinstance(a, (bool, int, float, str, bytes, np.generic)):
        return bool(a == b) or (a != a and b != b)  # NaN equals NaN here
    return a is b  # e.g. the same function, or the same atlas object


def _take_drawn(jobs, drawn) -> tuple[list, dict]:
    """The jobs still to draw, and the PNGs of those ``drawn`` holds for the same job."""
    if not drawn:
        return list(jobs), {}
    todo, got = [], {}
    for key, f, a, k in jobs:
        old = drawn.get(key)
        if old is not None and old[0] is f and same_job(old[1], a) and same_job(old[2], k):
            got[key] = old[3]
        else:
            todo.append((key, f, a, k))
    return todo, got


def _run_limited(jobs, *, as_png: bool, dpi: int, n_jobs: int, drawn=None, then=None) -> dict:
    if not as_png:
        return {key: f(*a, **k) for key, f, a, k in jobs}
    todo, got = _take_drawn(jobs, drawn)
    first = [] if then is None else [key for key in then[0] if key in {j[0] for j in jobs}]
    if n_jobs == 1 or len(todo) < 2:
        got.update({key: _render(f, a, k, dpi) for key, f, a, k in todo})
        if then is not None:
            then[1]({key: got[key] for key in first})
        return {key: got[key] for key, _, _, _ in jobs}
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor

    _warm_for(todo)
    tasks = _tasks(todo, first)
    failed = None
    with ProcessPoolExecutor(max_workers=n_jobs, mp_context=mp.get_context("fork")) as pool:
        futures = [(task, pool.submit(_render_all, task, dpi)) for task in tasks]
        owner = {job[0]: future for task, future in futures for job in task}
        if then is not None:
            ready = {}
            for key in first:
                if key not in got:
                    task = next(t for t, f in futures if f is owner[key])
                    got.update(zip((job[0] for job in task), owner[key].result()))
                ready[key] = got[key]
            try:
                then[1](ready)
            except Exception as exc:  # raised once the figures are drawn
                failed = exc
        for task, future in futures:
            got.update(zip((job[0] for job in task), future.result()))
    if failed is not None:
        raise failed
    return {key: got[key] for key, _, _, _ in jobs}


#: Figure kinds drawn by one worker each (one task): the first of a kind in a process costs
#: 2-5 times the next (its kept layout, fonts, text rasters), so it is paid once, not per worker.
_TOGETHER = ("roi-bars", "pairs", "roi-heatmap", "networks", "coupling", "topomap", "topomap-z")
#: The slowest kinds (many axes or tick labels, ~0.3-1 s each).
_SLOW = ("coupling", "leakage", "roi-heatmap", "topomap", "topomap-z", "ocular")


def _tasks(jobs, first) -> list[list]:
    """The workers' tasks: the figures of a kind in :data:`_TOGETHER` in one task, the others
    one by one.  Those holding a figure of ``first`` come first; then kinds together and the
    slowest kinds, so that no worker is left drawing a long task alone at the end."""
    groups: dict = {}
    tasks: list[list] = []
    for job in jobs:
        kind = job[0].split("/")[0]
        if kind in _TOGETHER:
            if kind not in groups:
                groups[kind] = []
                tasks.append(groups[kind])
            groups[kind].append(job)
        else:
            tasks.append([job])
    wanted = set(first)

    def rank(task):
        kind = task[0][0].split("/")[0]
        return (not any(job[0] in wanted for job in task), kind not in _TOGETHER + _SLOW)

    return sorted(tasks, key=rank)


def _render_all(jobs, dpi) -> list:
    """Worker: the PNGs of a task's figures (see :func:`_render`)."""
    return [_render(f, a, k, dpi) for _, f, a, k in jobs]


def _warm_for(jobs) -> None:
    """Fill the caches the queued glass brains and surface views use before workers fork."""
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor

    from . import geometry

    geometry.sulcal_depth()  # fill caches before forking so every worker shares them
    geometry.source_positions_mni305()
    # the glass brains' volume lookups (~1.5 CPU-s each) built in a forked helper while this
    # process draws the surface layout's face raster (~1 CPU-s)
    volumes = {
        (int(k.get("resolution", 2)), 0.2, 5.0) for _, f, _, k in jobs if f is brain.glass_brain
    } - set(geometry.VOLUME_MAPS)
    helper = (
        ProcessPoolExecutor(max_workers=1, mp_context=mp.get_context("fork")) if volumes else None
    )
    try:
        built = {key: helper.submit(geometry._volume_map, *key) for key in volumes}
        warmed = set()
        for _, f, _, k in jobs:
            layout = (f, k.get("resolution"), id(k.get("outline")), bool(k.get("title")))
            if f is brain.surface_views and layout + (k.get("dpi"),) not in warmed:
                warmed.add(layout + (k.get("dpi"),))
                brain.warm_caches(f, k)
        geometry.VOLUME_MAPS.update({key: job.result() for key, job in built.items()})
    finally:
        if helper is not None:
            helper.shutdown()
    for _, f, _, k in jobs:
        layout = (f, k.get("resolution"), k.get("display_mode"))
        if f is brain.glass_brain and layout not in warmed:
            warmed.add(layout)
            brain.warm_caches(f, k)


def _edges(result, band: str) -> str:
    lo, hi = result.bands.edges[result.bands.names.index(band)]
    return f"{lo:g}-{hi:g} Hz"
