"""Coupling figures on Agg: pairs on a head, ROI-by-ROI matrices, the figure-set keys."""

import dataclasses

import matplotlib.pyplot as plt
import numpy as np
import pytest
from matplotlib.collections import LineCollection

from sourcelab.constants import SITES_1020
from sourcelab.figures import coupling_matrix, electrode_layout, pair_head_map, result_figures
from sourcelab.figures.colours import z_scale


@pytest.fixture(autouse=True)
def _close_figures():
    yield
    plt.close("all")


@pytest.fixture(scope="module")
def tables(plain_result):
    """The demo recording's real pair and coupling tables (no norms), with invented z-scores:
    seeded N(0, 1.3²) values so that some rows pass 1.96 (figures need z to colour pairs)."""
    rng = np.random.default_rng(4)
    pt, ct = plain_result.pair_table, plain_result.coupling_table
    return (
        pt.assign(z=1.3 * rng.standard_normal(len(pt))),
        ct.assign(z=1.3 * rng.standard_normal(len(ct))),
        pt,
        ct,
    )


def test_electrode_layout_follows_1020_geometry(head_model):
    # Jasper 1958: Cz is the vertex, sites mirror across the midline, the nose is up; the
    # outer ring (Fp1, F7, T7, P7, O1 and their right partners) lies near 90° from the vertex.
    xy = electrode_layout(head_model.ch_pos)
    at = dict(zip(head_model.ch_names, xy))
    assert np.hypot(*at["Cz"]) < 0.05
    assert at["Fz"][1] > 0.3 and at["Pz"][1] < -0.3 and at["T7"][0] < -0.9
    for left, right in (("Fp1", "Fp2"), ("F7", "F8"), ("C3", "C4"), ("P7", "P8"), ("O1", "O2")):
        np.testing.assert_allclose(at[left] * [-1, 1], at[right], atol=0.05)
    ring = np.hypot(*np.array([at[c] for c in ("Fp1", "F7", "T7", "P7", "O1")]).T)
    np.testing.assert_allclose(ring, 1.0, atol=0.1)


def test_pair_head_map_draws_each_deviating_pair_once(tables):
    ptz = tables[0]
    fig = pair_head_map(ptz, band="alpha", measure="lagcoh", band_label="alpha (8-12 Hz)")
    ax = fig.axes[0]
    sel = ptz[
        (ptz.band == "alpha") & (ptz.measure == "lagcoh") & (ptz.homologous | ptz.intrahemispheric)
    ]
    dev = sel[np.abs(sel.z) >= 1.96]
    grey, arcs = [c for c in ax.collections if isinstance(c, LineCollection)]
    assert len(grey.get_segments()) == len(sel) == 64  # 8 homologous + 56 within
    assert len(arcs.get_segments()) == len(dev) > 0
    np.testing.assert_allclose(np.sort(arcs.get_array()), np.sort(dev.z.to_numpy()))
    assert arcs.norm.vmin == -arcs.norm.vmax == -3.0  # symmetric, shared z limits
    texts = {t.get_text() for t in ax.texts}
    assert set(SITES_1020) <= texts
    cb = [a for a in fig.axes if getattr(a, "_colorbar", None) is not None]
    assert len(cb) == 1 and "z-score" in cb[0].get_ylabel()
    caption = " ".join(t.get_text() for t in fig.texts)
    assert f"{len(dev)} of 64 pairs" in caption and "chance" in caption
    assert "lagged coherence" in fig._suptitle.get_text() and "8-12 Hz" in fig._suptitle.get_text()


def test_pair_head_map_asymmetry_all_pairs_and_errors(tables):
    ptz, _, pt, _ = tables
    fig = pair_head_map(ptz, band="theta", measure="asymmetry")
    grey = [c for c in fig.axes[0].collections if isinstance(c, LineCollection)][0]
    assert len(grey.get_segments()) == 15  # 8 homologous + 7 A-P
    assert "left" in " ".join(t.get_text() for t in fig.texts)
    fig = pair_head_map(ptz, band="alpha", measure="msc", pairs="all")
    grey = [c for c in fig.axes[0].collections if isinstance(c, LineCollection)][0]
    assert len(grey.get_segments()) == 171
    fig = pair_head_map(pt, band="alpha", measure="msc")  # no norms: nothing coloured
    assert len([c for c in fig.axes[0].collections if isinstance(c, LineCollection)]) == 1
    assert "no norms" in " ".join(t.get_text() for t in fig.texts)
    with pytest.raises(ValueError, match="symmetric"):
        pair_head_map(
            ptz, band="alpha", measure="msc", scale=dataclasses.replace(z_scale(), vmin=-2.0)
        )
    with pytest.raises(ValueError, match="no rows"):
        pair_head_map(ptz, band="beta2", measure="msc")  # not a default band


