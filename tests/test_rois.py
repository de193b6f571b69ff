"""ROI reduction, user-defined ROIs and the atlas figure."""

from __future__ import annotations

import logging

import matplotlib
import numpy as np
import pytest

from sourcelab.errors import InputError
from sourcelab.figures.atlas import plot_atlas
from sourcelab.headmodel import load_head_model
from sourcelab.headmodel.geometry import mni152_to_mni305, mni305_to_mni152
from sourcelab.rois import (
    ROI_MODES,
    SMALL_MIN_VERTICES,
    atlas_summary,
    load_atlas,
    load_custom_rois,
    roi_reduce,
)

MODEL = load_head_model()
N_SRC = MODEL.n_src
N_PER_HEMI = 10_242  # fsaverage5 surface vertices per hemisphere


def _src(surface_vertices) -> np.ndarray:
    """Source indices of cortical surface vertices (medial-wall vertices are not sources)."""
    v = np.asarray(surface_vertices)
    keep = MODEL.surface.cortex[v]
    return np.searchsorted(MODEL.vertno, v[keep])


matplotlib.use("Agg")


@pytest.fixture
def rng():
    return np.random.default_rng(20240607)


# --- geometry ---------------------------------------------------------------------------------


def test_mni305_to_mni152_published_example():
    # FreeSurfer wiki "CoordinateSystems" (8): MNI305 (10, -20, 35) -> MNI152 (10.695, -18.409,
    # 36.137); the wiki's rounded matrix reproduces it to ~3e-3 mm.
    np.testing.assert_allclose(
        mni305_to_mni152([10, -20, 35]), [10.695, -18.409, 36.137], atol=5e-3
    )
    p = np.array([[-40.0, 30.0, 30.0], [12.0, -80.0, 5.0]])
    np.testing.assert_allclose(mni152_to_mni305(mni305_to_mni152(p)), p, atol=1e-10)


def test_template_surface_is_fsaverage5():
    # nilearn packages fsaverage5 with 10,242 vertices per hemisphere (ico-5), left first here.
    s = MODEL.surface
    assert s.white.shape == s.pial.shape == (2 * N_PER_HEMI, 3)
    assert np.all(s.white[:N_PER_HEMI, 0].mean() < 0) and s.white[N_PER_HEMI:, 0].mean() > 0
    np.testing.assert_allclose(s.mid, (s.white + s.pial) / 2)


# --- roi_reduce -------------------------------------------------------------------------------


@pytest.mark.parametrize("name", ["brodmann", "lobes", "yeo7"])
@pytest.mark.parametrize("mode", list(ROI_MODES))
def test_constant_per_roi_gives_the_constants_back(name, mode, rng):
    # Known answer (constructed input): a map that is constant within each (non-overlapping) ROI
    # must return exactly those constants for every reduction mode.
    atlas = load_atlas(name)
    consts = rng.integers(1, 1000, size=(3, len(atlas.rois))).astype(float)  # exact in float64
    values = rng.normal(size=(3, N_SRC)) * 1e6  # sources outside every ROI must not matter
    for k, roi in enumerate(atlas.rois):
        values[:, roi.vertices] = consts[:, k : k + 1]
    out = roi_reduce(values, atlas, mode=mode)
    assert out.shape == (3, len(atlas.rois))
    if mode == "centroid_weighted":  # weights sum to 1 in floating point: a few ulp
        np.testing.assert_allclose(out, consts, rtol=1e-12)
    else:
        np.testing.assert_array_equal(out, consts)


def test_reduce_modes_agree_with_numpy(rng):
    # Reference: numpy's own mean / median / max over each ROI's sources.
    atlas = load_atlas("networks")  # overlapping ROIs
    values = rng.gamma(2.0, size=(2, 4, N_SRC))
    for mode, func in (("mean", np.mean), ("median", np.median), ("max", np.max)):
        out = roi_reduce(values, atlas, mode=mode)
        assert out.shape == (2, 4, len(atlas.rois))
        for k in (0, 5, len(atlas.rois) - 1):
            np.testing.assert_allclose(
                out[..., k], func(values[..., atlas.rois[k].vertices], axis=-1), rtol=1e-12
            )


