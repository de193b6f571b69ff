"""Simulations under model mismatch: fitting and checking the localisation probability model.

The model itself (:mod:`sourcelab.trust.probability`) is what analyses use; this module
simulates the data it is fitted and checked on and refits it
(``python -m sourcelab.simulate.localisation --out PATH``).

Simulation model (all invented; :mod:`sourcelab.simulate.mismatch` for the true head):

* **true head**: 3-shell sphere, one electrode-jitter realisation per simulated recording
  (sets of realisations are split between fitting and checking);
* **point sources** (power maps, no norms): one cortical source with its true-head topography,
  plus noise that is half uncorrelated cortical background (true-head ``G Gᵀ``) and half white
  sensor noise, at an amplitude SNR, sampled over ``n_epochs`` spectral estimates;
* **people** (for norms and z-maps): background activity at every cortical source with a
  person-specific global scale (log-normal, SD :data:`GLOBAL_SD_LN`), a smooth regional pattern
  (:data:`N_BUMPS` Gaussian bumps of width :data:`BUMP_MM`, amplitudes SD
  :data:`REGIONAL_SD_LN`), an age trend, white sensor noise, finite epochs;
* **focal deviations**: a coherent patch of radius 10-15 mm around a random cortical source
  added to a new person; z-scored per source against a simulated cohort's per-source norms.

Probability model (:mod:`sourcelab.trust.probability`).  The area named for a map is the area
of highest evidence around its maximum over all areas, as candidate lists name it
(:func:`sourcelab.trust.naming.listed_naming`); a map whose named area is not resolvable from
19 electrodes is not shown by a list, so it is left out of the fit and of the checks.  The
probability that the generator lies in it is a logistic model of five features
(:data:`~sourcelab.trust.probability.FEATURES`): the peak's signed distance to the named
area's border, the margin of the area's maximum, its size, its leakage own-share and its share
of the evidence.  One
coefficient set per map kind (``"power"`` for point-source power maps without norms, ``"z"`` for
the excess z-maps ``max(z, 0)`` of focal deviations), fitted by maximum likelihood on
simulations of mismatch seed 0 (jitter realisations 1-8) and checked on other seeds (other
electrode jitters, sources and noise; ``tests/test_trust_localise.py``).  The probability is
calibrated *under this simulation model*; a real head can differ more.

References
----------
Cox DR (1958).  The regression analysis of binary sequences.  J R Stat Soc B 20:215-242 (from
memory): logistic regression.
Niculescu-Mizil A, Caruana R (2005).  Predicting good probabilities with supervised learning.
Proc ICML (from memory): checking calibration by binned reliability.
"""

from __future__ import annotations

import argparse
import functools
import json
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..spectra import average_reference_projector
from ..trust.probability import FEATURES, area_features

#: Between-person SD of the global background scale, natural-log units (≈ 0.2 log10).
#: Adult between-person SD of log10 absolute band power is about 0.2-0.3 (from memory; cf.
#: Gasser, Bächer & Möcks 1982; John et al. 1980).
GLOBAL_SD_LN = 0.45
#: SD of the regional pattern's bump amplitudes, natural-log units.
REGIONAL_SD_LN = 0.35
N_BUMPS = 8
BUMP_MM = 25.0
#: Age trend of background power, natural log per year (a slow decline; from memory).
AGE_SLOPE_LN = -0.008
#: White sensor noise power relative to mean channel background power.
SENSOR_NOISE_SHARE = 0.1
#: Epochs per simulated recording (2-s epochs: 2 minutes).
N_EPOCHS = 60


@dataclass(frozen=True, eq=False)
class SimSetup:
    """Inputs shared by every simulation.

    Attributes
    ----------
    space : CortexSpace
        Inverse side (template BEM kernel, labels, mesh).
    true_gain : ndarray, shape (n_real, n_ch, n_src)
        True-head topographies of the space's sources.
    background : ndarray, shape (n_real, n_ch, n_ch)
        ``G Gᵀ`` of the true head over all sources (uncorrelated unit cortical activity).
    own : ndarray, shape (n_codes,)
        Leakage own-share per area code.
    exclude : ndarray of int
        Area codes left out of naming (not resolvable).
    realisations : tuple of int
        Jitter realisations this setup draws from.
    """

    space: object
    true_gain: np.ndarray
    background: np.ndarray
    own: np.ndarray
    exclude: np.ndarray
    realisations: tuple

    @functools.cached_property
    def mid_pos(self) -> np.ndarray:
        return self.space.mesh.pos_mm

    @functools.cached_property
    def hemi(self) -> np.ndarray:
        return self.space.right


