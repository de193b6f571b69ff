"""Intraclass correlation of the split halves (sourcelab.intake.reliability.icc)."""

import numpy as np
import pytest

from sourcelab.errors import InputError
from sourcelab.intake.reliability import icc, reliability_summary, split_half, test_retest

# Shrout & Fleiss (1979), Psychol Bull 86:420-428, Table 2: 6 targets rated by 4 judges.
SHROUT_FLEISS = np.array(
    [[9, 2, 5, 8], [6, 1, 3, 2], [8, 4, 6, 8], [7, 1, 2, 6], [10, 5, 6, 9], [6, 2, 4, 7]], float
)


def test_icc_shrout_fleiss_table():
    # Point values: Shrout & Fleiss (1979) Table 4, ICC(2,1) = .29 and ICC(3,1) = .71.
    # Intervals: McGraw & Wong (1996) formulas as printed for these data by R's psych::ICC,
    # [.02, .76] and [.34, .95] (from memory).
    a = icc(SHROUT_FLEISS, kind="2,1")
    c = icc(SHROUT_FLEISS, kind="3,1")
    assert a.value == pytest.approx(0.29, abs=0.005)
    assert c.value == pytest.approx(0.71, abs=0.006)
    assert (a.low, a.high) == pytest.approx((0.02, 0.76), abs=0.005)
    assert (c.low, c.high) == pytest.approx((0.34, 0.95), abs=0.005)
    assert (a.n_items, a.n_measurements, a.confidence) == (6, 4, 0.95)


def test_icc_two_measurements_matches_moment_formulas(rng):
    # Direct computation for k = 2 from the two-way ANOVA mean squares (Shrout & Fleiss 1979):
    # MSR - MSE = 2 s_ab, MSR + MSE = s_a^2 + s_b^2, 2 (MSC - MSE) / n = d^2 - s_d^2 / n
    # (d: mean difference, s_d^2: variance of the differences), hence
    # ICC(3,1) = 2 s_ab / (s_a^2 + s_b^2),
    # ICC(2,1) = 2 s_ab / (s_a^2 + s_b^2 + d^2 - s_d^2 / n).
    n = 19
    a = rng.normal(size=n)
    b = 0.8 * a + 0.5 * rng.normal(size=n) + 0.3
    cov = np.cov(a, b)
    s_ab, va, vb = cov[0, 1], cov[0, 0], cov[1, 1]
    d = np.mean(a - b)
    vd = np.var(a - b, ddof=1)
    x = np.c_[a, b]
    assert icc(x, kind="3,1").value == pytest.approx(2 * s_ab / (va + vb), rel=1e-12)
    assert icc(x, kind="2,1").value == pytest.approx(
        2 * s_ab / (va + vb + d * d - vd / n), rel=1e-12
    )


def test_icc_agreement_falls_with_a_shift_consistency_does_not(rng):
    # Definition (McGraw & Wong 1996): consistency ignores a constant offset between the
    # measurements, absolute agreement does not.
    a = rng.normal(size=30)
    b = a + 0.3 * rng.normal(size=30)
    base_a, base_c = icc(np.c_[a, b]).value, icc(np.c_[a, b], kind="3,1").value
    shifted = np.c_[a, b + 1.0]
    assert icc(shifted).value < base_a - 0.2
    assert icc(shifted, kind="3,1").value == pytest.approx(base_c, rel=1e-12)


@pytest.mark.parametrize("kind", ["2,1", "3,1"])
def test_icc_interval_covers_the_true_value(rng, kind):
    # Property of a 95 % interval: it covers the population ICC in about 95 % of samples.
    # Model: x_ij = t_i + c_j + e_ij, var(t) = 1, var(e) = 0.25 (true ICC(3,1) = 0.8); for
    # ICC(2,1) the column effects are random with var(c) = 0.1 (true 1 / 1.35).
    n, k, reps = 19, 2, 400
    true = 0.8 if kind == "3,1" else 1.0 / 1.35
    hits = 0
    for _ in range(reps):
        col = rng.normal(scale=np.sqrt(0.1), size=k) if kind == "2,1" else np.array([0.0, 0.4])
        x = rng.normal(size=(n, 1)) + col + rng.normal(scale=0.5, size=(n, k))
        r = icc(x, kind=kind)
        assert r.low <= r.value <= r.high
        hits += r.low <= true <= r.high
    # binomial SE at 0.95 with 400 draws is 0.011: +-3 SE
    assert 0.915 <= hits / reps <= 0.985


def test_icc_refuses_bad_options():
    with pytest.raises(InputError, match="kind"):
        icc(SHROUT_FLEISS, kind="1,1")
    with pytest.raises(ValueError, match="confidence"):
        icc(SHROUT_FLEISS, confidence=1.5)
    with pytest.raises(InputError, match="ratings"):
        icc(SHROUT_FLEISS[:2])
    with pytest.raises(InputError, match="finite"):
        icc(np.where(SHROUT_FLEISS > 9, np.nan, SHROUT_FLEISS))


def test_reliability_summary_reports_icc_of_the_halves(rng):
    power = np.exp(rng.normal(size=(40, 3, 19)) * 0.3 + rng.normal(size=(1, 3, 19)))
    names = ["delta", "theta", "alpha"]
    s = reliability_summary(power, names)
    sh = split_half(power)
    tr = test_retest(power)
    for k, b in enumerate(names):
        half_a = np.log10(power[0::2, k].mean(0))
        half_b = np.log10(power[1::2, k].mean(0))
        assert s.split_half_icc[b]["icc"] == pytest.approx(icc(np.c_[half_a, half_b]).value)
        assert s.split_half_icc[b]["icc"] == pytest.approx(sh.icc[k].value)
        assert s.test_retest_icc[b]["icc"] == pytest.approx(tr.icc[k].value)
        lo, hi = s.split_half_icc[b]["low"], s.split_half_icc[b]["high"]
        assert lo <= s.split_half_icc[b]["icc"] <= hi
    d = s.to_dict()
    assert set(d["split_half_icc"]) == set(names)
    short = reliability_summary(power[:1], names)
    assert short.split_half_icc["alpha"] == {"icc": None, "low": None, "high": None}


def test_report_shows_icc_with_interval(rng):
    import re

    from sourcelab.report.build import _reliability
    from sourcelab.report.labels import reliability_table

    power = np.exp(rng.normal(size=(40, 2, 19)) * 0.3 + rng.normal(size=(1, 2, 19)))
    rel = {"sensors": reliability_summary(power, ["theta", "alpha"]).to_dict()}
    t = reliability_table(rel)
    assert list(t.columns) == ["level", "halves", "theta", "alpha"]
    assert len(t) == 2
    for cell in t[["theta", "alpha"]].to_numpy().ravel():
        v, lo, hi = map(
            float, re.fullmatch(r"(-?[\d.]+) \((-?[\d.]+) to (-?[\d.]+)\)", cell).groups()
        )
        assert lo <= v <= hi
    html = _reliability(rel, 0.9)
    assert "ICC(2,1)" in html and "95 % interval" in html
    # results written before ICCs were stored still show their correlations
    old = {"sensors": {k: v for k, v in rel["sensors"].items() if not k.endswith("_icc")}}
    assert reliability_table(old)["alpha"].str.startswith("r ").all()
