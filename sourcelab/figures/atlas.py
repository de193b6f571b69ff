"""Atlas figure: ROIs painted on the inflated fsaverage5 surface (matplotlib, no display needed)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..headmodel import load_head_model
from ..headmodel.model import HEMIS, N_PER_HEMI
from ..rois import Atlas, load_atlas


def atlas_label_map(atlas: Atlas) -> np.ndarray:
    """ROI number (1-based, 0 = none) per fsaverage5 surface vertex, shape (20484,).

    Bilateral (``"both"``) ROIs are painted only when the atlas has no per-hemisphere ROI of the
    same name; where ROIs overlap, the later ROI in ``atlas.rois`` wins (e.g. networks).
    """
    per_hemi = {r.name for r in atlas.rois if r.hemisphere != "both"}
    names = sorted({r.name for r in atlas.rois}, key=[r.name for r in atlas.rois].index)
    vertno = load_head_model().vertno
    out = np.zeros(2 * N_PER_HEMI, dtype=np.int32)
    for r in atlas.rois:
        if r.hemisphere == "both" and r.name in per_hemi:
            continue
        out[vertno[r.vertices]] = names.index(r.name) + 1
    return out


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
        Four 3-D axes: left lateral, left medial, right lateral, right medial.  Colours come from
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
    fig, axes = plt.subplots(1, 4, figsize=(14, 3.6), subplot_kw={"projection": "3d"})
    fig.subplots_adjust(left=0.0, right=1.0, bottom=0.0, top=0.88, wspace=0.0)
    for h, hemi in enumerate(HEMIS):
        sl = slice(h * N_PER_HEMI, (h + 1) * N_PER_HEMI)
        mesh = (surf.inflated[sl].copy(), surf.hemi_faces(hemi).copy())  # nilearn edits in place
        for j, view in enumerate(("lateral", "medial")):
            ax = axes[2 * h + j]
            roi_map = np.where(labels[sl] > 0, labels[sl], np.nan)  # NaN: not painted
            plotting.plot_surf_roi(mesh, roi_map=roi_map, hemi=hemi, view=view,
                                   cmap=cmap, vmin=0.5, vmax=n_max + 0.5, engine="matplotlib",
                                   axes=ax,
                                   figure=fig, colorbar=False, bg_on_data=False)
            ax.set_title(f"{hemi} {view}", fontsize=9)
    fig.suptitle(f"{atlas.name}: {len({r.name for r in atlas.rois})} ROIs", fontsize=11)
    if output_file is not None:
        fig.savefig(output_file, dpi=120)
    return fig
