"""Coupling in the product: the analysis computes the pair and coupling tables by default, with
bootstrap intervals, z against norms, and writes them as plain TSV with JSON column sidecars."""

import json

import numpy as np
import pandas as pd
import pytest
from coupling_sim import coupled_recording, norms_shifted_from
from scipy import stats

from sourcelab.analysis import analyze
from sourcelab.config import AnalysisConfig, load_config
from sourcelab.coupling import EDGE_COLUMNS, EDGE_MEASURES, PAIR_COLUMNS
from sourcelab.errors import InputError

FS = 256.0


@pytest.fixture(scope="module")
def coupled_raw(head_model):
    """Invented: a left-frontal patch leads a right-occipital patch by 10 ms (shared 8-12 Hz
    signal) on pink background, 120 s (as tests/test_coupling_source.py, at an amplitude that
    keeps every 2-s epoch below the default 150 µV rejection threshold)."""
    import mne

    from sourcelab.headmodel import make_info

    rng = np.random.default_rng(3)
    d = coupled_recording(
        head_model,
        duration_s=120.0,
        sfreq=FS,
        rng=rng,
        patches=[
            ((-30, 40, 30), "left", 0.6, 0.0, 15.0),
            ((25, -90, 5), "right", 0.6, 0.010, 15.0),
        ],
    )
    return mne.io.RawArray(d * 1e-6, make_info(FS), verbose="error")


@pytest.fixture(scope="module")
def result(coupled_raw):
    # the default configuration (coupling on, 199 coupling replicates); band-power intervals
    # off to keep the module quick (they are tested in test_trust_bootstrap.py)
    return analyze(coupled_raw, config=AnalysisConfig(n_boot=0))


def test_default_analysis_has_both_tables_with_intervals(result):
    pt, ct = result.pair_table, result.coupling_table
    n_b = len(result.bands)
    assert list(pt.columns) == list(PAIR_COLUMNS) and list(ct.columns) == list(EDGE_COLUMNS)
    # 171 pairs x 9 measures + 15 asymmetry pairs, per band; 3 atlases of 12/14/16 ROIs x 6
    assert len(pt) == n_b * (171 * 9 + 15)
    assert len(ct) == n_b * 6 * (66 + 91 + 120)
    assert set(ct["atlas"]) == {"lobes", "yeo7", "networks"}
    assert set(ct["measure"]) == set(EDGE_MEASURES)
    for t in (pt, ct):
        assert (t["n_epochs"] == result.quality.n_epochs).all()
        assert t.attrs["bootstrap"]["n_boot"] == 199
        ok = t[["value_lo", "value_hi"]].notna().all(axis=1)
        assert ok.mean() > 0.99
        assert (t.loc[ok, "value_lo"] <= t.loc[ok, "value_hi"]).all()
        assert t["z"].isna().all()  # no norms: no z


def test_tables_equal_the_coupling_functions_on_the_clean_epochs(result, coupled_raw, head_model):
    # Two routes must agree: the analysis' tables and the coupling functions applied by hand to
    # the same clean epochs (sourcelab.intake.clean_recording) and the same inverse operator.
    from sourcelab.coupling import (
        coupling_table,
        independent_source_covariance,
        network_coupling,
        pair_table,
        sensor_coupling,
    )
    from sourcelab.intake import clean_recording, read_recording
    from sourcelab.inverse import inverse_operator
    from sourcelab.rois import load_atlas
    from sourcelab.spectra import epoch_fourier

    from sourcelab._threads import thread_limits

    cfg = result.config
    # the same BLAS thread count as the analysis: float32 bootstrap sums round differently
    # with another one (interval ends then differ in the 7th digit)
    with thread_limits():
        clean = clean_recording(
            read_recording(coupled_raw), cfg, muscle_uv=cfg.muscle_uv, blink_uv=cfg.blink_uv
        )
        spec, freqs = epoch_fourier(clean.epochs, clean.sfreq, cfg.bands, dtype=np.complex64)
        plain, _ = epoch_fourier(
            clean.epochs, clean.sfreq, cfg.bands, taper=False, dtype=np.complex64
        )
        c0 = independent_source_covariance(head_model.gain_fixed)
        kw = dict(n_boot=199, seed=cfg.boot_seed, ci=cfg.ci)
        pt = pair_table(
            sensor_coupling(
                spec, freqs, cfg.bands, head_model.ch_names, head_model.ch_pos, null_cov=c0, **kw
            )
        )
        op = inverse_operator(cfg.method, cfg.orientation, cfg.lambda2)
        ct = coupling_table(
            network_coupling(
                spec,
                plain,
                freqs,
                cfg.bands,
                op,
                [load_atlas(a) for a in cfg.coupling_atlases],
                null_cov=c0,
                normals=head_model.src_nn,
                **kw,
            )
        )
    pd.testing.assert_frame_equal(result.pair_table, pt, check_exact=False, rtol=1e-9)
    pd.testing.assert_frame_equal(result.coupling_table, ct, check_exact=False, rtol=1e-9)


