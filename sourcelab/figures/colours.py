"""One colour convention for every sourcelab figure.

* z-scores: a symmetric diverging map (``RdBu_r``) centred on 0, with the **same** limits for every
  band and measure (default ±3), optionally hiding |z| below a threshold (default 1.96, the
  two-sided 5 % point of the standard normal: common practice).
* power (absolute or relative): a sequential map (``magma``) over a robust range of the data (1st to
  99th percentile) unless limits are given.

Every colour bar is labelled with the quantity and its unit through :func:`add_colourbar`.
"""

from __future__ import annotations

from dataclasses import dataclass

import matplotlib as mpl
import numpy as np

from ..checks import check_number, check_option
from ..constants import Z_THRESHOLD as _Z_THRESHOLD

#: Diverging map for z-scores (standard matplotlib map).
Z_CMAP = "RdBu_r"
#: Sequential map for power.
POWER_CMAP = "magma"
#: Default symmetric z limit.
Z_LIMIT = 3.0
#: Default display threshold for z: |z| below it is hidden when thresholding is asked for.
Z_THRESHOLD = _Z_THRESHOLD
#: Units shown on colour bars, by measure.
POWER_LABELS = {
    "absolute": "sLORETA power (standardised)",
    "relative": "relative power (fraction)",
    "sensor_absolute": "absolute power (µV²)",
    "sensor_relative": "relative power (fraction)",
}
Z_LABEL = "z-score (SD units)"


@dataclass(frozen=True)
class ColourScale:
    """A colour map with its limits and the label of its colour bar.

    Attributes
    ----------
    cmap : str
        Matplotlib colour-map name.
    vmin, vmax : float
        Colour limits (for z, ``vmin == -vmax``).
    label : str
        Quantity and unit, shown beside the colour bar.
    threshold : float | None
        Values with magnitude below it are hidden (z only), or None.
    diverging : bool
        True for z scales.
    """

    cmap: str
    vmin: float
    vmax: float
    label: str
    threshold: float | None = None
    diverging: bool = False

    @property
    def norm(self) -> mpl.colors.Normalize:
        return mpl.colors.Normalize(vmin=self.vmin, vmax=self.vmax)

    def scalar_mappable(self) -> mpl.cm.ScalarMappable:
        """A mappable with this scale's map and limits, for a colour bar.

        Returns
        -------
        matplotlib.cm.ScalarMappable
            Normalised to ``[vmin, vmax]`` with :attr:`cmap`.
        """
        return mpl.cm.ScalarMappable(norm=self.norm, cmap=mpl.colormaps[self.cmap])


def z_scale(
    *, limit: float = Z_LIMIT, threshold: float | None = None, label: str = Z_LABEL
) -> ColourScale:
    """The z-score colour scale: symmetric about 0, the same for every band.

    Parameters
    ----------
    limit : float
        Colour limit; the scale spans ``[-limit, +limit]``.  Must be > 0.
    threshold : float | None
        Hide |z| below this (e.g. :data:`Z_THRESHOLD`); must be in ``[0, limit)``.
    label : str
        Colour-bar label (quantity and unit).

    Returns
    -------
    ColourScale
        Diverging :data:`Z_CMAP` scale from ``-limit`` to ``+limit`` (SD units).
    """
    limit = check_number("z limit", limit, low=0.0, low_open=True)
    threshold = check_number(
        "z threshold", threshold, low=0.0, high=limit, high_open=True, none_ok=True
    )
    return ColourScale(Z_CMAP, -float(limit), float(limit), label, threshold, True)


def power_scale(
    values: np.ndarray | None = None,
    *,
    measure: str = "absolute",
    vmin: float | None = None,
    vmax: float | None = None,
    percentile: float = 99.0,
    label: str | None = None,
) -> ColourScale:
    """A sequential power colour scale.

    Parameters
    ----------
    values : ndarray | None
        Data used to choose limits not given explicitly (NaNs ignored).  Pass all bands at once
        to share limits across bands.
    measure : str
        Key of :data:`POWER_LABELS` (``"absolute"``, ``"relative"``, ``"sensor_absolute"``,
        ``"sensor_relative"``), which sets the colour-bar label.
    vmin, vmax : float | None
        Explicit limits.  Default: the ``100 - percentile``-th and ``percentile``-th
        percentiles of the data (a robust range: one outlier does not wash out the map, and
        maximum-intensity projections are not saturated by a floor at 0).
    percentile : float
        Upper percentile of the robust range (the lower one is ``100 - percentile``).
    label : str | None
        Colour-bar label; default from ``measure``.

    Returns
    -------
    ColourScale
        Sequential :data:`POWER_CMAP` scale in the measure's unit (standardised sLORETA power,
        µV² at sensors, or a fraction); without data and limits it spans 0 to 1, and
        ``vmax > vmin`` always.
    """
    if label is None:
        check_option("measure", measure, sorted(POWER_LABELS))
        label = POWER_LABELS[measure]
    finite = np.array([], float)
    if values is not None:
        v = np.asarray(values, float).ravel()
        finite = v[np.isfinite(v)]
    if vmin is None:
        vmin = float(np.percentile(finite, 100.0 - percentile)) if finite.size else 0.0
    if vmax is None:
        vmax = float(np.percentile(finite, percentile)) if finite.size else 1.0
    if not vmax > vmin:
        vmax = vmin + (abs(vmin) if vmin else 1.0)
    return ColourScale(POWER_CMAP, float(vmin), float(vmax), label)


