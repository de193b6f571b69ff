"""Figures: glass brains, cortical surfaces, ROI charts, scalp maps, atlas views, coupling
(electrode pairs on a head, ROI-by-ROI matrices); matplotlib.

Every plotting function takes its data first, options keyword-only, accepts ``output_file`` and
returns the :class:`matplotlib.figure.Figure`; none calls ``plt.show()``.  The colour convention
(z: symmetric ``RdBu_r``; power: sequential ``magma``) lives in :mod:`.colours`.
"""

from .._lazy import lazy_exports

#: Public name -> the submodule defining it, imported on first use (matplotlib and nilearn load
#: only when a figure is drawn, not when, e.g., :mod:`.warm` is imported by the command line).
_HOMES = {
    "atlas_label_map": "atlas",
    "plot_atlas": "atlas",
    "glass_brain": "brain",
    "surface_views": "brain",
    "POWER_CMAP": "colours",
    "Z_CMAP": "colours",
    "Z_LIMIT": "colours",
    "Z_THRESHOLD": "colours",
    "ColourScale": "colours",
    "add_colourbar": "colours",
    "power_scale": "colours",
    "z_scale": "colours",
    "coupling_matrix": "coupling",
    "electrode_layout": "coupling",
    "pair_head_map": "coupling",
    "atlas_labels": "figure_set",
    "figure_png": "figure_set",
    "result_figures": "figure_set",
    "sources_to_volume": "geometry",
    "network_chart": "roi",
    "roi_bars": "roi",
    "roi_heatmap": "roi",
    "sensor_info": "sensor",
    "sensor_topomaps": "sensor",
}


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

_SUBMODULES = ("_agg", "_shared", "atlas", "brain", "colours", "coupling", "figure_set")
_SUBMODULES += ("geometry", "roi", "sensor", "warm")

__getattr__, __dir__ = lazy_exports(__name__, _HOMES, _SUBMODULES)