def make_setup(
    model,
    space,
    *,
    seed: int = 0,
    n_jitter: int = 16,
    realisations=None,
    exclude_unresolvable: bool = True,
) -> SimSetup:
    """Build a :class:`SimSetup` (the mismatch forward is cached on disk).

    Parameters
    ----------
    model : HeadModel
        The template head model (electrodes, sources, normals).
    space : CortexSpace
        Inverse side (template kernel, area codes, mesh) whose sources are simulated.
    seed, n_jitter : int
        Of :func:`sourcelab.simulate.mismatch.mismatch_forward`.
    realisations : sequence of int, optional
        Realisations to use (default all jittered ones, 1..n_jitter).
    exclude_unresolvable : bool
        Leave the areas not resolvable from 19 electrodes out of naming
        (:func:`sourcelab.trust.resolvability.unresolvable_codes`); False: none left out.

    Returns
    -------
    setup : SimSetup
        True-head gains and backgrounds of ``space``'s sources for every realisation
        (``n_real = n_jitter + 1``), leakage own-shares and the excluded area codes.
    """
    from .mismatch import mismatch_forward
    from ..trust.resolvability import own_shares, resolvability_table, unresolvable_codes

    mf = mismatch_forward(model, n_jitter=n_jitter, seed=seed)
    gain = mf.gain[:, :, space.sources]
    real = tuple(range(1, mf.n_real)) if realisations is None else tuple(realisations)
    bg = np.einsum("rcs,rds->rcd", gain, gain)
    excl = np.zeros(0, dtype=np.int64)
    if exclude_unresolvable:
        table = resolvability_table(space, model.ch_pos, model.src_pos)
        excl = unresolvable_codes(space, table)
    return SimSetup(
        space=space,
        true_gain=gain,
        background=bg,
        own=own_shares(space),
        exclude=excl,
        realisations=real,
    )


def power_map(kernel: np.ndarray, csd: np.ndarray) -> np.ndarray:
    """``diag(K C Kᵀ)``; csd (n_ch, n_ch) or (n, n_ch, n_ch) -> (n_src,) or (n, n_src).

    Parameters
    ----------
    kernel : ndarray, shape (n_src, n_ch)
        Inverse operator (rows: sources).
    csd : ndarray, shape (n_ch, n_ch) or (n, n_ch, n_ch)
        Real band cross-spectrum (or covariance) of the sensors, one or a stack.

    Returns
    -------
    power : ndarray, shape (n_src,) or (n, n_src)
        Source power, in the unit of ``csd`` times the kernel's unit squared.
    """
    c = np.asarray(csd)
    if c.ndim == 2:
        return np.einsum("rc,rc->r", kernel @ c, kernel)
    return np.stack([np.einsum("rc,rc->r", kernel @ x, kernel) for x in c])


def wishart_csd(cov: np.ndarray, n_epochs: int, rng: np.random.Generator) -> np.ndarray:
    """Mean of ``n_epochs`` complex-Gaussian cross-spectral estimates with expectation ``cov``.

    Parameters
    ----------
    cov : ndarray, shape (n_ch, n_ch)
        Expected (real, symmetric positive semi-definite) cross-spectrum.
    n_epochs : int
        Independent spectral estimates averaged (sets the sampling error).
    rng : numpy.random.Generator
        Draws the complex Gaussian Fourier coefficients.

    Returns
    -------
    csd : ndarray, shape (n_ch, n_ch)
        Real part of the averaged sample cross-spectrum, same unit as ``cov``.
    """
    ev, vec = np.linalg.eigh(cov)
    ll = vec * np.sqrt(np.clip(ev, 0, None))
    w = rng.standard_normal((cov.shape[0], n_epochs)) + 1j * rng.standard_normal(
        (cov.shape[0], n_epochs)
    )
    x = ll @ w
    return (x @ x.conj().T).real / (2.0 * n_epochs)


