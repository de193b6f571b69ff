"""Invented recordings with planted coupling, for the coupling tests (no real person's data).

Cortical patches of the shipped template head model carry one shared narrow-band signal, each
patch delayed by its own lag, on top of spatially white pink background activity at every source
(drawn in sensor space with covariance ``G Gᵀ``) and white sensor noise; everything is
average-referenced.  Time courses are built in the frequency domain, so delays are exact.
"""

from __future__ import annotations

import numpy as np

from sourcelab.simulate import patch_vertices, pink_noise


def delayed_narrowband(
    n_times: int, sfreq: float, freq: float, bandwidth: float, delays_s, rng: np.random.Generator
) -> np.ndarray:
    """One band-limited Gaussian signal (unit variance) delayed by each of ``delays_s``.

    Returns ndarray, shape (len(delays_s), n_times); row ``k`` is ``s(t - delays_s[k])``
    (circularly, exact in the frequency domain).
    """
    f = np.fft.rfftfreq(n_times, 1 / sfreq)
    spec = rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)
    spec[np.abs(f - freq) > bandwidth / 2] = 0
    out = np.fft.irfft(
        spec[None] * np.exp(-2j * np.pi * f[None] * np.asarray(delays_s)[:, None]),
        n=n_times,
        axis=-1,
    )
    return out / out[0].std()


def coupled_recording(
    model,
    *,
    duration_s: float,
    sfreq: float,
    patches,
    rng,
    freq: float = 10.0,
    bandwidth: float = 4.0,
    background_uv: float = 10.0,
    sensor_noise_uv: float = 1.0,
    coupling: float = 1.0,
) -> np.ndarray:
    """Sensor data in µV, shape (n_ch, n_times).

    ``patches``: sequence of ``(center_mni, hemisphere, amplitude, delay_s, radius_mm)``; all
    carry the same signal with their own delay, weighted ``coupling``, plus their own
    independent narrow-band signal weighted ``sqrt(1 - coupling²)``.  ``amplitude`` is relative
    to one background source.
    """
    n_t = int(round(duration_s * sfreq))
    gf = model.gain_fixed
    n_ch = gf.shape[0]
    evals, evecs = np.linalg.eigh(gf @ gf.T)
    background = (evecs * np.sqrt(np.clip(evals, 0, None))) @ pink_noise(n_ch, n_t, sfreq, rng)
    p = np.eye(n_ch) - 1.0 / n_ch
    scale = background_uv / np.median((p @ background).std(axis=1))
    data = scale * background
    if patches:
        sig = delayed_narrowband(n_t, sfreq, freq, bandwidth, [d for *_, d, _ in patches], rng)
        for k, (centre, hemi, amp, _delay, radius) in enumerate(patches):
            topo = gf[:, patch_vertices(model, centre, hemi, radius)].sum(axis=1)
            own = delayed_narrowband(n_t, sfreq, freq, bandwidth, [0.0], rng)[0]
            src = coupling * sig[k] + np.sqrt(max(0.0, 1.0 - coupling**2)) * own
            data += scale * amp * np.outer(topo, src)
    data = p @ data
    return data + sensor_noise_uv * rng.standard_normal(data.shape)


def epochs_of(data: np.ndarray, n_per: int) -> np.ndarray:
    """Non-overlapping epochs, shape (n_epochs, n_ch, n_per)."""
    n = data.shape[1] // n_per
    return data[:, : n * n_per].reshape(data.shape[0], n, n_per).transpose(1, 0, 2)


def cohort_values_spectral(
    model, op, atlas, n_people: int, rng, *, n_epochs: int = 60, freqs=np.arange(8.0, 12.0, 0.5)
) -> list[dict]:
    """Pair and edge values of an invented cohort (see :func:`cohort_spectral`), as
    ``{(kind, measure): array (n_bands, n_items)}`` per person."""
    out = []
    for sc, ec in cohort_spectral(model, op, atlas, n_people, rng, n_epochs=n_epochs, freqs=freqs):
        v = {("pair", k): y for k, y in sc.values.items()}
        v[("pair", "asymmetry")] = np.concatenate(
            [sc.asymmetry["homologous"], sc.asymmetry["anterior_posterior"]], axis=1
        )
        v.update({("edge", k): y for k, y in ec.values.items()})
        out.append(v)
    return out


