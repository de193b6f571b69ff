"""Bootstrap confidence intervals of ROI and sensor band power (sourcelab.trust.bootstrap)."""

import numpy as np
import pandas as pd
import pytest

from sourcelab.errors import InputError
from sourcelab.inverse.sloreta import sloreta_operator, source_power
from sourcelab.spectra import average_reference, relative_power, sensor_band_power
from sourcelab.trust import (
    add_intervals,
    add_sensor_intervals,
    bootstrap_weights,
    percentile_interval,
    robust_flags,
    roi_bootstrap,
    z_interval,
)
from sourcelab.simulate.sphere import patch_atlas, sphere_head

BANDS = ("delta", "theta", "alpha")


@pytest.fixture(scope="module")
def small():
    head = sphere_head(300)
    atlas = patch_atlas(head, 12)
    ops = {
        o: sloreta_operator(
            head.gain, lambda2=1 / 9, orientation=o, normals=head.src_nn if o == "fixed" else None
        )
        for o in ("fixed", "free")
    }
    return head, atlas, ops


def _true_csd(head, rng, n_bands=len(BANDS)):
    """Band covariances of a stationary process: smooth random source variances + sensor noise."""
    g = head.gain_fixed
    out = []
    for _ in range(n_bands):
        centre = rng.standard_normal(3)
        centre /= np.linalg.norm(centre)
        var = 0.2 + np.exp(4 * (head.src_nn @ centre - 1))
        sig = (g * var) @ g.T
        sig += 0.05 * np.trace(sig) / g.shape[0] * np.eye(g.shape[0])
        out.append(sig)
    return np.array(out)


def _epochs(sigma, n_ep, rng, dof=6, common_mode=0.0):
    """Per-epoch real Wishart cross-spectra with mean ``sigma`` (dof = 2 x frequency bins)."""
    chol = np.linalg.cholesky(sigma)  # (n_bands, n_ch, n_ch)
    z = rng.standard_normal((n_ep, sigma.shape[0], sigma.shape[1], dof))
    x = np.einsum("bcd,ebdt->ebct", chol, z)
    if common_mode:
        x += common_mode * rng.standard_normal((n_ep, sigma.shape[0], 1, dof))
    return np.einsum("ebct,ebdt->ebcd", x, x) / dof


def _roi_values(op, csd, atlas):
    p = source_power(op, csd)
    r = relative_power(p)
    return (
        np.stack([p[:, roi.vertices].mean(1) for roi in atlas.rois], 1),
        np.stack([r[:, roi.vertices].mean(1) for roi in atlas.rois], 1),
    )


def _table(atlas, absolute, relative):
    rows = []
    for measure, vals in (("absolute", absolute), ("relative", relative)):
        for b, band in enumerate(BANDS):
            for r, roi in enumerate(atlas.rois):
                rows.append(
                    dict(
                        atlas=atlas.name,
                        roi=roi.name,
                        hemisphere=roi.hemisphere,
                        band=band,
                        measure=measure,
                        value=vals[b, r],
                        z=np.nan,
                    )
                )
    return pd.DataFrame(rows)


@pytest.mark.parametrize("orientation", ["fixed", "free"])
def test_uniform_weights_give_the_pipeline_values(small, rng, orientation):
    # The bootstrap statistic at the empirical distribution (every epoch weight 1/n) is the
    # plug-in estimate (Efron & Tibshirani 1993, ch. 6, from memory): it must equal the pipeline's
    # route (mean cross-spectrum -> source_power -> relative_power -> ROI mean) to float precision.
    head, atlas, ops = small
    op = ops[orientation]
    csd = _epochs(_true_csd(head, rng), 40, rng, common_mode=30.0)
    w = np.full((1, 40), 1 / 40)
    s = roi_bootstrap(csd, op, [r.vertices for r in atlas.rois], w)
    ab, rel = _roi_values(op, csd.mean(0), atlas)
    np.testing.assert_allclose(s["absolute"][0], ab, rtol=1e-10)
    np.testing.assert_allclose(s["relative"][0], rel, rtol=2e-6)


