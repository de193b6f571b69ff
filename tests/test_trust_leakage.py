"""ROI-to-ROI leakage (cross-talk) of the inverse (sourcelab.trust.leakage) and its CLI."""

import argparse

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from sourcelab.errors import InputError
from sourcelab.inverse.sloreta import sloreta_operator, source_power
from sourcelab.trust import (
    activity_gain,
    leakage_hints,
    leakage_matrix,
    plot_leakage,
    point_spread_power,
)
from sourcelab.simulate.sphere import patch_atlas, sphere_head


@pytest.fixture(scope="module")
def small():
    head = sphere_head(400)
    atlas = patch_atlas(head, 16)
    ops = {
        o: sloreta_operator(
            head.gain, lambda2=1 / 9, orientation=o, normals=head.src_nn if o == "fixed" else None
        )
        for o in ("fixed", "free")
    }
    return head, atlas, ops


def _offdiag_spearman(leak):
    d = leak.distances()
    off = ~np.eye(len(leak.names), dtype=bool)
    return stats.spearmanr(d[off], leak.share[off]).statistic


@pytest.mark.parametrize("orientation", ["fixed", "free"])
def test_analytic_leakage_matches_brute_force_simulation(small, orientation):
    # Cross-talk as rows of the resolution matrix (Hauk, Stenroos & Treder 2019, NeuroImage 186,
    # from memory; Liu, Dale & Belliveau 2002, Hum Brain Mapp 16:47-62, from memory): simulate
    # uncorrelated unit-variance activity on ROI b's sources (all components for free
    # orientation), push it through the forward and the inverse, and average the estimated power
    # over each ROI a.  Must match tr(M_a S_b) within Monte Carlo error (20,000 samples: relative
    # SD <= sqrt(2/20000) = 1 %; tolerance 5 %).
    head, atlas, ops = small
    op = ops[orientation]
    leak = leakage_matrix(op, head.gain, atlas, normals=head.src_nn)
    g = activity_gain(op, head.gain, normals=head.src_nn).reshape(19, op.n_src, op.n_comp)
    rng = np.random.default_rng(7)
    n = 20_000
    for b in (0, 5, len(atlas.rois) - 1):
        gb = g[:, atlas.rois[b].vertices].reshape(19, -1)
        est = op.kernel @ (gb @ rng.standard_normal((gb.shape[1], n)))
        power = (est**2).mean(1).reshape(op.n_src, op.n_comp).sum(1)
        sim = np.array([power[r.vertices].mean() for r in atlas.rois])
        np.testing.assert_allclose(sim, leak.expected[:, b], rtol=0.05)


@pytest.mark.parametrize("orientation", ["fixed", "free"])
def test_shares_partition_and_roi_power_matrices(small, orientation, rng):
    # Exact algebra: for a non-overlapping atlas, shares over all ROIs plus the unlabelled share
    # sum to 1; tr(M_a C) is the ROI mean of the per-source power diag(K C K^T).
    from sourcelab.inverse import roi_power_matrices

    head, atlas, ops = small
    op = ops[orientation]
    leak = leakage_matrix(op, head.gain, atlas, normals=head.src_nn)
    np.testing.assert_allclose(leak.share.sum(1) + leak.unlabelled, 1.0, rtol=1e-12)
    assert (leak.share > 0).all() and (leak.unlabelled > 0).all()
    a = rng.standard_normal((op.kernel.shape[1], op.kernel.shape[1]))
    c = a @ a.T
    m = roi_power_matrices(op, atlas.vertex_sets())
    per_source = source_power(op, c)
    np.testing.assert_allclose(
        np.einsum("rcd,dc->r", m, c),
        [per_source[r.vertices].mean() for r in atlas.rois],
        rtol=1e-10,
    )


def test_leakage_decays_with_distance(small):
    # Point-spread and cross-talk of linear inverses fall off with distance (Hauk et al. 2019,
    # from memory): the Spearman rank correlation between centroid distance and off-diagonal share
    # must be clearly negative.
    head, atlas, ops = small
    for op in ops.values():
        assert _offdiag_spearman(leakage_matrix(op, head.gain, atlas, normals=head.src_nn)) < -0.6


def test_point_sources_peak_exactly_but_spread(small):
    # Pascual-Marqui 2002 (Methods Find Exp Clin Pharmacol 24 Suppl D:5-12): fixed-orientation
    # sLORETA puts the maximum of a noise-free single source's map at its own location, for every
    # source; the map is nevertheless blurred: most of its power lies outside the source's ROI.
    head, atlas, ops = small
    op = ops["fixed"]
    g = activity_gain(op, head.gain_fixed)
    maps = point_spread_power(op, g, np.arange(op.n_src))
    assert np.array_equal(maps.argmax(1), np.arange(op.n_src))
    own = np.full(op.n_src, -1)
    for k, r in enumerate(atlas.rois):
        own[r.vertices] = k
    outside = [
        1 - maps[j, atlas.rois[own[j]].vertices].sum() / maps[j].sum()
        for j in np.flatnonzero(own >= 0)
    ]
    assert np.median(outside) > 0.5


