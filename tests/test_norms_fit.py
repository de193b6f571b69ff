"""Fitting norms to a reference cohort's tables, leave-one-out calibration, checking a file."""

from __future__ import annotations

import matplotlib
import numpy as np
import pytest

from sourcelab.config import DEFAULT_BANDS
from sourcelab.errors import InputError
from sourcelab.norms import (
    apply_norms,
    calibration_report,
    check_norms,
    fit_norms,
    plot_calibration,
    write_norms,
)
from sourcelab.norms.models import fit_poly, fit_poly_columns
from sourcelab.simulate import gaussian_cohort
from sourcelab.provenance import Fingerprint

matplotlib.use("Agg")

FP = Fingerprint(
    headmodel_sha256="0" * 64,
    method="sLORETA",
    orientation="fixed",
    lambda2=1 / 9,
    bands=DEFAULT_BANDS,
)
N = 100


@pytest.fixture(scope="module")
def cohort():
    # 100 invented controls x 66 quantities, Gaussian after transform with an age trend
    return gaussian_cohort(N, rng=np.random.default_rng(7))


@pytest.fixture(scope="module")
def fit(cohort):
    return fit_norms(cohort.entries, fingerprint=FP, condition="eyes closed")


def test_loo_false_positive_rate_matches_normal(fit):
    # Under a correct Gaussian model P(|Z| > 1.96) = 0.05 and P(|Z| > 2.58) = 0.0099 (scipy.stats
    # normal); leave-one-out z of 6,600 control values must land within 5 +- 1.5 %.
    rep = calibration_report(fit)
    ov = rep.attrs["overall"]
    assert ov["loo_n"] == N * 66
    assert 0.035 <= ov["loo_frac_1.96"] <= 0.065
    assert 0.002 <= ov["loo_frac_2.58"] <= 0.02
    assert 0.95 <= ov["loo_sd"] <= 1.08
    # Gaussian by construction: Shapiro-Wilk (Shapiro & Wilk 1965, Biometrika 52:591-611) should
    # reject in about 5 % of rows, skewness and excess kurtosis near 0
    assert ov["frac_rows_shapiro_p<0.05"] <= 0.15
    assert ov["median_abs_skewness"] < 0.3 and abs(ov["median_excess_kurtosis"]) < 0.4
    assert len(rep) == len(fit.norms.table) and rep["n"].min() >= 95


def test_planted_deviations_recovered(cohort, fit):
    # A new person exactly +3 true SD above the true age mean in every quantity: the estimated
    # norms (n = 100) must give z near 3.  Per-row precision is about +-0.25 (SD of the
    # estimated SD ~ 7 % x 3, plus the mean's error), so most, not all, rows fall in [2.5, 3.5].
    zs = []
    for age in (12.0, 30.0):
        roi, sen = cohort.tables_at(age, np.full(len(cohort.keys), 3.0))
        zs.append(apply_norms(roi, fit.norms, age=age, fingerprint=FP).z)
        zs.append(apply_norms(sen, fit.norms, age=age, fingerprint=FP, kind="sensor").z)
    z = np.concatenate(zs)
    assert abs(np.median(z) - 3.0) < 0.15
    assert np.mean((z >= 2.5) & (z <= 3.5)) >= 0.9
    assert z.min() > 2.0 and z.max() < 4.0
    # and the unplanted person sitting on the true mean is not flagged
    roi, _ = cohort.tables_at(30.0, np.zeros(len(cohort.keys)))
    z0 = apply_norms(roi, fit.norms, age=30.0, fingerprint=FP).z
    assert np.abs(z0).max() < 1.0


def test_analytic_loo_equals_refitting():
    # hat-matrix leave-one-out (Cook & Weisberg 1982, from memory) must equal brute-force refits
    rng = np.random.default_rng(5)
    age = 10 ** rng.uniform(0.8, 1.9, 40)
    y = 0.3 + 0.5 * np.log10(age) + 0.2 * rng.standard_normal(40)
    f = fit_poly(age, y, 2, robust=False)
    brute = []
    for i in range(40):
        keep = np.arange(40) != i
        g = fit_poly(age[keep], y[keep], 2, robust=False)
        x = np.log10(age[i])
        brute.append((y[i] - g.coef @ [1, x, x * x]) / g.sd)
    np.testing.assert_allclose(f.loo_z, brute, rtol=1e-9)


