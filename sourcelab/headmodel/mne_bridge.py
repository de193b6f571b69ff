"""MNE objects carrying exactly the shipped leadfield (for MNE's inverse and simulation tools).

Also the one call of MNE's forward solver (:func:`eeg_forward`) that the head-model build, its
validation, this bridge and the simulations' independent sphere head share.
"""

from __future__ import annotations

import functools
import tempfile

import mne
import numpy as np

from ..errors import InputError
from .ingredients import fsaverage5_source_space, read_trans, write_fsaverage5_subject
from .model import HeadModel
from .sites import make_info

#: Largest allowed distance (m) between the model's and the rebuilt source-space positions.
_POS_TOL_M = 1e-6


def eeg_forward(info: mne.Info, *, src, bem, trans=None) -> mne.Forward:
    """EEG-only forward solution keeping every source, on one job, with MNE's messages off.

    Parameters
    ----------
    info : mne.Info
        EEG channels with positions (head frame).
    src : mne.SourceSpaces
        Source space (surface in MRI frame, or discrete positions in the head frame with
        ``trans=None``).
    bem : mne.bem.ConductorModel | str
        BEM solution or sphere model.
    trans : mne.transforms.Transform | None
        Head -> MRI transform; None for the identity.

    Returns
    -------
    mne.Forward
        Free-orientation forward; ``fwd["sol"]["data"]`` has shape ``(n_eeg, 3 * n_src)``,
        V/(A·m), not re-referenced.  ``mindist=0``: no source is dropped for lying near the
        inner skull.
    """
    return mne.make_forward_solution(
        info,
        trans=trans,
        src=src,
        bem=bem,
        eeg=True,
        meg=False,
        mindist=0.0,
        n_jobs=1,
        verbose="error",
    )


def to_mne_forward(model: HeadModel, info: mne.Info | None = None) -> mne.Forward:
    """An ``mne.Forward`` whose gain is exactly ``model.gain``.

    The structure (a two-hemisphere fsaverage5 surface source space whose ``vertno`` are the
    model's cortical vertices, head-frame positions and normals, free orientation,
    ``surf_ori=False``) is built by :func:`mne.make_forward_solution` with a placeholder sphere
    conductor; the computed gain is then replaced by the shipped one.
    ``mne.minimum_norm.make_inverse_operator``, ``apply_inverse_cov`` and ``compute_source_psd``
    therefore run on sourcelab's leadfield.
    Built once per model (about 2 s) and copied on later calls.

    Parameters
    ----------
    model : HeadModel
    info : mne.Info, optional
        Measurement info whose EEG channels select and order the forward's rows (all must be
        model sites).  Default: :func:`make_info` (all 19 sites).  Projectors are not copied
        into the forward: pass the info with its average-reference projector to the inverse.

    Returns
    -------
    fwd : mne.Forward
        Free-orientation forward in head coordinates; ``fwd["sol"]["data"]`` has shape
        ``(n_eeg, 3 * model.n_src)``, not re-referenced.
    """
    if not isinstance(model, HeadModel):
        raise TypeError(f"model must be a HeadModel, got {type(model).__name__}")
    fwd = _template_forward(model).copy()
    if info is None:
        return fwd
    if not isinstance(info, mne.Info):
        raise TypeError(f"info must be an mne.Info or None, got {type(info).__name__}")
    names = [info["ch_names"][i] for i in mne.pick_types(info, eeg=True, exclude=())]
    unknown = [n for n in names if n not in model.ch_names]
    if unknown or not names:
        raise InputError(
            f"info EEG channels {unknown or names} are not head-model sites; "
            f"allowed: {', '.join(model.ch_names)}"
        )
    return mne.pick_channels_forward(fwd, include=names, ordered=True, verbose="error")


@functools.lru_cache(maxsize=2)
def _template_forward(model: HeadModel) -> mne.Forward:
    info = make_info(250.0)
    if tuple(info["ch_names"]) != model.ch_names:
        raise RuntimeError("make_info channels differ from the head model's")
    with tempfile.TemporaryDirectory(prefix="sourcelab-fwd-") as subjects_dir:
        write_fsaverage5_subject(subjects_dir)
        src = fsaverage5_source_space(subjects_dir, vertno=model.vertno)
    # Placeholder conductor: a sphere large enough to contain every source; its gain is discarded.
    sphere = mne.make_sphere_model(r0=(0.0, 0.0, 0.0), head_radius=0.5, verbose="error")
    fwd = eeg_forward(info, src=src, bem=sphere, trans=read_trans())
    if fwd["nsource"] != model.n_src or fwd["sol"]["data"].shape != model.gain.shape:
        raise RuntimeError("MNE forward structure does not match the head model")
    rr = np.concatenate([s["rr"][s["vertno"]] for s in fwd["src"]])
    nn = np.concatenate([s["nn"][s["vertno"]] for s in fwd["src"]])
    if np.abs(rr - model.src_pos).max() > _POS_TOL_M or np.abs(nn - model.src_nn).max() > 1e-6:
        raise RuntimeError("MNE source space positions/normals differ from the head model's")
    gain = np.array(model.gain, dtype=np.float64)  # writable copy
    fwd["sol"]["data"] = gain
    fwd["_orig_sol"] = gain.copy()
    return fwd
