"""Band cross-spectra: known answers and agreement with scipy's Welch estimator."""

import numpy as np
import pytest
import scipy.signal

from sourcelab.config import Bands
from sourcelab.errors import InputError
from sourcelab.spectra import (
    average_reference,
    epoch_cross_spectra,
    epoch_fourier,
    relative_power,
    sensor_band_power,
)

FS = 256.0
N = 512  # 2-s epochs


def _sine_epochs(amp_uv, freq, n_epochs=30, n_ch=3, noise=0.0, rng=None):
    t = np.arange(N) / FS
    x = np.zeros((n_epochs, n_ch, N))
    x[:, 0] = amp_uv * np.sin(2 * np.pi * freq * t + 0.3)
    if noise:
        x += noise * rng.standard_normal(x.shape)
    return x


def test_sine_gives_a_squared_over_two():
    # A sine of amplitude A has mean power A²/2 (textbook; e.g. Oppenheim & Schafer, from memory):
    # a 10 µV 10 Hz sine gives 50 µV² in the alpha band.
    csd = epoch_cross_spectra(_sine_epochs(10.0, 10.0), FS, Bands()).mean(axis=0)
    alpha = Bands().names.index("alpha")
    assert csd[alpha, 0, 0] == pytest.approx(50.0, rel=1e-3)
    others = [b for b in range(len(Bands())) if b != alpha]
    assert np.all(csd[others, 0, 0] < 1e-3)


def test_matches_scipy_welch(rng):
    # Reference implementation: scipy.signal.welch (Welch 1967) with a Hann window, one segment
    # per epoch, density scaling; band power = sum of bins in [lo, hi) times the bin width.
    x = _sine_epochs(5.0, 10.0, noise=3.0, rng=rng)
    bands = Bands()
    csd = epoch_cross_spectra(x, FS, bands).mean(axis=0)
    cont = x.transpose(1, 0, 2).reshape(x.shape[1], -1)
    f, p = scipy.signal.welch(cont, FS, window="hann", nperseg=N, noverlap=0)
    for b, (lo, hi) in enumerate(bands.edges):
        sel = (f >= lo) & (f < hi)
        np.testing.assert_allclose(np.diag(csd[b]), p[:, sel].sum(1) * (f[1] - f[0]), rtol=1e-10)
    # cross terms match scipy.signal.csd too
    f2, pxy = scipy.signal.csd(cont[0], cont[1], FS, window="hann", nperseg=N, noverlap=0)
    lo, hi = bands.edges[2]  # alpha
    sel = (f2 >= lo) & (f2 < hi)
    assert csd[2, 0, 1] == pytest.approx(pxy[sel].real.sum() * (f2[1] - f2[0]), rel=1e-10)


def test_fourier_out_keeps_the_coefficients(rng):
    # The analysis hands the band-power transform's Hann coefficients to coupling: they must be
    # epoch_fourier's single-precision values exactly (the coupling tables depend on them), and
    # scipy.signal.welch's periodogram per bin (Welch 1967; density times bin width) is |X|².
    x = _sine_epochs(5.0, 10.0, n_epochs=70, noise=3.0, rng=rng)  # more than one chunk
    bands = Bands()
    ref, freqs = epoch_fourier(x, FS, bands, dtype=np.complex64)
    kept = np.empty_like(ref)
    csd = epoch_cross_spectra(x, FS, bands, fourier_out=kept)
    np.testing.assert_array_equal(kept, ref)
    np.testing.assert_array_equal(csd, epoch_cross_spectra(x, FS, bands))
    f, p = scipy.signal.welch(x[:, 0], FS, window="hann", nperseg=N, noverlap=0)
    sel = np.isin(f, freqs)
    np.testing.assert_allclose(np.abs(kept[:, 0]) ** 2, p[:, sel] * (f[1] - f[0]), rtol=1e-5)
    with pytest.raises(InputError, match="fourier_out"):
        epoch_cross_spectra(x, FS, bands, fourier_out=kept[:, :, 1:])


def test_average_reference_and_relative(rng):
    x = rng.standard_normal((10, 19, N))
    csd = average_reference(epoch_cross_spectra(x, FS, Bands()).mean(0))
    # after the average reference every row of the cross-spectrum sums to zero
    np.testing.assert_allclose(csd.sum(axis=-1), 0, atol=1e-10)
    absolute, relative = sensor_band_power(csd)
    np.testing.assert_allclose(relative.sum(axis=0), 1.0)
    assert relative_power(np.zeros((3, 2))).shape == (3, 2)


def test_band_errors():
    with pytest.raises(InputError, match="Nyquist"):
        epoch_cross_spectra(np.zeros((2, 3, 100)), 50.0, Bands())
    with pytest.raises(InputError, match="no frequency bin"):
        epoch_cross_spectra(np.zeros((2, 3, 8)), 256.0, Bands.from_mapping({"x": [1, 2]}))
