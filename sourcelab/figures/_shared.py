"""Small helpers shared by the figure modules: saving on request, table columns, heatmap cells,
figures kept for reuse by layout."""

from __future__ import annotations

from collections import OrderedDict

import numpy as np

#: Figures kept for reuse, by family and layout (this process's; see :func:`kept_layout`).
_KEPT: dict = {}
#: Most layouts kept per family (the oldest is dropped first).
KEPT_PER_FAMILY = 8


def kept_layout(family: str, key, build) -> dict:
    """The state of the figure kept for ``key`` of ``family``, made by ``build()`` when new.

    A figure kept for its layout holds the parts that do not depend on the data (axes, ticks,
    outlines, fixed texts); the family's drawing function replaces only the data artists on
    it and renders it again (``figure_png(fig, close=False)``).

    Parameters
    ----------
    family : str
        Figure kind, e.g. ``"roi-bars"``.
    key : hashable
        Everything the static parts depend on (size, resolution, axes positions ...).
    build : callable
        No arguments; returns a dict with at least ``"fig"``.

    Returns
    -------
    dict
        The kept state (the family's own keys, and ``"colourbar"`` from
        :func:`kept_colourbar`).
    """
    store = _KEPT.setdefault(family, OrderedDict())
    state = store.get(key)
    if state is None:
        state = store[key] = build()
        while len(store) > KEPT_PER_FAMILY:
            store.popitem(last=False)
    else:
        store.move_to_end(key)
    return state


def png_options(func, args, options: dict, name: str) -> dict:
    """The arguments of ``func(*args, **options)`` by name, defaults filled in, for a PNG twin
    of a figure function (which takes no ``output_file``).

    Parameters
    ----------
    func : callable
        The figure function.
    args : tuple
        Its positional arguments.
    options : dict
        Its keyword arguments.
    name : str
        The twin's name, for the message.

    Returns
    -------
    dict
        Every parameter of ``func`` but ``output_file``.

    Raises
    ------
    TypeError
        Arguments ``func`` does not take, or an ``output_file``.
    """
    import inspect

    bound = inspect.signature(func).bind(*args, **options)
    bound.apply_defaults()
    out = dict(bound.arguments)
    if out.pop("output_file", None) is not None:
        raise TypeError(f"{name}: no output_file (it returns the PNG)")
    return out


def agg_figure(figsize, dpi: int):
    """A figure on a plain Agg canvas, outside pyplot (kept figures are never closed).

    Parameters
    ----------
    figsize : (float, float)
        Inches.
    dpi : int

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=figsize, dpi=dpi)
    FigureCanvasAgg(fig)
    return fig


def kept_colourbar(
    state: dict, fig, scale, rect, *, data=None, orientation: str = "vertical", slot="colourbar"
):
    """:func:`~sourcelab.figures.colours.add_colourbar` in new axes at ``rect`` of ``fig``, or
    the colour bar kept in ``state`` when it was drawn for the same scale, ends and place (only
    its label, which states the data range, is replaced).

    Parameters
    ----------
    state : dict
        The figure's kept state (the colour bar is kept under ``slot``).
    fig : Figure
    scale : ColourScale
    rect : (float, float, float, float)
        Axes position, figure fractions.
    data : array-like, optional
        The values drawn (extension arrows and label, as in ``add_colourbar``).
    orientation : {"vertical", "horizontal"}
    slot : hashable
        Key of this colour bar in ``state`` (one per colour bar of the figure).

    Returns
    -------
    matplotlib.colorbar.Colorbar
    """
    from .colours import add_colourbar, colourbar_label, extend_for

    extend = None if data is None else extend_for(data, scale)
    key = (scale.cmap, scale.vmin, scale.vmax, scale.threshold, scale.diverging, extend)
    key += (orientation, tuple(rect))
    old = state.get(slot)
    if old is not None and old[0] == key:
        old[1].set_label(colourbar_label(scale, data))
        return old[1]
    if old is not None:
        old[1].ax.remove()
    cb = add_colourbar(fig, scale, cax=fig.add_axes(rect), orientation=orientation, data=data)
    state[slot] = (key, cb)
    return cb


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
