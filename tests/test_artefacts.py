"""Learned rejection thresholds: known answers for the robust rule and the age-aware bounds."""

from __future__ import annotations

import numpy as np
import pytest

from sourcelab.intake.artefacts import (
    MIN_LEARN_EPOCHS,
    amplitude_factor,
    learn_thresholds,
    plausibility_bounds,
    robust_threshold,
)


def test_robust_threshold_on_lognormal_with_outliers(rng):
    # log-normal epoch amplitudes (mu = log 60 µV, sigma = 0.3) plus 10 % artefacts ten times
    # larger: the median/MAD rule moves only a little (Leys et al. 2013), unlike mean + 3 SD.
    # From the normal quantiles, 10 % far outliers move the median by +0.14 sigma and scale the
    # MAD by 1.14, so the threshold sits at mu + 3.56 sigma (n = 4000: sampling error ~0.06
    # sigma).
    n = 4000
    mu, sigma = np.log(60.0), 0.3
    x = np.exp(rng.normal(mu, sigma, (n, 3)))
    bad = rng.random((n, 3)) < 0.10
    x[bad] *= 10.0
    thr = robust_threshold(x)
    expect = np.exp(mu + 3 * sigma)
    shift = (np.log(thr) - np.log(expect)) / sigma
    np.testing.assert_allclose(shift, 0.56, atol=0.2)
    assert np.all(x[bad] > thr[None, :].repeat(n, 0)[bad])
    mean_sd = np.exp(np.log(x).mean(0) + 3 * np.log(x).std(0))
    assert np.all(mean_sd > 1.3 * thr)  # the non-robust rule is pulled up by the artefacts


def test_false_rejection_rate_is_the_normal_tail(rng):
    # Without artefacts the rule rejects P(Z > 3) = 0.00135 of the epochs (one-sided normal
    # tail, scipy.stats); 3-sigma binomial band for 200,000 draws.
    x = np.exp(rng.normal(0.0, 1.0, (200000, 1)))
    frac = float(np.mean(x[:, 0] > robust_threshold(x)[0]))
    p = 0.0013499
    assert abs(frac - p) < 3 * np.sqrt(p * (1 - p) / 200000) + 2e-4


@pytest.mark.parametrize(
    "age, factor", [(None, 2.0), (6, 2.0), (12, 2.0), (15, 1.5), (18, 1.0), (40, 1.0), (80, 1.0)]
)
def test_amplitude_factor(age, factor):
    assert amplitude_factor(age) == pytest.approx(factor)


def test_bounds_and_clipping(rng):
    adult, child = plausibility_bounds(30), plausibility_bounds(8)
    assert adult["ptp_uv"] == (100.0, 250.0) and child["ptp_uv"] == (200.0, 500.0)
    assert adult["muscle_uv"] == child["muscle_uv"] == (8.0, 15.0)
    quiet = np.exp(rng.normal(np.log(20), 0.2, (100, 19)))  # a very clean recording
    loud = np.exp(rng.normal(np.log(600), 0.2, (100, 19)))  # artefact everywhere
    t = learn_thresholds(quiet, quiet / 10, age=30)
    assert np.all(t.ptp_uv == 100.0) and np.all(t.muscle_uv == 8.0)  # floors
    assert np.all(t.learned_ptp_uv < 100.0)
    t = learn_thresholds(loud, loud, age=30)
    assert np.all(t.ptp_uv == 250.0) and np.all(t.muscle_uv == 15.0)  # ceilings
    t = learn_thresholds(loud, loud, age=8)
    assert np.all(t.ptp_uv == 500.0)
    mid = np.exp(rng.normal(np.log(90), 0.2, (100, 19)))  # threshold ~ 90 e^0.6 = 164 µV
    t = learn_thresholds(mid, mid / 10, age=30)
    assert np.all((t.ptp_uv > 100.0) & (t.ptp_uv < 250.0))
    np.testing.assert_array_equal(t.ptp_uv, t.learned_ptp_uv)  # inside the bounds: learned
    few = learn_thresholds(mid[: MIN_LEARN_EPOCHS - 1], mid[: MIN_LEARN_EPOCHS - 1], age=30)
    assert np.all(few.ptp_uv == 100.0) and np.isnan(few.learned_ptp_uv).all()


def test_config_fields_validated():
    from sourcelab.config import AnalysisConfig, load_config
    from sourcelab.errors import InputError

    assert AnalysisConfig().rejection == "auto" and AnalysisConfig().min_clean_s == 20.0
    assert load_config(None, rejection="fixed").rejection == "fixed"
    for bad in (dict(rejection="strict"), dict(reject_z=0), dict(exclude_procedures="yes")):
        with pytest.raises(InputError, match=next(iter(bad))):
            AnalysisConfig(**bad)