def test_top_hints_and_exports(small, tmp_path):
    head, atlas, ops = small
    leak = leakage_matrix(ops["fixed"], head.gain, atlas, normals=head.src_nn)
    a = 3
    top = leak.top(leak.names[a], n=4)
    assert top.iloc[0].roi == leak.names[a] and top.iloc[0].share == leak.self_share[a]
    assert list(top.share.iloc[1:5]) == sorted(top.share.iloc[1:5], reverse=True)
    assert top.iloc[-1].roi == "(unlabelled)"
    with pytest.raises(InputError, match="not in atlas"):
        leak.top("BA99")
    # hints: a deviating ROI whose strongest leaker deviates the same way is flagged
    b = leak.index(top.iloc[1].roi, top.iloc[1].hemisphere)
    rows = [
        dict(
            atlas=atlas.name,
            roi=r.name,
            hemisphere=r.hemisphere,
            band="alpha",
            measure="absolute",
            z=0.0,
        )
        for r in atlas.rois
    ]
    table = pd.DataFrame(rows)
    table.loc[a, "z"] = 2.8
    table.loc[b, "z"] = 2.2
    hints = leakage_hints(table, leak, top=2)
    assert len(hints) == 2 + 2  # both ROIs deviate; two leakers each
    first = hints[(hints.roi == leak.names[a]) & (hints["rank"] == 1)].iloc[0]
    assert first.leaker == leak.names[b] and first.same_direction
    # TSV export round trip
    path = leak.to_tsv(tmp_path / "leak.tsv")
    back = pd.read_csv(path, sep="\t")
    n = len(leak.names)
    assert len(back) == n * n + n
    np.testing.assert_allclose(back.share[: n * n].to_numpy().reshape(n, n), leak.share, rtol=1e-5)
    with pytest.raises(InputError, match="tsv"):
        leak.to_tsv(tmp_path / "leak.csv")


def test_plot_leakage(small):
    import matplotlib.pyplot as plt

    head, atlas, ops = small
    leak = leakage_matrix(ops["free"], head.gain, atlas)
    fig = plot_leakage(leak)
    ax = fig.axes[0]
    assert ax.images[0].get_array().shape == (len(atlas.rois), len(atlas.rois))
    assert ax.get_xlabel() and ax.get_ylabel() and fig.axes[1].get_ylabel()
    assert [t.get_text() for t in ax.get_yticklabels()][0] == leak.labels[0]
    plt.close(fig)


def test_real_head_model_leakage(head_model):
    # On the shipped head model (fails if the file is missing).  Brodmann atlas: rows partition
    # (Brodmann areas do not overlap), leakage decays with distance (Hauk et al. 2019, from
    # memory), and 500 random fixed-orientation point sources peak exactly at their own location
    # (Pascual-Marqui 2002) while most of their power falls outside their own area.
    from sourcelab.rois import load_atlas

    op = sloreta_operator(
        head_model.gain, lambda2=1 / 9, orientation="fixed", normals=head_model.src_nn
    )
    atlas = load_atlas("brodmann")
    leak = leakage_matrix(op, head_model.gain, atlas, normals=head_model.src_nn)
    np.testing.assert_allclose(leak.share.sum(1) + leak.unlabelled, 1.0, rtol=1e-10)
    rho = _offdiag_spearman(leak)
    print(
        f"brodmann: Spearman(distance, share) = {rho:.2f}; median self-share "
        f"{np.median(leak.self_share):.3f}"
    )
    assert rho < -0.3
    rng = np.random.default_rng(0)
    idx = rng.choice(op.n_src, 500, replace=False)
    maps = point_spread_power(op, head_model.gain_fixed, idx)
    assert np.array_equal(maps.argmax(1), idx)
    own = np.full(op.n_src, -1)
    for k, r in enumerate(atlas.rois):
        own[r.vertices] = k
    outside = [
        1 - maps[i, atlas.rois[own[j]].vertices].sum() / maps[i].sum()
        for i, j in enumerate(idx)
        if own[j] >= 0
    ]
    assert np.median(outside) > 0.5


def test_real_head_model_cli(head_model, capsys, tmp_path):
    # The CLI sub-command on the shipped head model: prints the ROI's self-share and leakers.
    from sourcelab.cli import leakage as cli

    p = argparse.ArgumentParser()
    cli.add_parser(p.add_subparsers(dest="command"))
    png = tmp_path / "leak.png"
    args = p.parse_args(
        ["leakage", "BA17", "--hemisphere", "left", "--top", "5", "--plot", str(png)]
    )
    assert args.func(args) == 0
    out = capsys.readouterr().out
    assert "BA17 (left)" in out and "BA18" in out and "(unlabelled)" in out
    assert png.stat().st_size > 10_000
    bad = p.parse_args(["leakage", "BA17", "--atlas", "nope"])
    with pytest.raises(InputError, match="--atlas"):
        bad.func(bad)
    amb = p.parse_args(["leakage", "BA17"])
    with pytest.raises(InputError, match="hemispheres"):
        amb.func(amb)
