"""Network / lobe coupling: ROI filters, mne-connectivity agreement from ROI time series,
orthogonalised envelope correlation, known answers and the leakage expectation."""

import numpy as np
import pytest
from coupling_sim import coupled_recording, epochs_of

from sourcelab.config import Bands
from sourcelab.coupling.source import (
    EDGE_COLUMNS,
    aec_from_moments,
    band_analytic,
    coupling_table,
    edge_leakage_msc,
    envelope_moments,
    independent_source_covariance,
    network_coupling,
    roi_cross_spectra,
    roi_filters,
    roi_fourier,
)
from sourcelab.spectra import band_bin_indices, epoch_bin_cross_spectra, epoch_fourier

FS = 256.0
N = 512
ALPHA = Bands(("alpha",), ((8.0, 12.0),))


@pytest.fixture(scope="module")
def op():
    from sourcelab.inverse import inverse_operator

    return inverse_operator("sLORETA", "fixed", 1 / 9)


@pytest.fixture(scope="module")
def lobes():
    from sourcelab.rois import load_atlas

    return load_atlas("lobes")


@pytest.fixture(scope="module")
def two_source_epochs(head_model):
    """Invented: left-frontal patch leads a right-occipital patch by 10 ms (shared 8-12 Hz
    signal), pink background; 120 two-second epochs."""
    rng = np.random.default_rng(3)
    d = coupled_recording(
        head_model,
        duration_s=240.0,
        sfreq=FS,
        rng=rng,
        patches=[
            ((-30, 40, 30), "left", 3.0, 0.0, 15.0),
            ((25, -90, 5), "right", 3.0, 0.010, 15.0),
        ],
    )
    return epochs_of(d, N)


def test_roi_filters_are_the_leading_direction_of_roi_power(op, lobes, head_model):
    # w_r is the leading eigenvector of M_r = K_rᵀK_r/|r| (the ROI power operator of the
    # pipeline), scaled so that ‖w_r‖² is its eigenvalue; W C Wᵀ equals the coefficient route.
    from sourcelab.inverse import roi_power_matrices

    f = roi_filters(op, lobes, normals=head_model.src_nn)
    m = roi_power_matrices(op, lobes.vertex_sets())
    for r in range(len(f.names)):
        ev, vec = np.linalg.eigh(m[r])
        np.testing.assert_allclose(abs(vec[:, -1] @ f.weights[r]) ** 2, ev[-1], rtol=1e-8)
        assert f.share[r] == pytest.approx(ev[-1] / ev.sum(), rel=1e-8)
    assert np.all((f.share > 0) & (f.share <= 1))
    assert roi_filters(op, lobes, normals=head_model.src_nn) is f  # cached
    rng = np.random.default_rng(0)
    x = rng.standard_normal((6, 19, N))
    csd, freqs = epoch_bin_cross_spectra(x, FS, ALPHA, dtype=np.complex128)
    spec, _ = epoch_fourier(x, FS, ALPHA)
    y = roi_fourier(spec, f.weights)
    np.testing.assert_allclose(
        roi_cross_spectra(csd, f.weights),
        np.einsum("erf,esf->efrs", y, y.conj()),
        rtol=1e-10,
        atol=1e-12,
    )


