"""sLORETA engine: published properties and agreement with MNE-Python."""

import numpy as np
import pytest

from sourcelab.errors import InputError
from sourcelab.inverse.sloreta import point_source_peaks, sloreta_operator, source_power, whitener


def _random_orientations(rng, n):
    u = rng.standard_normal((n, 3))
    return u / np.linalg.norm(u, axis=1, keepdims=True)


@pytest.mark.parametrize("lambda2", [1 / 9, 1e-6])
def test_zero_localisation_error_fixed(head_model, lambda2):
    # Pascual-Marqui 2002 (Methods Find Exp Clin Pharmacol 24 Suppl D:5-12): sLORETA localises
    # noise-free single point sources with zero error.  Every one of the 20,484 template sources.
    peaks = point_source_peaks(
        head_model.gain, lambda2=lambda2, orientation="fixed", normals=head_model.src_nn
    )
    err = np.linalg.norm(head_model.src_mni[peaks] - head_model.src_mni, axis=1)
    assert head_model.n_src == 18_715  # every cortical source (20,484 minus the medial wall)
    assert np.mean(peaks == np.arange(head_model.n_src)) == 1.0
    assert err.max() == 0.0


@pytest.mark.parametrize("lambda2", [1 / 9, 1e-6])
def test_zero_localisation_error_free_3x3(head_model, rng, lambda2):
    # Pascual-Marqui 2002: the free-orientation form standardised by the inverse square root of
    # each source's 3x3 resolution block keeps zero localisation error for any orientation.
    ori = _random_orientations(rng, head_model.n_src)
    peaks = point_source_peaks(
        head_model.gain, lambda2=lambda2, orientation="free", orientations=ori
    )
    assert np.mean(peaks == np.arange(head_model.n_src)) == 1.0


def test_mne_free_sloreta_loses_zero_error(head_model, rng):
    # Why sourcelab computes free-orientation sLORETA itself: MNE-Python's sLORETA with free
    # orientation (mne.minimum_norm.apply_inverse, loose=1, pick_ori=None) normalises each source
    # by a scalar (the trace of its 3x3 resolution block) and does not keep Pascual-Marqui's zero
    # localisation error for noise-free point sources, while the 3x3 form finds all of them
    # (test above).  Reference implementation: MNE-Python, called here on the shipped gain.
    import mne

    from sourcelab.headmodel import make_info, to_mne_forward

    info = make_info(256.0, average_reference=True)
    fwd = to_mne_forward(head_model, info)
    noise = mne.Covariance(
        np.eye(19) * 1e-12, info["ch_names"], [], info["projs"], nfree=10**6, verbose="error"
    )
    inv = mne.minimum_norm.make_inverse_operator(
        info, fwd, noise, loose=1.0, depth=None, verbose="error"
    )
    idx = rng.choice(head_model.n_src, 1000, replace=False)
    ori = _random_orientations(rng, head_model.n_src)[idx]
    g = head_model.gain.reshape(19, -1, 3)[:, idx]
    data = np.einsum("cjk,jk->cj", g, ori) * 1e-9  # 1 nA·m unit sources, one per sample
    evoked = mne.EvokedArray(data, info, tmin=0.0, verbose="error")
    stc = mne.minimum_norm.apply_inverse(
        evoked, inv, lambda2=1 / 9, method="sLORETA", pick_ori=None, verbose="error"
    )
    mne_peaks = stc.data.argmax(axis=0)
    err = np.linalg.norm(head_model.src_mni[mne_peaks] - head_model.src_mni[idx], axis=1)
    # ours on the same 1,000 sources and orientations (all 18,715: the test above); the data's
    # scale does not move a peak
    op = sloreta_operator(head_model.gain, lambda2=1 / 9, orientation="free")
    ours = []
    for k in range(0, len(idx), 250):  # 250 test sources at a time (~110 MB of estimates)
        est = (op.kernel @ data[:, k : k + 250]).reshape(head_model.n_src, 3, -1)
        ours.append((est**2).sum(1).argmax(0))
    assert np.array_equal(np.concatenate(ours), idx)
    # HEADMODEL-NOTES.md measured a 22 mm median error for MNE's form (noise-free)
    assert np.mean(mne_peaks == idx) < 0.2
    assert np.median(err) > 5.0


def test_power_from_cross_spectra_equals_sample_route(head_model, rng):
    # Source power is a quadratic form of the data: mean over samples of the squared standardised
    # estimate equals the cross-spectral route (exact algebra, checked numerically).
    for orientation in ("fixed", "free"):
        op = sloreta_operator(
            head_model.gain,
            lambda2=1 / 9,
            orientation=orientation,
            normals=head_model.src_nn if orientation == "fixed" else None,
        )
        x = rng.standard_normal((19, 500))
        c = x @ x.T / x.shape[1]
        est = op.kernel @ x
        per_sample = (est**2).mean(1).reshape(op.n_src, op.n_comp).sum(1)
        np.testing.assert_allclose(source_power(op, c), per_sample, rtol=1e-9)


