"""Tests of the shipped fsaverage5 EEG head model, its loader, MNE bridge and BEM accuracy."""

from __future__ import annotations

import json
import shutil

import mne
import numpy as np
import pytest
from scipy.spatial import ConvexHull, cKDTree

from sourcelab.constants import SITES_1020
from sourcelab.errors import InputError
from sourcelab.headmodel import (
    HeadModel,
    fsaverage_montage,
    load_head_model,
    make_info,
    shipped_path,
    to_mne_forward,
)
from sourcelab.headmodel.build import ray_surface_distance, three_layer_meshes
from sourcelab.headmodel.ingredients import mne_fsaverage_dir, read_trans
from sourcelab.headmodel.validate import rdm_mag, sphere_leadfields
from sourcelab.provenance import sha256_file

# 2 x 10,242 fsaverage5 vertices (Fischl et al. 1999, Hum Brain Mapp 8:272-284) minus the 1,769
# medial-wall vertices of Yeo et al. 2011's fsaverage labels (label 0; DATA-SOURCES.md).
N_SURFACE = 20_484
N_MEDIAL_WALL = 1_769
N_SRC = N_SURFACE - N_MEDIAL_WALL


@pytest.fixture(scope="module")
def model() -> HeadModel:
    return load_head_model()


def _to_mri_m(model, pts_head_m):
    t = read_trans()["trans"]  # head -> MRI, shipped with MNE
    return pts_head_m @ t[:3, :3].T + t[:3, 3]


# ----------------------------------------------------------------------------- shipped file
def test_shipped_file_shapes_and_hash(model):
    path = shipped_path()
    # size limit and hash recording: project requirement (<= 10 MB, sha256 in the manifest)
    assert path.stat().st_size <= 10 * 1024**2
    manifest = json.loads((path.parent / "MANIFEST.json").read_text())["files"]
    assert manifest[path.name] == sha256_file(path) == model.sha256
    assert model.ch_names == SITES_1020
    assert model.gain.shape == (19, 3 * N_SRC) and model.n_src == N_SRC
    assert model.src_pos.shape == model.src_nn.shape == model.src_mni.shape == (N_SRC, 3)
    assert model.surface.white.shape == (N_SURFACE, 3)
    assert np.isfinite(model.gain).all() and np.abs(model.gain).max() > 0
    with np.load(path) as z:  # stored as float32 (project requirement)
        assert z["gain"].dtype == np.float32
    # cached and read-only
    assert load_head_model() is model
    assert not model.gain.flags.writeable
    # conductivities are MNE's make_bem_model defaults (common practice; MNE-Python)
    assert model.meta["bem"]["conductivity_S_per_m"] == [0.3, 0.006, 0.3]
    assert model.meta["bem"]["n_vertices_per_layer"] == 2562  # ico-4: 10 * 4**4 + 2


def test_normals_unit_and_mostly_outward(model):
    assert np.allclose(np.linalg.norm(model.src_nn, axis=1), 1.0, atol=1e-6)
    # White-surface normals point out of each hemisphere on the crowns of gyri; with folding
    # about three quarters point away from the hemisphere centroid (measured on fsaverage5: 0.77).
    for sl in (slice(0, model.n_left), slice(model.n_left, None)):
        p, n = model.src_pos[sl], model.src_nn[sl]
        assert np.mean(np.einsum("ij,ij->i", n, p - p.mean(0)) > 0) > 0.7


def test_sources_are_the_cortex_outside_the_medial_wall(model):
    # The medial wall (FreeSurfer's cut, not cortex) is label 0 of Yeo et al. 2011's fsaverage
    # parcellation (J Neurophysiol 106:1125-1165), read here from the annotation's own file.
    with np.load(shipped_path().parent / "yeo7_fsaverage5.npz") as z:
        yeo = z["labels"]
    assert (yeo == 0).sum() == N_MEDIAL_WALL
    np.testing.assert_array_equal(model.vertno, np.flatnonzero(yeo > 0))
    np.testing.assert_array_equal(model.surface.cortex, yeo > 0)
    assert model.n_left == int((yeo[:10_242] > 0).sum())
    # per-source maps go to the surface with the medial wall empty, and back
    v = np.arange(model.n_src, dtype=float)
    surf = model.to_surface(v)
    assert np.isnan(surf[yeo == 0]).all() and np.array_equal(model.from_surface(surf), v)


