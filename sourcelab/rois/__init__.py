"""ROIs and atlases on the cortical template sources (left hemisphere first).

Shipped atlases: ``brodmann`` (Brodmann-style areas per hemisphere), ``lobes``, ``networks``
(published Brodmann-area groupings), ``yeo7`` (Yeo et al. 2011).  Provenance: ``atlases/README.md``.
"""

from .atlas import ROI, Atlas
from .custom import load_custom_rois
from .reduce import ROI_MODES, roi_reduce
from .registry import (
    ATLAS_TITLES,
    DEFAULT_NETWORK_ATLAS,
    SMALL_MIN_VERTICES,
    atlas_summary,
    atlas_title,
    available_atlases,
    load_atlas,
)

__all__ = [
    "ROI",
    "Atlas",
    "ATLAS_TITLES",
    "DEFAULT_NETWORK_ATLAS",
    "ROI_MODES",
    "SMALL_MIN_VERTICES",
    "atlas_summary",
    "atlas_title",
    "available_atlases",
    "load_atlas",
    "load_custom_rois",
    "roi_reduce",
]
