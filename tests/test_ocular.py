"""Ocular correction: eye model, ICA and regression against known answers and MNE.

Recordings here are invented (sourcelab.simulate): cortical generators and pink background
through the template head model, plus blinks and horizontal eye movements from the eye-dipole
model.
"""

from __future__ import annotations

import warnings

import mne
import numpy as np
import pytest

from sourcelab.config import SITES_1020, AnalysisConfig
from sourcelab.intake.clean import DEFAULT_NASION
from sourcelab.intake.ocular import (
    OCULAR_R,
    correct_ocular,
    ocular_residual,
    ocular_templates,
    remove_components,
    subspace_cosine,
)
from sourcelab.analysis import analyze
from sourcelab.simulate import Generator, ocular_artefacts, simulate_raw

SF = 256.0
#: Maps are compared in the bands that carry a generator (beta bands hold background only).
BANDS = ("delta", "theta", "alpha")
#: Brodmann areas where the issue found eye artefact reported as delta generators.
ORBITOFRONTAL = {"BA10", "BA11", "BA47", "BA25"}


def _idx(name):
    return SITES_1020.index(name)


@pytest.fixture(scope="module")
def sim(head_model):
    """Clean invented recording (occipital alpha, parietal delta, frontal-midline theta) and
    the same with blinks (0.25/s, 150 µV) and horizontal gaze shifts (1/s, up to 80 µV)."""
    rng = np.random.default_rng(3)
    gens = (
        Generator((14.0, -95.0, 2.0), "right", freq=10.0, amplitude=1.5),
        Generator((-40.0, -60.0, 40.0), "left", freq=2.0, bandwidth=2.0, amplitude=0.7),
        Generator((-5.0, 35.0, 30.0), "left", freq=6.0, bandwidth=2.0, amplitude=1.0),
    )
    raw = simulate_raw(
        head_model, duration_s=120.0, sfreq=SF, generators=gens, rng=rng, background_uv=15.0
    )
    eye = ocular_artefacts(
        head_model.ch_pos,
        DEFAULT_NASION,
        n_times=raw.n_times,
        sfreq=SF,
        rng=rng,
        saccade_rate_hz=1.0,
        saccade_uv=80.0,
    )
    dirty = mne.io.RawArray(raw.get_data() + eye, raw.info, verbose="error")
    return raw, dirty, eye


#: n_boot=0: intervals do not change the maps and cost time here
CFG = AnalysisConfig(n_boot=0)


@pytest.fixture(scope="module")
def clean_map(sim):
    return analyze(sim[0], config=CFG)


def _r(a, b, band):
    k = list(a.config.bands.names).index(band)
    return float(np.corrcoef(a.source_abs[k], b.source_abs[k])[0, 1])


def _eye_warnings(res):
    return [w for w in res.warnings if "eye" in w]


def test_templates_have_the_published_shape(head_model):
    # Blinks: largest at Fp1/Fp2, falling steeply to the back, about symmetric; horizontal
    # movements: F7/F8 of opposite sign, largest there (Croft & Barry 2000, Neurophysiol Clin
    # 30:5-19; Elbert et al. 1985 — from memory).
    t = ocular_templates(head_model.ch_pos, DEFAULT_NASION)
    v, h = t[:, 0], t[:, 1]
    assert set(np.argsort(-v)[:2]) == {_idx("Fp1"), _idx("Fp2")}
    assert v[[_idx("Fp1"), _idx("Fp2")]].min() > 3 * abs(v[[_idx("O1"), _idx("O2")]]).max()
    assert abs(v[_idx("Fp1")] - v[_idx("Fp2")]) < 0.1 * v[_idx("Fp1")]
    assert np.argmax(h) == _idx("F8") and np.argmin(h) == _idx("F7")
    assert abs(h[_idx("Cz")]) < 0.05 * h[_idx("F8")]
    np.testing.assert_allclose(np.linalg.norm(t, axis=0), 1.0)
    np.testing.assert_allclose(t.sum(axis=0), 0.0, atol=1e-12)


