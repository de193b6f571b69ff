"""Scalp topographies of band power or z at the 19 10-20 sites (MNE's plot_topomap)."""

from __future__ import annotations

import functools

import matplotlib.pyplot as plt
import numpy as np
from matplotlib.figure import Figure

from .._threads import thread_limits
from ..constants import SITES_1020
from ..errors import InputError
from ._shared import agg_figure, kept_colourbar, kept_layout, png_options, save_if_asked
from .colours import clipped
from .._docs import fill_doc


@functools.lru_cache(maxsize=4)
def sensor_info(ch_names: tuple[str, ...] = SITES_1020):
    """An :class:`mne.Info` for the 10-20 sites with MNE's fsaverage-fitted 10-20 positions.

    Positions come from MNE's packaged ``fsaverage_1020`` montage (electrodes fitted to the
    fsaverage scalp), so the maps sit on the same head as the source model.

    Parameters
    ----------
    ch_names : tuple of str
        10-20 sites (any subset of the 19 canonical sites); default all 19 in canonical order.

    Returns
    -------
    mne.Info
        EEG channels of these sites with positions (sampling rate 250 Hz, a placeholder);
        cached, so callers must not modify it.

    Raises
    ------
    InputError
        A name that is not one of the 19 sites.
    """
    from ..headmodel import make_info

    if tuple(ch_names) != SITES_1020:
        missing = sorted(set(ch_names) - set(SITES_1020))
        if missing:
            raise InputError(
                f"ch_names: no fsaverage_1020 position for {missing}", field="ch_names"
            )
        return make_info(250.0).pick(list(ch_names))
    return make_info(250.0)


@fill_doc
def sensor_topomaps(
    values: np.ndarray,
    *,
    band_names,
    scale,
    ch_names=SITES_1020,
    title: str | None = None,
    image_interp: str = "linear",
    names: bool = True,
    dpi: int = 90,
    output_file=None,
) -> Figure:
    """One scalp map per band, on one colour scale or on one scale per band.

    Parameters
    ----------
    values : ndarray, shape (n_bands, n_ch)
        Band power (µV² or fraction) or z per electrode, channels in ``ch_names`` order.
    band_names : sequence of str, length n_bands
    scale : ColourScale | sequence of ColourScale
        One scale for every band (z: symmetric limits, one colour bar), or one per band (power,
        whose range differs tenfold between bands: a colour bar under each map).
    ch_names : sequence of str, length n_ch
        Electrode names (10-20, modern T7/T8/P7/P8 names).
    title : str | None
    image_interp : {"linear", "cubic", "nearest"}
        Interpolation between electrodes (MNE's ``image_interp``); "linear" draws ten times
        faster than "cubic" and invents no extrema between electrodes.
    names : bool
        Write the electrode names on the maps (default).
    %(figure_output)s

    Returns
    -------
    fig : matplotlib.figure.Figure
        One axes per band (with the interpolated map as an image) and a colour bar.
    """
    with thread_limits():  # see figure_set._run: BLAS threads spin on 19-point transforms
        return _sensor_topomaps(
            values,
            band_names=band_names,
            scale=scale,
            ch_names=ch_names,
            title=title,
            image_interp=image_interp,
            names=names,
            dpi=dpi,
            output_file=output_file,
        )


@fill_doc
def sensor_topomaps_png(values: np.ndarray, **options) -> bytes:
    """PNG of :func:`sensor_topomaps`, drawn on a figure kept for its layout.

    The figure and its axes are made once per layout (number of maps, one scale or one per
    map, titled or not); each figure clears what MNE drew in the map axes and draws the maps
    again there (:func:`mne.viz.plot_topomap`), and keeps a colour bar whose scale and ends
    are the same (new label).  The pixels are those of ``figure_png(sensor_topomaps(...))``
    (see the tests).

    Parameters
    ----------
    values : ndarray, shape (n_bands, n_ch)
    %(png_twin_returns)s
    """
    from .figure_set import figure_png

    o = png_options(sensor_topomaps, (values,), options, "sensor_topomaps_png")
    with thread_limits():
        v, band_names, scales, per_band = _topomap_inputs(
            o["values"], o["band_names"], o["scale"], o["ch_names"]
        )
        n, titled, dpi = len(band_names), bool(o["title"]), int(o["dpi"])
        state = kept_layout(
            "topomaps",
            (n, per_band, titled, dpi),
            lambda: _topomap_layout(
                agg_figure(_topomap_size(n, per_band, titled), dpi), n, per_band, titled
            ),
        )
        _clear_maps(state)
        _draw_topomaps(state, v, band_names, scales, per_band, o)
        return figure_png(state["fig"], dpi=dpi, close=False)


def _topomap_inputs(values, band_names, scale, ch_names):
    v = np.asarray(values, dtype=float)
    band_names = list(band_names)
    ch_names = tuple(ch_names)
    if v.ndim != 2 or v.shape != (len(band_names), len(ch_names)):
        raise ValueError(
            f"values: need shape (n_bands={len(band_names)}, n_ch={len(ch_names)}), got {v.shape}"
        )
    n = len(band_names)
    scales = list(scale) if isinstance(scale, (list, tuple)) else [scale] * n
    if len(scales) != n:
        raise ValueError(f"scale: need one ColourScale or {n}, got {len(scales)}")
    return v, band_names, scales, isinstance(scale, (list, tuple))