def test_centroid_weighted_favours_the_centre():
    # A map equal to each source's distance from the ROI centroid: the centroid-weighted mean must
    # be smaller than the plain mean (weights fall with distance).
    atlas = load_atlas("lobes")
    white = MODEL.src_mni
    roi = atlas.rois[0]
    values = np.zeros(N_SRC)
    values[roi.vertices] = np.linalg.norm(white[roi.vertices] - roi.centroid_mni, axis=1)
    out_w = roi_reduce(values, atlas, mode="centroid_weighted")[0]
    out_m = roi_reduce(values, atlas, mode="mean")[0]
    assert out_w < 0.8 * out_m


def test_reduce_rejects_bad_input():
    atlas = load_atlas("lobes")
    with pytest.raises(InputError, match="allowed: mean, median, max, centroid_weighted"):
        roi_reduce(np.zeros(N_SRC), atlas, mode="sum")
    with pytest.raises(InputError, match=f"{N_SRC} sources"):
        roi_reduce(np.zeros(8196), atlas)
    with pytest.raises(InputError, match="unknown atlas"):
        roi_reduce(np.zeros(N_SRC), "aal")
    np.testing.assert_array_equal(roi_reduce(np.ones(N_SRC), "lobes"), np.ones(len(atlas.rois)))


# --- user-defined ROIs ------------------------------------------------------------------------


def _write(tmp_path, name, text):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def test_custom_rois_toml_all_kinds(tmp_path, caplog):
    import nibabel as nib

    ba = {(r.name, r.hemisphere): r.vertices for r in load_atlas("brodmann").rois}
    # an .annot on fsaverage5 (10,242 vertices) with two entries: first 100 vertices and the rest
    lab = np.zeros(N_PER_HEMI, dtype=np.int32)
    lab[:100] = 1
    ctab = np.array([[10, 10, 10, 0, 0], [200, 20, 20, 0, 0]], dtype=np.int32)
    nib.freesurfer.write_annot(
        str(tmp_path / "lh.test.annot"), lab, ctab, [b"rest", b"first"], fill_ctab=True
    )
    # a FreeSurfer .label (ASCII format: header, count, "vertex x y z value" rows) on fsaverage,
    # with one vertex beyond fsaverage5 that must be dropped
    verts = [5, 6, 7, 200000 - 36158]
    rows = "\n".join(f"{v} 0.0 0.0 0.0 0.0" for v in verts)
    (tmp_path / "lh.test.label").write_text(f"#!ascii label\n{len(verts)}\n{rows}\n")
    assert MODEL.surface.cortex[[4321, 5, 6, 7, N_PER_HEMI + 1, N_PER_HEMI + 3]].all()
    c305 = MODEL.surface.mid[4321]
    c152 = mni305_to_mni152(c305)
    path = _write(
        tmp_path,
        "rois.toml",
        f"""
name = "pilot"
[[roi]]
name = "dot"
kind = "sphere"
center = [{float(c152[0])!r}, {float(c152[1])!r}, {float(c152[2])!r}]
radius_mm = 0.01
[[roi]]
name = "ba17-18"
kind = "areas"
areas = ["BA17", "BA18"]
hemisphere = "right"
[[roi]]
name = "dmn-yeo"
kind = "areas"
areas = ["yeo7:default"]
[[roi]]
name = "picked"
kind = "vertices"
vertices = [{N_PER_HEMI + 3}, {N_PER_HEMI + 1}, {N_PER_HEMI + 3}]
[[roi]]
name = "lab"
kind = "label"
file = "lh.test.label"
hemisphere = "left"
[[roi]]
name = "parc"
kind = "annot"
file = "lh.test.annot"
hemisphere = "left"
""",
    )
    with caplog.at_level(logging.WARNING, logger="sourcelab"):
        atlas = load_custom_rois(path)
    rois = {(r.name, r.hemisphere): r for r in atlas.rois}
    assert atlas.name == "pilot" and len(atlas.sha256) == 64
    # sphere of ~0 radius around a vertex's mid-thickness point holds exactly that vertex
    np.testing.assert_array_equal(rois[("dot", "left")].vertices, _src([4321]))
    np.testing.assert_array_equal(
        rois[("ba17-18", "right")].vertices,
        np.union1d(ba[("BA17", "right")], ba[("BA18", "right")]),
    )
    assert rois[("dmn-yeo", "both")].vertices.size > 3000
    np.testing.assert_array_equal(
        rois[("picked", "right")].vertices, _src([N_PER_HEMI + 1, N_PER_HEMI + 3])
    )
    np.testing.assert_array_equal(rois[("lab", "left")].vertices, _src([5, 6, 7]))
    np.testing.assert_array_equal(rois[("parc.first", "left")].vertices, _src(np.arange(100)))
    assert rois[("parc.rest", "left")].vertices.size == MODEL.n_left - _src(np.arange(100)).size
    # tiny ROIs: flagged and announced loudly
    assert rois[("dot", "left")].small and rois[("lab", "left")].small
    assert not rois[("dmn-yeo", "both")].small
    assert "too small to trust" in caplog.text and "dropped" in caplog.text
    assert len(atlas_summary(atlas)) == len(atlas.rois)


