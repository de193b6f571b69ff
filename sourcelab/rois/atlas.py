"""Atlases as collections of ROIs over the 20,484 template sources (contract; see DEVELOPERS.md)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True, eq=False)
class ROI:
    """One region of interest on the template source space.

    Attributes
    ----------
    name : str
        e.g. ``"BA17"``, ``"default-mode"``, ``"occipital"``.
    hemisphere : {"left", "right", "both"}
    vertices : ndarray of int
        Indices into the 20,484-source vector (left hemisphere first), sorted, unique.
    centroid_mni : tuple of float
        Mean position of the ROI's sources in MNI305 millimetres.
    small : bool
        True when the ROI has too few sources to trust at this resolution.
    """

    name: str
    hemisphere: str
    vertices: np.ndarray
    centroid_mni: tuple[float, float, float]
    small: bool = False


@dataclass(frozen=True, eq=False)
class Atlas:
    """A named set of ROIs (ROIs may overlap, e.g. networks sharing areas)."""

    name: str
    description: str
    citation: str
    rois: tuple[ROI, ...]
    sha256: str = ""