def test_column_fits_match_numpy_polyfit_and_scipy():
    # The column-wise fit (columns keeping the same controls share one solve) against outside
    # references, column by column: numpy's polyfit on the kept controls, brute-force
    # leave-one-out refits (Cook & Weisberg 1982, from memory), and for the calibration table
    # scipy.stats' skew, kurtosis and Shapiro-Wilk of each row's kept residuals.
    from scipy import stats

    rng = np.random.default_rng(11)
    n, q = 30, 12
    age = 10 ** rng.uniform(0.8, 1.9, n)
    x = np.log10(age)
    Y = 0.3 + 0.5 * x[:, None] + 0.2 * rng.standard_normal((n, q))
    Y[3, 1] += 3.0  # gross outliers (15 SD) in two columns
    Y[7, 2] -= 3.0
    Y[[0, 5], 3] = np.nan  # missing values: another set of controls
    Y[:, 4] = np.nan  # too few values: no fit
    Y[:4, 4] = 1.0
    fits = fit_poly_columns(age, Y, 2, robust=True)
    assert not fits.ok[4] and fits.ok[[0, 1, 2, 3, 5]].all()
    assert not fits.kept[3, 1] and not fits.kept[7, 2] and fits.n[1] == n - 1
    assert not fits.kept[[0, 5], 3].any()
    for j in (0, 1, 3):
        k = fits.kept[:, j]
        ref = np.polynomial.polynomial.polyfit(x[k], Y[k, j], 2)
        np.testing.assert_allclose(fits.coef[:, j], ref, rtol=1e-9, atol=1e-12)
        i = np.flatnonzero(k)[0]
        keep = k & (np.arange(n) != i)
        c = np.polynomial.polynomial.polyfit(x[keep], Y[keep, j], 2)
        e = Y[keep, j] - np.polynomial.polynomial.polyval(x[keep], c)
        sd = np.sqrt(e @ e / (keep.sum() - 3))
        z = (Y[i, j] - np.polynomial.polynomial.polyval(x[i], c)) / sd
        np.testing.assert_allclose(fits.loo_z[i, j], z, rtol=1e-9)

    fit = fit_norms(
        gaussian_cohort(24, rng=np.random.default_rng(3)).entries,
        fingerprint=FP,
        condition="eyes closed",
    )
    rep = calibration_report(fit)
    for r in (0, len(rep) // 2, len(rep) - 1):
        j, mem = fit.row_quantity[r], fit.row_members[r]
        e = fit.resid[mem & np.isfinite(fit.resid[:, j]) & ~fit.excluded[:, j], j]
        assert rep["n"].iloc[r] == e.size
        np.testing.assert_allclose(rep["skewness"].iloc[r], stats.skew(e, bias=False), rtol=1e-9)
        np.testing.assert_allclose(
            rep["excess_kurtosis"].iloc[r], stats.kurtosis(e, bias=False), rtol=1e-9
        )
        np.testing.assert_allclose(rep["shapiro_p"].iloc[r], stats.shapiro(e).pvalue, rtol=1e-9)


def test_robust_rule_excludes_gross_outliers(cohort):
    # three controls with values 8 true SD high in every quantity must be excluded and must not
    # inflate the SD; a clean cohort loses almost nothing (P(|Z|>3.5) = 0.00047, scipy.stats)
    k = len(cohort.keys)
    ents = list(cohort.entries)
    for i in range(3):
        pid, age = ents[i][0], ents[i][1]
        ents[i] = (pid, age, *cohort.tables_at(age, np.full(k, 8.0)))
    robust = fit_norms(ents, fingerprint=FP, condition="eyes closed", degree=2)
    naive = fit_norms(ents, fingerprint=FP, condition="eyes closed", degree=2, robust=False)
    assert robust.excluded[:3].all()
    assert robust.excluded[3:].mean() < 0.005
    ratio_r = robust.norms.table["sd"].to_numpy() / cohort.sd
    ratio_n = naive.norms.table["sd"].to_numpy() / cohort.sd
    assert 0.9 < np.median(ratio_r) < 1.1 and np.median(ratio_n) > 1.3


def test_binned_model_and_degree_selection(cohort, fit):
    # the truth is quadratic in log age: LOO cross-validation must prefer degree >= 1 to 0
    sc = fit.degree_scores
    assert min(sc, key=sc.get) == fit.norms.cohort["degree"] >= 1 and sc[0] > sc[1]
    b = fit_norms(
        cohort.entries,
        fingerprint=FP,
        condition="eyes closed",
        model="binned",
        bins=(5, 15, 30, 81),
        min_n_per_bin=15,
    )
    t = b.norms.table
    assert set(t.model) == {"binned"} and (t.degree == 0).all()
    assert len(t) == 3 * 66 and (t.n >= 15).all()
    # a bin's b0 and sd are the mean and SD of its retained members' transformed values
    j = 0
    mem = (b.ages >= 5) & (b.ages < 15)
    kept = mem & ~b.excluded[:, j]
    row = t[
        (t.age_min == 5)
        & (t.name == b.quantities.name[j])
        & (t.band == b.quantities.band[j])
        & (t.measure == b.quantities.measure[j])
        & (t.hemisphere == b.quantities.hemisphere[j])
        & (t.kind == b.quantities.kind[j])
    ]
    assert row.b0.iloc[0] == pytest.approx(np.mean(b.values[kept, j]), rel=1e-12)
    assert row.sd.iloc[0] == pytest.approx(np.std(b.values[kept, j], ddof=1), rel=1e-12)
    with pytest.raises(InputError, match="model"):
        fit_norms(cohort.entries, fingerprint=FP, condition="x", model="spline")


def test_plot_calibration_content(fit):
    fig = plot_calibration(fit)
    axes = fig.get_axes()
    assert len(axes) == 4
    assert all(ax.has_data() for ax in axes)
    assert "5.0 %" in axes[0].get_title() and axes[1].get_xlabel()


def test_check_norms_summary(fit, tmp_path):
    p = write_norms(fit.norms, tmp_path / "n.tsv").path
    s = check_norms(p)
    assert "valid sourcelab norms file" in s and "8 ROIs" in s and "3 channels" in s
    # the fingerprint declares the IFCN delta and gamma (Babiloni et al. 2020), which these
    # norms (theta, alpha, beta: sourcelab.simulate.tables) lack
    assert "without norms: ['delta', 'gamma']" in s


def test_check_norms_counts_age_gaps(cohort, tmp_path):
    # Known answer: binned norms (18-30, 30-45, 45-66 y) with the middle bin of exactly one ROI
    # quantity removed have one gap between age ranges (30 y to 45 y), and no other.
    import dataclasses

    binned = fit_norms(
        cohort.entries,
        fingerprint=FP,
        condition="eyes closed",
        model="binned",
        bins=[18, 30, 45, 66],
        min_n_per_bin=10,
    ).norms
    t = binned.table
    roi = t[t["kind"] == "roi"]
    first = roi.iloc[0]
    same = (
        roi[["atlas", "name", "hemisphere", "band", "measure"]]
        == first[["atlas", "name", "hemisphere", "band", "measure"]]
    ).all(axis=1)
    middle = roi.index[same & (roi["age_min"] == 30.0)]
    assert len(middle) == 1
    holed = dataclasses.replace(binned, table=t.drop(middle).reset_index(drop=True))
    s = check_norms(write_norms(holed, tmp_path / "holed.tsv").path)
    assert "WARNING roi: 1 gaps between age ranges" in s
    assert s.count("gaps between age ranges") == 1  # none for the sensor rows
    assert "gaps" not in check_norms(write_norms(binned, tmp_path / "whole.tsv").path)