def cohort_spectral(
    model, op, atlas, n_people: int, rng, *, n_epochs: int = 60, freqs=np.arange(8.0, 12.0, 0.5)
):
    """Yield ``(SensorCoupling, EdgeCoupling)`` of each person of an invented cohort,
    simulated as Fourier coefficients (fast).

    Person-level variation is Gaussian on the scales where it is commonly modelled: log
    amplitude of two coupled alpha patches and of the background (log power is close to normal
    across people; Gasser et al. 1982, from memory), their lag (normal, 8 ± 2 ms) and the Fisher
    z of their coupling (normal); on top comes the sampling noise of each person's estimates.

    Each epoch's coefficient at each bin is drawn as circular complex Gaussian: pink background
    ``L z`` (``L Lᵀ = G Gᵀ``), the two patches' signals (a shared part delayed by the person's
    lag, ``e^{-i 2π f τ}``, and an own part), white sensor noise; average reference.  Bins are
    independent (no taper leakage), and the same coefficients serve as the untapered spectrum
    for the envelopes.
    """
    from sourcelab.config import Bands
    from sourcelab.coupling.sensor import sensor_coupling
    from sourcelab.coupling.source import network_coupling

    gf = model.gain_fixed
    n_ch = gf.shape[0]
    p = np.eye(n_ch) - 1.0 / n_ch
    evals, evecs = np.linalg.eigh(gf @ gf.T)
    lmat = p @ (evecs * np.sqrt(np.clip(evals, 0, None)))
    lmat /= np.median(np.sqrt(np.sum(lmat**2, axis=1)))
    topo = [
        p @ gf[:, patch_vertices(model, c, h, 15.0)].sum(axis=1)
        for c, h in (((-30, 40, 30), "left"), ((25, -90, 5), "right"))
    ]
    topo = [t / np.median(np.sqrt(np.sum(lmat**2, axis=1))) for t in topo]
    f = np.asarray(freqs, dtype=float)
    bands = Bands(("alpha",), ((float(f[0]), float(f[-1]) + 1e-9),))
    shape = (n_epochs, f.size)

    def cn(*s):
        return (rng.standard_normal(s) + 1j * rng.standard_normal(s)) / np.sqrt(2.0)

    for _ in range(n_people):
        amp = np.exp(rng.normal(np.log(2.0), 0.3, 2))
        lag = rng.normal(0.008, 0.002)
        c = np.tanh(rng.normal(0.8, 0.3))
        bg = np.exp(rng.normal(np.log(10.0), 0.2))
        shared = cn(*shape)
        x = bg * np.einsum("cd,edf->ecf", lmat, cn(n_epochs, n_ch, f.size))
        for k, (t, a) in enumerate(zip(topo, amp)):
            s = c * shared * np.exp(-2j * np.pi * f * (lag if k else 0.0)) + np.sqrt(
                1 - c * c
            ) * cn(*shape)
            x += bg * a * 0.02 * t[None, :, None] * s[:, None, :]
        x += 0.1 * cn(n_epochs, n_ch, f.size)
        sc = sensor_coupling(x, f, bands, model.ch_names, model.ch_pos, null_method=None)
        ec = network_coupling(x, x, f, bands, op, [atlas], null_method=None, normals=model.src_nn)[
            0
        ]
        yield sc, ec


def norms_shifted_from(result, *, shift_sd: float, coupling: bool = True, sd: float = 0.2):
    """Invented norms whose mean sits ``shift_sd`` SDs *below* every transformed value of this
    very analysis result (so every z must be +shift_sd), for its ROI, sensor and (optionally)
    pair and coupling tables; SD ``sd`` on the transformed scale, ages 20-60, one age bin."""
    import pandas as pd

    from sourcelab.errors import InputError
    from sourcelab.norms import NA, Norms, get_transform
    from sourcelab.norms.fit import transform_for
    from sourcelab.norms.io import V_COLUMNS

    rows = []
    tables = [
        ("roi", result.roi_table, "atlas", "roi", "hemisphere"),
        ("sensor", result.sensor_table, None, "channel", None),
    ]
    if coupling:
        tables += [
            ("pair", result.pair_table, None, "pair", None),
            ("edge", result.coupling_table, "atlas", "edge", None),
        ]
    for kind, t, ac, nc, hc in tables:
        for r in t.itertuples(index=False):
            r = r._asdict()
            tr = transform_for(kind, r["measure"])
            try:
                tv = float(get_transform(tr).forward(np.array([r["value"]]))[0])
            except InputError:
                continue
            if not np.isfinite(tv):
                continue
            rows.append(
                dict(
                    kind=kind,
                    atlas=r[ac] if ac else NA,
                    name=r[nc],
                    hemisphere=r[hc] if hc else NA,
                    band=r["band"],
                    measure=r["measure"],
                    age_min=20.0,
                    age_max=60.0,
                    model="binned",
                    degree=0,
                    transform=tr,
                    b0=tv - shift_sd * sd,
                    b1=0.0,
                    b2=0.0,
                    b3=0.0,
                    sd=sd,
                    n=40,
                    df=39,
                    **{c: 0.0 for c in V_COLUMNS if c != "v00"},
                    v00=1.0 / 40,
                )
            )
    return Norms(table=pd.DataFrame(rows), fingerprint=result.fingerprint, condition="eyes closed")
