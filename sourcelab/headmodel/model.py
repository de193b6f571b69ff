"""The template head model: a frozen dataclass around the shipped fsaverage5 leadfield.

Contract (shared by the inverse, simulation, atlases and figures):

* sources are the 20,484 fsaverage5 cortical vertices, left hemisphere first
  (source ``i`` < 10,242 is left-hemisphere vertex ``i``; source ``10,242 + v`` is right vertex ``v``);
* ``gain`` is the free-orientation leadfield, **not** re-referenced (the inverse applies the
  average-reference projector), in V per A·m, three columns (x, y, z) per source, expressed in the
  same frame as ``src_nn``;
* ``src_mni`` are the white-surface vertex positions in fsaverage surface RAS (MNI305), millimetres.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True, eq=False)
class HeadModel:
    """Template EEG head model for the 19 10-20 sites.

    Attributes
    ----------
    ch_names : tuple of str, length n_ch
        Electrode names in :data:`sourcelab.config.SITES_1020` order.
    ch_pos : ndarray, shape (n_ch, 3)
        Electrode positions, metres, in the frame of ``gain``.
    gain : ndarray, shape (n_ch, 3 * n_src)
        Free-orientation leadfield, V/(A·m), columns ``3*i + (0, 1, 2)`` for source ``i``.
    src_pos : ndarray, shape (n_src, 3)
        Source positions, metres, in the frame of ``gain``.
    src_nn : ndarray, shape (n_src, 3)
        Unit outward surface normals, same frame.
    src_mni : ndarray, shape (n_src, 3)
        Source positions in fsaverage surface RAS (MNI305), millimetres.
    n_left : int
        Number of left-hemisphere sources (10,242 for fsaverage5).
    sha256 : str
        sha256 of the shipped leadfield file; part of every pipeline fingerprint.
    meta : dict
        Build metadata (conductivities, mesh sizes, software versions).
    """

    ch_names: tuple[str, ...]
    ch_pos: np.ndarray
    gain: np.ndarray
    src_pos: np.ndarray
    src_nn: np.ndarray
    src_mni: np.ndarray
    n_left: int
    sha256: str
    meta: dict = field(default_factory=dict)

    @property
    def n_src(self) -> int:
        return self.src_pos.shape[0]

    @property
    def gain_fixed(self) -> np.ndarray:
        """Leadfield for surface-normal sources, shape (n_ch, n_src)."""
        g = self.gain.reshape(len(self.ch_names), self.n_src, 3)
        return np.einsum("csk,sk->cs", g, self.src_nn)
