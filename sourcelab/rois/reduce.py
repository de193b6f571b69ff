"""Reduce per-source maps to one value per ROI (pure array functions + a dispatch table)."""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from .atlas import Atlas


def _mean(x: np.ndarray, roi_w: np.ndarray | None) -> np.ndarray:
    return x.mean(axis=-1)


def _median(x: np.ndarray, roi_w: np.ndarray | None) -> np.ndarray:
    return np.median(x, axis=-1)


def _max(x: np.ndarray, roi_w: np.ndarray | None) -> np.ndarray:
    return x.max(axis=-1)


def _weighted_mean(x: np.ndarray, roi_w: np.ndarray | None) -> np.ndarray:
    return x @ roi_w


#: Reduction mode -> ``f(values (..., n_roi_vertices), weights (n_roi_vertices,)) -> (...)``.
#: ``weights`` is only used by ``centroid_weighted`` (Gaussian of the distance to the ROI centroid).
ROI_MODES = {"mean": _mean, "median": _median, "max": _max, "centroid_weighted": _weighted_mean}

#: Width (standard deviation, mm) of the Gaussian weight of the ``centroid_weighted`` mode.
CENTROID_SIGMA_MM = 10.0


def _centroid_weights(vertices: np.ndarray) -> np.ndarray:
    from ..headmodel import load_head_model

    pos = load_head_model().src_mni[vertices]
    d2 = np.sum((pos - pos.mean(axis=0)) ** 2, axis=1)
    w = np.exp(-0.5 * d2 / CENTROID_SIGMA_MM**2)
    return w / w.sum()


def roi_reduce(values: np.ndarray, atlas: Atlas | str, *, mode: str = "mean") -> np.ndarray:
    """One value per ROI from per-source values.

    Parameters
    ----------
    values : array_like, shape (..., n_src)
        Per-source values (any unit; e.g. band power) on the shipped head model's sources.
    atlas : Atlas or str
        From :func:`load_atlas` or :func:`load_custom_rois`, or a shipped atlas name.
    mode : {"mean", "median", "max", "centroid_weighted"}
        How each ROI's sources are combined. ``centroid_weighted`` is a mean weighted by a Gaussian
        (sigma :data:`CENTROID_SIGMA_MM`) of each source's distance to the ROI centroid.
        Power is non-negative, so no sign flip is needed; signed data should be reduced as power.

    Returns
    -------
    ndarray, shape (..., n_rois)
        Column ``k`` belongs to ``atlas.rois[k]``; same unit as ``values``.

    Raises
    ------
    InputError
        Unknown ``mode`` or atlas name, a last axis that is not ``n_src`` long, or an empty ROI.
    """
    if isinstance(atlas, str):
        from .registry import load_atlas

        atlas = load_atlas(atlas)
    if mode not in ROI_MODES:
        raise InputError(f"unknown ROI mode {mode!r}; allowed: {', '.join(ROI_MODES)}")
    from ..headmodel import load_head_model

    n_src = load_head_model().n_src
    values = np.asarray(values)
    if values.ndim == 0 or values.shape[-1] != n_src:
        raise InputError(
            f"values must have {n_src} sources on the last axis, got shape {values.shape}"
        )
    func = ROI_MODES[mode]
    out = np.empty(
        values.shape[:-1] + (len(atlas.rois),), dtype=np.result_type(values.dtype, np.float64)
    )
    for k, roi in enumerate(atlas.rois):
        if roi.vertices.size == 0:
            raise InputError(
                f"ROI {roi.name!r} ({roi.hemisphere}) of atlas {atlas.name!r} has no sources"
            )
        w = _centroid_weights(roi.vertices) if mode == "centroid_weighted" else None
        out[..., k] = func(values[..., roi.vertices], w)
    return out
