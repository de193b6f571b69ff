"""Figures: glass brains, cortical surfaces, ROI charts, scalp maps, atlas views, coupling
(electrode pairs on a head, ROI-by-ROI matrices); matplotlib.

Every plotting function takes its data first, options keyword-only, accepts ``output_file`` and
returns the :class:`matplotlib.figure.Figure`; none calls ``plt.show()``.  The colour convention
(z: symmetric ``RdBu_r``; power: sequential ``magma``) lives in :mod:`.colours`.
"""

from .atlas import atlas_label_map, plot_atlas
from .brain import glass_brain, surface_views
from .colours import (
    POWER_CMAP,
    Z_CMAP,
    Z_LIMIT,
    Z_THRESHOLD,
    ColourScale,
    add_colourbar,
    power_scale,
    z_scale,
)
from .coupling import coupling_matrix, electrode_layout, pair_head_map
from .figure_set import atlas_labels, figure_png, result_figures
from .geometry import sources_to_volume
from .roi import network_chart, roi_bars, roi_heatmap
from .sensor import sensor_info, sensor_topomaps

__all__ = [
    "POWER_CMAP",
    "Z_CMAP",
    "Z_LIMIT",
    "Z_THRESHOLD",
    "ColourScale",
    "add_colourbar",
    "atlas_label_map",
    "atlas_labels",
    "coupling_matrix",
    "electrode_layout",
    "figure_png",
    "glass_brain",
    "network_chart",
    "pair_head_map",
    "plot_atlas",
    "power_scale",
    "result_figures",
    "roi_bars",
    "roi_heatmap",
    "sensor_info",
    "sensor_topomaps",
    "sources_to_volume",
    "surface_views",
    "z_scale",
]
