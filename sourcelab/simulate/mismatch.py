"""An independent "true head" for simulations: MNE's analytic 3-shell sphere, jittered electrodes.

Localisation claims made with the template BEM must be checked with data the BEM did not make,
otherwise model error is invisible (sLORETA has zero error on its own forward; Pascual-Marqui
2002).  This module builds a forward model that differs from sourcelab's in every way a real
head does, and that is evaluated by a different code path:

* **geometry**: concentric spheres instead of the fsaverage BEM meshes.  The centre is MNE's
  least-squares sphere fit to the 19 fsaverage-fitted electrode positions
  (:func:`mne.bem.fit_sphere_to_headshape`, ``dig_kinds=("eeg",)``).  The innermost (brain)
  radius is the largest source distance from that centre plus :data:`BRAIN_MARGIN_MM` (every
  cortical source must lie inside it: MNE silently gives zero gain to sources outside), the skull
  and scalp are :data:`SKULL_MM` and :data:`SCALP_MM` thick (about the BEM's nominal 6 mm skull;
  common practice);
* **conductivities** (0.33, 0.0042, 0.33) S/m, brain : skull = 80 (Rush & Driscoll 1968, Anesth
  Analg 47:717-723, from memory), against the BEM's (0.3, 0.006, 0.3) (ratio 50): the skull ratio
  is the least certain number of EEG forward modelling (published ratios 15-80; Oostendorp et al.
  2000, IEEE Trans Biomed Eng 47:1487-1492, from memory);
* **electrodes** projected radially onto the outer sphere (MNE's Berg-Scherg sphere formulas
  assume field points on the outer surface), then displaced tangentially at random by
  :func:`jitter_tangential` (RMS :data:`JITTER_MM` = 10 mm: cap placement and template-head
  mismatch; the issue's figure);
* **solver**: :func:`mne.make_forward_solution` with the sphere conductor (Berg & Scherg 1994
  equivalent dipoles) at the same fsaverage5 source positions and surface normals as the
  shipped head model (a discrete source space in the head frame, identity transform).

Every jitter realisation is one set of 19 electrodes; all realisations are computed in one
forward call (19 x ``n_jitter`` channels).  The result is cached outside the repository
(``~/.cache/sourcelab-bench`` or ``SOURCELAB_BENCH_CACHE``), keyed by everything it depends on.

References
----------
Berg P, Scherg M (1994).  A fast method for forward computation of multiple-shell spherical head
models.  Electroencephalogr Clin Neurophysiol 90:58-64 (from memory).
Mosher JC, Leahy RM, Lewis PS (1999).  EEG and MEG: forward solutions for inverse methods.  IEEE
Trans Biomed Eng 46:245-259.
Pascual-Marqui RD (2002).  Methods Find Exp Clin Pharmacol 24 Suppl D:5-12.
"""

from __future__ import annotations

import functools
import hashlib
import json
import logging
import os
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..spectra import average_reference_projector

log = logging.getLogger("sourcelab")

#: Margin between the outermost source and the brain sphere, mm.
BRAIN_MARGIN_MM = 2.0
#: Skull and scalp shell thickness, mm.
SKULL_MM = 6.0
SCALP_MM = 6.0
#: Brain, skull, scalp conductivities of the true head, S/m (see module docstring).
SPHERE_SIGMAS = (0.33, 0.0042, 0.33)
#: RMS tangential electrode displacement, mm.
JITTER_MM = 10.0
#: Cache file format (bump when the arrays or their meaning change).
_CACHE_FORMAT = 1


