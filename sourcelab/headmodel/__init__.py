"""The fsaverage5 template EEG head model (3-layer BEM, 19 10-20 sites, cortical sources).

* :func:`load_head_model` -- the shipped leadfield and meshes as a :class:`HeadModel` (cached,
  hash-checked);
* :func:`make_info` -- ``mne.Info`` for the 19 sites with MNE's fsaverage-fitted montage;
* :func:`to_mne_forward` -- an ``mne.Forward`` carrying exactly the shipped gain
  (:mod:`.mne_bridge`);
* :func:`build_head_model` -- rebuild the file offline from installed packages
  (``python -m sourcelab.headmodel.build``; :mod:`.build`).

The gain is stored without re-referencing; the inverse applies the average-reference projector.
"""

from .load import load_head_model, shipped_path
from .model import HeadModel, TemplateSurface, fixed_gain
from .sites import fsaverage_montage, make_info

__all__ = [
    "HeadModel",
    "TemplateSurface",
    "build_head_model",
    "fixed_gain",
    "fsaverage_montage",
    "load_head_model",
    "make_info",
    "shipped_path",
    "to_mne_forward",
]


def __getattr__(name):  # the MNE-heavy parts are imported only when used
    if name == "to_mne_forward":
        from .mne_bridge import to_mne_forward

        return to_mne_forward
    if name == "build_head_model":
        from .build import build_head_model

        return build_head_model
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
