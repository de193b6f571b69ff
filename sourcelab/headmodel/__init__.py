"""The fsaverage5 template EEG head model (3-layer BEM, 19 10-20 sites), shipped and rebuildable.

* :func:`load_head_model` -- the shipped leadfield as a :class:`HeadModel` (cached, hash-checked);
* :func:`make_info` -- ``mne.Info`` for the 19 sites with MNE's fsaverage-fitted montage;
* :func:`to_mne_forward` -- an ``mne.Forward`` carrying exactly the shipped gain;
* :func:`build_head_model` -- rebuild the file offline from installed packages
  (``python -m sourcelab.headmodel.build --out PATH``).

The gain is stored without re-referencing; the inverse applies the average-reference projector.
"""

from .build import build_head_model
from .load import load_head_model, shipped_path
from .mne_bridge import to_mne_forward
from .model import HeadModel
from .sites import fsaverage_montage, make_info

__all__ = [
    "HeadModel",
    "build_head_model",
    "fsaverage_montage",
    "load_head_model",
    "make_info",
    "shipped_path",
    "to_mne_forward",
]