def test_replicates_equal_explicit_resampling(small, rng):
    # Each replicate must equal recomputing everything from the explicitly resampled epochs
    # (definition of the nonparametric bootstrap; Efron & Tibshirani 1993, from memory).  A large
    # common-mode signal (raw reference) stresses the float32 path's cancellation.
    head, atlas, ops = small
    op = ops["fixed"]
    n_ep = 30
    csd = _epochs(_true_csd(head, rng), n_ep, rng, common_mode=100.0)
    w = bootstrap_weights(n_ep, n_boot=12, seed=3)
    s = roi_bootstrap(csd, op, [r.vertices for r in atlas.rois], w)
    for i in range(12):
        idx = np.repeat(np.arange(n_ep), np.round(w[i] * n_ep).astype(int))
        ab, rel = _roi_values(op, csd[idx].mean(0), atlas)
        np.testing.assert_allclose(s["absolute"][i], ab, rtol=1e-10)
        np.testing.assert_allclose(s["relative"][i], rel, rtol=1e-5)


@pytest.mark.parametrize("orientation", ["fixed", "free"])
def test_broadband_total_replicates_equal_explicit_resampling(small, rng, orientation):
    # With a broadband total (the pipeline's relative-power denominator), every replicate must
    # equal recomputing band power / broadband power from the resampled epochs (definition of
    # the nonparametric bootstrap), for ROIs and sensors.
    from sourcelab.trust.bootstrap import sensor_bootstrap

    head, atlas, ops = small
    op = ops[orientation]
    n_ep = 30
    csd = _epochs(_true_csd(head, rng, n_bands=4), n_ep, rng, common_mode=50.0)
    bands, total = csd[:, :3], csd[:, 3]  # last one plays the 1-45 Hz total
    w = bootstrap_weights(n_ep, n_boot=10, seed=5)
    s = roi_bootstrap(bands, op, [r.vertices for r in atlas.rois], w, epoch_total=total)
    sb = sensor_bootstrap(bands, w, epoch_total=total)
    for i in range(10):
        idx = np.repeat(np.arange(n_ep), np.round(w[i] * n_ep).astype(int))
        p = source_power(op, bands[idx].mean(0))
        rel = relative_power(p, source_power(op, total[idx].mean(0)))
        want = np.stack([rel[:, roi.vertices].mean(1) for roi in atlas.rois], 1)
        np.testing.assert_allclose(s["relative"][i], want, rtol=1e-5)
        np.testing.assert_allclose(
            s["absolute"][i],
            np.stack([p[:, r.vertices].mean(1) for r in atlas.rois], 1),
            rtol=1e-10,
        )
        _, srel = sensor_band_power(
            average_reference(bands[idx].mean(0)), average_reference(total[idx].mean(0))
        )
        np.testing.assert_allclose(sb["relative"][i], srel, rtol=1e-10)


def test_weights_are_seeded_multinomial():
    # Resampling n epochs with replacement = multinomial counts summing to n (common practice).
    w = bootstrap_weights(50, n_boot=200, seed=7)
    assert w.shape == (200, 50)
    np.testing.assert_allclose(w.sum(1), 1.0)
    np.testing.assert_allclose(w * 50, np.round(w * 50))
    np.testing.assert_array_equal(w, bootstrap_weights(50, n_boot=200, seed=7))
    assert not np.array_equal(w, bootstrap_weights(50, n_boot=200, seed=8))
    # each epoch is drawn 1 time per replicate on average
    assert abs((w * 50).mean() - 1.0) < 1e-12


def test_coverage_of_95_percent_intervals(small):
    # Percentile-bootstrap 95 % intervals should contain the true value in about 95 % of
    # independent recordings (Efron & Tibshirani 1993, ch. 13, from memory).  200 simulated
    # recordings of a stationary process, 60 epochs each, per-epoch cross-spectra real Wishart with
    # mean = the true band covariance; the truth is the ROI power of the true covariance (relative:
    # ROI mean of per-source relative power of the true covariances).
    head, atlas, ops = small
    op = ops["fixed"]
    rng = np.random.default_rng(2024)
    sigma = _true_csd(head, rng)
    t_abs, t_rel = _roi_values(op, sigma, atlas)
    verts = [r.vertices for r in atlas.rois]
    hits = {"absolute": [], "relative": []}
    n_rec = 200
    for k in range(n_rec):
        csd = _epochs(sigma, 60, rng)
        s = roi_bootstrap(csd, op, verts, bootstrap_weights(60, n_boot=500, seed=k))
        for m, truth in (("absolute", t_abs), ("relative", t_rel)):
            lo, hi = percentile_interval(s[m], ci=0.95)
            hits[m].append((lo <= truth) & (truth <= hi))
    for m, h in hits.items():
        h = np.array(h)  # (n_rec, n_bands, n_rois)
        cov = h.mean()
        print(f"coverage {m}: {cov:.3f} (per ROI/band {h.mean(0).min():.3f}-{h.mean(0).max():.3f})")
        assert 0.90 <= cov <= 0.99, (m, cov)
        assert h.mean(0).min() >= 0.85, (m, h.mean(0).min())