def test_meshes_are_nilearn_fsaverage5_and_match_head_frame(model):
    # Reference: nilearn's own loader of the packaged fsaverage5 meshes.
    from nilearn.datasets import load_fsaverage, load_fsaverage_data

    fs = load_fsaverage("fsaverage5")
    for key, ours in (
        ("white_matter", model.surface.white),
        ("pial", model.surface.pial),
        ("inflated", model.surface.inflated),
    ):
        ref = np.concatenate(
            [fs[key].parts["left"].coordinates, fs[key].parts["right"].coordinates]
        )
        np.testing.assert_allclose(ours, ref, atol=1e-4)
    faces = fs["white_matter"].parts
    np.testing.assert_array_equal(model.surface.hemi_faces("right"), faces["right"].faces)
    sulc = load_fsaverage_data("fsaverage5", data_type="sulcal")
    np.testing.assert_allclose(
        model.surface.sulc[:10_242], np.ravel(sulc.data.parts["left"]), atol=1e-5
    )
    ref = np.concatenate([fs["white_matter"].parts[h].coordinates for h in ("left", "right")])
    np.testing.assert_allclose(model.src_mni, ref[model.vertno], atol=1e-4)
    # Frame convention (model.py): src_pos is head frame; head -> MRI gives src_mni (mm).
    np.testing.assert_allclose(_to_mri_m(model, model.src_pos) * 1e3, model.src_mni, atol=1e-6)
    # Left hemisphere first: x < 0 in MNI305 (Talairach & Tournoux 1988 axis convention).
    assert np.mean(model.src_mni[: model.n_left, 0] < 0) > 0.99
    assert np.mean(model.src_mni[model.n_left :, 0] > 0) > 0.99
    # Brain extent in MNI space, roughly x +-75, y -110..75, z -50..85 mm (from memory).
    lo, hi = model.src_mni.min(0), model.src_mni.max(0)
    assert (lo > [-80, -115, -55]).all() and (hi < [80, 80, 90]).all()


def _solid_angle_sum(pts, rr, tris):
    """Total solid angle (sr) subtended by a closed mesh at each point: 4 pi inside, 0 outside.

    Van Oosterom A, Strackee J (1983). The solid angle of a plane triangle. IEEE Trans Biomed
    Eng 30:125-126.
    """
    out = np.empty(len(pts))
    for s in range(0, len(pts), 100):
        a, b, c = (rr[tris[:, k]][None] - pts[s : s + 100, None] for k in range(3))
        la, lb, lc = (np.linalg.norm(x, axis=-1) for x in (a, b, c))
        num = np.einsum("ptk,ptk->pt", a, np.cross(b, c))
        den = (
            la * lb * lc
            + np.einsum("ptk,ptk->pt", a, b) * lc
            + np.einsum("ptk,ptk->pt", a, c) * lb
            + np.einsum("ptk,ptk->pt", b, c) * la
        )
        out[s : s + 100] = 2 * np.arctan2(num, den).sum(axis=1)
    return out


def test_sources_inside_inner_skull(model):
    # Sources must lie inside the innermost BEM compartment (MNE omits those outside; common
    # practice).  Exact inside test (solid angle 4 pi) against the full-resolution shipped inner
    # skull for the 500 sources closest to it plus 100 random others; all >= 3 mm inside.
    inner = mne.read_bem_surfaces(
        mne_fsaverage_dir() / "fsaverage-inner_skull-bem.fif", verbose="error"
    )[0]
    pts = model.src_mni / 1e3
    dist, _ = cKDTree(inner["rr"]).query(pts)
    assert dist.min() > 3e-3
    order = np.argsort(dist)
    pick = np.r_[order[:500], np.random.default_rng(0).choice(order[500:], 100, replace=False)]
    omega = _solid_angle_sum(pts[pick], inner["rr"], inner["tris"])
    np.testing.assert_allclose(omega, 4 * np.pi, atol=1e-6)
    # control: a point outside the scalp gives 0
    assert abs(_solid_angle_sum(np.array([[0.0, 0.0, 0.2]]), inner["rr"], inner["tris"])[0]) < 1e-6