def test_custom_sphere_matches_distance_rule(tmp_path):
    # Reference: a brute-force distance computation in MNI152 mm over the mid-thickness points.
    centre = np.array([-40.0, 30.0, 30.0])  # dorsolateral prefrontal, MNI152
    path = _write(
        tmp_path, "s.tsv", "name\tkind\themisphere\tspec\ndlpfc\tsphere\tleft\t-40 30 30 12\n"
    )
    roi = load_custom_rois(path).rois[0]
    mid152 = mni305_to_mni152(MODEL.surface.mid)
    expected = _src(np.flatnonzero(np.linalg.norm(mid152[:N_PER_HEMI] - centre, axis=1) <= 12.0))
    assert np.setxor1d(roi.vertices, expected).size == 0
    assert roi.vertices.size >= SMALL_MIN_VERTICES and not roi.small


def test_custom_tsv_all_kinds(tmp_path):
    path = _write(
        tmp_path,
        "r.tsv",
        "name\tkind\themisphere\tspec\n"
        "net\tareas\tboth\tBA23,default-mode,occipital\n"
        "v\tvertices\t\t1 2 3\n"
        "s\tsphere\tright\t40 30 30 10 mni305\n",
    )
    atlas = load_custom_rois(path)
    assert [(r.name, r.hemisphere) for r in atlas.rois] == [
        ("net", "both"),
        ("v", "left"),
        ("s", "right"),
    ]


@pytest.mark.parametrize(
    "body,match",
    [
        (
            '[[roi]]\nname = "x"\nkind = "sphere"\ncenter = [0, 0, 200]\nradius_mm = 5\n',
            "contains no template sources",
        ),
        ('[[roi]]\nname = "x"\nkind = "areas"\nareas = ["BA99"]\n', "unknown Brodmann area"),
        ('[[roi]]\nname = "x"\nkind = "areas"\nareas = ["motor"]\n', "allowed: BA<n>"),
        ('[[roi]]\nname = "x"\nkind = "cube"\n', "allowed: sphere, areas, vertices, label, annot"),
        ('[[roi]]\nname = "x"\nkind = "vertices"\nvertices = [20484]\n', "0..20483"),
        (
            '[[roi]]\nname = "x"\nkind = "label"\nfile = "missing.label"\nhemisphere = "left"\n',
            "file not found",
        ),
        (
            '[[roi]]\nname = "x"\nkind = "vertices"\nvertices = [1]\nhemisphere = "top"\n',
            "allowed: left, right, both",
        ),
        (
            '[[roi]]\nname = "x"\nkind = "vertices"\nvertices = [1]\n'
            '[[roi]]\nname = "x"\nkind = "vertices"\nvertices = [2]\n',
            "defined twice",
        ),
        ('name = "empty"\n', "no ROIs defined"),
        ("[[roi]\n", "invalid TOML"),
    ],
)
def test_custom_rois_bad_input(tmp_path, body, match):
    with pytest.raises(InputError, match=match):
        load_custom_rois(_write(tmp_path, "bad.toml", body))


def test_custom_rois_bad_file_type(tmp_path):
    with pytest.raises(InputError, match="allowed: .toml, .tsv"):
        load_custom_rois(_write(tmp_path, "r.csv", "a,b\n"))
    with pytest.raises(InputError, match="not found"):
        load_custom_rois(tmp_path / "none.toml")


# --- figure -----------------------------------------------------------------------------------


def test_plot_atlas_returns_figure_with_four_views(tmp_path):
    import matplotlib.pyplot as plt

    out = tmp_path / "lobes.png"
    fig = plot_atlas("lobes", output_file=out)
    try:
        axes = [ax for ax in fig.axes if ax.name == "3d"]
        assert len(axes) == 4
        assert all(ax.collections for ax in axes)  # each view has a painted mesh
        assert [ax.get_title() for ax in axes] == [
            "left lateral",
            "left medial",
            "right lateral",
            "right medial",
        ]
        assert out.stat().st_size > 10_000
    finally:
        plt.close(fig)