def test_add_intervals_columns_order_and_z(small, rng):
    head, atlas, ops = small
    op = ops["free"]
    csd = _epochs(_true_csd(head, rng), 50, rng)
    ab, rel = _roi_values(op, csd.mean(0), atlas)
    table = _table(atlas, ab, rel).sample(frac=1.0, random_state=1)  # any row order
    mean = {"absolute": float(np.log10(np.median(ab))) - 0.3, "relative": -1.0}
    sd = {"absolute": 0.15, "relative": 0.2}

    from sourcelab.norms import NormRows

    is_abs = (table["measure"] == "absolute").to_numpy()
    rows = NormRows(
        mean=np.where(is_abs, mean["absolute"], mean["relative"]),
        sd=np.where(is_abs, sd["absolute"], sd["relative"]),
        transform=np.where(is_abs, "log10", "logit").astype(object),
        n=np.full(len(table), 50),
        has=np.ones(len(table), bool),
        extrapolated=np.zeros(len(table), bool),
    )
    v = table["value"].to_numpy(float)
    r = v[~is_abs]
    z = np.empty(v.shape)
    z[is_abs] = (np.log10(v[is_abs]) - mean["absolute"]) / sd["absolute"]  # by hand
    z[~is_abs] = (np.log(r) - np.log1p(-r) - mean["relative"]) / sd["relative"]
    np.testing.assert_allclose(rows.z(v), z, rtol=1e-12)
    table["z"] = z
    out = add_intervals(
        table, csd, op, [atlas], n_boot=401, seed=5, norm_rows=rows, band_names=BANDS
    )
    assert list(out.index) == list(table.index)
    assert list(out.columns[-5:]) == ["value_lo", "value_hi", "z_lo", "z_hi", "robust"]
    assert (out.value_lo < out.value_hi).all() and (out.z_lo < out.z_hi).all()
    # the point estimate lies inside its interval for nearly every row (not guaranteed: the
    # percentile interval of a biased statistic can exclude it)
    inside = (out.value_lo <= out.value) & (out.value <= out.value_hi)
    assert inside.mean() > 0.95
    # z interval = z of the value interval ends (monotone transform, Efron & Tibshirani 1993:
    # percentile intervals respect monotone transformations), computed by the pure helper too.
    a = out[out.measure == "absolute"]
    zl, zh = z_interval(a.value_lo, a.value_hi, "log10", mean["absolute"], sd["absolute"])
    np.testing.assert_allclose(a.z_lo, zl, rtol=1e-12)
    np.testing.assert_allclose(a.z_hi, zh, rtol=1e-12)
    # ...and equals the percentile interval of the bootstrapped z itself: with 401 replicates the
    # 2.5 / 97.5 % quantiles are order statistics, so the equality is exact.
    s = roi_bootstrap(
        csd, op, [r.vertices for r in atlas.rois], bootstrap_weights(50, n_boot=401, seed=5)
    )
    zs = (np.log10(s["absolute"]) - mean["absolute"]) / sd["absolute"]
    lo, hi = percentile_interval(zs)
    first = a.iloc[0]
    b = BANDS.index(first.band)
    r = [x.name for x in atlas.rois].index(first.roi)
    assert first.z_lo == pytest.approx(lo[b, r], rel=1e-12)
    assert first.z_hi == pytest.approx(hi[b, r], rel=1e-12)
    assert out.attrs["bootstrap"]["n_boot"] == 401


def test_robust_flags_known_answers():
    # Issue 14: robust is defined only for deviating rows (|z| > 1.96, the two-sided 5 % normal
    # point, common practice): True when the whole interval lies beyond the same threshold,
    # False when it crosses it; empty (NA) for rows that do not deviate and for NaN.
    z = [2.5, 2.5, -3.0, -3.0, 0.5, 0.5, np.nan]
    lo = [2.0, 1.5, -4.0, -4.0, -1.0, -0.5, 0.0]
    hi = [3.0, 3.0, -2.5, -1.0, 1.0, 2.1, 1.0]
    got = robust_flags(z, lo, hi)
    assert list(got[:4]) == [True, False, True, False]
    assert got.isna()[4:].all()