def test_lps_matches_mne_connectivity_from_roi_time_series(
    two_source_epochs, op, lobes, head_model
):
    # Reference: mne_connectivity.spectral_connectivity_epochs(method="ciplv") on the ROI time
    # series W x of the same epochs (MNE's Welch Fourier coefficients,
    # mne.time_frequency.EpochsSpectrumArray); lagged phase synchronisation = ciPLV² per bin
    # (DATA-SOURCES.md), band = mean over bins.  Issue 17: within 1e-3.
    import mne
    from mne_connectivity import spectral_connectivity_epochs

    f = roi_filters(op, lobes, normals=head_model.src_nn)
    spec, freqs = epoch_fourier(two_source_epochs, FS, ALPHA)
    res = network_coupling(
        spec, None, freqs, ALPHA, op, [lobes], normals=head_model.src_nn, null_method=None
    )[0]
    roi_ts = np.einsum("rc,ect->ert", f.weights, two_source_epochs)
    info = mne.create_info(roi_ts.shape[1], FS, "eeg")
    ep = mne.EpochsArray(roi_ts, info, verbose="error")
    s = ep.compute_psd(
        method="welch",
        n_fft=N,
        n_per_seg=N,
        n_overlap=0,
        window="hann",
        output="complex",
        average=False,
        fmin=8.0,
        fmax=11.5,
        remove_dc=True,
        verbose="error",
    )
    sa = mne.time_frequency.EpochsSpectrumArray(
        s.get_data()[..., 0], info, s.freqs, verbose="error"
    )
    idx = (res.edges[:, 0], res.edges[:, 1])
    errs = {}
    for method, ours, fn in (
        ("ciplv", "lps", np.square),
        ("coh", "msc", np.square),
        ("imcoh", "imcoh", None),
    ):
        ref = spectral_connectivity_epochs(
            sa, method=method, indices=idx, verbose="error"
        ).get_data()
        ref = fn(ref) if fn else ref
        errs[method] = np.abs(res.values[ours][0] - ref.mean(axis=1)).max()
        assert errs[method] < 1e-3, (method, errs[method])
    print("edge max |ours - mne_connectivity|:", errs)


def test_aec_matches_mne_envelope_correlation(two_source_epochs, op, lobes, head_model):
    # Reference: mne_connectivity.envelope_correlation(orthogonalize="pairwise",
    # absolute=False) on the same band-limited analytic ROI signals, all epochs concatenated
    # into one series (our correlation pools all samples, as Hipp et al. 2012 correlate whole
    # recordings).  Full-rate envelopes (M = n_times) agree to 1e-8; the default decimated
    # envelopes (M = 4 x band bins) differ from full rate by the envelope sampling only
    # (tolerance 0.02, a tenth of the weakest coupling worth reporting; measured below).
    from mne_connectivity import envelope_correlation

    f = roi_filters(op, lobes, normals=head_model.src_nn)
    plain, freqs = epoch_fourier(two_source_epochs, FS, ALPHA, taper=False)
    y = roi_fourier(plain, f.weights)
    idx = band_bin_indices(freqs, ALPHA)[0]
    full = band_analytic(y, idx, samples_per_epoch=N)
    ours = aec_from_moments(envelope_moments(full))[0]
    series = full.transpose(1, 0, 2).reshape(full.shape[1], -1)[None]
    ref = envelope_correlation(series, orthogonalize="pairwise", absolute=False)
    ref = ref.get_data(output="dense")[0, :, :, 0]
    off = ~np.eye(len(f.names), dtype=bool)
    np.testing.assert_allclose(ours[off], ref[off], atol=1e-8)
    dec = aec_from_moments(envelope_moments(band_analytic(y, idx)))[0]
    err = np.abs(dec[off] - ours[off]).max()
    assert err < 0.02, err
    print("AEC decimated vs full-rate max difference:", err)


def test_planted_lag_between_networks(two_source_epochs, op, lobes, head_model):
    # Known answer: frontal-left leads occipital-right by 10 ms at 10 Hz.  The edge's lag is
    # 10 ± 2 ms (issue 17) and its lagged coherence and lagged phase synchronisation are well
    # above the leakage null (> 3 x its 95th percentile), while the coherence leakage alone
    # would give between these distant lobes is small.
    bands = ALPHA
    spec, freqs = epoch_fourier(two_source_epochs, FS, bands)
    plain, _ = epoch_fourier(two_source_epochs, FS, bands, taper=False)
    res = network_coupling(
        spec, plain, freqs, bands, op, [lobes], gain=head_model.gain, normals=head_model.src_nn
    )
    t = coupling_table(res)
    e = t[t.edge == "frontal.left|occipital.right"].set_index("measure")
    assert abs(e.loc["lag_ms", "value"] - 10.0) <= 2.0, e.loc["lag_ms", "value"]
    for m in ("lagcoh", "lps"):
        assert e.loc[m, "value"] > 3 * e.loc[m, "leakage_q95"], m
        assert not e.loc[m, "leakage_explained"]
    assert e.loc["msc", "leakage_expected"] < 0.05
    print(e[["value", "leakage_expected", "leakage_q95"]])