def test_matches_mne_apply_inverse_cov(head_model, rng):
    # MNE-Python reference implementation: fixed-orientation sLORETA through
    # mne.minimum_norm.apply_inverse_cov on the same forward and noise covariance.  MNE's sLORETA
    # normalises by sqrt(diag(R)/λ²) (mne/minimum_norm/inverse.py, prepare_inverse_operator),
    # Pascual-Marqui (2002) by sqrt(diag(R)): MNE's power = ours × λ².
    import mne

    from sourcelab.headmodel import to_mne_forward
    from sourcelab.headmodel import make_info

    info = make_info(256.0, average_reference=True)
    fwd = to_mne_forward(head_model, info)
    n = len(head_model.ch_names)
    noise = mne.Covariance(
        np.eye(n) * 1e-12, info["ch_names"], [], info["projs"], nfree=10**6, verbose="error"
    )
    inv = mne.minimum_norm.make_inverse_operator(
        info, fwd, noise, loose=0.0, fixed=True, depth=None, verbose="error"
    )
    a = rng.standard_normal((n, 2 * n)) * 1e-6
    data_cov_v2 = a @ a.T / (2 * n)
    lambda2 = 1 / 9
    cov = mne.Covariance(
        data_cov_v2, info["ch_names"], [], info["projs"], nfree=1000, verbose="error"
    )
    stc = mne.minimum_norm.apply_inverse_cov(
        cov, info, inv, nave=1, lambda2=lambda2, method="sLORETA", verbose="error"
    )
    fwd_fixed = mne.convert_forward_solution(fwd, surf_ori=True, force_fixed=True, verbose="error")
    op = sloreta_operator(
        fwd_fixed["sol"]["data"], lambda2=lambda2, orientation="fixed", noise_cov=np.eye(n) * 1e-12
    )
    ours = source_power(op, data_cov_v2)
    np.testing.assert_allclose(stc.data[:, 0], ours * lambda2, rtol=1e-6)
    # and with the shipped leadfield reduced to normals, identical maps (r = 1)
    op2 = sloreta_operator(head_model.gain, lambda2=lambda2, normals=head_model.src_nn)
    r = np.corrcoef(source_power(op2, data_cov_v2), stc.data[:, 0])[0, 1]
    assert r > 0.99999


def test_whitener_and_errors(rng):
    w = whitener(None, 19)
    assert w.shape == (18, 19)
    np.testing.assert_allclose(w @ np.ones(19), 0, atol=1e-12)
    np.testing.assert_allclose(w @ (np.eye(19) - 1 / 19) @ w.T, np.eye(18), atol=1e-10)
    g = rng.standard_normal((19, 30))
    with pytest.raises(InputError, match="orientation"):
        sloreta_operator(g, lambda2=0.1, orientation="radial")
    with pytest.raises(InputError, match="lambda2"):
        sloreta_operator(g, lambda2=0.0)
    with pytest.raises(InputError, match="3 columns"):
        sloreta_operator(g[:, :29], lambda2=0.1, orientation="free")


@pytest.mark.parametrize("method", ["dSPM", "eLORETA"])
def test_mne_methods_power_matches_apply_inverse_cov(head_model, rng, method):
    # eLORETA (Pascual-Marqui 2007, arXiv:0710.3341, from memory) and dSPM (Dale et al. 2000,
    # Neuron 26:55-67) come from MNE-Python; sourcelab turns them into a kernel and computes power
    # from cross-spectra.  Reference: mne.minimum_norm.apply_inverse_cov on the same covariance.
    import mne

    from sourcelab.headmodel import to_mne_forward
    from sourcelab.headmodel import make_info
    from sourcelab.inverse.methods import make_operator

    info = make_info(256.0, average_reference=True)
    fwd = to_mne_forward(head_model, info)
    n = 19
    noise = mne.Covariance(
        np.eye(n) * 1e-12, info["ch_names"], [], info["projs"], nfree=10**6, verbose="error"
    )
    inv = mne.minimum_norm.make_inverse_operator(
        info, fwd, noise, loose=0.0, fixed=True, depth=None, verbose="error"
    )
    a = rng.standard_normal((n, 2 * n))
    c_uv2 = a @ a.T / (2 * n)
    cov = mne.Covariance(
        c_uv2 * 1e-12, info["ch_names"], [], info["projs"], nfree=1000, verbose="error"
    )
    stc = mne.minimum_norm.apply_inverse_cov(
        cov, info, inv, nave=1, lambda2=1 / 9, method=method, verbose="error"
    )
    op = make_operator(head_model, method=method, orientation="fixed", lambda2=1 / 9)
    np.testing.assert_allclose(op.power(c_uv2), stc.data[:, 0], rtol=1e-6)
