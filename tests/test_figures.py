"""Figures: content checks on Agg (axes hold data, z limits symmetric, bars labelled)."""

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt
import numpy as np
import pytest
from matplotlib.figure import Figure

from sourcelab.figures import (
    Z_CMAP,
    glass_brain,
    network_chart,
    power_scale,
    result_figures,
    roi_bars,
    roi_heatmap,
    sensor_info,
    sensor_topomaps,
    surface_views,
    z_scale,
)
from sourcelab.figures.geometry import source_positions_mni305
from sourcelab.headmodel import load_head_model
from sourcelab.headmodel.geometry import MNI305_TO_MNI152

N_SRC = load_head_model().n_src
N_LEFT = load_head_model().n_left


@pytest.fixture(scope="module")
def result(demo_result):
    return demo_result


@pytest.fixture(autouse=True)
def _close_figures():
    yield
    plt.close("all")


def _colourbar_axes(fig):
    """Axes holding a colour bar (matplotlib marks them with ``_colorbar``)."""
    return [ax for ax in fig.axes if getattr(ax, "_colorbar", None) is not None]


def _has_data(ax) -> bool:
    return bool(ax.images or ax.collections or ax.patches)


def _check_colourbar(fig, expect_label: str, *, symmetric: bool):
    cbs = _colourbar_axes(fig)
    assert len(cbs) == 1
    cb = cbs[0]._colorbar
    assert expect_label in cb.ax.get_ylabel() + cb.ax.get_xlabel()
    lo, hi = cb.mappable.norm.vmin, cb.mappable.norm.vmax
    if symmetric:
        assert lo == -hi and hi > 0
    else:
        assert hi > lo


def test_z_scale_is_symmetric_and_shared():
    # common practice: z maps on a diverging scale centred on 0, same limits for every band
    s = z_scale(limit=2.5, threshold=1.96)
    assert (s.vmin, s.vmax, s.cmap) == (-2.5, 2.5, Z_CMAP)
    assert "z-score" in s.label
    with pytest.raises(ValueError, match="z limit"):
        z_scale(limit=0)
    with pytest.raises(ValueError, match="threshold"):
        z_scale(limit=2, threshold=3)
    with pytest.raises(ValueError, match="measure"):
        power_scale(np.ones(3), measure="loudness")


def test_power_scale_uses_robust_maximum():
    v = np.r_[np.linspace(0, 1, 1000), 1e6]  # one outlier must not set the top of the scale
    s = power_scale(v, measure="absolute")
    assert 0 < s.vmin < 0.02 and 0.9 < s.vmax < 1.01
    assert "power" in s.label


def test_mni305_to_mni152_is_a_small_correction():
    # FreeSurfer wiki "CoordinateSystems": MNI305 and MNI152 differ by ~1-2 mm (from memory)
    A = MNI305_TO_MNI152
    assert abs(np.linalg.det(A[:3, :3]) - 1) < 0.02
    assert np.linalg.norm(A[:3, 3]) < 3
    pos = source_positions_mni305()
    assert pos.shape == (N_SRC, 3)
    # left hemisphere first: left sources have negative x on average
    assert pos[:N_LEFT, 0].mean() < -20 and pos[N_LEFT:, 0].mean() > 20


def test_glass_brain_z(result):
    zmap = np.where(np.arange(N_SRC) < N_LEFT, 2.5, -2.5)
    fig = glass_brain(zmap, scale=z_scale(limit=3), title="z", display_mode="lyrz")
    assert isinstance(fig, Figure)
    data_axes = [ax for ax in fig.axes if ax not in _colourbar_axes(fig) and ax.images]
    assert len(data_axes) == 4  # l, y, r, z projections each hold an image
    _check_colourbar(fig, "z-score", symmetric=True)
    for ax in data_axes:
        clim = ax.images[0].get_clim()
        assert clim[0] == -clim[1] == -3


def test_glass_brain_power_and_bad_input(result, tmp_path):
    out = tmp_path / "g.png"
    v = result.source_map("alpha")
    fig = glass_brain(v, scale=power_scale(v), display_mode="ortho", output_file=out)
    assert out.stat().st_size > 1000
    _check_colourbar(fig, "sLORETA power", symmetric=False)
    with pytest.raises(ValueError, match=str(N_SRC)):
        glass_brain(np.ones(100), scale=power_scale())
    with pytest.raises(ValueError, match="display_mode"):
        glass_brain(v, scale=power_scale(v), display_mode="sideways")