def test_single_source_gives_no_lagged_edge(head_model, op, lobes):
    # Known answer: one left-frontal patch only.  Its blur reaches the neighbouring lobes at
    # zero lag: the frontal-temporal (left) edge has zero imaginary coherency (bootstrap interval
    # contains 0) and lagged coherence / lagged phase synchronisation within the leakage null.
    rng = np.random.default_rng(8)
    d = coupled_recording(
        head_model,
        duration_s=240.0,
        sfreq=FS,
        rng=rng,
        patches=[((-30, 40, 30), "left", 3.0, 0.0, 15.0)],
    )
    ep = epochs_of(d, N)
    spec, freqs = epoch_fourier(ep, FS, ALPHA)
    res = network_coupling(
        spec,
        None,
        freqs,
        ALPHA,
        op,
        [lobes],
        gain=head_model.gain,
        normals=head_model.src_nn,
        n_boot=500,
        seed=2,
    )
    t = coupling_table(res)
    for edge in ("frontal.left|temporal.left", "frontal.left|parietal.left"):
        e = t[t.edge == edge].set_index("measure")
        assert e.loc["imcoh", "value_lo"] <= 0.0 <= e.loc["imcoh", "value_hi"], edge
        for m in ("imcoh", "lagcoh", "lps"):
            assert bool(e.loc[m, "leakage_explained"]), (edge, m)


def test_leakage_coherence_model(op, lobes, head_model):
    # W C₀ Wᵀ of independent sources: symmetric, unit diagonal, and blur falls with distance:
    # homologous-hemisphere neighbours (frontal-parietal left) leak more than opposite ends
    # (frontal left - occipital right).
    f = roi_filters(op, lobes, normals=head_model.src_nn)
    c0 = independent_source_covariance(head_model.gain_fixed)
    np.testing.assert_allclose(np.trace(c0), 18.0)
    leak = edge_leakage_msc(f.weights, c0)
    np.testing.assert_allclose(leak, leak.T)
    np.testing.assert_allclose(np.diag(leak), 1.0)
    n = list(zip(f.names, f.hemispheres))
    fl, pl, orr = (
        n.index(("frontal", "left")),
        n.index(("parietal", "left")),
        n.index(("occipital", "right")),
    )
    assert leak[fl, pl] > leak[fl, orr]


def test_volume_conduction_covariance_is_computed_once_per_head_model(head_model):
    # The volume-conduction covariance depends only on the (read-only) template leadfield, so
    # it is cached like the inverse operator: the same read-only array on a second call, equal
    # to a fresh computation from a writable copy (which is not cached).
    a = independent_source_covariance(head_model.gain_fixed)
    assert independent_source_covariance(head_model.gain_fixed) is a
    assert not a.flags.writeable
    fresh = independent_source_covariance(np.array(head_model.gain_fixed))
    assert fresh is not a and fresh.flags.writeable
    np.testing.assert_array_equal(fresh, a)
    assert independent_source_covariance(head_model.gain_fixed, noise=1 / 9) is not a


def test_coupling_table_layout(two_source_epochs, op, head_model):
    from sourcelab.rois import load_atlas

    ats = [load_atlas(a) for a in ("lobes", "yeo7", "networks")]
    spec, freqs = epoch_fourier(two_source_epochs[:30], FS, ALPHA)
    plain, _ = epoch_fourier(two_source_epochs[:30], FS, ALPHA, taper=False)
    res = network_coupling(
        spec, plain, freqs, ALPHA, op, ats, gain=head_model.gain, normals=head_model.src_nn
    )
    t = coupling_table(res)
    assert tuple(t.columns) == EDGE_COLUMNS
    sizes = [len(r.filters.names) for r in res]
    assert sizes == [12, 14, 16]  # networks: per hemisphere, bilateral dropped
    assert len(t) == sum(k * (k - 1) // 2 for k in sizes) * 6
    assert res[0].matrix("lagcoh", "alpha").shape == (12, 12)
    assert t[t.measure == "lag_ms"].leakage_explained.isna().all()