# ----------------------------------------------------------------------------- point sources
def point_source_maps(
    setup: SimSetup,
    sources: np.ndarray,
    *,
    rng: np.random.Generator,
    snr: np.ndarray | float | None,
    n_epochs: int = N_EPOCHS,
) -> tuple[np.ndarray, np.ndarray]:
    """Power maps of single cortical sources under the true head.

    Parameters
    ----------
    setup : SimSetup
        True-head gains and backgrounds (:func:`make_setup`).
    sources : ndarray of int, shape (n,)
        Source indices of ``setup.space``.
    rng : numpy.random.Generator
        Draws the jitter realisation of each map and the noise.
    snr : float, ndarray (n,), or None
        Amplitude SNR (noise half brain background, half white); None: noise-free.
    n_epochs : int
        Epochs averaged in each noisy cross-spectrum (not used when ``snr`` is None).

    Returns
    -------
    maps : ndarray, shape (n, n_src)
        Source power through the template kernel (arbitrary unit).
    real : ndarray of int, shape (n,)
        Jitter realisation used for each.
    """
    from .mismatch import noisy_csd

    k = setup.space.op.kernel
    sources = np.asarray(sources)
    real = rng.choice(setup.realisations, sources.size)
    snr_a = None if snr is None else np.broadcast_to(np.asarray(snr, float), sources.shape)
    maps = np.empty((sources.size, setup.space.n_src))
    for i, (s, r) in enumerate(zip(sources, real)):
        g = setup.true_gain[r][:, s]
        if snr_a is None:
            maps[i] = (k @ g) ** 2
        else:
            c = noisy_csd(
                g[:, None],
                snr=float(snr_a[i]),
                n_epochs=n_epochs,
                rng=rng,
                background=setup.background[r],
            )[0]
            maps[i] = power_map(k, c)
    return maps, real


# ----------------------------------------------------------------------------- people
def patch_sources(setup: SimSetup, centre: int, radius_mm: float) -> np.ndarray:
    """Sources of ``setup.space`` within ``radius_mm`` (mid-thickness, same hemisphere).

    Parameters
    ----------
    setup : SimSetup
        Supplies mid-thickness positions (mm) and hemispheres.
    centre : int
        Source index of the patch centre.
    radius_mm : float
        Straight-line radius around the centre, mm.

    Returns
    -------
    sources : ndarray of int, shape (n_patch,)
        Source indices, ascending (the centre included).
    """
    d = np.linalg.norm(setup.mid_pos - setup.mid_pos[centre], axis=1)
    return np.flatnonzero((d <= radius_mm) & (setup.hemi == setup.hemi[centre]))


def person_covariance(
    setup: SimSetup,
    rng: np.random.Generator,
    *,
    age: float,
    real: int,
    patch: np.ndarray | None = None,
    patch_ratio: float = 0.0,
) -> np.ndarray:
    """Expected band cross-spectrum of one invented person (true head, sensor space).

    Parameters
    ----------
    setup : SimSetup
        True-head gains (:func:`make_setup`).
    rng : numpy.random.Generator
        Draws the person's global scale and regional pattern.
    age : float
        Years (sets the age trend).
    real : int
        Electrode-jitter realisation.
    patch : ndarray of int, optional
        Sources of a coherent focal excess.
    patch_ratio : float
        The patch's mean channel power (average reference) relative to the background's.

    Returns
    -------
    ndarray, shape (n_ch, n_ch)
        Expected cross-spectrum (unit cortical source variance; arbitrary unit), not
        re-referenced; background, white sensor noise and the patch.
    """
    g = setup.true_gain[real]
    n_src = g.shape[1]
    ln_w = rng.normal(0.0, GLOBAL_SD_LN) + AGE_SLOPE_LN * (age - 40.0) + np.zeros(n_src)
    centres = rng.choice(n_src, N_BUMPS, replace=False)
    amps = rng.normal(0.0, REGIONAL_SD_LN, N_BUMPS)
    for c, a in zip(centres, amps):
        d2 = np.sum((setup.mid_pos - setup.mid_pos[c]) ** 2, axis=1)
        ln_w += a * np.exp(-0.5 * d2 / BUMP_MM**2) * (setup.hemi == setup.hemi[c])
    cov = (g * np.exp(ln_w)) @ g.T
    n_ch = g.shape[0]
    p = average_reference_projector(n_ch)
    bg_pow = np.trace(p @ cov @ p) / n_ch
    cov = cov + SENSOR_NOISE_SHARE * bg_pow * np.eye(n_ch)
    if patch is not None and patch_ratio > 0:
        t = g[:, patch].sum(axis=1)
        t_pow = float(np.sum((p @ t) ** 2)) / n_ch
        cov = cov + (patch_ratio * bg_pow / t_pow) * np.outer(t, t)
    return cov