@dataclass(frozen=True, eq=False)
class MismatchForward:
    """Fixed-orientation gains of the true head, one per electrode-jitter realisation.

    Attributes
    ----------
    gain : ndarray, shape (n_real, n_ch, n_src)
        V/(A·m), surface-normal sources, not re-referenced.  Realisation 0 has no jitter
        (electrodes only projected onto the sphere); the others are jittered.
    ch_pos : ndarray, shape (n_real, n_ch, 3)
        Electrode positions used, metres, head frame.
    sources : ndarray of int, shape (n_src,)
        Template source index (0..20,483) of each gain column.
    r0 : ndarray, shape (3,)
        Sphere centre, metres, head frame.
    radii : ndarray, shape (3,)
        Brain, skull, scalp outer radii, metres.
    sigmas : tuple of float
        S/m.
    jitter_mm : float
        RMS tangential displacement of realisations 1.. .
    seed : int
    """

    gain: np.ndarray
    ch_pos: np.ndarray
    sources: np.ndarray
    r0: np.ndarray
    radii: np.ndarray
    sigmas: tuple
    jitter_mm: float
    seed: int

    @property
    def n_real(self) -> int:
        return self.gain.shape[0]

    def restrict(self, sources: np.ndarray) -> "MismatchForward":
        """The same model on a subset of template sources (e.g. cortex only).

        Parameters
        ----------
        sources : array of int
            Template source indices, each present in ``self.sources``.

        Returns
        -------
        forward : MismatchForward
            Gains of those sources, shape (n_real, n_ch, len(sources)), in the order given;
            everything else unchanged.

        Raises
        ------
        sourcelab.errors.InputError
            When a source is not in this forward.
        """
        sources = np.asarray(sources, dtype=np.int64)
        pos = np.full(int(max(self.sources.max(), sources.max())) + 1, -1)
        pos[self.sources] = np.arange(self.sources.size)
        cols = pos[sources]
        if (cols < 0).any():
            raise InputError("sources: some are not in this mismatch forward")
        return replace(self, gain=self.gain[:, :, cols], sources=sources)


# ----------------------------------------------------------------------------- pure geometry
def sphere_radii(
    src_pos: np.ndarray,
    r0: np.ndarray,
    *,
    margin_mm: float = BRAIN_MARGIN_MM,
    skull_mm: float = SKULL_MM,
    scalp_mm: float = SCALP_MM,
) -> np.ndarray:
    """Outer radii (brain, skull, scalp) of the shells, metres, so every source is inside.

    Parameters
    ----------
    src_pos : ndarray, shape (n_src, 3)
        Source positions, metres.
    r0 : ndarray, shape (3,)
        Sphere centre, metres.
    margin_mm : float
        Gap between the outermost source and the brain sphere, mm.
    skull_mm, scalp_mm : float
        Shell thicknesses, mm.

    Returns
    -------
    ndarray, shape (3,)
        Brain, skull and scalp outer radii, metres.
    """
    r_brain = float(np.linalg.norm(np.asarray(src_pos) - r0, axis=1).max()) + margin_mm * 1e-3
    return np.array([r_brain, r_brain + skull_mm * 1e-3, r_brain + (skull_mm + scalp_mm) * 1e-3])


def project_to_sphere(pos: np.ndarray, r0: np.ndarray, radius: float) -> np.ndarray:
    """Move points radially (from ``r0``) onto the sphere of ``radius``; shapes (..., 3).

    Parameters
    ----------
    pos : ndarray, shape (..., 3)
        Points, metres (none at ``r0``).
    r0 : ndarray, shape (3,)
        Sphere centre, metres.
    radius : float
        Sphere radius, metres.

    Returns
    -------
    ndarray, shape (..., 3)
        The points on the sphere, metres.
    """
    d = np.asarray(pos, dtype=float) - r0
    return r0 + d * (radius / np.linalg.norm(d, axis=-1, keepdims=True))


