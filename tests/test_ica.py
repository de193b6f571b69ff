"""Own FastICA, EOG scoring and filters against their reference implementations.

References: MNE-Python (``mne.preprocessing.ICA`` with ``method="fastica"``, ``find_bads_eog``,
``_find_outliers``, ``mne.filter.filter_data``), scikit-learn (``FastICA``) and scipy
(``signal.butter``, ``signal.sosfiltfilt``, ``signal.welch``, ``stats`` distributions).  The
ocular route is compared end to end with the route it replaced (MNE's ICA and scipy's filters).
"""

from __future__ import annotations

import warnings

import mne
import numpy as np
import pytest
from scipy import signal, stats

from sourcelab.config import SITES_1020
from sourcelab.intake import ocular
from sourcelab.intake.clean import DEFAULT_NASION
from sourcelab.intake.fir import apply_fir, firwin2_bandpass
from sourcelab.intake.ica import eog_scores, find_outliers, fit_ica
from sourcelab.intake.iir import butter_lowpass_sos, sosfiltfilt
from sourcelab.intake.power import epoch_spectra
from sourcelab.simulate import ocular_artefacts, simulate_raw

SF = 256.0
MATRICES = ("pre_whitener_", "pca_mean_", "pca_components_", "unmixing_matrix_", "mixing_matrix_")


@pytest.fixture(scope="module")
def eeg(head_model):
    """Invented 19-site EEG with blinks and gaze shifts, average reference (rank 18), volts."""
    rng = np.random.default_rng(7)
    raw = simulate_raw(head_model, duration_s=90.0, sfreq=SF, rng=rng, background_uv=15.0)
    eye = ocular_artefacts(
        head_model.ch_pos, DEFAULT_NASION, n_times=raw.n_times, sfreq=SF, rng=rng
    )
    x = raw.get_data() + eye
    return x - x.mean(axis=0)