def simulate_people(
    setup: SimSetup,
    ages: np.ndarray,
    rng: np.random.Generator,
    *,
    kernels=(),
    n_epochs: int = N_EPOCHS,
    patches=None,
    ratios=None,
) -> list[np.ndarray]:
    """Per-source power maps of invented people through each kernel.

    Parameters
    ----------
    setup : SimSetup
        True-head gains (:func:`make_setup`).
    ages : ndarray, shape (n,)
        Ages, years.
    rng : numpy.random.Generator
        Draws each person's realisation, pattern and sampled cross-spectrum.
    kernels : sequence of ndarray (n_rows, n_ch)
        Operators to apply (e.g. the cortex-only and the full-space kernel).
    n_epochs : int
        Epochs averaged in each person's sampled cross-spectrum.
    patches : sequence of (ndarray of int or None), optional
        Focal excess per person.
    ratios : ndarray, shape (n,), optional
        Patch-to-background mean channel power ratio per person
        (:func:`person_covariance`'s ``patch_ratio``); default 0.

    Returns
    -------
    list of ndarray, one per kernel, shape (n, n_rows)
        Power per person and kernel row, from one sampled cross-spectrum per person (arbitrary
        unit).
    """
    n = len(ages)
    out = [np.empty((n, k.shape[0])) for k in kernels]
    real = rng.choice(setup.realisations, n)
    for i in range(n):
        cov = person_covariance(
            setup,
            rng,
            age=float(ages[i]),
            real=int(real[i]),
            patch=None if patches is None else patches[i],
            patch_ratio=0.0 if ratios is None else float(ratios[i]),
        )
        c = wishart_csd(cov, n_epochs, rng)
        for o, k in zip(out, kernels):
            o[i] = power_map(k, c)
    return out


# ----------------------------------------------------------------------------- features, model
def fit_logistic(
    x: np.ndarray, y: np.ndarray, *, ridge: float = 1e-3, max_iter: int = 50
) -> np.ndarray:
    """Maximum-likelihood logistic regression (Newton-Raphson / IRLS, tiny ridge on slopes).

    Parameters
    ----------
    x : ndarray, shape (n, k)
        Features, one row per observation (no intercept column).
    y : ndarray of {0, 1}, shape (n,)
        Outcomes.
    ridge : float
        L2 penalty on the slopes (not the intercept).
    max_iter : int
        Newton steps at most (stops earlier when every coefficient moves less than 1e-9).

    Returns
    -------
    ndarray, shape (k + 1,)
        Intercept first.
    """
    X = np.column_stack([np.ones(len(x)), x])
    b = np.zeros(X.shape[1])
    pen = np.full(X.shape[1], ridge)
    pen[0] = 0.0
    for _ in range(max_iter):
        eta = X @ b
        p = 0.5 * (1 + np.tanh(0.5 * eta))
        w = np.clip(p * (1 - p), 1e-9, None)
        grad = X.T @ (y - p) - pen * b
        hess = (X * w[:, None]).T @ X + np.diag(pen)
        step = np.linalg.solve(hess, grad)
        b = b + step
        if np.max(np.abs(step)) < 1e-9:
            break
    return b


def reliability(prob: np.ndarray, hit: np.ndarray, *, edges=(0.0, 0.2, 0.4, 0.6, 0.8, 1.0)):
    """Binned calibration: per bin of stated probability, count, mean stated, observed rate.

    Parameters
    ----------
    prob : ndarray, shape (n,)
        Stated probabilities, 0..1.
    hit : ndarray of {0, 1} or bool, shape (n,)
        Outcomes (named area is the true one).
    edges : sequence of float
        Bin edges; bins are ``[lo, hi)``, closed (``[lo, hi]``) when ``hi >= 1``.

    Returns
    -------
    list of dict
        ``lo, hi, n, stated, observed``.
    """
    prob, hit = np.asarray(prob), np.asarray(hit, dtype=float)
    out = []
    for lo, hi in zip(edges[:-1], edges[1:]):
        sel = (prob >= lo) & ((prob < hi) if hi < 1 else (prob <= hi))
        out.append(
            dict(
                lo=lo,
                hi=hi,
                n=int(sel.sum()),
                stated=float(prob[sel].mean()) if sel.any() else np.nan,
                observed=float(hit[sel].mean()) if sel.any() else np.nan,
            )
        )
    return out