def test_electrodes_are_mne_fsaverage_montage_on_scalp(model):
    # Positions: MNE's fsaverage-fitted 10-20 montage
    # (mne/channels/data/montages/fsaverage_1020.tsv).
    info = mne.create_info(list(SITES_1020), 250.0, "eeg")
    info.set_montage("fsaverage_1020")
    ref = np.array([ch["loc"][:3] for ch in info["chs"]])
    np.testing.assert_allclose(model.ch_pos, ref, atol=1e-9)
    # ... and they sit on the fsaverage scalp: nearest scalp vertex within half the longest
    # scalp edge (18 mm) of every electrode.
    head = mne.read_bem_surfaces(mne_fsaverage_dir() / "fsaverage-head.fif", verbose="error")[0]
    d, _ = cKDTree(head["rr"]).query(_to_mri_m(model, model.ch_pos))
    assert d.max() < 9e-3


def test_gain_physics(model):
    # Not re-referenced (documented convention): an average-referenced gain has zero column means.
    g = model.gain
    ratio = np.abs(g.mean(0)) / np.sqrt((g**2).mean(0))
    assert np.median(ratio) > 0.01
    # A radial outward dipole just under an electrode is most positive at that electrode
    # (volume-conduction physics, e.g. Nunez & Srinivasan 2006, Electric Fields of the Brain).
    centre = model.ch_pos.mean(0) - [0, 0, 0.04]
    for k, e in enumerate(model.ch_pos):
        i = np.argmin(np.linalg.norm(model.src_pos - e, axis=1))
        u = (e - centre) / np.linalg.norm(e - centre)
        v = g[:, 3 * i : 3 * i + 3] @ u
        assert np.argmax(v - v.mean()) == k, SITES_1020[k]


def test_gain_close_to_fitted_sphere_model(model):
    # Reference: MNE's 3-shell sphere fitted to the electrodes.  Realistic and spherical head
    # models differ by RDM ~0.1-0.3 and by MAG up to ~30 % for cortical sources (Vatta et al.
    # 2010, Comput Intell Neurosci 2010:972060 -- from memory): the bounds are that range, not
    # today's values (median RDM 0.13, MAG 1.10).
    info = make_info(250.0)
    sphere = mne.make_sphere_model("auto", "auto", info, verbose="error")
    idx = np.arange(0, model.n_src, 40)
    src = mne.setup_volume_source_space(
        pos={"rr": model.src_pos[idx], "nn": model.src_nn[idx]}, verbose="error"
    )
    fwd = mne.make_forward_solution(
        info, trans=None, src=src, bem=sphere, eeg=True, meg=False, mindist=0.0, verbose="error"
    )
    ref = fwd["sol"]["data"]
    ours = model.gain.reshape(19, -1, 3)[:, idx].reshape(19, -1)
    rdm, mag = rdm_mag(ours - ours.mean(0), ref - ref.mean(0))
    assert np.median(rdm) < 0.3
    assert 0.7 < np.median(mag) < 1.3