def test_planted_lag_is_beyond_leakage_in_the_analysis(result):
    # Known answer (constructed input): the frontal and occipital lobes that hold the two
    # patches are coupled with a 10-ms lag in alpha: lagged coherence beyond the leakage null,
    # and the left-frontal lobe leads (positive lag for the edge frontal.left|occipital.right).
    ct = result.coupling_table
    row = ct[
        (ct.atlas == "lobes")
        & (ct.band == "alpha")
        & (ct.roi_a == "frontal")
        & (ct.hemisphere_a == "left")
        & (ct.roi_b == "occipital")
        & (ct.hemisphere_b == "right")
    ].set_index("measure")
    assert row.loc["lagcoh", "leakage_explained"] == False  # noqa: E712
    assert row.loc["lagcoh", "value"] > row.loc["lagcoh", "leakage_q95"]
    assert row.loc["lag_ms", "value"] > 0


def test_written_tables_read_back_with_plain_pandas(result, tmp_path):
    out = result.write(tmp_path / "res", figures=False, report=False, maps=False)
    for name, table in (
        ("pair_table", result.pair_table),
        ("coupling_table", result.coupling_table),
    ):
        text = (out / f"{name}.tsv").read_text(encoding="utf-8")
        assert not any(line.startswith("#") for line in text.splitlines())
        back = pd.read_csv(out / f"{name}.tsv", sep="\t")
        # the unit follows from the measure: stated once in the sidecar, not on every row
        assert list(back.columns) == [c for c in table.columns if c != "unit"]
        assert len(back) == len(table)
        np.testing.assert_allclose(back["value"], table["value"], rtol=1e-5, atol=1e-12)
        assert set(back["leakage_explained"].dropna()) <= {True, False}
        side = json.loads((out / f"{name}.json").read_text(encoding="utf-8"))
        assert list(side) == list(back.columns)
        assert all(side[c]["Description"] and side[c]["Description"] != c for c in side)
        assert set(side["measure"]["Levels"]) == set(table["measure"])
        assert side["band"]["Levels"]["alpha"].startswith("8-13 Hz")  # IFCN alpha
        assert "unit" in side["value"]["Units"]
    assert json.loads((out / "pair_table.json").read_text())["distance_mm"]["Units"] == "mm"


@pytest.fixture(scope="module")
def scored(result, coupled_raw):
    nm = norms_shifted_from(result, shift_sd=2.5)
    return analyze(coupled_raw, config=result.config, norms=nm, age=40.0, condition="eyes closed")


def test_coupling_z_p_fdr_and_intervals_against_norms(scored):
    # Known answer: every norm mean sits 2.5 SD below the value, so z = +2.5 for every pair and
    # edge row (circular phases included), p = 0.018 (predictive t on 39 df), and Benjamini-Hochberg
    # over equal p-values flags them all at 0.05.  z_lo / z_hi are the z of the interval's ends.
    for t in (scored.pair_table, scored.coupling_table):
        z = t["z"].to_numpy(float)
        ok = np.isfinite(z)
        assert ok.mean() > 0.99
        np.testing.assert_allclose(z[ok], 2.5, rtol=1e-9)
        # predictive Student-t p (norms format 2, n = 40, one age bin): t = z / sqrt(1 + 1/40)
        np.testing.assert_allclose(
            t["p"][ok], 2 * stats.t.sf(2.5 / np.sqrt(1 + 1 / 40), 39), rtol=1e-9
        )
        assert t["fdr"][ok].all() and not t["no_norm"].any()
        assert (t["z_lo"][ok] <= t["z_hi"][ok] + 1e-12).all()
        msc = t[(t.measure == "msc") & ok]
        want = (np.arctanh(np.sqrt(msc["value_hi"])) - np.arctanh(np.sqrt(msc["value"]))) / 0.2
        np.testing.assert_allclose(msc["z_hi"] - 2.5, want, rtol=1e-6, atol=1e-9)
        assert set(t["robust"].dropna()) <= {True, False}
    assert not any("norms hold no" in w or "clean epochs" in w for w in scored.warnings)
    n = sum(int(t["z"].notna().sum()) for t in (scored.pair_table, scored.coupling_table))
    assert (
        f"{n} electrode-pair and network-coupling z-scores; {n} with |z| > 1.96" in scored.summary()
    )