# ----------------------------------------------------------------------------- simulation sets
def point_source_set(setup: SimSetup, n: int, rng: np.random.Generator, *, snr_range=(1.5, 10.0)):
    """Features and outcomes of ``n`` point-source power maps (SNR log-uniform in range).

    Parameters
    ----------
    setup : SimSetup
        True head and inverse side (:func:`make_setup`).
    n : int
        Number of maps; sources drawn uniformly from ``setup.space``.
    rng : numpy.random.Generator
        Draws sources, SNRs, jitter realisations and noise.
    snr_range : (float, float)
        Range of the amplitude SNR, drawn log-uniformly.

    Returns
    -------
    dict
        ``x`` (n, 5) features, ``hit`` (n,) named area is the true one, ``true``, ``named``,
        ``sources``.
    """
    sp = setup.space
    src = rng.integers(0, sp.n_src, n)
    snr = np.exp(rng.uniform(np.log(snr_range[0]), np.log(snr_range[1]), n))
    maps, _ = point_source_maps(setup, src, rng=rng, snr=snr)
    return _score_maps(setup, maps, sp.codes[src], src, "power")


def _score_maps(setup, maps, true, src, kind):
    """Name each map at its maximum as a candidate list does; features of the maps it shows.

    :func:`sourcelab.trust.naming.listed_naming`: named over all areas; a map whose named area
    is not resolvable (``setup.exclude``) is not shown by default, so it is left out of the
    returned features and outcomes (counted in ``n_left_out``; ``kept`` marks the others).
    """
    from ..trust.naming import listed_naming

    excl = tuple(int(c) for c in setup.exclude)
    x, named, kept = [], [], []
    for v in maps:
        peak = int(np.argmax(v))
        a, ev, shown = listed_naming(v, setup.space, peak, exclude=excl, kind=kind)
        kept.append(shown)
        if shown:
            named.append(a)
            x.append(area_features(v, setup.space, a, setup.own, peak=peak, evidence=ev))
    kept = np.asarray(kept, dtype=bool)
    named = np.asarray(named, dtype=np.int64)
    true, src = np.asarray(true)[kept], np.asarray(src)[kept]
    return {
        "x": np.asarray(x).reshape(len(named), len(FEATURES)),
        "hit": (named == true).astype(float),
        "true": true,
        "named": named,
        "sources": src,
        "kept": kept,
        "n_left_out": int((~kept).sum()),
    }


def deviation_set(
    setup: SimSetup,
    n: int,
    rng: np.random.Generator,
    *,
    n_controls: int = 80,
    ratio_range=(0.1, 1.0),
    radius_range=(10.0, 15.0),
):
    """Features and outcomes of ``n`` focal deviations z-scored against simulated norms.

    A cohort of ``n_controls`` invented adults (18-65 y) gives per-source norms (degree 1 in
    log age, robust rule); each deviating person gets a patch at a random source.

    Parameters
    ----------
    setup : SimSetup
        True head and inverse side (:func:`make_setup`).
    n : int
        Number of deviating people.
    rng : numpy.random.Generator
        Draws the cohort, the patches and every person's data.
    n_controls : int
        Invented reference people behind the per-source norms.
    ratio_range : (float, float)
        Range of the patch-to-background mean channel power ratio, drawn log-uniformly.
    radius_range : (float, float)
        Range of the patch radius, mm, drawn uniformly.

    Returns
    -------
    dict
        As :func:`point_source_set` (features of the excess maps ``max(z, 0)``), plus
        ``peak_z``, the highest excess z of each map (the maps themselves are not kept).
    """
    from ..norms.source_norms import fit_source_models
    from ..norms.predictive import predictive_t

    sp = setup.space
    ages = rng.uniform(18, 65, n_controls)
    (ctrl,) = simulate_people(setup, ages, rng, kernels=(sp.op.kernel,))
    coef, sd, n_kept, xtx = fit_source_models(ages, np.log10(ctrl), 1)
    centres = rng.integers(0, sp.n_src, n)
    radii = rng.uniform(*radius_range, n)
    ratios = np.exp(rng.uniform(np.log(ratio_range[0]), np.log(ratio_range[1]), n))
    ages_d = rng.uniform(18, 65, n)
    patches = [patch_sources(setup, c, r) for c, r in zip(centres, radii)]
    (dev,) = simulate_people(
        setup, ages_d, rng, kernels=(sp.op.kernel,), patches=patches, ratios=ratios
    )
    zs = []
    for i in range(n):
        x0 = np.array([1.0, np.log10(ages_d[i])])
        h = float(x0 @ xtx @ x0) * n_controls / n_kept
        mean = x0 @ coef
        z = predictive_t(np.log10(dev[i]), mean, sd, n=n_kept, degree=1, h0=h)["z_equivalent"]
        zs.append(np.clip(z, 0.0, None))  # the excess map a candidate list names
    out = _score_maps(setup, np.asarray(zs), sp.codes[centres], centres, "z")
    out["peak_z"] = np.array([z.max() for z in zs])[out["kept"]]
    return out


