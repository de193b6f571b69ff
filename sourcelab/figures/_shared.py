"""Small helpers shared by the figure modules: saving on request, table columns, heatmap cells."""

from __future__ import annotations

import numpy as np


def save_if_asked(fig, output_file, dpi: int) -> None:
    """Save ``fig`` to ``output_file`` at ``dpi`` (format from the extension); None: nothing.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    output_file : str | Path | None
    dpi : int
        Dots per inch.
    """
    if output_file is not None:
        fig.savefig(output_file, dpi=dpi)


def check_columns(table, name: str, need) -> None:
    """Raise ``ValueError`` naming the columns of ``need`` that ``table`` lacks.

    Parameters
    ----------
    table : DataFrame
    name : str
        The table's parameter name, for the message.
    need : iterable of str
        Required column names.
    """
    missing = sorted(set(need) - set(table.columns))
    if missing:
        raise ValueError(f"{name}: missing columns {missing}")


def heatmap_cells(ax, grid: np.ndarray, *, cmap, norm, aspect: str | None = None):
    """Draw ``grid`` as one cell per value (NaN: the colour map's "bad" colour).

    Parameters
    ----------
    ax : Axes
    grid : ndarray, shape (n_rows, n_cols)
    cmap : Colormap
    norm : Normalize
    aspect : str | None
        ``imshow``'s aspect (None: matplotlib's default, square cells).

    Returns
    -------
    matplotlib.image.AxesImage
    """
    kw = {} if aspect is None else {"aspect": aspect}
    return ax.imshow(
        np.ma.masked_invalid(grid), cmap=cmap, norm=norm, interpolation="nearest", **kw
    )