def test_subspace_cosine_known_answers():
    rng = np.random.default_rng(0)
    t = rng.standard_normal((19, 2))
    t -= t.mean(0)
    assert subspace_cosine(t[:, 0] * 3 + t[:, 1], t) == pytest.approx(1.0)
    # orthogonal to the span (after average reference) -> 0
    q, _ = np.linalg.qr(np.c_[np.ones(19), t], mode="complete")
    assert subspace_cosine(q[:, 3], t) == pytest.approx(0.0, abs=1e-12)
    # null distribution: cos^2 ~ Beta(1, 8) for a random pattern and a 2-D subspace in 18-D,
    # so P(cos >= OCULAR_R) = (1 - OCULAR_R**2)**8 (= 2.8e-4); 20,000 draws, 3-sigma band
    x = rng.standard_normal((19, 20000))
    frac = float(np.mean(subspace_cosine(x, t) >= OCULAR_R))
    p = (1 - OCULAR_R**2) ** 8
    assert abs(frac - p) < 3 * np.sqrt(p * (1 - p) / 20000) + 1e-4


def test_correction_recovers_the_clean_maps(sim, clean_map):
    # Known answer (the criterion): after correction every band with a generator gives
    # the clean source power map back with r >= 0.95, no ocular warning, and the removed
    # components have ocular scalp maps.
    clean, corr = clean_map, analyze(sim[1], config=CFG)
    for band in BANDS:
        assert _r(clean, corr, band) >= 0.95, band
    q = corr.quality.ocular
    assert q["method"] == "ica" and 1 <= len(q["removed_components"]) <= 3
    assert min(q["template_r"]) >= OCULAR_R
    assert len(q["component_maps_uv"]) == len(q["removed_components"])
    assert len(q["component_maps_uv"][0]) == 19
    assert not _eye_warnings(corr)
    assert corr.quality.ocular["slow_maximum"]["roi"] not in ORBITOFRONTAL
    # the clean recording: nothing ocular found, nothing removed
    assert clean.quality.ocular["method"] == "none found"
    assert not _eye_warnings(clean)


def test_without_correction_the_warning_fires(sim, clean_map):
    # Same recording, correction off: the delta map is no longer the clean one (so the test
    # above can fail), its maximum moves to an orbitofrontal area and the report says so.
    clean, off = clean_map, analyze(sim[1], config=CFG.replace(ocular_correction="off"))
    assert _r(clean, off, "delta") < 0.95
    assert off.quality.ocular["method"] == "off"
    assert off.quality.ocular["slow_maximum"]["roi"] in ORBITOFRONTAL
    assert _eye_warnings(off)


def test_confusable_areas_are_the_orbitofrontal_ones(head_model):
    # Computed, not listed: the Brodmann areas whose sources' scalp maps have median cosine
    # >= OCULAR_R with the ocular subspace are the areas the issue saw eye artefact in
    # (BA10/11/47/25; BA33, 5-7 sources, may join).
    from sourcelab.rois import load_atlas
    from sourcelab.trust.ocular import confusable_rois, source_ocular_cosine

    cos = source_ocular_cosine(head_model.gain_fixed, head_model.ch_pos, DEFAULT_NASION)
    areas = {name for name, _ in confusable_rois(cos, load_atlas("brodmann").rois)}
    assert ORBITOFRONTAL <= areas <= ORBITOFRONTAL | {"BA33"}


def test_remove_components_matches_mne_apply(rng):
    # Reference implementation: our removal equals ica.apply(exclude=...) (MNE) to 1e-9.
    x = rng.laplace(size=(6, 6000)) * 1e-5
    x = rng.standard_normal((6, 6)) @ x
    info = mne.create_info(6, 100.0, "eeg")
    raw = mne.io.RawArray(x, info, verbose="error")
    ica = mne.preprocessing.ICA(n_components=6, method="fastica", rng=0, verbose="error")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ica.fit(raw, verbose="error")
    ours = remove_components(ica, x * 1e6, [1, 4])
    ref = ica.apply(raw.copy(), exclude=[1, 4], verbose="error").get_data() * 1e6
    np.testing.assert_allclose(ours, ref, rtol=1e-9, atol=1e-9 * np.abs(ref).max())