def fit_model(
    model, space, *, seed: int = 0, n_point: int = 3000, n_dev: int = 3000, sim_seed: int = 1
) -> dict:
    """Fit both coefficient sets on simulations (jitter realisations ``1..8`` of ``seed``).

    Parameters
    ----------
    model : HeadModel
        The template head model (electrodes, sources).
    space : CortexSpace
        Inverse side whose maps are named.
    seed : int
        Seed of the electrode jitter (:func:`sourcelab.simulate.mismatch.mismatch_forward`).
    n_point, n_dev : int
        Simulated point-source power maps (``"power"`` coefficients) and focal deviations
        (``"z"`` coefficients).
    sim_seed : int
        Seed of the simulations.

    Returns
    -------
    record : dict
        The content of ``localisation_probability.json``: ``format``, ``description``,
        ``features`` (:data:`~sourcelab.trust.probability.FEATURES`), ``coefficients``
        (``"power"`` and ``"z"``, intercept first) and ``fit`` (seeds, counts, hit rates,
        λ², number of sources, seconds taken).
    """
    setup = make_setup(model, space, seed=seed, realisations=range(1, 9))
    rng = np.random.default_rng(sim_seed)
    t0 = time.perf_counter()
    pts = point_source_set(setup, n_point, rng)
    dev = deviation_set(setup, n_dev, rng)
    coefs = {
        "power": fit_logistic(pts["x"], pts["hit"]).tolist(),
        "z": fit_logistic(dev["x"], dev["hit"]).tolist(),
    }
    return {
        "format": "sourcelab-localisation-probability 1",
        "description": "logistic model of P(generator in the named area) from features of the "
        "named area (the area of highest evidence around the map's peak over all areas, "
        "sourcelab.trust.naming.listed_naming; maps a candidate list does not show left out); "
        "fitted on simulations under model mismatch "
        "(3-shell sphere true head, 10 mm RMS tangential electrode jitter, noise); see "
        "sourcelab/trust/probability.py and sourcelab/simulate/localisation.py",
        "features": list(FEATURES),
        "coefficients": coefs,
        "fit": {
            "mismatch_seed": seed,
            "realisations": [1, 8],
            "sim_seed": sim_seed,
            "n_point": n_point,
            "n_deviation": n_dev,
            "n_point_left_out": pts["n_left_out"],
            "n_deviation_left_out": dev["n_left_out"],
            "hit_rate_point": float(pts["hit"].mean()),
            "hit_rate_deviation": float(dev["hit"].mean()),
            "naming": "sourcelab.trust.naming.listed_naming (named over all areas; maps whose "
            "named area is not resolvable are not shown and left out of the fit; power: point "
            "templates, z: patch templates)",
            "lambda2": space.op.lambda2,
            "n_src": int(space.n_src),
            "seconds": round(time.perf_counter() - t0, 1),
        },
    }


def main(argv=None) -> int:
    """``python -m sourcelab.simulate.localisation --out PATH``: refit the shipped coefficients.

    Parameters
    ----------
    argv : list of str or None
        Arguments (``--out PATH``, ``--n`` simulations per map kind); None: ``sys.argv[1:]``.

    Returns
    -------
    code : int
        Exit code 0; the coefficients are written atomically to ``--out`` and the fit summary
        printed.
    """
    p = argparse.ArgumentParser(prog="python -m sourcelab.simulate.localisation")
    p.add_argument("--out", required=True)
    p.add_argument("--n", type=int, default=3000, help="simulations per map kind")
    args = p.parse_args(argv)
    from ..headmodel import load_head_model
    from ..provenance import atomic_write_text
    from ..trust.cortex import cortex_space

    res = fit_model(load_head_model(), cortex_space(), n_point=args.n, n_dev=args.n)
    atomic_write_text(Path(args.out), json.dumps(res, indent=2) + "\n")
    print(json.dumps(res["fit"], indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
