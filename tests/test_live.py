"""Honest live values: per-epoch file, expected live SD, smoothing, unclean windows."""

import json
import math

import numpy as np
import pytest

from sourcelab.config import Bands
from sourcelab.epochfile import read_epochs, write_epochs
from sourcelab.errors import InputError
from sourcelab.provenance import Fingerprint
from sourcelab.simulate import pink_noise
from sourcelab.spectra import epoch_cross_spectra
from sourcelab.targets import make_target, read_target, replay_array, write_target
from sourcelab.targets.definition import butter_sos
from sourcelab.targets.live import (
    Smoother,
    expected_live_sd,
    live_section,
    live_window_dof,
    log_variance_dof,
    smoother_weights,
    welch_epoch_dof,
)

SF = 256.0
BANDS = Bands()
FP = Fingerprint(
    headmodel_sha256="0" * 64,
    method="sLORETA",
    orientation="fixed",
    lambda2=1 / 9,
    bands=tuple((n, lo, hi) for n, (lo, hi) in zip(BANDS.names, BANDS.edges)),
)


def _epochs(x, epoch_s=2.0):
    n = int(epoch_s * SF)
    k = x.shape[1] // n
    ep = x[:, : k * n].reshape(x.shape[0], k, n).transpose(1, 0, 2)
    return epoch_cross_spectra(ep, SF, BANDS), np.arange(k) * epoch_s


def test_epochs_file_round_trip_and_refusals(tmp_path, rng):
    a = rng.standard_normal((7, 5, 19, 30))
    csd = a @ a.transpose(0, 1, 3, 2)
    p = write_epochs(
        tmp_path / "epochs.npz",
        csd,
        ch_names=[f"c{i}" for i in range(19)],
        band_names=BANDS.names,
        band_edges=BANDS.edges,
        epoch_s=2.0,
        sfreq=SF,
        fingerprint=FP,
        onsets_s=np.arange(7) * 2.0,
    )
    back = read_epochs(tmp_path)
    # float32 storage: 24-bit mantissa, relative rounding <= 2^-24 ~ 6e-8
    np.testing.assert_allclose(back.csd, csd, rtol=1e-7)
    np.testing.assert_array_equal(back.csd, back.csd.transpose(0, 1, 3, 2))
    assert back.band_names == BANDS.names and back.fingerprint.differences(FP) == []
    assert p.stat().st_size < 7 * 5 * 190 * 4 + 4000  # float32 upper triangles + a header
    np.save(tmp_path / "obj.npy", np.array([{"a": 1}], dtype=object))
    (tmp_path / "bad").mkdir()
    np.savez(tmp_path / "bad" / "epochs.npz", format=np.array([{"a": 1}], dtype=object))
    with pytest.raises(InputError, match="epochs"):  # object arrays are refused, not unpickled
        read_epochs(tmp_path / "bad")
    with pytest.raises(InputError, match="no epochs.npz"):
        read_epochs(tmp_path / "nowhere")


