"""Atlas figure: ROIs painted on the inflated fsaverage5 surface (matplotlib, no display needed)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .._docs import fill_doc
from ..headmodel import load_head_model
from ..headmodel.model import HEMIS, N_PER_HEMI
from ..rois import Atlas, load_atlas
from ..rois.names import area_name, natural_key
from .geometry import paint_rois


@fill_doc
def atlas_label_map(atlas: Atlas) -> np.ndarray:
    """ROI number (1-based, 0 = none) per fsaverage5 surface vertex, shape (20484,).

    Bilateral (``"both"``) ROIs are painted only when the atlas has no per-hemisphere ROI of the
    same name; where ROIs overlap, the later ROI in ``atlas.rois`` wins (e.g. networks).

    %(atlas_parameters)s

    Returns
    -------
    ndarray of int32, shape (20484,)
        1 + index of the ROI's name among the atlas's distinct ROI names (in first-seen order)
        per vertex, left hemisphere first; 0 = none (medial wall, unlabelled cortex).
    """
    per_hemi = {r.name for r in atlas.rois if r.hemisphere != "both"}
    names = sorted({r.name for r in atlas.rois}, key=[r.name for r in atlas.rois].index)
    codes = [
        None if r.hemisphere == "both" and r.name in per_hemi else names.index(r.name) + 1
        for r in atlas.rois
    ]
    return paint_rois(atlas, codes, fill=0, dtype=np.int32)


def _qualitative_cmap(n: int):
    """``n`` colours from matplotlib's qualitative tab20, tab20b and tab20c maps (cycled)."""
    from matplotlib import colormaps
    from matplotlib.colors import ListedColormap

    colours = [c for name in ("tab20", "tab20b", "tab20c") for c in colormaps[name].colors]
    return ListedColormap([colours[i % len(colours)] for i in range(max(n, 1))])


def plot_atlas(name_or_atlas: str | Atlas, *, output_file: str | Path | None = None):
    """Lateral and medial views of both hemispheres with each ROI in its own colour.

    Parameters
    ----------
    name_or_atlas : str or Atlas
        Shipped atlas name (see :func:`available_atlases`) or an :class:`Atlas`.
    output_file : str or Path, optional
        Also save the figure there (PNG/SVG/PDF by suffix).

    Returns
    -------
    matplotlib.figure.Figure
        Four 3-D axes: left lateral, left medial, right lateral, right medial, and a legend
        naming each ROI (Brodmann areas with their descriptive names).  Colours come from
        matplotlib's qualitative tab20/tab20b/tab20c maps; the same ROI name has the same colour
        in every view; sources in no ROI (medial wall) are left grey.
    """
    import matplotlib.pyplot as plt
    from nilearn import plotting

    atlas = load_atlas(name_or_atlas) if isinstance(name_or_atlas, str) else name_or_atlas
    labels = atlas_label_map(atlas)
    surf = load_head_model().surface
    n_max = max(int(labels.max()), 1)
    cmap = _qualitative_cmap(n_max)
    names = sorted({r.name for r in atlas.rois}, key=[r.name for r in atlas.rois].index)
    n_cols = 1 if len(names) <= 16 else 2 if len(names) <= 48 else 3
    legend_w = 3.3 * n_cols
    fig = plt.figure(figsize=(14 + legend_w, 3.8))
    frac = 14 / (14 + legend_w)
    axes = [fig.add_axes((frac * k / 4, 0.0, frac / 4, 0.86), projection="3d") for k in range(4)]
    for h, hemi in enumerate(HEMIS):
        sl = slice(h * N_PER_HEMI, (h + 1) * N_PER_HEMI)
        mesh = (surf.inflated[sl].copy(), surf.hemi_faces(hemi).copy())  # nilearn edits in place
        for j, view in enumerate(("lateral", "medial")):
            ax = axes[2 * h + j]
            roi_map = np.where(labels[sl] > 0, labels[sl], np.nan)  # NaN: not painted
            plotting.plot_surf_roi(
                mesh,
                roi_map=roi_map,
                hemi=hemi,
                view=view,
                cmap=cmap,
                vmin=0.5,
                vmax=n_max + 0.5,
                engine="matplotlib",
                axes=ax,
                figure=fig,
                colorbar=False,
                bg_on_data=False,
            )
            ax.set_title(f"{hemi} {view}", fontsize=9)
    from matplotlib.patches import Patch

    handles = [
        Patch(facecolor=cmap(i), edgecolor="0.3", lw=0.4, label=(f"{n} {area_name(n)}".strip()))
        for i, n in sorted(enumerate(names), key=lambda kn: natural_key(kn[1]))
    ]
    fig.legend(
        handles=handles,
        loc="center left",
        bbox_to_anchor=(frac + 0.005, 0.45),
        ncol=n_cols,
        fontsize=6.5 if len(names) > 30 else 8,
        frameon=False,
        handlelength=1.2,
        columnspacing=0.8,
        borderaxespad=0.0,
    )
    fig.suptitle(f"{atlas.name}: {len(names)} ROIs (grey: not in any ROI)", x=frac / 2, fontsize=11)
    if output_file is not None:
        fig.savefig(output_file, dpi=120)
    return fig