def test_recording_length_far_from_the_norms_cohort_warns(result, coupled_raw):
    # Coherence-type magnitudes are biased by about 1/n_epochs: a recording with half the
    # clean epochs of the norms' cohort is flagged (EPOCHS_TOLERANCE, 25 %); within it, not.
    import dataclasses

    nm = norms_shifted_from(result, shift_sd=1.0)
    n = result.quality.n_epochs
    for median, warned in ((2.0 * n, True), (1.1 * n, False)):
        norms = dataclasses.replace(nm, cohort={"clean_epochs": {"median": median}})
        res = analyze(
            coupled_raw,
            config=result.config.replace(coupling_n_boot=0),
            norms=norms,
            age=40.0,
            condition="eyes closed",
        )
        assert (
            any(f"{n} clean epochs against a median of {median:.0f}" in w for w in res.warnings)
            == warned
        )


def test_norms_without_coupling_rows_leave_z_empty_and_warn(result, coupled_raw):
    nm = norms_shifted_from(result, shift_sd=1.0, coupling=False)
    res = analyze(
        coupled_raw,
        config=result.config.replace(coupling_n_boot=0),
        norms=nm,
        age=40.0,
        condition="eyes closed",
    )
    assert res.pair_table["z"].isna().all() and res.coupling_table["z"].isna().all()
    assert sum("norms hold no" in w for w in res.warnings) == 2
    np.testing.assert_allclose(res.roi_table["z"].dropna(), 1.0, rtol=1e-9)


def test_coupling_off_and_config_checks(coupled_raw, tmp_path):
    res = analyze(coupled_raw, config=AnalysisConfig(coupling=False, n_boot=0))
    assert res.pair_table is None and res.coupling_table is None
    out = res.write(tmp_path / "off", figures=False, report=False, maps=False)
    assert not (out / "pair_table.tsv").exists() and (out / "roi_table.tsv").is_file()
    with pytest.raises(InputError, match="coupling_n_boot"):
        AnalysisConfig(coupling_n_boot=50)
    with pytest.raises(InputError, match="coupling_atlases"):
        AnalysisConfig(coupling_atlases="lobes")
    p = tmp_path / "c.toml"
    p.write_text('coupling_atlases = ["lobes"]\ncoupling_n_boot = 999\n')
    cfg = load_config(p)
    assert cfg.coupling_atlases == ("lobes",) and cfg.coupling_n_boot == 999
    assert cfg.to_dict()["coupling_atlases"] == ("lobes",)


def test_199_replicate_intervals_cover_at_the_nominal_rate():
    # Known answer: two signals mixed instantaneously (x2 = 0.8 s + noise, x1 = s + noise) have
    # zero imaginary coherency (Nolte et al. 2004), and its estimate is unbiased, so 95 %
    # percentile intervals from the analysis' default 199 replicates must contain 0 in 95 % of
    # 600 invented data sets: binomial SD 0.9 %, tolerance 3 SD (92.3-97.7 %).  (Measured with
    # 2,000 data sets: 95.2 % at 199 replicates, 94.9 % at 999; sourcelab/coupling/TABLES.md.)
    from sourcelab.coupling.measures import (
        bootstrap_intervals,
        coupling_from_statistics,
        pair_statistics_from_fourier,
    )

    n_boot = AnalysisConfig().coupling_n_boot
    rng = np.random.default_rng(0)
    k, f = 120, 8
    freqs = 8.0 + 0.5 * np.arange(f)
    idx = [np.arange(f)]

    def cn(*s):
        return (rng.standard_normal(s) + 1j * rng.standard_normal(s)) / np.sqrt(2)

    hits = 0
    for it in range(600):
        s = cn(k, f)
        x = np.stack([s + cn(k, f), 0.8 * s + cn(k, f)], axis=1).astype(np.complex64)
        ps = pair_statistics_from_fourier(x, freqs, [[0, 1]])
        est = coupling_from_statistics(ps, idx, measures=("imcoh",))
        lo, hi = bootstrap_intervals(ps, idx, est, n_boot=n_boot, seed=it, measures=("imcoh",))[
            "imcoh"
        ]
        hits += int(lo[0, 0] <= 0.0 <= hi[0, 0])
    assert 0.923 <= hits / 600 <= 0.977, hits / 600