def test_regression_on_real_eog_channels_matches_mne(head_model, rng):
    # With EOG channels the correction is least-squares regression; MNE's EOGRegression is the
    # reference implementation (same weights to 1e-3: MNE does not remove the mean first), and
    # the known eye signal is removed.
    n = int(60 * SF)
    clean = simulate_raw(head_model, duration_s=60.0, sfreq=SF, rng=rng).get_data() * 1e6
    eye = (
        ocular_artefacts(
            head_model.ch_pos,
            DEFAULT_NASION,
            n_times=n,
            sfreq=SF,
            rng=rng,
            saccade_rate_hz=1.0,
            saccade_uv=80.0,
        )
        * 1e6
    )
    tpl = ocular_templates(head_model.ch_pos, DEFAULT_NASION)
    eog = np.linalg.lstsq(tpl, eye, rcond=None)[0] * 3.0  # vertical, horizontal channels
    eog = eog + 2.0 * rng.standard_normal(eog.shape)  # electrode noise, µV
    data = clean + eye
    out = correct_ocular(data, SF, SITES_1020, head_model.ch_pos, DEFAULT_NASION, eog_uv=eog)
    assert out.method == "regression" and out.mixing.shape == (19, 2)
    resid = out.data - clean
    resid -= resid.mean(axis=1, keepdims=True)  # a constant offset is filtered out anyway
    assert np.std(resid) < 0.1 * np.std(eye)
    # MNE regresses average-referenced EEG only; so do we for the comparison
    data_ar = data - data.mean(axis=0)
    ours = correct_ocular(
        data_ar, SF, SITES_1020, head_model.ch_pos, DEFAULT_NASION, eog_uv=eog
    ).mixing
    info = mne.create_info(list(SITES_1020) + ["VEOG", "HEOG"], SF, ["eeg"] * 19 + ["eog"] * 2)
    raw = mne.io.RawArray(np.vstack([data_ar, eog]) * 1e-6, info, verbose="error")
    raw.set_eeg_reference("average", projection=True, verbose="error").apply_proj()
    ref = mne.preprocessing.EOGRegression(picks="eeg", picks_artifact="eog").fit(raw)
    np.testing.assert_allclose(ours, ref.coef_, rtol=1e-3, atol=1e-4 * np.abs(ref.coef_).max())


def test_residual_check_on_constructed_spectra():
    # A pure blink cross-spectrum is ocular; an occipital one is not.
    from sourcelab.headmodel import load_head_model

    m = load_head_model()
    t = ocular_templates(m.ch_pos, DEFAULT_NASION)
    blink = np.outer(t[:, 0], t[:, 0]) * 100 + np.eye(19)
    assert ocular_residual(blink, t)["ocular"]
    occ = np.zeros(19)
    occ[[_idx("O1"), _idx("O2")]] = 1
    assert not ocular_residual(np.outer(occ, occ) + 0.1 * np.eye(19), t)["ocular"]


def test_switched_off_in_the_config():
    from sourcelab.config import load_config

    cfg = load_config(None, ocular_correction="off")
    assert cfg.ocular_correction == "off"
    from sourcelab.errors import InputError

    with pytest.raises(InputError, match="ocular_correction"):
        AnalysisConfig(ocular_correction="sometimes")


def test_eog_channels_of_the_file_select_regression(head_model, rng):
    # A file with real EOG channels ("VEOG" typed eog, "EEG LOC-REF" by name) keeps them beside
    # the 19 sites, and the default correction regresses them out.
    from sourcelab.intake import clean_recording, read_recording

    n = int(60 * SF)
    clean = simulate_raw(head_model, duration_s=60.0, sfreq=SF, rng=rng).get_data()
    eye = ocular_artefacts(head_model.ch_pos, DEFAULT_NASION, n_times=n, sfreq=SF, rng=rng)
    tpl = ocular_templates(head_model.ch_pos, DEFAULT_NASION)
    eog = np.linalg.lstsq(tpl, eye, rcond=None)[0] * 3.0
    names = list(SITES_1020) + ["VEOG", "EEG LOC-REF", "EEG A1-REF"]
    info = mne.create_info(names, SF, ["eeg"] * 19 + ["eog", "eeg", "eeg"])
    data = np.vstack([clean + eye, eog, 1e-6 * rng.standard_normal((1, n))])
    rec = read_recording(mne.io.RawArray(data, info, verbose="error"))
    assert rec.eog_names == ("VEOG", "EEG LOC-REF") and rec.eog_uv.shape == (2, n)
    cl = clean_recording(rec, AnalysisConfig(min_clean_s=10.0))
    assert cl.ocular["method"] == "regression"
    assert len(cl.ocular["component_maps_uv"]) == 2  # one weight map per EOG channel
