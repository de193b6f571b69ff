"""Predictive (Student-t) p-values and per-source norms (sourcelab.norms.predictive,
sourcelab.norms.source_norms, sourcelab.simulate.null)."""

import numpy as np
import pytest
from scipy import stats

from sourcelab.errors import InputError
from sourcelab.norms.models import fit_poly
from sourcelab.norms.predictive import leverage, pack_v, predictive_t, unpack_v, xtx_inverse


def test_binned_case_is_crawford_howell():
    # Crawford & Howell (1998, Clin Neuropsychol 12:482-486; from memory): a case against n
    # controls with mean m and SD s: t = (x - m) / (s sqrt((n + 1) / n)), df = n - 1.  Degree 0
    # with leverage 1/n is exactly that.
    ages = np.linspace(20, 60, 10)
    h0 = leverage(xtx_inverse(ages, 0), 0, 35.0)
    np.testing.assert_allclose(h0, 1 / 10)
    res = predictive_t([3.0], [1.0], [1.0], n=[10], degree=[0], h0=h0)
    t = 2.0 / np.sqrt(11 / 10)
    np.testing.assert_allclose(res["t"], t)
    np.testing.assert_allclose(res["p"], 2 * stats.t.sf(t, 9))
    np.testing.assert_allclose(res["z_equivalent"], stats.norm.isf(res["p"] / 2))


def test_leverage_matches_hat_matrix_and_pack_round_trip(rng):
    # h0 of a control's own age equals its hat-matrix diagonal x (X'X)^-1 x' (Cook & Weisberg
    # 1982, from memory).
    ages = rng.uniform(18, 70, 40)
    c = xtx_inverse(ages, 2)
    x = np.vander(np.log10(ages), 3, increasing=True)
    hat = np.diag(x @ np.linalg.inv(x.T @ x) @ x.T)
    np.testing.assert_allclose(leverage(c, np.full(40, 2), ages), hat, rtol=1e-10)
    np.testing.assert_array_equal(unpack_v(pack_v(c)), c)
    with pytest.raises(InputError):
        predictive_t([0.0], [0.0], [1.0], n=[3], degree=[2], h0=[0.1])


@pytest.mark.parametrize("degree", [0, 2])
def test_predictive_t_is_student_t_under_the_null(rng, degree):
    # Under the model the predictive statistic follows Student t with n - p df exactly
    # (Crawford & Garthwaite 2006, Neuropsychology 20:259-271; from memory), so
    # |z_equivalent| > 1.96 occurs 5 % of the time at n = 12, where the plain z does not.
    # 4,000 replicates: binomial SD of a 5 % rate 0.34 %; tolerance ±1.2 % (3.5 SD).
    n, reps = 12, 4000
    t_all, z_eq, z_plain = [], [], []
    for _ in range(reps):
        ages = rng.uniform(18, 65, n + 1)
        y = 0.3 * np.log10(ages) + rng.standard_normal(n + 1) * 0.2
        f = fit_poly(ages[:n], y[:n], degree, robust=False)
        x0 = np.log10(ages[n]) ** np.arange(degree + 1)
        h0 = leverage(xtx_inverse(ages[:n], degree), degree, ages[n])
        r = predictive_t([y[n]], [x0 @ f.coef], [f.sd], n=[f.n], degree=[degree], h0=h0)
        t_all.append(r["t"][0])
        z_eq.append(r["z_equivalent"][0])
        z_plain.append(r["z_plain"][0])
    assert stats.kstest(t_all, stats.t(n - degree - 1).cdf).pvalue > 1e-3
    assert abs(np.mean(np.abs(z_eq) > 1.96) - 0.05) < 0.012
    assert np.mean(np.abs(z_plain) > 1.96) > 0.065  # the plain z is anti-conservative


def test_source_models_equal_fit_poly(rng):
    # The vectorised per-source fit must give the builder's numbers (fit_poly), robust rule
    # included, column by column.
    from sourcelab.norms.source_norms import fit_source_models

    ages = rng.uniform(18, 65, 50)
    y = 0.5 + 0.2 * np.log10(ages)[:, None] + 0.1 * rng.standard_normal((50, 30))
    y[3, 4] += 2.0  # an outlying control
    y[7, 9] -= 1.5
    coef, sd, n_kept, _ = fit_source_models(ages, y, 1, robust=True)
    for j in range(30):
        f = fit_poly(ages, y[:, j], 1, robust=True)
        np.testing.assert_allclose(coef[:, j], f.coef, rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(sd[j], f.sd, rtol=1e-9)
        assert n_kept[j] == f.n
    assert n_kept[4] == 49 and n_kept[9] == 49


def test_source_norms_file_round_trip(tmp_path, rng):
    from sourcelab.norms.source_norms import (
        fit_source_norms,
        read_source_norms,
        source_z,
        source_norms_path,
        write_source_norms,
    )
    from sourcelab.provenance import Fingerprint

    fp = Fingerprint(
        headmodel_sha256="a" * 64,
        method="sLORETA",
        orientation="fixed",
        lambda2=1 / 9,
        bands=(("theta", 4.0, 8.0), ("alpha", 8.0, 12.0)),
    )
    ages = rng.uniform(18, 65, 40)
    power = 10 ** (1 + 0.1 * rng.standard_normal((40, 2, 25)))
    sn = fit_source_norms(
        ages,
        {"absolute": power},
        degree=1,
        bands=("theta", "alpha"),
        fingerprint=fp.to_dict(),
        condition="eyes closed",
        vertices=np.arange(25) * 3,
    )
    path = write_source_norms(sn, source_norms_path(tmp_path / "norms.tsv"))
    assert path.name == "norms_sources.npz"
    back = read_source_norms(path, fingerprint=fp.to_dict())
    np.testing.assert_array_equal(back.coef, sn.coef)
    np.testing.assert_array_equal(back.vertices, np.arange(25) * 3)
    z = source_z(back, power[0], age=float(ages[0]), predictive=False)
    assert z.shape == (2, 25) and np.isfinite(z).all()
    zp = source_z(back, power[0], age=float(ages[0]))
    assert (np.abs(zp) <= np.abs(z) + 1e-12).all()  # predictive z is never larger
    other = Fingerprint(**{**fp.to_dict(), "lambda2": 0.05, "bands": fp.bands})
    with pytest.raises(InputError, match="fingerprint"):
        read_source_norms(path, fingerprint=other.to_dict())
    with pytest.raises(InputError, match="outside"):
        source_z(back, power[0], age=90.0)


@pytest.mark.slow
def test_complete_null_fdr_and_heldout_rates():
    # Issue 14 targets under a complete null with 60 controls: people with >= 1 FDR-flagged
    # row 5 ± 2 %, held-out |z| > 1.96 rate 5 ± 1.5 %, for the predictive route (sensor-like
    # table, the faster one; the benchmark runs both kinds with more replicates).
    # 1,000 people: binomial SD of a 5 % rate 0.7 %.
    from sourcelab.simulate.null import complete_null

    r = complete_null(kind="sensor", n_rois=19, n_reps=50, n_heldout=20, seed=11)
    assert abs(r["predictive"]["any_fdr"] - 0.05) <= 0.02
    assert abs(r["predictive"]["beyond_1_96"] - 0.05) <= 0.015
