"""Simulated recordings through the template forward model (for the demo, tests and benchmarks).

Everything simulated here is invented: no real person's data is involved.

Model: sensor data = background + generators + sensor noise, where
* background: spatially uncorrelated pink (1/f) activity of unit variance at every cortical
  source, pushed through the fixed-orientation leadfield.  Its sensor covariance is ``G Gᵀ``, so it
  is drawn directly in sensor space as ``L z(t)`` with ``L Lᵀ = G Gᵀ`` (exact, and 1,000 times
  cheaper than 20,484 source time courses);
* generators: patches of cortex (all sources within ``radius_mm`` of a centre vertex, same
  hemisphere) carrying one narrow-band oscillation, e.g. alpha at 10 Hz;
* white sensor noise.

The cortical part is average-referenced (as if recorded against the mean of the 19 sites); the
white sensor noise is added after referencing.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..checks import check_option
from ..headmodel.model import HeadModel
from ..spectra import average_reference_projector


@dataclass(frozen=True)
class Generator:
    """One oscillating cortical patch.

    Attributes
    ----------
    center_mni : tuple of float
        Approximate patch centre (MNI305 mm); the nearest source in ``hemisphere`` is used.
    hemisphere : {"left", "right"}
    freq : float
        Centre frequency, Hz.
    bandwidth : float
        Full width of the oscillation's band, Hz.
    amplitude : float
        RMS of the patch time course relative to a background source (unit variance).
    radius_mm : float
        Patch radius (Euclidean, along the white surface's vertex positions).
    """

    center_mni: tuple[float, float, float]
    hemisphere: str
    freq: float = 10.0
    bandwidth: float = 2.0
    amplitude: float = 1.0
    radius_mm: float = 12.0


def patch_vertices(model: HeadModel, center_mni, hemisphere: str, radius_mm: float) -> np.ndarray:
    """Sources within ``radius_mm`` of the source nearest ``center_mni`` in one hemisphere.

    Parameters
    ----------
    model : HeadModel
    center_mni : sequence of 3 float
        Approximate patch centre, MNI305 mm.
    hemisphere : {"left", "right"}
    radius_mm : float
        Patch radius, mm (Euclidean distance between white-surface source positions).

    Returns
    -------
    ndarray of int
        Source indices (``0..n_src-1``), increasing; the nearest source is always included.
    """
    check_option("hemisphere", hemisphere, ("left", "right"))
    sl = slice(0, model.n_left) if hemisphere == "left" else slice(model.n_left, model.n_src)
    pos = model.src_mni[sl]
    c = pos[np.argmin(np.linalg.norm(pos - np.asarray(center_mni), axis=1))]
    idx = np.flatnonzero(np.linalg.norm(pos - c, axis=1) <= radius_mm)
    return idx + sl.start


def pink_noise(
    n_series: int,
    n_times: int,
    sfreq: float,
    rng: np.random.Generator,
    *,
    exponent: float = 1.0,
    f_min: float = 0.5,
    spectral_gain: tuple[tuple[float, float], ...] = (),
) -> np.ndarray:
    """Unit-variance noise with a ``1/f**exponent`` power spectrum, shape (n_series, n_times).

    ``spectral_gain``: ``(centre_hz, ln_power_gain)`` pairs; each multiplies the power spectrum
    by ``exp(gain * g(f))`` with ``g`` a Gaussian bump in log10 frequency (SD
    :data:`GAIN_WIDTH_DECADES`) around the centre: a smooth person-specific spectral shape.

    Parameters
    ----------
    n_series : int
        Number of independent series.
    n_times : int
        Samples per series.
    sfreq : float
        Sampling rate, Hz.
    rng : numpy.random.Generator
    exponent : float
        Spectral exponent (1: pink).
    f_min : float
        Below this frequency, Hz, the spectrum is flat (avoids the 1/f pole); the 0 Hz bin is
        zeroed.
    spectral_gain : tuple of (float, float)
        ``(centre_hz, ln_power_gain)`` pairs, see above.

    Returns
    -------
    ndarray, shape (n_series, n_times)
        Zero-mean series of expected standard deviation 1 (dimensionless; the realised SD
        scatters around 1).
    """
    spec = rng.standard_normal((n_series, n_times // 2 + 1)) + 1j * rng.standard_normal(
        (n_series, n_times // 2 + 1)
    )
    f = np.fft.rfftfreq(n_times, 1 / sfreq)
    spec *= 1.0 / np.maximum(f, f_min) ** (exponent / 2.0)
    if spectral_gain:
        lf = np.log10(np.maximum(f, f_min))
        ln_pow = sum(
            g * np.exp(-0.5 * ((lf - np.log10(c)) / GAIN_WIDTH_DECADES) ** 2)
            for c, g in spectral_gain
        )
        spec *= np.exp(ln_pow / 2.0)
    spec[:, 0] = 0
    x = np.fft.irfft(spec, n=n_times, axis=-1)
    # Scaled by the *expected* standard deviation, not the realised one: dividing by each
    # realisation's own SD would give every simulated person a random overall gain (the slow
    # bins, few and strong, dominate the realised SD), i.e. two sessions of one invented person
    # would differ in every band.  Parseval with E|X_k|² = 2 a_k² (a_k the amplitude profile;
    # real and imaginary parts unit normal; the Nyquist bin keeps its real part only).
    a2 = 1.0 / np.maximum(f, f_min) ** exponent
    if spectral_gain:
        a2 = a2 * np.exp(ln_pow)
    a2[0] = 0.0
    w = np.full(f.shape, 4.0)  # 2 (both signs of k) x 2 (E|X_k|² = 2 a_k²)
    if n_times % 2 == 0:
        w[-1] = 1.0
    expected_sd = np.sqrt((w * a2).sum()) / n_times
    return x / expected_sd


#: Width (SD, decades of frequency) of a :func:`pink_noise` spectral-gain bump (a factor of 1.3).
GAIN_WIDTH_DECADES = 0.12


def narrowband(
    n_times: int, sfreq: float, freq: float, bandwidth: float, rng: np.random.Generator
) -> np.ndarray:
    """Unit-variance band-limited Gaussian noise centred on ``freq`` (flat within the band).

    Parameters
    ----------
    n_times : int
        Samples.
    sfreq : float
        Sampling rate, Hz.
    freq : float
        Centre frequency, Hz.
    bandwidth : float
        Full width of the flat band, Hz (bins with ``|f - freq| <= bandwidth / 2`` are kept).
    rng : numpy.random.Generator

    Returns
    -------
    ndarray, shape (n_times,)
        Standard deviation 1 (dimensionless).
    """
    spec = rng.standard_normal(n_times // 2 + 1) + 1j * rng.standard_normal(n_times // 2 + 1)
    f = np.fft.rfftfreq(n_times, 1 / sfreq)
    spec[np.abs(f - freq) > bandwidth / 2] = 0
    x = np.fft.irfft(spec, n=n_times)
    return x / x.std()


def simulate_sensor_data(
    model: HeadModel,
    *,
    duration_s: float,
    sfreq: float,
    generators: tuple[Generator, ...] = (),
    background_uv: float = 15.0,
    sensor_noise_uv: float = 1.0,
    alpha_background: Generator | None = None,
    background_exponent: float = 1.0,
    background_spectral_gain: tuple[tuple[float, float], ...] = (),
    rng: np.random.Generator,
) -> np.ndarray:
    """Simulated 19-channel data in volts, shape (n_ch, n_times), average reference.

    Parameters
    ----------
    model : HeadModel
        Template head model; its fixed-orientation gain carries background and generators.
    duration_s : float
        Length, s.
    sfreq : float
        Sampling rate, Hz.
    generators : tuple of Generator
        Oscillating patches; a generator's ``amplitude`` is relative to one background source, so
        an amplitude of 1 with a 100-source patch adds the same variance as 100 background sources
        if they were coherent.
    background_uv : float
        Median RMS of the pink background across channels after average reference, µV.
    sensor_noise_uv : float
        RMS of white noise added at each electrode, µV.
    alpha_background : Generator, optional
        Not used by the simulation (accepted and ignored).
    background_exponent : float
        Exponent of the background's ``1/f**exponent`` power spectrum (1: pink).
    background_spectral_gain : tuple of (float, float)
        Smooth spectral-shape changes of the background (see :func:`pink_noise`).
    rng : numpy.random.Generator

    Returns
    -------
    ndarray, shape (n_ch, n_times)
        Volts, channels in ``model.ch_names`` order, ``n_times = round(duration_s * sfreq)``.
    """
    n_t = int(round(duration_s * sfreq))
    gf = model.gain_fixed
    n_ch = gf.shape[0]
    cov = gf @ gf.T
    evals, evecs = np.linalg.eigh(cov)
    l_mat = evecs * np.sqrt(np.clip(evals, 0, None))
    background = l_mat @ pink_noise(
        n_ch,
        n_t,
        sfreq,
        rng,
        exponent=background_exponent,
        spectral_gain=tuple(background_spectral_gain),
    )
    p = average_reference_projector(n_ch)
    # expected (not realised) background SD per channel after the average reference: the unit-
    # variance series mixed by L give covariance L Lᵀ = G Gᵀ (see pink_noise for why expected)
    scale = background_uv * 1e-6 / np.median(np.sqrt(np.clip(np.diag(p @ cov @ p), 0, None)))
    data = scale * background
    for g in generators:
        verts = patch_vertices(model, g.center_mni, g.hemisphere, g.radius_mm)
        topo = gf[:, verts].sum(axis=1)
        data += (
            scale * g.amplitude * np.outer(topo, narrowband(n_t, sfreq, g.freq, g.bandwidth, rng))
        )
    data = p @ data  # as recorded against the average of the 19 sites
    data += sensor_noise_uv * 1e-6 * rng.standard_normal(data.shape)
    return data


def simulate_raw(
    model: HeadModel,
    *,
    duration_s: float = 300.0,
    sfreq: float = 256.0,
    generators: tuple[Generator, ...] = (),
    rng: np.random.Generator,
    **kwargs,
):
    """Like :func:`simulate_sensor_data`, wrapped as an ``mne.io.RawArray`` with the 19 sites.

    Parameters
    ----------
    model : HeadModel
    duration_s : float
        Length, s.
    sfreq : float
        Sampling rate, Hz.
    generators : tuple of Generator
        Oscillating patches.
    rng : numpy.random.Generator
    **kwargs
        Passed to :func:`simulate_sensor_data` (``background_uv``, ``sensor_noise_uv`` ...).

    Returns
    -------
    mne.io.RawArray
        Invented data in volts, EEG channels named after the 19 10-20 sites.
    """
    import mne

    from ..headmodel import make_info

    data = simulate_sensor_data(
        model, duration_s=duration_s, sfreq=sfreq, generators=generators, rng=rng, **kwargs
    )
    raw = mne.io.RawArray(data, make_info(sfreq), verbose="error")
    return raw


def ocular_artefacts(
    ch_pos: np.ndarray,
    nasion: np.ndarray,
    *,
    n_times: int,
    sfreq: float,
    rng: np.random.Generator,
    blink_rate_hz: float = 0.25,
    blink_uv: float = 150.0,
    blink_s: float = 0.3,
    saccade_rate_hz: float = 0.3,
    saccade_uv: float = 60.0,
) -> np.ndarray:
    """Invented blinks and horizontal eye movements at the electrodes, volts (average reference).

    Each eye is a current dipole in front of the frontal pole
    (:func:`sourcelab.intake.ocular.ocular_templates`): blinks change it upwards, horizontal
    movements sideways.

    Parameters
    ----------
    ch_pos : ndarray, shape (n_ch, 3)
        Electrode positions, metres, head coordinates.
    nasion : ndarray, shape (3,)
    n_times : int
    sfreq : float
    rng : numpy.random.Generator
    blink_rate_hz : float
        Mean blink rate (Poisson); resting adults blink ~15-20 times a minute (from memory).
    blink_uv : float
        Blink peak at the largest site (Fp1/Fp2), µV (50-200 µV: Croft & Barry 2000 — from
        memory).
    blink_s : float
        Blink duration (raised cosine), s.
    saccade_rate_hz : float
        Rate of horizontal gaze changes (Poisson); gaze jumps to a new position and holds.
    saccade_uv : float
        Largest gaze deflection at the largest site (F7/F8), µV.

    Returns
    -------
    ndarray, shape (n_ch, n_times)
        Invented ocular signals, volts, average reference, to add to EEG data.
    """
    from ..intake.ocular import ocular_templates

    tpl = ocular_templates(ch_pos, nasion)
    tpl = tpl / np.abs(tpl).max(axis=0)  # 1 at the largest site
    dur = n_times / sfreq
    vert = np.zeros(n_times)
    width = max(int(round(blink_s * sfreq)), 2)
    pulse = 0.5 * (1 - np.cos(2 * np.pi * np.arange(width) / (width - 1)))
    for onset in np.sort(rng.uniform(0, dur, rng.poisson(blink_rate_hz * dur))):
        i = int(onset * sfreq)
        seg = vert[i : i + width]
        seg += blink_uv * pulse[: len(seg)] * rng.uniform(0.7, 1.3)
    horiz = np.zeros(n_times)
    changes = np.sort(rng.uniform(0, dur, rng.poisson(saccade_rate_hz * dur)))
    edges = np.r_[0, (changes * sfreq).astype(int), n_times]
    for a, b in zip(edges[:-1], edges[1:]):
        horiz[a:b] = saccade_uv * rng.uniform(-1, 1)
    horiz -= horiz.mean()
    return 1e-6 * (np.outer(tpl[:, 0], vert) + np.outer(tpl[:, 1], horiz))