def _topomap_size(n: int, per_band: bool, titled: bool) -> tuple[float, float]:
    return 1.9 * n + (0.3 if per_band else 1.6), (3.2 if per_band else 2.5) + (
        0.3 if titled else 0.0
    )


def _topomap_rects(n: int, per_band: bool, titled: bool) -> tuple[list, list, tuple]:
    """Positions (figure fractions) of the map axes, of the per-map colour bars and of the
    shared colour bar."""
    fig_w = _topomap_size(n, per_band, titled)[0]
    width = (1.0 - (0.3 if per_band else 1.5) / fig_w) / n
    top = 0.80 if titled else 0.9
    bottom = 0.3 if per_band else 0.04
    maps = [(0.01 + i * width, bottom, width * 0.96, top - bottom - 0.04) for i in range(n)]
    bars = [(0.01 + i * width + 0.15 * width, 0.19, width * 0.66, 0.035) for i in range(n)]
    return maps, bars, (1.0 - 1.3 / fig_w, 0.12, 0.12 / fig_w, top - 0.2)


def _topomap_layout(fig, n: int, per_band: bool, titled: bool) -> dict:
    """A figure's map axes (empty), in the order of the maps."""
    rects = _topomap_rects(n, per_band, titled)[0]
    axes = [fig.add_axes(r) for r in rects]
    return {"fig": fig, "axes": axes, "fresh": [_axes_state(ax) for ax in axes]}


def _axes_state(ax) -> tuple:
    return set(map(id, ax.get_children())), ax.get_xlim(), ax.get_ylim()


def _clear_maps(state: dict) -> None:
    """The map axes as new: what MNE drew removed, limits and autoscaling reset."""
    from matplotlib.transforms import Bbox

    for ax, (own, xlim, ylim) in zip(state["axes"], state["fresh"]):
        for a in ax.get_children():
            if id(a) not in own:
                a.remove()
        ax.dataLim.set(Bbox.null())
        ax.ignore_existing_data_limits = True
        ax.set_xlim(xlim)
        ax.set_ylim(ylim)
        ax.set_autoscale_on(True)


def _sensor_topomaps(
    values, *, band_names, scale, ch_names, title, image_interp, names, dpi, output_file
) -> Figure:
    v, band_names, scales, per_band = _topomap_inputs(values, band_names, scale, ch_names)
    n = len(band_names)
    fig = plt.figure(figsize=_topomap_size(n, per_band, bool(title)), dpi=dpi)
    state = _topomap_layout(fig, n, per_band, bool(title))
    options = dict(ch_names=ch_names, title=title, image_interp=image_interp, names=names)
    _draw_topomaps(state, v, band_names, scales, per_band, {"scale": scale, **options})
    save_if_asked(fig, output_file, dpi)
    return fig


def _draw_topomaps(state: dict, v, band_names, scales, per_band: bool, o: dict) -> None:
    """The maps into a layout's empty map axes, their colour bars and the title."""
    import mne

    fig = state["fig"]
    ch_names = tuple(o["ch_names"])
    info = sensor_info(ch_names)
    _, bars, shared = _topomap_rects(len(band_names), per_band, bool(o["title"]))
    for i, (band, ax) in enumerate(zip(band_names, state["axes"])):
        sc = scales[i]
        row = clipped(v[i], sc)  # beyond the limits: end colours (the bar's arrows say so)
        finite = np.isfinite(row)
        data = np.where(
            finite,
            row,
            0.0 if sc.diverging else np.nanmin(v[i]) if np.isfinite(v[i]).any() else 0.0,
        )
        mne.viz.plot_topomap(
            data,
            info,
            axes=ax,
            cmap=sc.cmap,
            vlim=(sc.vmin, sc.vmax),
            show=False,
            contours=4,
            sensors=True,
            names=list(ch_names) if o["names"] else None,
            image_interp=o["image_interp"],
            mask=finite if sc.threshold else None,
            mask_params={
                "marker": "o",
                "markersize": 10,
                "markerfacecolor": "none",
                "markeredgecolor": "k",
                "markeredgewidth": 0.8,
            },
        )
        for txt in ax.texts:  # electrode names: small, over the map
            txt.set_fontsize(6)
        ax.set_title(band, fontsize=10, y=1.0)  # the map has no ticks: no search above it
        if per_band:
            cb = kept_colourbar(
                state, fig, sc, bars[i], orientation="horizontal", data=v[i], slot=("bar", i)
            )
            cb.set_label(cb.ax.get_xlabel(), fontsize=7)
            cb.ax.tick_params(labelsize=7)
    if not per_band:
        kept_colourbar(state, fig, o["scale"], shared, data=v)
    if o["title"]:
        fig.suptitle(o["title"], x=0.45, y=0.99, va="top", fontsize=11)