def test_sensor_intervals(rng, small):
    head, _, _ = small
    sigma = _true_csd(head, rng)
    csd = _epochs(sigma, 80, rng, common_mode=20.0)
    ch = [f"E{i}" for i in range(19)]
    ab, rel = sensor_band_power(average_reference(csd.mean(0)))
    rows = [
        dict(channel=c, band=b, measure=m, value=v[i, j], z=np.nan)
        for m, v in (("absolute", ab), ("relative", rel))
        for i, b in enumerate(BANDS)
        for j, c in enumerate(ch)
    ]
    table = pd.DataFrame(rows)
    out = add_sensor_intervals(table, csd, ch_names=ch, n_boot=300, seed=0)
    inside = (out.value_lo <= out.value) & (out.value <= out.value_hi)
    assert inside.all()
    assert out.z_lo.isna().all() and out.robust.isna().all()  # no norms: no z interval
    # relative width is about 2 x 1.96 x SD/sqrt(n) of a chi-square mean (common practice)
    width = (out.value_hi - out.value_lo) / out.value
    assert 0.1 < width[out.measure == "absolute"].median() < 0.8


def test_input_errors(small, rng):
    head, atlas, ops = small
    csd = _epochs(_true_csd(head, rng), 20, rng)
    ab, rel = _roi_values(ops["fixed"], csd.mean(0), atlas)
    table = _table(atlas, ab, rel)
    with pytest.raises(InputError, match="band_names"):
        add_intervals(table, csd, ops["fixed"], [atlas], band_names=("a", "b"))
    with pytest.raises(InputError, match="not in the given atlases"):
        add_intervals(table.assign(atlas="other"), csd, ops["fixed"], [atlas])
    with pytest.raises(InputError, match="ci"):
        add_intervals(table, csd, ops["fixed"], [atlas], ci=95)
    with pytest.raises(InputError, match="2 clean epochs"):
        bootstrap_weights(1)


def test_real_head_model_intervals(head_model, rng):
    # On the shipped head model (fails if the file is missing): uniform weights reproduce the
    # pipeline's ROI values for the Brodmann atlas, and intervals bracket most values.
    from sourcelab.inverse import roi_power_matrices
    from sourcelab.rois import load_atlas

    op = sloreta_operator(
        head_model.gain, lambda2=1 / 9, orientation="fixed", normals=head_model.src_nn
    )
    atlas = load_atlas("brodmann")
    a = rng.standard_normal((len(BANDS), 19, 19))
    sigma = np.einsum("bij,bkj->bik", a, a) + 0.1 * np.eye(19)
    csd = _epochs(sigma, 40, rng, common_mode=50.0)
    ab, rel = _roi_values(op, csd.mean(0), atlas)
    m = roi_power_matrices(op, atlas.vertex_sets())
    np.testing.assert_allclose(np.einsum("rcd,bdc->br", m, csd.mean(0)), ab, rtol=1e-10)
    s = roi_bootstrap(csd, op, [r.vertices for r in atlas.rois], np.full((1, 40), 1 / 40))
    np.testing.assert_allclose(s["relative"][0], rel, rtol=1e-5)
    out = add_intervals(_table(atlas, ab, rel), csd, op, [atlas], n_boot=200, seed=0)
    inside = (out.value_lo <= out.value) & (out.value <= out.value_hi)
    assert inside.mean() > 0.95


