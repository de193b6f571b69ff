"""Atlases as collections of ROIs over the cortical template sources.

The contract is described in DEVELOPERS.md.
"""

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
        Source indices (``0..n_src-1`` of the shipped head model; left hemisphere first), sorted,
        unique.
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
    """A named set of ROIs (ROIs may overlap, e.g. networks sharing areas).

    Attributes
    ----------
    name : str
        Atlas name, e.g. ``"brodmann"``.
    description : str
        One-line description for reports.
    citation : str
        Reference of the parcellation.
    rois : tuple of ROI
        The regions, in display order.
    sha256 : str
        sha256 of the file the atlas was read from (empty for atlases built in memory); part of the
        pipeline fingerprint.
    """

    name: str
    description: str
    citation: str
    rois: tuple[ROI, ...]
    sha256: str = ""

    def vertex_sets(self) -> list[np.ndarray]:
        """The source indices of every ROI, in ``rois`` order.

        Returns
        -------
        list of ndarray of int
            One array of source indices (``0..n_src-1``) per ROI.
        """
        return [r.vertices for r in self.rois]

    def label(self, roi: ROI) -> str:
        """Display label, e.g. ``"BA17 L"`` (``"both"`` hemisphere: the name alone).

        Parameters
        ----------
        roi : ROI
            A region of this atlas.

        Returns
        -------
        str
            The ROI name, followed by ``" L"`` or ``" R"`` for a one-hemisphere ROI.
        """
        h = roi.hemisphere
        return f"{roi.name} {h[:1].upper()}" if h in ("left", "right") else roi.name
