"""ROIs and atlases on the cortical template sources (left hemisphere first).

Shipped atlases: ``brodmann`` (Brodmann-style areas per hemisphere), ``lobes``, ``networks``
(published Brodmann-area groupings), ``yeo7`` (Yeo et al. 2011).  Provenance: ``atlases/README.md``.
"""

from .atlas import ROI, Atlas
from .custom import load_custom_rois
from .reduce import ROI_MODES, roi_reduce
from .registry import SMALL_MIN_VERTICES, atlas_summary, available_atlases, load_atlas

__all__ = ["ROI", "Atlas", "ROI_MODES", "SMALL_MIN_VERTICES", "atlas_summary",
           "available_atlases", "load_atlas", "load_custom_rois", "roi_reduce"]
