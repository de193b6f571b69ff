"""Scalp topographies of band power or z at the 19 10-20 sites (MNE's plot_topomap)."""

from __future__ import annotations

import functools

import matplotlib.pyplot as plt
import numpy as np
from matplotlib.figure import Figure

from .._threads import thread_limits
from ..constants import SITES_1020
from ..errors import InputError
from ._shared import save_if_asked
from .colours import add_colourbar, clipped
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


def _sensor_topomaps(
    values, *, band_names, scale, ch_names, title, image_interp, names, dpi, output_file
) -> Figure:
    import mne

    v = np.asarray(values, dtype=float)
    band_names = list(band_names)
    ch_names = tuple(ch_names)
    if v.ndim != 2 or v.shape != (len(band_names), len(ch_names)):
        raise ValueError(
            f"values: need shape (n_bands={len(band_names)}, n_ch={len(ch_names)}), got {v.shape}"
        )
    info = sensor_info(ch_names)
    n = len(band_names)
    scales = list(scale) if isinstance(scale, (list, tuple)) else [scale] * n
    if len(scales) != n:
        raise ValueError(f"scale: need one ColourScale or {n}, got {len(scales)}")
    per_band = isinstance(scale, (list, tuple))
    fig_w = 1.9 * n + (0.3 if per_band else 1.6)
    fig = plt.figure(figsize=(fig_w, (3.2 if per_band else 2.5) + (0.3 if title else 0.0)), dpi=dpi)
    width = (1.0 - (0.3 if per_band else 1.5) / fig_w) / n
    top = 0.80 if title else 0.9
    bottom = 0.3 if per_band else 0.04
    for i, band in enumerate(band_names):
        sc = scales[i]
        ax = fig.add_axes((0.01 + i * width, bottom, width * 0.96, top - bottom - 0.04))
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
            names=list(ch_names) if names else None,
            image_interp=image_interp,
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
            cax = fig.add_axes((0.01 + i * width + 0.15 * width, 0.19, width * 0.66, 0.035))
            cb = add_colourbar(fig, sc, cax=cax, orientation="horizontal", data=v[i])
            cb.set_label(cb.ax.get_xlabel(), fontsize=7)
            cb.ax.tick_params(labelsize=7)
    if not per_band:
        cax = fig.add_axes((1.0 - 1.3 / fig_w, 0.12, 0.12 / fig_w, top - 0.2))
        add_colourbar(fig, scale, cax=cax, data=v)
    if title:
        fig.suptitle(title, x=0.45, y=0.99, va="top", fontsize=11)
    save_if_asked(fig, output_file, dpi)
    return fig