def jitter_tangential(
    pos: np.ndarray, r0: np.ndarray, radius: float, *, rms_mm: float, rng: np.random.Generator
) -> np.ndarray:
    """Displace points on a sphere along great circles, in random tangential directions.

    The displacement (arc length) is a 2-D isotropic Gaussian in the tangent plane with total RMS
    ``rms_mm`` (per-axis SD ``rms_mm / sqrt(2)``), so the distance moved is Rayleigh distributed
    (mean 0.886 x RMS).

    Parameters
    ----------
    pos : ndarray, shape (n, 3)
        Points on the sphere, metres.
    r0 : ndarray, shape (3,)
        Sphere centre, metres.
    radius : float
        Metres.
    rms_mm : float
        Total RMS of the displacement (arc length), mm.
    rng : numpy Generator
        Draws the displacements.

    Returns
    -------
    ndarray, shape (n, 3)
        Displaced points, exactly on the sphere.
    """
    u = (np.asarray(pos, float) - r0) / radius
    u /= np.linalg.norm(u, axis=1, keepdims=True)
    # orthonormal tangent basis per point
    ref = np.where(np.abs(u[:, 2:3]) < 0.9, [[0.0, 0.0, 1.0]], [[1.0, 0.0, 0.0]])
    e1 = np.cross(u, ref)
    e1 /= np.linalg.norm(e1, axis=1, keepdims=True)
    e2 = np.cross(u, e1)
    step = rng.standard_normal((len(u), 2)) * (rms_mm * 1e-3 / np.sqrt(2.0))
    arc = np.linalg.norm(step, axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        t = np.where(arc[:, None] > 0, (step[:, :1] * e1 + step[:, 1:] * e2) / arc[:, None], 0)
    ang = arc / radius
    v = u * np.cos(ang)[:, None] + t * np.sin(ang)[:, None]
    return r0 + radius * v


# ----------------------------------------------------------------------------- MNE forward
def fit_sphere_centre(ch_pos: np.ndarray, ch_names) -> np.ndarray:
    """MNE's least-squares sphere fit to electrode positions (head frame), centre in metres.

    Parameters
    ----------
    ch_pos : ndarray, shape (n_ch, 3)
        Electrode positions, metres, head frame.
    ch_names : sequence of str
        Channel names, one per row of ``ch_pos``.

    Returns
    -------
    r0 : ndarray, shape (3,)
        Sphere centre, metres, head frame (:func:`mne.bem.fit_sphere_to_headshape` with
        ``dig_kinds=("eeg",)``).
    """
    import mne

    from ..headmodel.sites import positions_info

    info = positions_info(ch_names, ch_pos)
    _, origin, _ = mne.bem.fit_sphere_to_headshape(
        info, dig_kinds=("eeg",), units="m", verbose="error"
    )
    return np.asarray(origin, dtype=float)


def sphere_gain(
    ch_pos_sets: np.ndarray,
    src_pos: np.ndarray,
    src_nn: np.ndarray,
    *,
    r0: np.ndarray,
    radii: np.ndarray,
    sigmas=SPHERE_SIGMAS,
    chunk: int = 4096,
) -> np.ndarray:
    """Fixed-orientation EEG gain of a 3-shell sphere by :func:`mne.make_forward_solution`.

    Parameters
    ----------
    ch_pos_sets : ndarray, shape (n_sets, n_ch, 3)
        Electrode positions (metres, head frame), one set per realisation; they should lie on
        the outer sphere.
    src_pos, src_nn : ndarray, shape (n_src, 3)
        Source positions (metres, head frame) and unit normals.
    r0 : ndarray, shape (3,)
        Sphere centre, metres, head frame.
    radii : ndarray, shape (3,)
        Brain, skull, scalp radii, metres.
    sigmas : tuple of 3 float
        S/m.
    chunk : int
        Sources per forward call (bounds memory).

    Returns
    -------
    ndarray, shape (n_sets, n_ch, n_src)
        V/(A·m), not re-referenced.
    """
    import mne

    from ..headmodel.mne_bridge import eeg_forward
    from ..headmodel.model import fixed_gain
    from ..headmodel.sites import positions_info

    ch_pos_sets = np.asarray(ch_pos_sets, dtype=float)
    n_sets, n_ch, _ = ch_pos_sets.shape
    names = [f"e{s:03d}_{c:02d}" for s in range(n_sets) for c in range(n_ch)]
    info = positions_info(names, ch_pos_sets.reshape(-1, 3))
    radii = np.asarray(radii, dtype=float)
    sphere = mne.make_sphere_model(
        r0=tuple(r0),
        head_radius=float(radii[-1]),
        relative_radii=tuple(radii / radii[-1]),
        sigmas=tuple(sigmas),
        verbose="error",
    )
    trans = mne.transforms.Transform("head", "mri")  # identity: sources given in head frame
    src_pos = np.asarray(src_pos, dtype=float)
    src_nn = np.asarray(src_nn, dtype=float)
    if np.linalg.norm(src_pos - r0, axis=1).max() >= radii[0]:
        raise InputError("sources: some lie outside the brain sphere (they would get no gain)")
    out = np.empty((n_sets * n_ch, src_pos.shape[0]))
    for start in range(0, src_pos.shape[0], chunk):
        sl = slice(start, min(start + chunk, src_pos.shape[0]))
        src = mne.setup_volume_source_space(
            pos={"rr": src_pos[sl], "nn": src_nn[sl]}, mindist=0.0, verbose="error"
        )
        fwd = eeg_forward(info, src=src, bem=sphere, trans=trans)
        if fwd["nsource"] != sl.stop - sl.start:
            raise RuntimeError("sphere forward dropped sources")
        out[:, sl] = fixed_gain(fwd["sol"]["data"], src_nn[sl])
    return out.reshape(n_sets, n_ch, -1)


def cache_dir() -> Path:
    """Folder for cached simulation inputs (outside the repository).

    Returns
    -------
    folder : pathlib.Path
        ``SOURCELAB_BENCH_CACHE`` when set, else ``~/.cache/sourcelab-bench``; not created
        here.
    """
    env = os.environ.get("SOURCELAB_BENCH_CACHE")
    return Path(env) if env else Path.home() / ".cache" / "sourcelab-bench"


def mismatch_forward(
    model,
    *,
    sources: np.ndarray | None = None,
    n_jitter: int = 16,
    jitter_mm: float = JITTER_MM,
    seed: int = 0,
    use_cache: bool = True,
) -> MismatchForward:
    """The true-head forward model for ``model``'s sources (see the module docstring).

    Parameters
    ----------
    model : HeadModel
        Supplies electrode positions, source positions and normals (head frame).
    sources : array of int, optional
        Template sources to include (default all).
    n_jitter : int
        Jittered electrode realisations in addition to the unjittered one.
    jitter_mm : float
        RMS tangential electrode displacement, mm.
    seed : int
        Seed of the jitter.
    use_cache : bool
        Read/write ``cache_dir()/mismatch-<key>.npz``.

    Returns
    -------
    MismatchForward
        ``n_real = n_jitter + 1`` realisations.
    """
    import mne

    src_idx = np.arange(model.n_src) if sources is None else np.asarray(sources, dtype=np.int64)
    r0 = fit_sphere_centre(model.ch_pos, model.ch_names)
    # radii from *all* template sources, so a subset gets the same conductor
    radii = sphere_radii(model.src_pos, r0)
    key = json.dumps(
        {
            "format": _CACHE_FORMAT,
            "headmodel": model.sha256,
            "n_jitter": n_jitter,
            "jitter_mm": jitter_mm,
            "seed": seed,
            "sigmas": SPHERE_SIGMAS,
            "radii": np.round(radii, 9).tolist(),
            "mne": mne.__version__,
            "sources": hashlib.sha256(src_idx.tobytes()).hexdigest(),
        },
        sort_keys=True,
    )
    path = cache_dir() / f"mismatch-{hashlib.sha256(key.encode()).hexdigest()[:16]}.npz"
    # everything but the gains and electrode positions is known before they are read or computed
    made = functools.partial(
        MismatchForward,
        sources=src_idx,
        r0=r0,
        radii=radii,
        sigmas=SPHERE_SIGMAS,
        jitter_mm=jitter_mm,
        seed=seed,
    )
    if use_cache and path.is_file():
        with np.load(path, allow_pickle=False) as z:
            if str(z["key"]) == key:
                return made(gain=z["gain"].astype(np.float64), ch_pos=z["ch_pos"])
    rng = np.random.default_rng(seed)
    on = project_to_sphere(model.ch_pos, r0, radii[-1])
    sets = [on] + [
        jitter_tangential(on, r0, radii[-1], rms_mm=jitter_mm, rng=rng) for _ in range(n_jitter)
    ]
    ch_pos = np.stack(sets)
    log.info(
        "mismatch forward: sphere r0 %s mm, radii %s mm, %d realisations x %d sources",
        np.round(r0 * 1e3, 1),
        np.round(radii * 1e3, 1),
        len(sets),
        src_idx.size,
    )
    gain = sphere_gain(ch_pos, model.src_pos[src_idx], model.src_nn[src_idx], r0=r0, radii=radii)
    if use_cache:
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp.npz")
        np.savez(tmp, gain=gain.astype(np.float32), ch_pos=ch_pos, key=np.array(key))
        os.replace(tmp, path)
    return made(gain=gain, ch_pos=ch_pos)


# ----------------------------------------------------------------------------- sensor data
def noisy_csd(
    topographies: np.ndarray,
    *,
    snr: float,
    n_epochs: int,
    rng: np.random.Generator,
    background: np.ndarray | None = None,
    background_share: float = 0.5,
) -> np.ndarray:
    """Sample band cross-spectra of point sources plus brain background and sensor noise.

    The signal of item ``k`` is one source with topography ``topographies[:, k]`` (unit source
    variance).  Noise is a mix of spatially white sensor noise and "brain background" with
    covariance ``background`` (e.g. ``G Gᵀ`` of all cortical sources: uncorrelated cortical
    activity), scaled so that, after the average reference, the signal's mean channel power is
    ``snr**2`` times the noise's (``snr`` an amplitude ratio).  Each epoch draws independent
    complex Gaussian Fourier coefficients (signal and noise), so the cross-spectrum averaged
    over ``n_epochs`` has the sampling error of a real recording of that many epochs.

    Parameters
    ----------
    topographies : ndarray, shape (n_ch, n_items)
        Gains of the simulated sources (any reference; the average reference is applied).
    snr : float
        Amplitude signal-to-noise ratio over the channels.
    n_epochs : int
        Epochs (independent spectral estimates) averaged.
    rng : numpy Generator
        Draws the Fourier coefficients of signal and noise.
    background : ndarray, shape (n_ch, n_ch), optional
        Brain-noise covariance; default: white noise only.
    background_share : float
        Fraction of the noise power that is brain background (0..1).

    Returns
    -------
    ndarray, shape (n_items, n_ch, n_ch)
        Real, average-referenced cross-spectra (arbitrary unit).
    """
    g = np.asarray(topographies, dtype=float)
    n_ch, n = g.shape
    p = average_reference_projector(n_ch)
    g = p @ g
    sig_pow = (g**2).mean(axis=0)  # (n,)
    noise = np.eye(n_ch)
    if background is not None:
        b = p @ background @ p
        b = b / np.trace(b) * n_ch
        noise = (1 - background_share) * p + background_share * b
    else:
        noise = p
    noise = noise / (np.trace(noise) / n_ch)
    ev, evec = np.linalg.eigh(noise)
    l_noise = evec * np.sqrt(np.clip(ev, 0, None))  # (n_ch, n_ch)
    out = np.empty((n, n_ch, n_ch))
    for k in range(n):
        s = rng.standard_normal(n_epochs) + 1j * rng.standard_normal(n_epochs)
        x = np.outer(g[:, k], s) * (snr / np.sqrt(sig_pow[k]))
        w = rng.standard_normal((n_ch, n_epochs)) + 1j * rng.standard_normal((n_ch, n_epochs))
        x = x + l_noise @ w
        out[k] = (x @ x.conj().T).real / (2.0 * n_epochs)
    return out