def extend_for(data, scale: ColourScale) -> str:
    """Colour-bar extension for ``data`` on ``scale``.

    Arrows mark that some values lie beyond the colour limits and are drawn in the end colours.

    Parameters
    ----------
    data : array-like
        The values drawn (NaNs ignored).
    scale : ColourScale
        The scale they are drawn on.

    Returns
    -------
    {"neither", "min", "max", "both"}
        Which ends the finite data pass; ``"neither"`` without finite values.
    """
    v = np.asarray(data, dtype=float)
    v = v[np.isfinite(v)]
    if not v.size:
        return "neither"
    lo, hi = bool(v.min() < scale.vmin), bool(v.max() > scale.vmax)
    return {
        (False, False): "neither",
        (True, False): "min",
        (False, True): "max",
        (True, True): "both",
    }[(lo, hi)]


def data_range_text(data) -> str:
    """``"data -1.8 to 12.3"``: the true range of the finite values (empty without any).

    Parameters
    ----------
    data : array-like
        The values drawn.

    Returns
    -------
    str
        Minimum and maximum to 3 significant digits, or ``""``.
    """
    v = np.asarray(data, dtype=float)
    v = v[np.isfinite(v)]
    if not v.size:
        return ""
    return f"data {v.min():.3g} to {v.max():.3g}"


def colourbar_label(scale: ColourScale, data=None) -> str:
    """The label :func:`add_colourbar` gives: the scale's, and the data range when given.

    Parameters
    ----------
    scale : ColourScale
    data : array-like, optional
        The values drawn.

    Returns
    -------
    str
    """
    rng = "" if data is None else data_range_text(data)
    return f"{scale.label}\n({rng})" if rng else scale.label


def add_colourbar(
    fig,
    scale: ColourScale,
    *,
    cax=None,
    ax=None,
    orientation: str = "vertical",
    data=None,
    **kwargs,
):
    """Add a labelled colour bar for ``scale`` to ``fig`` (in ``cax``, or stolen from ``ax``).

    Parameters
    ----------
    fig : Figure
    scale : ColourScale
    cax, ax : Axes, optional
    orientation : {"vertical", "horizontal"}
    data : array-like, optional
        The values drawn.  When given, the bar gets extension arrows at the ends the data pass
        (those values are drawn in the end colours) and its label states the true data range.
    **kwargs
        Passed to :meth:`matplotlib.figure.Figure.colorbar`.

    For z scales, dashed ticks mark ±threshold when one is set.

    Returns
    -------
    matplotlib.colorbar.Colorbar
        The colour bar; other keyword arguments go to :meth:`Figure.colorbar`.
    """
    if data is not None:
        kwargs.setdefault("extend", extend_for(data, scale))
    label = colourbar_label(scale, data)
    cb = fig.colorbar(scale.scalar_mappable(), cax=cax, ax=ax, orientation=orientation, **kwargs)
    cb.set_label(label)
    if scale.diverging and scale.threshold:
        for t in (-scale.threshold, scale.threshold):
            if orientation == "vertical":
                cb.ax.axhline(t, color="k", lw=0.8, ls="--")
            else:
                cb.ax.axvline(t, color="k", lw=0.8, ls="--")
    return cb


def masked(values: np.ndarray, scale: ColourScale) -> np.ndarray:
    """Copy of ``values`` (float) with |value| < threshold set to NaN (no-op without threshold).

    Parameters
    ----------
    values : array-like
        Values of any shape.
    scale : ColourScale
        Its ``threshold`` (if any) is applied.

    Returns
    -------
    ndarray of float
        Same shape as ``values``; a new array.
    """
    out = np.array(values, dtype=float, copy=True)
    if scale.threshold:
        out[np.abs(out) < scale.threshold] = np.nan
    return out


def clipped(values: np.ndarray, scale: ColourScale) -> np.ndarray:
    """:func:`masked` values clipped into the colour limits (NaN stays NaN).

    Values beyond the limits are drawn in the end colours (the colour bar's arrows say so)
    instead of being dropped by plotting functions that hide out-of-range values.

    Parameters
    ----------
    values : array-like
        Values of any shape.
    scale : ColourScale
        Threshold and colour limits.

    Returns
    -------
    ndarray of float
        Same shape as ``values``; hidden values NaN, the rest in ``[vmin, vmax]``.
    """
    out = masked(values, scale)
    ok = np.isfinite(out)
    out[ok] = np.clip(out[ok], scale.vmin, scale.vmax)
    return out