def test_coupling_matrix_z_panels(tables):
    ctz = tables[1]
    bands = ["delta", "theta", "alpha", "beta", "gamma"]
    fig = coupling_matrix(ctz, measure="lagcoh", bands=bands)
    panels = [a for a in fig.axes if a.images]
    assert len(panels) == 5
    # the default network atlas is Yeo et al. 2011 (sourcelab.rois.DEFAULT_NETWORK_ATLAS)
    assert fig._suptitle.get_text().startswith("Yeo 2011 7 networks: ")
    sel = ctz[(ctz.atlas == "yeo7") & (ctz.measure == "lagcoh")]
    n = len(set(zip(sel.roi_a, sel.hemisphere_a)) | set(zip(sel.roi_b, sel.hemisphere_b)))
    for ax, band in zip(panels, bands):
        m = np.ma.filled(ax.images[0].get_array(), np.nan)
        assert m.shape == (n, n)
        assert np.all(np.isnan(np.diag(m))) and np.allclose(m, m.T, equal_nan=True)
        g = sel[sel.band == band]
        np.testing.assert_allclose(np.sort(m[np.triu_indices(n, 1)]), np.sort(g.z.to_numpy()))
        frames = [p for p in ax.patches if p.get_fill() is False]
        assert len(frames) == 2 * int((np.abs(g.z) >= 1.96).sum())  # both triangles
        norm = ax.images[0].norm
        assert norm.vmin == -norm.vmax == -3.0
        assert ax.get_xlabel() == band
    labels = [t.get_text() for t in panels[0].get_yticklabels()]
    assert labels[0].endswith(" L") and labels[-1].endswith(" R") and "visual L" in labels
    # imcoh is antisymmetric: the lower triangle is b leading a
    fig = coupling_matrix(ctz, measure="imcoh", atlas="lobes", bands=["alpha"])
    m = np.ma.filled(fig.axes[0].images[0].get_array(), np.nan)
    np.testing.assert_allclose(m, -m.T, equal_nan=True)


def test_coupling_matrix_values_without_norms(tables):
    ct = tables[3]
    fig = coupling_matrix(ct, measure="aec_orth", atlas="yeo7", bands=["alpha"])
    ax = fig.axes[0]
    assert ax.images and np.isfinite(np.ma.filled(ax.images[0].get_array(), np.nan)).any()
    cb = [a for a in fig.axes if getattr(a, "_colorbar", None) is not None][0]
    assert "correlation" in cb.get_ylabel()
    assert cb._colorbar.mappable.norm.vmin == -cb._colorbar.mappable.norm.vmax  # signed measure
    assert "values" in fig._suptitle.get_text()
    with pytest.raises(ValueError, match="no rows"):
        coupling_matrix(ct, measure="lagcoh", atlas="brodmann")


def test_result_figures_coupling_keys(plain_result, tables):
    # (without norms, the figure set holds the matrices but no head maps: test_figures.py)
    scored = dataclasses.replace(plain_result, pair_table=tables[0], coupling_table=tables[1])
    figs = result_figures(
        scored,
        surfaces=False,
        measures=("relative",),
        resolution=3,
        bands=("alpha",),
        z_map_atlas=None,
        pair_measures=("lagcoh", "asymmetry"),
        edge_measures=("lps",),
    )
    assert {k for k in figs if k.startswith(("pairs/", "coupling/"))} == {
        "pairs/alpha/lagcoh",
        "pairs/alpha/asymmetry",
        "coupling/lps",
    }
    assert "z against the norm" in figs["coupling/lps"]._suptitle.get_text()
    with pytest.raises(ValueError, match="pair_measures"):
        result_figures(scored, surfaces=False, pair_measures=("gamma",))


def test_pair_head_map_png_on_a_kept_figure_matches_a_fresh_figure(tables):
    # reference: figure_png of pair_head_map on a new figure for every map; the kept figure
    # must give the same pixels whatever was drawn on it before
    import io

    import matplotlib.image as mpimg

    from sourcelab.figures import coupling, figure_png

    ptz, _, pt, _ = tables
    maps = [
        (ptz, {"band": "alpha", "measure": "lagcoh", "band_label": "alpha (8-12 Hz)"}),
        (ptz, {"band": "theta", "measure": "msc"}),
        (ptz, {"band": "alpha", "measure": "asymmetry"}),  # another set of pairs
        (ptz.assign(z=0.0), {"band": "alpha", "measure": "lagcoh"}),  # nothing deviates
        (ptz.assign(z=ptz["z"] * 3), {"band": "beta", "measure": "lagcoh"}),  # beyond ±3
        (ptz, {"band": "alpha", "measure": "msc", "pairs": "all"}),
        (ptz, {"band": "alpha", "measure": "lagcoh", "z_threshold": 1.0}),
    ]
    for table, kw in maps:
        kept = coupling.pair_head_map_png(table, **kw)
        fresh = figure_png(pair_head_map(table, **kw))
        a = mpimg.imread(io.BytesIO(kept), format="png")
        b = mpimg.imread(io.BytesIO(fresh), format="png")
        assert a.shape == b.shape and np.array_equal(a, b), kw