def _mne_ica(x, n, max_iter):
    raw = mne.io.RawArray(x, mne.create_info(list(SITES_1020), SF, "eeg"), verbose="error")
    ica = mne.preprocessing.ICA(
        n_components=n, method="fastica", max_iter=max_iter, rng=0, verbose="error"
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # convergence advice
        ica.fit(raw, picks="eeg", verbose="error")
    return ica


@pytest.mark.parametrize("max_iter", [ocular.MAX_ITER, 1000])
def test_fit_matches_mne_fastica(eeg, max_iter):
    # Reference implementation: mne.preprocessing.ICA(method="fastica") as the pipeline called
    # it (MAX_ITER) and with MNE's "auto" iterations; the same matrices to 1e-10, the same maps.
    ica = _mne_ica(eeg, 18, max_iter)
    ours = fit_ica(eeg, n_components=18, max_iter=max_iter, seed=0)
    assert ours.n_components_ == ica.n_components_ and ours.n_iter_ == ica.n_iter_
    for name in MATRICES:
        ref = getattr(ica, name)
        np.testing.assert_allclose(
            getattr(ours, name), ref, rtol=1e-10, atol=1e-10 * np.abs(ref).max(), err_msg=name
        )
    ref = ica.get_components()
    np.testing.assert_allclose(ours.get_components(), ref, atol=1e-10 * np.abs(ref).max())


def test_fastica_step_matches_sklearn(rng):
    # Reference implementation: scikit-learn's FastICA(whiten=False), parallel, logcosh, on
    # white data; our unmixing matrix (before MNE's scaling) is its components_.
    from sklearn.decomposition import FastICA

    from sourcelab.intake.ica import FASTICA_TOL, _fastica_parallel

    s = rng.laplace(size=(5, 4000))
    x = rng.standard_normal((5, 5)) @ s
    _, _, vt = np.linalg.svd(x - x.mean(axis=1, keepdims=True), full_matrices=False)
    white = vt.T * np.sqrt(x.shape[1] - 1)
    ref = FastICA(whiten=False, random_state=3, max_iter=200, tol=FASTICA_TOL).fit(white)
    w, n_iter = _fastica_parallel(
        white.T, np.random.RandomState(3).normal(size=(5, 5)), max_iter=200, tol=FASTICA_TOL
    )
    assert n_iter == ref.n_iter_
    np.testing.assert_allclose(w, ref.components_, atol=1e-12)


def test_eog_scores_match_find_bads_eog(eeg):
    # Reference implementation: ICA.find_bads_eog (1-10 Hz firwin2 filter, Pearson r, adaptive
    # z-scoring at 3) on the same fitted ICA; the same flags in the same order, r to 1e-10.
    ica = _mne_ica(eeg, 18, ocular.MAX_ITER)
    ours = fit_ica(eeg, n_components=18, max_iter=ocular.MAX_ITER, seed=0)
    veog = eeg[[SITES_1020.index("Fp1"), SITES_1020.index("Fp2")]].mean(axis=0)
    heog = eeg[SITES_1020.index("F8")] - eeg[SITES_1020.index("F7")]
    names = list(SITES_1020) + ["VEOG", "HEOG"]
    info = mne.create_info(names, SF, ["eeg"] * 19 + ["eog"] * 2)
    raw = mne.io.RawArray(np.vstack([eeg, veog, heog]), info, verbose="error")
    flags, scores = ica.find_bads_eog(raw, ch_name=["VEOG", "HEOG"], threshold=3.0, verbose=False)
    got_flags, got_scores = eog_scores(ours, eeg, np.vstack([veog, heog]), SF)
    assert got_flags == [int(i) for i in flags] and len(got_flags) >= 1
    np.testing.assert_allclose(got_scores, np.array(scores), atol=1e-10)


def test_find_outliers_matches_mne(rng):
    # Reference implementation: mne.preprocessing.bads._find_outliers (two rounds, |z| > 3).
    from mne.preprocessing.bads import _find_outliers

    for k in range(30):
        x = rng.standard_normal(20) * 0.1
        x[rng.integers(0, 20, size=k % 4)] += rng.choice([-1, 1]) * rng.uniform(0.2, 2.0)
        for thr in (2.0, 3.0):
            np.testing.assert_array_equal(
                find_outliers(x, threshold=thr), _find_outliers(x, threshold=thr)
            )


@pytest.mark.parametrize("sfreq", [SF / 6, 250.0 / 6, 100.0, 500.0 / 12])
def test_firwin2_bandpass_matches_mne(rng, sfreq):
    # Reference implementation: the filter find_bads_eog applies (mne.filter.filter_data with
    # firwin2, Hann, 10 s, 0.5 Hz transitions, zero-double): coefficients and output to 1e-12.
    kw = dict(
        phase="zero-double",
        filter_length="10s",
        fir_window="hann",
        l_trans_bandwidth=0.5,
        h_trans_bandwidth=0.5,
        fir_design="firwin2",
        verbose="error",
    )
    ref_h = mne.filter.create_filter(None, sfreq, 1.0, 10.0, **kw)
    h = firwin2_bandpass(sfreq, 1.0, 10.0)
    np.testing.assert_allclose(h, ref_h, atol=1e-12 * np.abs(ref_h).max())
    x = np.cumsum(rng.standard_normal((3, 4000)), axis=1)
    ref = mne.filter.filter_data(x, sfreq, 1.0, 10.0, **kw)
    np.testing.assert_allclose(
        apply_fir(x.copy(), h, double=True), ref, atol=1e-12 * np.abs(ref).max()
    )


@pytest.mark.parametrize(
    "order,cutoff,sfreq",
    [(4, 12.0, 256.0), (4, 12.0, 1000.0), (4, 0.4 * 128 / 3, 128.0), (3, 30.0, 200.0)],
)
def test_butterworth_filtfilt_matches_scipy(rng, order, cutoff, sfreq):
    # Reference implementation: scipy.signal.butter(..., output="sos") and sosfiltfilt with
    # its defaults; the same frequency response and output to 1e-11 of the data's scale.
    ref_sos = signal.butter(order, cutoff, fs=sfreq, output="sos")
    sos = butter_lowpass_sos(order, cutoff, sfreq)
    _, h_ref = signal.sosfreqz(ref_sos, 1024)
    _, h = signal.sosfreqz(sos, 1024)
    np.testing.assert_allclose(h, h_ref, atol=1e-12)
    x = 40.0 + np.cumsum(rng.standard_normal((2, 9001)), axis=1)
    ref = signal.sosfiltfilt(ref_sos, x)
    np.testing.assert_allclose(sosfiltfilt(sos, x), ref, atol=1e-11 * np.abs(ref).max())
    np.testing.assert_allclose(sosfiltfilt(sos, x[0]), ref[0], atol=1e-11 * np.abs(ref).max())


@pytest.mark.parametrize("n", [512, 511])
def test_epoch_spectra_match_welch(rng, n):
    # Reference implementation: scipy.signal.welch with one Hann segment per epoch.
    x = 3.0 + 10.0 * rng.standard_normal((4, 3, n))
    f_ref, p_ref = signal.welch(
        x, fs=SF, window="hann", nperseg=n, noverlap=0, detrend="constant", scaling="density"
    )
    f, p = epoch_spectra(x, SF)
    np.testing.assert_array_equal(f, f_ref)
    np.testing.assert_allclose(p, p_ref, rtol=1e-12, atol=1e-14 * p_ref.max())


def test_pvalue_functions_are_scipy_stats():
    # Reference implementation: scipy.stats' norm.sf / norm.isf / t.sf / f.ppf / chi2.ppf /
    # gamma.ppf, the numbers the z-score table, the ICC and coupling intervals used before
    # (bit for bit).
    from scipy.special import fdtri, ndtr, ndtri, stdtr

    x = np.array([0.0, 0.5, 1.96, 2.58, 6.0, 40.0, np.inf, np.nan])
    df = np.array([1.0, 3.5, 17.0, 250.0, np.inf])
    np.testing.assert_array_equal(ndtr(-x), stats.norm.sf(x))
    p = np.array([1e-300, 1e-8, 0.025, 0.3, 0.5, 0.9, 1.0, np.nan])
    np.testing.assert_array_equal(0.0 - ndtri(p), stats.norm.isf(p))
    np.testing.assert_array_equal(stdtr(df, -x[:, None]), stats.t.sf(x[:, None], df))
    q = np.array([0.9, 0.975, 0.995])
    np.testing.assert_array_equal(fdtri(5.0, 7.3, q), stats.f.ppf(q, 5.0, 7.3))
    # coupling's analytic null: chi2.ppf(l, h) = 2 gammaincinv(h/2, l) and
    # gamma.ppf(l, a, scale=s) = s gammaincinv(a, l), degenerate shapes included
    from scipy.special import gammaincinv

    h = np.array([0.0, 1e-9, 0.5, 3.0, 1e6, np.inf, np.nan])[:, None]
    np.testing.assert_array_equal(2 * gammaincinv(h / 2, q), stats.chi2.ppf(q, h))
    np.testing.assert_array_equal(0.3 * gammaincinv(h, q), stats.gamma.ppf(q, h, scale=0.3))


def _mne_route(data_uv, fit_mask):
    """The ocular route before: MNE's ICA and find_bads_eog, scipy's Butterworth filtfilt."""
    idx = np.flatnonzero(fit_mask)
    n_comp = ocular._data_rank(data_uv[:, idx[:: max(1, len(idx) // 20000)]])
    step = max(1, len(idx) // (ocular.FIT_SAMPLES_PER_COMPONENT2 * n_comp**2))
    names = list(SITES_1020)
    veog = data_uv[[0, 1]][:, idx].mean(axis=0)
    heog = data_uv[names.index("F8"), idx] - data_uv[names.index("F7"), idx]
    fit_raw = mne.io.RawArray(
        data_uv[:, idx[::step]] * 1e-6, mne.create_info(names, SF / step, "eeg"), verbose="error"
    )
    q = max(1, int(SF // ocular.SCORE_HZ))
    sos = signal.butter(4, min(12.0, 0.4 * SF / q), fs=SF, output="sos")
    rows = [*(data_uv[c, idx] for c in range(19)), veog, heog]
    low = np.array([signal.sosfiltfilt(sos, r)[::q] for r in rows]) * 1e-6
    info = mne.create_info(names + ["VEOG", "HEOG"], SF / q, ["eeg"] * 19 + ["eog"] * 2)
    score_raw = mne.io.RawArray(low, info, verbose="error")
    ica = mne.preprocessing.ICA(
        n_components=n_comp, method="fastica", max_iter=ocular.MAX_ITER, rng=0, verbose="error"
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ica.fit(fit_raw, picks="eeg", verbose="error")
        flagged, scores = ica.find_bads_eog(
            score_raw, ch_name=["VEOG", "HEOG"], threshold=ocular.EOG_Z, verbose="error"
        )
    return ica, [int(i) for i in flagged], np.array(scores)


def test_correct_ocular_unchanged_against_the_mne_route(head_model, eeg):
    # End to end: the removed components, their maps, the scores and the corrected data are
    # those of the former route (MNE ICA + find_bads_eog + scipy filters) to rounding.
    data_uv = eeg * 1e6  # µV, as the cleaning stage hands it over
    mask = np.ones(data_uv.shape[1], bool)
    mask[: int(5 * SF)] = False  # some samples not learnt from
    ica, flagged, scores = _mne_route(data_uv, mask)
    out = ocular.correct_ocular(
        data_uv, SF, SITES_1020, head_model.ch_pos, DEFAULT_NASION, fit_mask=mask
    )
    maps = ica.get_components() * 1e6
    cos = ocular.subspace_cosine(maps, ocular.ocular_templates(head_model.ch_pos, DEFAULT_NASION))
    removed = tuple(sorted(i for i in flagged if cos[i] >= ocular.OCULAR_R))
    assert out.method == "ica" and out.removed == removed and len(removed) >= 1
    np.testing.assert_allclose(out.mixing, maps[:, list(removed)], atol=1e-9 * np.abs(maps).max())
    np.testing.assert_allclose(out.eog_scores["VEOG"], np.round(scores[0], 4), atol=1e-12)
    np.testing.assert_allclose(out.eog_scores["HEOG"], np.round(scores[1], 4), atol=1e-12)
    ref = ocular.remove_components(ica, data_uv, removed)
    np.testing.assert_allclose(out.data, ref, atol=1e-9 * np.abs(ref).max())


_HEAVY = ("scipy.signal", "sklearn", "mne.preprocessing", "scipy.stats")
_IMPORTS_CHILD = """
import json, sys
from sourcelab.cli.main import main
main(["analyze", sys.argv[1], "--out", sys.argv[2], "--no-figures", "--no-report", "--no-maps"])
print(json.dumps(sorted(m for m in sys.modules if m.split(".")[0] in ("scipy", "sklearn", "mne"))))
"""


@pytest.fixture(scope="module")
def tables_only_modules(head_model, tmp_path_factory):
    """Modules loaded by a fresh ``sourcelab analyze REC --no-figures --no-report --no-maps``."""
    import json
    import subprocess
    import sys

    d = tmp_path_factory.mktemp("tables_only")
    raw = simulate_raw(head_model, duration_s=60.0, sfreq=SF, rng=np.random.default_rng(1))
    raw.save(d / "rec_raw.fif", verbose="error")
    p = subprocess.run(
        [sys.executable, "-c", _IMPORTS_CHILD, str(d / "rec_raw.fif"), str(d / "out")],
        capture_output=True,
        text=True,
        cwd=d,
    )
    assert p.returncode == 0, p.stderr[-2000:]
    return set(json.loads(p.stdout.strip().splitlines()[-1]))


@pytest.mark.parametrize("module", _HEAVY)
def test_tables_only_analysis_skips_heavy_imports(tables_only_modules, module):
    # Contract (issue 19, start-up time): the default tables-only analysis needs none of these
    # (scipy.signal ~0.8 s, scipy.stats ~0.5 s, scikit-learn, mne.preprocessing).
    assert module not in tables_only_modules