def test_surface_views(result):
    v = result.source_map("alpha", "relative")
    labels = np.repeat(np.arange(4), 20484 // 4 + 1)[:20484]
    fig = surface_views(v, scale=power_scale(v, measure="relative"), outline=labels)
    # default: the four views painted as one image over the figure, each view titled
    images = [ax for ax in fig.axes if ax.images and ax not in _colourbar_axes(fig)]
    assert len(images) == 1 and images[0].get_position().bounds == (0.0, 0.0, 1.0, 1.0)
    titles = {t.get_text() for t in fig.texts}
    assert {f"{h} {w}" for h, w in (("left", "lateral"), ("right", "medial"))} <= titles
    _check_colourbar(fig, "relative power", symmetric=False)
    fig3d = surface_views(v, scale=power_scale(v, measure="relative"), outline=labels, raster=False)
    axes3d = [ax for ax in fig3d.axes if ax.name == "3d"]
    assert len(axes3d) == 4 and all(ax.collections for ax in axes3d)
    # the outline adds a second collection (parcel borders) to the views that show a border
    assert any(len(ax.collections) > 1 for ax in axes3d)
    fz = surface_views(v * 0 + 2.5, scale=z_scale(threshold=1.96))
    _check_colourbar(fz, "z-score", symmetric=True)


def test_sensor_topomaps(result):
    info = sensor_info(result.ch_names)
    pos = np.array([info["chs"][i]["loc"][:3] for i in range(len(result.ch_names))])
    # MNE's fsaverage-fitted montage: O1 is posterior of Fp1 (y in metres, head frame)
    assert pos[result.ch_names.index("O1"), 1] < pos[result.ch_names.index("Fp1"), 1]
    fig = sensor_topomaps(
        result.sensor_abs,
        band_names=result.bands.names,
        scale=power_scale(result.sensor_abs, measure="sensor_absolute"),
    )
    maps = [ax for ax in fig.axes if ax.images]
    assert len(maps) == len(result.bands.names)
    _check_colourbar(fig, "µV²", symmetric=False)
    z = np.zeros((5, 19))
    fz = sensor_topomaps(z, band_names=result.bands.names, scale=z_scale())
    _check_colourbar(fz, "z-score", symmetric=True)
    with pytest.raises(ValueError, match="n_bands"):
        sensor_topomaps(z[:2], band_names=result.bands.names, scale=z_scale())


def test_roi_bars_sorted_by_abs_z(result):
    fig = roi_bars(result.roi_table, band="theta", atlas="lobes", scale=z_scale())
    ax = next(a for a in fig.axes if a.patches)
    widths = [p.get_width() for p in ax.patches]
    # bars are drawn bottom-up, so |z| must be increasing along the list
    assert np.all(np.diff(np.abs(widths)) >= 0)
    t = result.roi_table
    z = t[(t.atlas == "lobes") & (t.band == "theta") & (t.measure == "absolute")].z
    assert max(np.abs(widths)) == pytest.approx(np.abs(z).max())
    lo, hi = ax.get_xlim()
    assert lo == -hi
    guides = sorted(
        round(line.get_xdata()[0], 2) for line in ax.lines if line.get_linestyle() == "--"
    )
    assert guides == [-1.96, 1.96]
    _check_colourbar(fig, "z-score", symmetric=True)


def test_roi_heatmap_and_networks(result):
    fig = roi_heatmap(result.roi_table, measure="absolute", atlas="lobes")
    ax = next(a for a in fig.axes if a.images)
    n_lobes = len(result.atlas("lobes").rois)
    assert ax.images[0].get_array().shape == (5, n_lobes)  # 5 bands x lobes
    assert ax.images[0].norm.vmin == -ax.images[0].norm.vmax
    _check_colourbar(fig, "z-score", symmetric=True)
    fn = network_chart(result.roi_table, atlas="yeo7", measure="absolute")
    ax = fn.axes[0]
    # titled by the atlas's name for people, not its key twice ("networks (networks)")
    assert ax.get_title().startswith("Yeo 2011 7 networks, absolute power")
    assert len(ax.collections) == 5  # one marker set per band
    lo, hi = ax.get_xlim()
    assert lo == -hi
    with pytest.raises(ValueError, match="no rows"):
        network_chart(result.roi_table, atlas="nonexistent")


def test_roi_heatmap_many_rois_turns_to_rows():
    import pandas as pd

    rows = [
        ("a", f"R{i}", "left", b, "absolute", 1.0, "u", 10, False, (i % 7) - 3.0)
        for i in range(60)
        for b in ("theta", "alpha")
    ]
    t = pd.DataFrame(
        rows,
        columns=[
            "atlas",
            "roi",
            "hemisphere",
            "band",
            "measure",
            "value",
            "unit",
            "n_vertices",
            "small",
            "z",
        ],
    )
    fig = roi_heatmap(t, measure="absolute")
    panels = [a for a in fig.axes if a.images]
    assert len(panels) == 2  # 60 ROIs -> two panels of 30 rows, 2 band columns each
    assert all(a.images[0].get_array().shape == (30, 2) for a in panels)
    assert panels[1].get_yticklabels()[-1].get_text() == "R59 L"
    _check_colourbar(fig, "z-score", symmetric=True)


def _coupling_keys(result, bands) -> set:
    """Coupling figures of the default set: ROI matrices always, pair head maps with pair z
    (the demo norms may or may not hold pair rows)."""
    keys = {"coupling/lagcoh", "coupling/aec_orth"}
    pt = result.pair_table
    if pt is not None and np.isfinite(pt["z"].astype(float)).any():
        keys |= {f"pairs/{b}/{m}" for b in bands for m in ("msc", "lagcoh", "asymmetry")}
    return keys


def test_result_figures_keys(result, plain_result):
    figs = result_figures(
        result,
        surfaces=False,
        measures=("absolute",),
        resolution=3,
        z_map_atlas=None,
        bands=("theta", "alpha"),
    )
    names = ("theta", "alpha")
    expected = (
        {f"glass/{b}/absolute" for b in names}
        | {f"roi-bars/{b}/absolute" for b in names}
        | {"topomap/absolute", "topomap-z/absolute", "roi-heatmap/absolute", "networks/absolute"}
    )
    assert set(figs) == expected | {"leakage"} | _coupling_keys(result, names)
    assert all(isinstance(v, Figure) for v in figs.values())  # notebook users see figures
    plt.close("all")  # open figures are the caller's to close (more than 20 trips a warning)
    png = result_figures(
        result,
        surfaces=False,
        measures=("absolute",),
        resolution=3,
        z_map_atlas=None,
        bands=("alpha",),
        as_png=True,
    )
    assert all(v.startswith(b"\x89PNG") for v in png.values())
    no_z = result_figures(
        plain_result, surfaces=False, measures=("relative",), resolution=3, bands=("alpha",)
    )
    assert set(no_z) == {
        "glass/alpha/relative",
        "topomap/relative",
        "leakage",
        "coupling/lagcoh",
        "coupling/aec_orth",
    }  # no z: no pair head maps
    with pytest.raises(ValueError, match="bands"):
        result_figures(result, bands=("beta2",))  # not a default band


def test_result_figures_in_worker_processes(result):
    import io

    import matplotlib.image as mpimg

    options = dict(
        surfaces=False,
        measures=("absolute",),
        resolution=3,
        z_map_atlas=None,
        bands=("alpha",),
        as_png=True,
    )
    from sourcelab.figures import geometry

    key = (3, 0.2, 5.0)  # the glass brains' volume lookup at 3 mm
    geometry.VOLUME_MAPS.pop(key, None)  # built by a helper process for the workers
    parallel = result_figures(result, n_jobs=2, **options)
    assert key in geometry.VOLUME_MAPS
    # reference: the same figures drawn in this process, the volume lookup built here
    geometry.VOLUME_MAPS.pop(key)
    serial = result_figures(result, n_jobs=1, **options)
    for name in ("glass/alpha/absolute", "roi-bars/alpha/absolute"):
        a, b = (mpimg.imread(io.BytesIO(f[name]), format="png") for f in (parallel, serial))
        assert np.array_equal(a, b), name
    assert set(parallel) == {
        "glass/alpha/absolute",
        "roi-bars/alpha/absolute",
        "topomap/absolute",
        "topomap-z/absolute",
        "roi-heatmap/absolute",
        "networks/absolute",
        "leakage",
    } | _coupling_keys(result, ["alpha"])
    assert all(v.startswith(b"\x89PNG") for v in parallel.values())
    with pytest.raises(ValueError, match="n_jobs"):
        result_figures(result, n_jobs=0)


def test_power_topomaps_one_scale_per_band():
    # Absolute band power differs tenfold between bands (e.g. alpha vs high beta in resting EEG,
    # common practice): each band gets its own labelled sequential colour bar.
    from sourcelab.figures import power_scale
    from sourcelab.figures.sensor import sensor_topomaps

    v = np.abs(np.random.default_rng(1).standard_normal((3, 19))) * np.array([[100], [10], [1]])
    scales = [power_scale(v[i], measure="sensor_absolute") for i in range(3)]
    fig = sensor_topomaps(v, band_names=["a", "b", "c"], scale=scales)
    bars = [ax for ax in fig.axes if ax.get_xlabel()]
    assert len(bars) == 3 and all("µV²" in ax.get_xlabel() for ax in bars)
    assert scales[0].vmax > 5 * scales[2].vmax
    plt.close(fig)


# ---------------------------------------------------------------- issue 16: ranges, masks, holes
def _coloured_faces(fig):
    """Per 3-D view: (faces drawn, faces coloured by data).  The background is sulcal shading in
    grey (r = g = b); data colours of RdBu_r/magma ends are not grey.  ``fig`` is drawn with
    ``raster=False``: the default raster path paints these same face colours (nilearn's), held
    to the 3-D drawing's pixels by test_surface_raster_draws_the_same_pixels_as_matplotlib_3d."""
    out = []
    views = [a for a in fig.axes if a.name == "3d"]
    assert len(views) == 4
    for ax in views:
        fc = ax.collections[0].get_facecolor()
        sat = fc[:, :3].max(1) - fc[:, :3].min(1)
        out.append((len(fc), int((sat > 0.02).sum())))
    return out


def _expected_coloured(values, scale):
    """Faces nilearn colours: |mean of its vertices' plotted values| >= the threshold."""
    from sourcelab.figures import brain, geometry

    surf = geometry.to_surface(values)
    out = []
    for hemi, view in brain.SURFACE_VIEWS:
        coords, faces = geometry.mesh("inflated", hemi)
        faces = brain._front_faces(coords, faces, hemi=hemi, view=view)
        h = geometry.HEMIS.index(hemi)
        sl = slice(h * geometry.N_LEFT, (h + 1) * geometry.N_LEFT)
        vals, thr = brain.surface_plot_values(surf[sl], scale)
        in_cortex = np.isfinite(surf[sl])[faces].all(1)
        out.append(
            (len(faces), int((np.abs(vals[faces].mean(1)) >= thr).sum()), int(in_cortex.sum()))
        )
    return out


def test_surface_masks_the_configured_fraction_and_leaves_no_holes():
    from sourcelab.constants import Z_THRESHOLD
    from sourcelab.figures.geometry import source_positions_mni305

    pos = source_positions_mni305()
    # half the sources (front) at |z| = 4, beyond the ±3 range; the back half at 0.5, masked
    front = pos[:, 1] > np.median(pos[:, 1])
    z = np.where(front, 4.0, 0.5) * np.where(pos[:, 0] < 0, 1.0, -1.0)
    scale = z_scale(threshold=Z_THRESHOLD)
    fig = surface_views(z, scale=scale, raster=False)
    got, want = _coloured_faces(fig), _expected_coloured(z, scale)
    assert [g[0] for g in got] == [w[0] for w in want]
    # coloured faces are exactly those at or beyond the mask (values beyond the range included)
    assert [g[1] for g in got] == [w[1] for w in want]
    # about half of the cortex is masked, as constructed (faces straddling the border aside)
    frac = sum(g[1] for g in got) / sum(w[2] for w in want)
    assert 0.35 < frac < 0.65
    cb = _colourbar_axes(fig)[0]._colorbar
    assert cb.extend == "both" and "4" in cb.ax.get_ylabel()
    # without a mask, every face inside cortex is coloured even though all values exceed ±3
    plain = z_scale()
    fig2 = surface_views(np.where(front, 5.0, -5.0), scale=plain, raster=False)
    for g, w in zip(_coloured_faces(fig2), _expected_coloured(np.full(N_SRC, 5.0), plain)):
        assert g[1] >= w[2]  # no uncoloured (NaN/grey) face inside cortex


def test_power_below_range_is_not_a_hole(rng):
    from sourcelab.figures import ColourScale

    v = rng.uniform(0.0, 10.0, N_SRC)
    # viridis: both ends saturated, so a coloured face is told from the grey background (the
    # power map's magma starts near black)
    scale = ColourScale("viridis", 2.0, 8.0, "power")
    fig = surface_views(v, scale=scale, raster=False)
    for g, w in zip(_coloured_faces(fig), _expected_coloured(v, scale)):
        assert g[1] >= w[2]
    cb = _colourbar_axes(fig)[0]._colorbar
    assert cb.extend == "both"


def test_colourbar_arrows_only_when_data_exceed_range(result):
    from sourcelab.figures.colours import extend_for

    s = z_scale(limit=3)
    assert extend_for([-1, 2], s) == "neither" and extend_for([-4, 2], s) == "min"
    assert extend_for([1, 12], s) == "max" and extend_for([np.nan, -5, 5], s) == "both"
    n_ch = len(result.ch_names)
    inside = np.tile(np.linspace(-2.5, 2.5, n_ch), (2, 1))
    fig = sensor_topomaps(inside, band_names=["a", "b"], ch_names=result.ch_names, scale=s)
    cb = _colourbar_axes(fig)[0]._colorbar
    assert cb.extend == "neither" and cb.mappable.norm.vmin == -cb.mappable.norm.vmax == -3
    beyond = inside.copy()
    beyond[0, 0] = 12.0
    fig = sensor_topomaps(beyond, band_names=["a", "b"], ch_names=result.ch_names, scale=s)
    cb = _colourbar_axes(fig)[0]._colorbar
    assert cb.extend == "max" and "12" in cb.ax.get_ylabel()  # true range stated
    # electrode names on the maps
    texts = {t.get_text() for ax in fig.axes for t in ax.texts}
    assert set(result.ch_names) <= texts


def test_roi_charts_name_and_sort_brodmann_areas(result):
    fig = roi_heatmap(result.roi_table, measure="absolute", atlas="brodmann")
    labels = [t.get_text() for ax in fig.axes for t in ax.get_yticklabels() if t.get_text()]
    assert any("BA17 L primary visual" == lab for lab in labels)
    left = [lab.split()[0] for lab in labels if " L " in lab]
    nums = [int(x[2:]) for x in left]
    assert nums == sorted(nums)  # BA1, BA2, ..., BA10 (natural order)


def test_glass_brain_outline_as_one_collection_draws_what_nilearn_draws():
    # reference: nilearn's own outline (one patch per path) against the single collection
    import contextlib
    import io

    import matplotlib.image as mpimg

    from sourcelab.figures import brain, figure_png

    z = np.where(np.arange(N_SRC) < N_LEFT, 2.5, -2.5)
    fast = brain.glass_brain(z, scale=z_scale())
    views = [ax for ax in fast.axes if ax not in _colourbar_axes(fast) and ax.images]
    assert all(len(ax.patches) == 0 and len(ax.collections) >= 1 for ax in views)
    a = mpimg.imread(io.BytesIO(figure_png(fast)), format="png")
    original = brain._fast_outline
    try:
        brain._fast_outline = contextlib.nullcontext
        slow = brain.glass_brain(z, scale=z_scale())
        assert sum(len(ax.patches) for ax in slow.axes) > 200
        b = mpimg.imread(io.BytesIO(figure_png(slow)), format="png")
    finally:
        brain._fast_outline = original
    assert a.shape == b.shape
    assert (np.abs(a - b).max(-1) > 0.05).mean() < 1e-3  # antialiasing of overlaps aside


def test_glass_brain_png_on_a_kept_figure_matches_a_fresh_figure(result):
    # reference: nilearn's plot_glass_brain on a new figure for every map (figure_png of
    # glass_brain); the kept figure must give the same pixels whatever was drawn on it before
    import io

    import matplotlib.image as mpimg

    from sourcelab.figures import brain, figure_png

    z = np.where(np.arange(N_SRC) < N_LEFT, 2.5, -2.5)
    power = np.asarray(result.source_map("alpha"), float)
    maps = [
        (power, power_scale(power), "alpha power"),
        (z, z_scale(threshold=1.96), "z"),
        (np.full(N_SRC, 0.5), z_scale(threshold=1.96), "z"),  # nothing beyond the mask
        (-z, z_scale(), "z"),
        (power[::-1].copy(), power_scale(power), "alpha power"),
    ]
    for values, scale, title in maps:
        for mode in ("lyrz", "ortho"):
            kept = brain.glass_brain_png(values, scale=scale, title=title, display_mode=mode)
            fresh = figure_png(glass_brain(values, scale=scale, title=title, display_mode=mode))
            a = mpimg.imread(io.BytesIO(kept), format="png")
            b = mpimg.imread(io.BytesIO(fresh), format="png")
            assert a.shape == b.shape and np.array_equal(a, b), (title, mode)


def _same_pixels(png_a: bytes, png_b: bytes) -> bool:
    import io

    import matplotlib.image as mpimg

    a = mpimg.imread(io.BytesIO(png_a), format="png")
    b = mpimg.imread(io.BytesIO(png_b), format="png")
    return a.shape == b.shape and np.array_equal(a, b)


def test_surface_png_on_a_kept_figure_matches_a_fresh_figure(result):
    # reference: figure_png of surface_views, a new figure for every map; the kept figure must
    # give the same pixels whatever was drawn on it before (other scales, colour-bar ends)
    from sourcelab.figures import brain, figure_png

    power = np.asarray(result.source_map("alpha"), float)
    z = np.linspace(-4.0, 4.0, N_SRC)
    labels = np.arange(20484) // 2000  # an outline: parcels of 2000 vertices
    maps = [
        (power, power_scale(power), "alpha power", None),
        (z, z_scale(threshold=1.96), "z", None),
        (np.clip(z, -2.0, 2.0), z_scale(threshold=1.96), "z", None),  # no colour-bar arrows
        (2.0 * power, power_scale(power), "alpha power", None),  # beyond the range: arrows
        (power, power_scale(power), None, None),
        (z, z_scale(), "z", labels),
        (-z, z_scale(), "z", labels),
    ]
    for values, scale, title, outline in maps:
        kept = brain.surface_views_png(values, scale=scale, title=title, outline=outline)
        fresh = figure_png(surface_views(values, scale=scale, title=title, outline=outline))
        assert _same_pixels(kept, fresh), (title, outline is None)


def test_roi_bars_png_on_a_kept_figure_matches_a_fresh_figure(result):
    # reference: figure_png of roi_bars on a new figure for every chart
    from sourcelab.figures import figure_png, roi

    rt = result.roi_table
    bigger = rt.assign(z=rt["z"] * 3.0)  # beyond the z limits: wider axis, colour-bar arrows
    charts = [
        (rt, {"band": "alpha", "measure": "absolute"}),
        (rt, {"band": "theta", "measure": "relative"}),
        (bigger, {"band": "alpha", "measure": "absolute"}),
        (rt, {"band": "beta", "measure": "absolute", "scale": z_scale(threshold=1.96)}),
        (rt, {"band": "alpha", "measure": "absolute", "top": 12}),  # another layout
        (rt, {"band": "delta", "measure": "absolute"}),
    ]
    for table, kw in charts:
        kw = {"atlas": "brodmann", **kw}
        fresh = figure_png(roi_bars(table, **kw))
        assert _same_pixels(roi.roi_bars_png(table, **kw), fresh), kw


def test_topomaps_png_on_a_kept_figure_matches_a_fresh_figure(result):
    # reference: figure_png of sensor_topomaps (MNE's plot_topomap on new axes for every map);
    # the kept figure, whose map axes MNE draws into again, must give the same pixels
    from sourcelab.figures import figure_png, sensor

    bands = list(result.bands.names)
    sens = np.asarray(result.sensor_abs)
    per_band = [power_scale(row, measure="sensor_absolute") for row in sens]
    z = np.linspace(-4.0, 4.0, sens.size).reshape(sens.shape)
    charts = [
        (sens, {"scale": per_band, "title": "power"}),
        (np.asarray(result.sensor_rel), {"scale": per_band, "title": "relative"}),
        (sens * 3.0, {"scale": per_band, "title": "power"}),  # beyond the range: arrows
        (z, {"scale": z_scale(threshold=1.96), "title": "z"}),
        (np.clip(z, -2.0, 2.0), {"scale": z_scale(threshold=1.96), "title": "z"}),
        (-z, {"scale": z_scale(), "title": None, "names": False}),
        (z[:2], {"scale": z_scale(), "band_names": bands[:2]}),  # another layout
    ]
    for values, kw in charts:
        kw = {"band_names": bands, "ch_names": result.ch_names, **kw}
        fresh = figure_png(sensor_topomaps(values, **kw))
        assert _same_pixels(sensor.sensor_topomaps_png(values, **kw), fresh), kw.get("title")


def test_fully_masked_z_map_draws_quietly():
    # nothing beyond the mask is a valid map (warnings are errors in this suite)
    fig = glass_brain(np.full(N_SRC, 0.5), scale=z_scale(threshold=1.96))
    assert _colourbar_axes(fig)[0]._colorbar.extend == "neither"


def test_ocular_component_maps_drawn_and_reported(result, rng):
    import dataclasses

    from sourcelab.figures.figure_set import _ocular_figure
    from sourcelab.report import build_html

    maps = rng.standard_normal((2, len(result.ch_names)))
    oc = {
        **result.quality.ocular,
        "method": "ica",
        "removed_components": [0, 3],
        "component_maps_uv": maps.tolist(),
        "template_r": [0.93, 0.88],
    }
    r2 = dataclasses.replace(result, quality=dataclasses.replace(result.quality, ocular=oc))
    jobs = []
    _ocular_figure(r2, lambda key, f, *a, **k: jobs.append((key, f, a, k)), 60)
    assert [j[0] for j in jobs] == ["ocular"]
    key, f, a, k = jobs[0]
    fig = f(*a, **k)
    titles = [ax.get_title() for ax in fig.axes if ax.get_title()]
    assert titles == ["component 0 (r = 0.93)", "component 3 (r = 0.88)"]
    html = build_html(r2, {"ocular": fig})
    start = html.index('id="quality"')
    assert "2 of 19 independent components were removed" in html[start:]
    assert "removed eye-movement components" in html[start : html.index("<section", start)]


def test_z_mask_is_a_config_option(result):
    import dataclasses

    from sourcelab.config import AnalysisConfig
    from sourcelab.constants import Z_THRESHOLD
    from sourcelab.errors import InputError

    assert AnalysisConfig().z_mask == Z_THRESHOLD  # default: the shared deviation threshold
    with pytest.raises(InputError, match="z_mask"):
        AnalysisConfig(z_mask=12)

    def dashed(fig):  # ±threshold marks on the z colour bar
        cb = _colourbar_axes(fig)[0]._colorbar
        return sorted(round(float(ln.get_ydata()[0]), 2) for ln in cb.ax.lines)

    kw = dict(
        measures=("absolute",),
        bands=("alpha",),
        surfaces=False,
        resolution=3,
        pair_measures=(),
        edge_measures=(),
    )
    figs = result_figures(result, **kw)
    assert dashed(figs["topomap-z/absolute"]) == [-Z_THRESHOLD, Z_THRESHOLD]
    plt.close("all")
    off = dataclasses.replace(result, config=result.config.replace(z_mask=None))
    figs = result_figures(off, **kw)
    assert dashed(figs["topomap-z/absolute"]) == []


def _png_pixels(fig) -> np.ndarray:
    import io

    import matplotlib.image as mpimg

    from sourcelab.figures import figure_png

    return mpimg.imread(io.BytesIO(figure_png(fig)))[..., :3].astype(float)


def test_surface_raster_draws_the_same_pixels_as_matplotlib_3d():
    # Reference: matplotlib's own 3-D drawing of nilearn's collections (raster=False).  The
    # cached face-index raster must give the same picture: same faces at the same pixels in
    # nilearn's colours, parcel borders blended over them.
    from sourcelab.figures.geometry import source_positions_mni305

    from sourcelab.rois import load_atlas

    pos = source_positions_mni305()
    z = 4.0 * np.sin(pos[:, 1] / 15.0) * np.where(pos[:, 0] < 0, 1.0, -1.0)
    for kw in (
        {"scale": z_scale(threshold=1.96), "outline": load_atlas("lobes")},
        {"scale": power_scale(np.abs(z)), "title": "power"},
    ):
        vals = z if "outline" in kw else np.abs(z)
        ref = _png_pixels(surface_views(vals, raster=False, **kw))
        new = _png_pixels(surface_views(vals, **kw))
        assert ref.shape == new.shape
        r = np.corrcoef(ref.ravel(), new.ravel())[0, 1]
        differ = (np.abs(ref - new).max(2) > 10 / 255).mean()
        assert r > 0.999 and differ < 0.02, (r, differ)


def test_figure_jobs_follows_cores_workers_and_environment(monkeypatch):
    import multiprocessing as mp
    import os

    from sourcelab.errors import InputError
    from sourcelab.figures.figure_set import figure_jobs

    monkeypatch.delenv("SOURCELAB_FIGURE_JOBS", raising=False)
    n = figure_jobs()
    assert 1 <= n <= min(4, len(os.sched_getaffinity(0)))
    with mp.get_context("fork").Pool(1) as pool:  # inside a worker: never a pool of its own
        assert pool.apply(figure_jobs) == 1
    monkeypatch.setenv("SOURCELAB_FIGURE_JOBS", "3")
    assert figure_jobs() == 3
    monkeypatch.setenv("SOURCELAB_FIGURE_JOBS", "0")
    with pytest.raises(InputError, match="SOURCELAB_FIGURE_JOBS"):
        figure_jobs()


def test_warm_renderer_draws_the_same_files(result, tmp_path, monkeypatch):
    # reference: the same figure set drawn in this process (byte-identical PNG files: the
    # renderer makes the same calls on the same arguments, only in another process)
    from sourcelab.figures import warm
    from sourcelab.outputs import _pdf_in_renderer

    monkeypatch.setenv("SOURCELAB_FIGURE_JOBS", "2")  # also on a one-core machine
    options = dict(surfaces=False, measures=("absolute",), bands=("alpha",), z_map_atlas=None)
    serial = result_figures(result, n_jobs=1, as_png=True, **options)
    with warm.warm_renderer() as renderer:
        assert warm.active() is renderer
        with warm.warm_renderer() as inner:  # nested: the outer renderer serves
            assert inner is None
        drawn = renderer.finish_figures(renderer.start_figures(result, n_jobs=2, **options))
        renderer.submit(_pdf_in_renderer, tmp_path / "report.pdf").result()
    assert warm.active() is None
    assert drawn == serial
    assert (tmp_path / "report.pdf").read_bytes().startswith(b"%PDF")
    with warm.warm_renderer(enabled=False) as off:
        assert off is None


def test_early_power_maps_are_the_figure_sets_own(result, tmp_path, monkeypatch):
    # reference: the figure set drawn in this process.  The power maps the analysis hands over
    # (warm.early_maps) are drawn before the result exists; the figure set takes them only for
    # the same function and arguments, so its PNGs are byte-identical, and the PDF report the
    # renderer writes as soon as its figures are drawn is a PDF of the pages write_pdf makes
    from sourcelab.figures import figure_set, warm
    from sourcelab.outputs import _pdf_figure_names, _pdf_of_figures

    monkeypatch.setenv("SOURCELAB_FIGURE_JOBS", "2")  # also on a one-core machine
    options = dict(surfaces=False, bands=("alpha", "theta"))
    serial = result_figures(result, n_jobs=1, as_png=True, **options)
    maps = (result.config, result.ch_names, result.source_abs, result.source_rel)
    maps += (result.sensor_abs, result.sensor_rel)
    early = warm._Early(*maps)
    jobs = figure_set.queued_figures(early, **options)
    names = [job[0] for job in jobs]
    assert names and all(n.split("/")[0] in ("glass", "topomap") for n in names)
    assert len(jobs) == 2 * 2 + 2  # glass brains of 2 bands x 2 measures, 2 sensor maps
    drawn = {k: (f, a, kw, serial[k]) for k, f, a, kw in jobs}
    # the same name with other values is drawn again, not taken
    f, a, kw, _ = drawn[names[0]]
    drawn[names[0]] = (f, (a[0] + 1.0,), kw, b"stale")
    todo, got = figure_set._take_drawn(figure_set.queued_figures(result, **options), drawn)
    assert set(got) == set(names[1:]) and names[0] in {job[0] for job in todo}
    assert not figure_set.same_job(np.zeros(3), np.zeros(3, np.float32))
    assert figure_set.same_job(
        (np.array([np.nan]), {"a": [1, "x"]}), (np.array([np.nan]), {"a": [1, "x"]})
    )
    with warm.warm_renderer() as renderer:
        asked = warm.early_maps(*maps, **options)
        assert asked.result() == len(jobs)  # all drawn: nothing else was asked meanwhile
        pdf = tmp_path / "report.pdf"
        pending = renderer.start_figures(
            result, n_jobs=2, side=(_pdf_figure_names, _pdf_of_figures, (pdf,)), **options
        )
        drawn = renderer.finish_figures(pending)
        assert renderer.side_ran
    assert drawn == serial and list(drawn) == list(serial)
    assert pdf.read_bytes().startswith(b"%PDF")


def test_warm_renderer_lost_leaves_drawing_to_the_caller(result):
    from sourcelab.figures import warm

    renderer = warm.WarmRenderer()
    try:
        renderer._process.kill()
        renderer._process.join()
        pending = renderer.start_figures(result, n_jobs=2, surfaces=False)
        assert renderer.finish_figures(pending) is None
        assert not renderer.usable
    finally:
        renderer.close()


def test_warm_renderer_is_stopped_at_once_when_the_caller_fails(monkeypatch):
    # a refused input inside the block (the CLI's analysis) must not wait for the renderer's
    # warm-up: the process is terminated (exit code -SIGTERM), not asked to finish
    import signal

    from sourcelab.errors import InputError
    from sourcelab.figures import warm

    monkeypatch.setenv("SOURCELAB_FIGURE_JOBS", "2")  # also on a one-core machine
    with pytest.raises(InputError, match="refused"):
        with warm.warm_renderer() as renderer:
            raise InputError("refused")
    assert warm.active() is None
    assert not renderer._process.is_alive()
    assert renderer._process.exitcode == -signal.SIGTERM


def test_text_cache_canvas_draws_what_matplotlib_draws():
    # reference: matplotlib's own Agg canvas; the cached text is placed at whole pixels (as
    # matplotlib <= 3.10 did), so a string may move by up to half a pixel, no more
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    from sourcelab.figures import _agg

    def page():
        fig = Figure(figsize=(5, 3.5), dpi=90)
        ax = fig.add_axes((0.3, 0.3, 0.6, 0.55))
        ax.set_yticks(range(6), [f"BA{k} L area {k}" for k in range(6)], fontsize=7)
        ax.set_xticks([0, 0.5, 1], ["0", "½", "1 µV²"], rotation=45)
        ax.set_xlabel("z-score (SD units)", fontweight="bold")
        ax.set_ylabel("rotated label")
        fig.text(0.5, 0.93, "title · with—dashes", ha="center", color="tab:red", alpha=0.6)
        return fig

    def ink(canvas):
        return 255.0 - np.asarray(canvas.buffer_rgba())[..., :3].mean(-1)

    if not _agg.supported():
        pytest.skip("this matplotlib draws text in one piece already (<= 3.10)")
    ref = FigureCanvasAgg(page())
    ref.draw()
    canvas = _agg.TextCacheCanvas(page())
    canvas.draw()
    n_cached = len(_agg._bitmaps)
    canvas.draw()  # the second drawing reuses every bitmap
    assert len(_agg._bitmaps) == n_cached
    a, b = ink(ref), ink(canvas)
    assert abs(a.sum() - b.sum()) < 0.01 * a.sum()  # the same ink
    for axis in (0, 1):  # ink profiles along columns and rows agree, centres < 0.35 px apart
        pa, pb = a.sum(axis), b.sum(axis)
        i = np.arange(len(pa))
        assert np.corrcoef(pa, pb)[0, 1] > 0.98
        assert abs(pa @ i / pa.sum() - pb @ i / pb.sum()) < 0.35