@pytest.mark.parametrize("lo,hi", [(4.0, 8.0), (8.0, 13.0), (13.0, 30.0)])
def test_quadratic_form_dof_matches_monte_carlo(lo, hi):
    # Known answer: a band-power estimate of Gaussian noise is ~ scaled χ²_ν with
    # ν = tr(Q)²/tr(Q²) (Satterthwaite 1946; Box 1954); then Var(ln P̂) = ψ'(ν/2) (trigamma).
    # Monte Carlo on 600 s of white noise: 300 epochs / 600 windows, so the sample variance of
    # ln P̂ has a relative SE of sqrt(2/300) ~ 8 %: tolerance 25 % (3 SE).
    from scipy.special import polygamma

    rng = np.random.default_rng(7)
    x = rng.standard_normal((1, int(600 * SF)))
    csd, _ = _epochs(x)
    b = BANDS.names.index({4.0: "theta", 8.0: "alpha", 13.0: "beta"}[lo])
    v_epoch = np.var(np.log(csd[:, b, 0, 0]), ddof=1)
    nu_e = welch_epoch_dof(lo, hi, SF, 2.0)
    assert abs(v_epoch / polygamma(1, nu_e / 2) - 1) < 0.25
    from scipy.signal import sosfilt

    sos = butter_sos(lo, hi, SF)
    y = sosfilt(sos, x[0])[int(4 * SF) :]
    n = int(SF)
    w = (y[: y.size // n * n].reshape(-1, n) ** 2).mean(axis=1)
    nu_w = live_window_dof(sos, SF, 1.0)
    assert abs(np.var(np.log(w), ddof=1) / polygamma(1, nu_w / 2) - 1) < 0.25
    # the trigamma inversion is exact
    assert math.isclose(log_variance_dof(float(polygamma(1, 4.5))), 9.0, rel_tol=1e-8)


@pytest.fixture(scope="module")
def steady():
    """300 s of invented 19-channel mixed pink noise (µV) and a random 'kernel' (200 x 19)."""
    rng = np.random.default_rng(5)
    x = 10.0 * rng.standard_normal((19, 19)) @ pink_noise(19, int(300 * SF), SF, rng)
    return x, rng.standard_normal((200, 19))


def _target(kernel, band="theta", **kw):
    return make_target(
        kernel=kernel,
        n_comp=1,
        atlas="brodmann",
        roi="BA9",
        hemisphere="left",
        vertices=np.arange(40),
        band=band,
        bands=FP.bands,
        measure="absolute",
        fingerprint=FP,
        sfreq=SF,
        reject_uv=1e9,
        **kw,
    )


@pytest.mark.parametrize("band", ["theta", "alpha"])
def test_expected_live_sd_matches_replayed_spread(steady, band):
    # The SD predicted from the 2-s epochs must match the SD of the replayed 1-s windows of the
    # same stationary data (log10 power), raw and after the default exponential smoothing.
    # Tolerance 15 %: the replay SD over 300 s of overlapping windows has an effective ~300
    # independent windows (relative SE ~4 %), the epoch variance ~150 epochs (SE of the SD ~6 %),
    # and the in-band spectrum is pink rather than flat (a few %).
    x, k = steady
    tg = _target(k, band=band)
    csd, onsets = _epochs(x)
    from sourcelab.targets.live import epoch_values

    levels = np.log10(epoch_values(tg, csd))
    lo, hi = tg.band_edges
    st = expected_live_sd(
        levels,
        onsets_s=onsets,
        epoch_s=2.0,
        sfreq=SF,
        sos=tg.sos[band],
        lo=lo,
        hi=hi,
        window_s=1.0,
        step_s=0.25,
    )
    res = replay_array(x, SF, tg)
    obs = np.nanstd(np.log10(res.power[res.clean]), ddof=1)
    assert abs(st["window_sd"] / obs - 1) < 0.15, (st, obs)
    sm = res.smoothed[res.clean][40:]  # past the smoother's start-up
    assert abs(st["smoothed_sd"] / np.std(sm, ddof=1) - 1) < 0.15
    assert st["smoothed_sd"] < 0.8 * st["window_sd"]


def test_unclean_windows_carry_no_value(steady):
    x, k = steady
    tg = _target(k)
    y = x[:, : int(20 * SF)].copy()
    y[3, int(10 * SF) : int(15 * SF)] = 0.0  # five flat seconds on one channel
    res = replay_array(y, SF, tg)
    warm = res.time_s < 2.0
    assert warm.any() and not res.clean[warm].any()
    bad = ~res.clean
    assert np.isnan(res.power[bad]).all() and np.isnan(res.z[bad]).all()
    assert np.isnan(res.smoothed[bad]).all()
    assert np.isfinite(res.power[res.clean]).all()
    # windows lying in the flat stretch once the artefact filter's 0.5-Hz high-pass has rung
    # down: 2nd-order Butterworth, envelope time constant 1/(2π·0.5·0.707) = 0.45 s, from a
    # ~150 µV step to below 0.5 µV takes ln(300)·0.45 = 2.6 s; the window (1 s) must start after
    assert not res.clean[(res.time_s >= 13.6) & (res.time_s <= 15.0)].any()


def test_smoother_time_constant_and_weights():
    # Known answer: an exponential smoother with time constant tau reaches 1 - 1/e of a step
    # after tau seconds; its steady-state weights sum to 1.
    s = Smoother("exponential", 2.0, 0.25)
    s.update(0.0, True)
    out = [s.update(1.0, True) for _ in range(8)]  # 8 steps of 0.25 s = 2 s
    assert math.isclose(out[-1], 1 - math.exp(-1), rel_tol=1e-12)
    assert math.isnan(s.update(5.0, False)) and s.update(1.0, True) > out[-1]
    assert math.isclose(smoother_weights("exponential", 2.0, 0.25).sum(), 1.0, rel_tol=1e-5)
    m = Smoother("moving", 1.0, 0.25)
    assert [m.update(v, True) for v in (4.0, 0.0, 0.0, 0.0, 0.0)][-1] == 0.0


def test_live_section_threshold_and_file(tmp_path, steady):
    x, k = steady
    norm = {"mean": 1.0, "sd": 0.13, "transform": "log10", "age": 40.0}
    tg = _target(k, norm=norm, z=2.0, offline={"value": 30.0, "z": 2.0})
    csd, onsets = _epochs(x[:, : int(120 * SF)])

    class E:  # the fields live_section reads from an EpochSpectra
        pass

    e = E()
    e.csd, e.onsets_s, e.epoch_s, e.band_names = csd, onsets, 2.0, BANDS.names
    live = live_section(tg, e, threshold_sd=1.0)
    exp = live["expected_sd"]
    assert math.isclose(exp["window"]["z"], exp["window"]["transformed"] / 0.13)
    th = live["threshold"]
    assert th["direction"] == "decrease"
    assert math.isclose(th["level"], math.log10(30.0) - exp["smoothed"]["transformed"])
    import dataclasses

    tg2 = dataclasses.replace(tg, live=live)
    p = write_target(tg2, tmp_path / "t.json")
    d = json.loads(p.read_text())
    assert d["schema"] == "sourcelab-target/1" and d["live"]["threshold"]["k_sd"] == 1.0
    back = read_target(p, current=FP)
    assert back.live == tg2.live
    res = replay_array(x[:, : int(30 * SF)], SF, back)
    met = res.threshold_met[res.clean]
    assert set(np.unique(met)) <= {0.0, 1.0}
    np.testing.assert_array_equal(met == 1.0, res.smoothed[res.clean] <= th["level"])
    # a file written before the live section existed still loads
    d.pop("live")
    (tmp_path / "old.json").write_text(json.dumps(d))
    assert read_target(tmp_path / "old.json", current=FP).live is None
    with pytest.raises(InputError, match="direction"):
        live_section(_target(k), e, threshold_sd=1.0)