def test_matched_norm_rows_give_apply_norms_z():
    # z = (T(value) - mean(age)) / sd with the norms row's transform (the norms module's
    # definition; Gasser et al. 1982 log/logit transforms, from memory): the matched rows must
    # give apply_norms' z, and scaling an absolute value by 10 must shift its z by exactly 1/sd.
    from sourcelab.config import DEFAULT_BANDS
    from sourcelab.norms import apply_norms, match_norms, norms_from_tables
    from sourcelab.provenance import Fingerprint
    from sourcelab.simulate import gaussian_cohort

    fp = Fingerprint(
        headmodel_sha256="0" * 64,
        method="sLORETA",
        orientation="fixed",
        lambda2=1 / 9,
        bands=DEFAULT_BANDS,
    )
    coh = gaussian_cohort(40, rng=np.random.default_rng(1))
    nm = norms_from_tables(coh.entries, fingerprint=fp, condition="eyes closed", degree=1)
    roi, _ = coh.tables_at(30.0, np.zeros(len(coh.keys)))
    opts = dict(age=30.0, fingerprint=fp, condition="eyes closed")
    rows = match_norms(roi, nm, kind="roi", **opts)
    z = rows.z(roi.value)
    np.testing.assert_allclose(z, apply_norms(roi, nm, kind="roi", **opts)["z"], rtol=1e-12)
    ab = (roi.measure == "absolute").to_numpy()
    z10 = rows.z(np.where(ab, roi.value * 10, roi.value))
    keys = nm.table[(nm.table.kind == "roi")].set_index(["name", "hemisphere", "band", "measure"])[
        "sd"
    ]
    sd = np.array([keys[(r.roi, r.hemisphere, r.band, r.measure)] for r in roi.itertuples()])
    np.testing.assert_allclose((z10 - z)[ab], 1.0 / sd[ab], rtol=1e-10)
    np.testing.assert_allclose((z10 - z)[~ab], 0.0, atol=1e-12)


@pytest.mark.slow
def test_coverage_real_head_model_full_size(head_model):
    # Full-size version of the coverage check (Efron & Tibshirani 1993, ch. 13, from memory): the
    # shipped head model, every Brodmann area, 1,000 replicates, 100 recordings of 100 epochs of
    # a stationary process whose band covariances come from smooth cortical source variances
    # through the real leadfield plus sensor noise.
    from sourcelab.rois import load_atlas

    op = sloreta_operator(
        head_model.gain, lambda2=1 / 9, orientation="fixed", normals=head_model.src_nn
    )
    atlas = load_atlas("brodmann")
    g = head_model.gain_fixed
    pos = head_model.src_mni / np.linalg.norm(head_model.src_mni, axis=1, keepdims=True)
    rng = np.random.default_rng(99)
    sig = []
    for centre in ((0.0, -1.0, 0.2), (0.3, 0.8, 0.5)):
        var = 0.2 + np.exp(4 * (pos @ (np.array(centre) / np.linalg.norm(centre)) - 1))
        s = (g * var) @ g.T
        sig.append(s + 0.05 * np.trace(s) / 19 * np.eye(19))
    sigma = np.array(sig)
    t_abs, t_rel = _roi_values(op, sigma, atlas)
    verts = [r.vertices for r in atlas.rois]
    hits = {"absolute": [], "relative": []}
    for k in range(100):
        s = roi_bootstrap(
            _epochs(sigma, 100, rng), op, verts, bootstrap_weights(100, n_boot=1000, seed=k)
        )
        for m, truth in (("absolute", t_abs), ("relative", t_rel)):
            lo, hi = percentile_interval(s[m])
            hits[m].append((lo <= truth) & (truth <= hi))
    for m, h in hits.items():
        cov = np.mean(h)
        print(f"full-size coverage {m}: {cov:.3f}")
        assert 0.90 <= cov <= 0.99, (m, cov)


def test_replicates_drawn_ahead_give_the_same_intervals(small, rng):
    # the analysis draws the ROI replicates on a second core while other stages run: the same
    # draw (bootstrap_weights of the same seed, Efron & Tibshirani 1993 ch. 6: a replicate is
    # a resample of the epochs), so the same table to the last bit
    from sourcelab.trust import roi_replicates

    head, atlas, ops = small
    op = ops["fixed"]
    csd = _epochs(_true_csd(head, rng), 40, rng)
    ab, rel = _roi_values(op, csd.mean(0), atlas)
    table = _table(atlas, ab, rel)
    opts = dict(n_boot=200, seed=3, band_names=BANDS)
    drawn = add_intervals(table, csd, op, [atlas], **opts)
    ahead = roi_replicates(csd, op, [atlas], n_boot=200, seed=3)
    pd.testing.assert_frame_equal(
        add_intervals(table, csd, op, [atlas], replicates=ahead, **opts), drawn
    )
    # replicates of another draw are refused, not silently used
    other = roi_replicates(csd, op, [atlas], n_boot=200, seed=4)
    with pytest.raises(InputError, match="replicates"):
        add_intervals(table, csd, op, [atlas], replicates=other, **opts)