# ----------------------------------------------------------------------------- loader errors
def test_loader_rejects_missing_damaged_and_tampered_files(tmp_path, monkeypatch):
    with pytest.raises(InputError, match="not found"):
        load_head_model(tmp_path / "absent.npz")
    copy = tmp_path / "hm.npz"
    shutil.copy(shipped_path(), copy)
    assert load_head_model(copy).sha256 == load_head_model().sha256
    bad = tmp_path / "bad.npz"
    bad.write_bytes(copy.read_bytes()[: copy.stat().st_size // 2])  # truncated zip
    with pytest.raises(InputError, match="unreadable"):
        load_head_model(bad)
    # the shipped file is checked against the manifest: a changed byte is refused
    import sourcelab.data as data
    from sourcelab.headmodel import load as load_mod

    monkeypatch.setattr(data, "manifest", lambda: {shipped_path().name: "0" * 64})
    data.shipped_bytes.cache_clear()
    load_mod._load_shipped.cache_clear()
    try:
        with pytest.raises(InputError, match="sha256"):
            load_head_model()
    finally:
        monkeypatch.undo()
        data.shipped_bytes.cache_clear()
        load_mod._load_shipped.cache_clear()


# ----------------------------------------------------------------------------- MNE helpers
def test_make_info():
    info = make_info(256)
    assert info["ch_names"] == list(SITES_1020) and info["sfreq"] == 256.0
    assert len(fsaverage_montage().ch_names) == 19
    for bad in (0, -1, "x"):
        with pytest.raises(InputError, match="sfreq"):
            make_info(bad)


def test_to_mne_forward_carries_the_shipped_gain(model):
    fwd = to_mne_forward(model)
    assert fwd["sol"]["data"].shape == (19, 3 * N_SRC) and not fwd["surf_ori"]
    got = np.concatenate([s["vertno"] + h * 10_242 for h, s in enumerate(fwd["src"])])
    np.testing.assert_array_equal(got, model.vertno)
    np.testing.assert_array_equal(fwd["sol"]["data"], model.gain)
    # positions pass through MNE's coordinate transforms: equal to rounding (1e-12 m)
    np.testing.assert_allclose(fwd["source_rr"], model.src_pos, rtol=0, atol=1e-12)
    # MNE's own conversion to surface-normal orientation must give HeadModel.gain_fixed
    # (reference implementation: mne.convert_forward_solution).
    fixed = mne.convert_forward_solution(fwd, surf_ori=True, force_fixed=True, verbose="error")
    gf = model.gain_fixed
    np.testing.assert_allclose(fixed["sol"]["data"], gf, rtol=0, atol=1e-6 * np.abs(gf).max())
    # channel subset and order follow the given info; unknown sites are refused
    info = mne.create_info(["Cz", "O1", "Fp2"], 100.0, "eeg")
    sub = to_mne_forward(model, info)
    rows = [SITES_1020.index(c) for c in ("Cz", "O1", "Fp2")]
    np.testing.assert_array_equal(sub["sol"]["data"], model.gain[rows])
    with pytest.raises(InputError, match="not head-model sites"):
        to_mne_forward(model, mne.create_info(["Cz", "T3"], 100.0, "eeg"))
    # MNE's inverse accepts it (average-reference projector on the data side)
    raw = mne.io.RawArray(np.zeros((19, 10)), make_info(100.0), verbose="error")
    raw.set_eeg_reference(projection=True, verbose="error")
    cov = mne.make_ad_hoc_cov(raw.info, verbose="error")
    inv = mne.minimum_norm.make_inverse_operator(
        raw.info, fwd, cov, loose=1.0, depth=None, verbose="error"
    )
    assert inv["nsource"] == N_SRC


# ----------------------------------------------------------------------------- BEM geometry
def test_ray_surface_distance_known_answers():
    # unit cube [-1, 1]^3 as 12 outward triangles: axis rays hit at 1, diagonal at sqrt(3)
    rr = np.array([[x, y, z] for x in (-1, 1) for y in (-1, 1) for z in (-1, 1)], float)
    hull_tris = ConvexHull(rr).simplices
    dirs = np.array([[1, 0, 0], [0, -1, 0], [0, 0, 1], [1, 1, 1]], float)
    dirs /= np.linalg.norm(dirs, axis=1, keepdims=True)
    t = ray_surface_distance(np.zeros(3), dirs, rr, hull_tris)
    np.testing.assert_allclose(t, [1, 1, 1, np.sqrt(3)], rtol=1e-12)
    assert np.isnan(ray_surface_distance(np.array([5.0, 0, 0]), dirs[:1], rr, hull_tris))[0]


def test_three_layers_nested_and_on_scalp():
    layers = three_layer_meshes(ico=3)
    c = layers["centre"]
    r = [
        np.linalg.norm(layers[k] - c, axis=1) for k in ("inner_skull", "outer_skull", "outer_skin")
    ]
    assert (r[0] < r[1]).all() and (r[1] < r[2]).all()
    assert (r[1] - r[0] <= 6e-3 + 1e-12).all()  # skull thickness min(6 mm, gap/2)
    assert min(layers["min_gap_mm"].values()) > 1.0
    # scalp vertices lie on the shipped head surface: nearest head vertex within its edge length
    head = mne.read_bem_surfaces(mne_fsaverage_dir() / "fsaverage-head.fif", verbose="error")[0]
    d, _ = cKDTree(head["rr"]).query(layers["outer_skin"])
    assert d.max() < 18e-3


def test_rdm_mag_known_answers():
    # Definitions: Mosher, Leahy & Lewis 1999, IEEE Trans Biomed Eng 46:245-259.
    a = np.array([[1.0, 0.0], [0.0, 2.0], [1.0, 1.0]])
    rdm, mag = rdm_mag(a, a)
    np.testing.assert_allclose(rdm, 0, atol=1e-15)
    np.testing.assert_allclose(mag, 1)
    rdm, mag = rdm_mag(2 * a, a)
    np.testing.assert_allclose(rdm, 0, atol=1e-15)
    np.testing.assert_allclose(mag, 2)
    np.testing.assert_allclose(rdm_mag(-a, a)[0], 2)


# ----------------------------------------------------------------------------- BEM accuracy
def test_bem_matches_analytic_sphere_ico3():
    # The head model's BEM path on concentric 90/96/102 mm ico-3 meshes vs MNE's analytic
    # 3-shell sphere (Berg & Scherg 1994, Electroencephalogr Clin Neurophysiol 90:58-64, as
    # implemented in mne.make_sphere_model), electrodes on the outer sphere.  RDM/MAG: Mosher,
    # Leahy & Lewis 1999, IEEE Trans Biomed Eng 46:245-259.  Sources >= 10 mm inside the
    # inner sphere.  Measured: median RDM 0.020, MAG 0.945 (ico-3 under-estimates amplitude).
    out = sphere_leadfields(ico=3, n_src=120, n_el=48, src_radius_mm=(10.0, 80.0), seed=1)
    rdm, mag = rdm_mag(out["bem"], out["sphere"])
    assert np.median(rdm) <= 0.03
    assert 0.9 <= np.median(mag) <= 1.1
    deep = np.repeat(out["src_r_mm"], 3) < 50
    assert np.median(rdm[deep]) < np.median(rdm[~deep])  # error grows toward the mesh


@pytest.mark.slow
def test_bem_matches_analytic_sphere_ico4():
    # As above at the shipped mesh density (ico-4); sources up to 5 mm from the inner sphere,
    # like the cortex (>= 4.7 mm from the fsaverage inner skull).  Measured: median RDM 0.0063
    # (0.020 for sources 80-85 mm), MAG 0.985.
    out = sphere_leadfields(ico=4, n_src=300, n_el=64, src_radius_mm=(10.0, 85.0), seed=2)
    rdm, mag = rdm_mag(out["bem"], out["sphere"])
    assert np.median(rdm) <= 0.015
    assert 0.95 <= np.median(mag) <= 1.05


# ----------------------------------------------------------------------------- rebuild
@pytest.mark.slow
def test_rebuild_reproduces_shipped_file(tmp_path, capsys, model):
    from sourcelab.headmodel.build import main

    out = tmp_path / "hm.npz"
    assert main(["--out", str(out)]) == 0
    assert "peak memory" in capsys.readouterr().out
    new = load_head_model(out)
    np.testing.assert_array_equal(new.src_pos, model.src_pos)
    np.testing.assert_array_equal(new.vertno, model.vertno)
    np.testing.assert_array_equal(new.surface.faces, model.surface.faces)
    np.testing.assert_allclose(new.ch_pos, model.ch_pos, atol=1e-12)
    np.testing.assert_allclose(
        new.gain, model.gain, rtol=1e-4, atol=1e-4 * np.abs(model.gain).max()
    )
