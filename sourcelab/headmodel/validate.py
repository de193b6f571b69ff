"""Accuracy checks of the head-model BEM path against MNE's analytic multi-shell sphere.

The same function that builds the head BEM (:func:`~sourcelab.headmodel.build.
bem_solution_from_layers`) is run on concentric spherical meshes; its EEG leadfield is compared
with :func:`mne.make_sphere_model` (Berg & Scherg's fast approximation of the 3-shell series)
through the relative difference measure (RDM) and magnitude ratio (MAG).

References
----------
Mosher JC, Leahy RM, Lewis PS (1999). EEG and MEG: forward solutions for inverse methods.
IEEE Trans Biomed Eng 46:245-259.
Berg P, Scherg M (1994). A fast method for forward computation of multiple-shell spherical head
models. Electroencephalogr Clin Neurophysiol 90:58-64.
"""

from __future__ import annotations

import tempfile

import mne
import numpy as np

from .build import CONDUCTIVITY, bem_solution_from_layers
from .mne_bridge import eeg_forward
from .sites import positions_info


def rdm_mag(test: np.ndarray, ref: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Relative difference measure and magnitude ratio, column by column.

    Parameters
    ----------
    test, ref : ndarray, shape (n_ch, n_col)
        Leadfields (one column per dipole component).

    Returns
    -------
    rdm : ndarray, shape (n_col,)
        ``|| t/|t| - r/|r| ||``, 0 for identical topographies, at most 2.
    mag : ndarray, shape (n_col,)
        ``|t| / |r|``, 1 for identical magnitudes.

    References
    ----------
    Mosher JC, Leahy RM, Lewis PS (1999). IEEE Trans Biomed Eng 46:245-259.
    """
    test = np.asarray(test, float)
    ref = np.asarray(ref, float)
    if test.shape != ref.shape or test.ndim != 2:
        raise ValueError(f"test and ref must be equal 2-D shapes, got {test.shape}, {ref.shape}")
    nt = np.linalg.norm(test, axis=0)
    nr = np.linalg.norm(ref, axis=0)
    rdm = np.linalg.norm(test / nt - ref / nr, axis=0)
    return rdm, nt / nr


def sphere_leadfields(
    *,
    ico: int = 3,
    radii_mm=(90.0, 96.0, 102.0),
    src_radius_mm=(10.0, 80.0),
    n_src: int = 200,
    n_el: int = 64,
    seed: int = 0,
    conductivity=CONDUCTIVITY,
) -> dict:
    """EEG leadfields of the BEM path on concentric sphere meshes and of MNE's analytic sphere.

    Electrodes lie exactly on the outer sphere (upper cap, z >= -0.25 R); sources are random
    points with radii uniform in ``src_radius_mm``; both leadfields are average-referenced.

    Parameters
    ----------
    ico : int
        Icosahedral subdivision of each spherical mesh (3: 642 vertices, 4: 2,562).
    radii_mm : tuple of 3 float
        Inner skull, outer skull, scalp radii, mm.
    src_radius_mm : (float, float)
        Range of source distances from the centre, mm.
    n_src, n_el : int
    seed : int
    conductivity : tuple of 3 float
        S/m.

    Returns
    -------
    out : dict
        ``bem``, ``sphere`` : ndarray (n_el, 3 n_src); ``src_r_mm`` : ndarray (n_src,).
    """
    from mne.surface import _get_ico_surface  # private but pinned (mne < 1.14)

    rng = np.random.default_rng(seed)
    radii = np.asarray(radii_mm, float) * 1e-3
    ico_surf = _get_ico_surface(ico)
    layers = [ico_surf["rr"] * r for r in radii]
    # electrodes: a Fibonacci spiral on the outer sphere's upper cap
    k = np.arange(n_el) + 0.5
    z = 1.0 - k / n_el * 1.25
    phi = np.pi * (1 + 5**0.5) * k
    el = np.c_[np.sqrt(1 - z**2) * np.cos(phi), np.sqrt(1 - z**2) * np.sin(phi), z] * radii[2]
    names = [f"E{i:03d}" for i in range(n_el)]
    info = positions_info(names, el)
    # sources
    d = rng.standard_normal((n_src, 3))
    d /= np.linalg.norm(d, axis=1, keepdims=True)
    r = rng.uniform(*np.asarray(src_radius_mm) * 1e-3, size=n_src)
    pos = {"rr": d * r[:, None], "nn": d}
    src = mne.setup_volume_source_space(pos=pos, verbose="error")
    sphere = mne.make_sphere_model(
        r0=(0.0, 0.0, 0.0),
        head_radius=radii[2],
        relative_radii=tuple(radii / radii[2]),
        sigmas=tuple(conductivity),
        verbose="error",
    )
    with tempfile.TemporaryDirectory(prefix="sourcelab-sph-") as subjects_dir:
        bem = bem_solution_from_layers(
            layers,
            ico_surf["tris"],
            subjects_dir=subjects_dir,
            subject="sphere",
            conductivity=conductivity,
        )
    out = {}
    for key, cond in (("bem", bem), ("sphere", sphere)):
        fwd = eeg_forward(info, src=src, bem=cond)
        if fwd["nsource"] != n_src:
            raise RuntimeError(f"{key} forward dropped sources")
        g = fwd["sol"]["data"]
        out[key] = g - g.mean(axis=0, keepdims=True)
    out["src_r_mm"] = r * 1e3
    return out
