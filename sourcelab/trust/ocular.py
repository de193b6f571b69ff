"""Which cortical areas can be mistaken for eye activity at 19 electrodes, and a check of the
slow-wave maximum against them.

Eye movements and blinks project onto the scalp with a frontal-pole pattern
(:func:`sourcelab.intake.ocular.ocular_templates`).  Some cortical sources project almost the
same pattern: on the shipped head model the surface-normal sources of the orbitofrontal and
frontopolar areas (BA10, BA11, BA47, BA25) have scalp maps whose median cosine with the ocular
template subspace is 0.80-0.86, above :data:`~sourcelab.intake.ocular.OCULAR_R`.  A slow-wave
maximum there cannot be told apart from residual eye artefact by its topography, whatever the
correction did, so the analysis says so.

Pure functions over arrays (gain matrix, positions, vertex index arrays).
"""

from __future__ import annotations

import numpy as np

from ..intake.ocular import OCULAR_R, ocular_templates, subspace_cosine


def source_ocular_cosine(
    gain_fixed: np.ndarray, ch_pos: np.ndarray, nasion: np.ndarray
) -> np.ndarray:
    """Cosine of every source's scalp map with the ocular template subspace.

    Parameters
    ----------
    gain_fixed : ndarray, shape (n_ch, n_src)
        Surface-normal leadfield (not re-referenced; the cosine uses the average reference).
    ch_pos : ndarray, shape (n_ch, 3)
        Electrode positions, metres, head coordinates.
    nasion : ndarray, shape (3,)
        Nasion position, metres, same frame.

    Returns
    -------
    ndarray, shape (n_src,)
        Cosine of each source's average-referenced scalp map with the span of the vertical and
        horizontal eye templates: 1 in the subspace, 0 orthogonal to it.
    """
    return subspace_cosine(np.asarray(gain_fixed, float), ocular_templates(ch_pos, nasion))


def confusable_rois(cosines: np.ndarray, rois) -> dict:
    """ROIs whose sources' median cosine with the ocular pattern reaches ``OCULAR_R``.

    Parameters
    ----------
    cosines : ndarray, shape (n_src,)
        From :func:`source_ocular_cosine`.
    rois : iterable of objects with ``name``, ``hemisphere`` and ``vertices``
        ``vertices`` index ``cosines``.

    Returns
    -------
    dict
        ``(name, hemisphere) -> median cosine`` (rounded to 3 decimals) for the confusable
        ROIs.
    """
    out = {}
    for roi in rois:
        med = float(np.median(cosines[np.asarray(roi.vertices)]))
        if med >= OCULAR_R:
            out[(roi.name, roi.hemisphere)] = round(med, 3)
    return out


def slow_maximum_check(
    roi_values: np.ndarray, rois, confusable: dict, *, band: str = "delta"
) -> dict:
    """Where the slow-wave maximum lies and whether it is in an ocular-confusable ROI.

    Parameters
    ----------
    roi_values : ndarray, shape (n_rois,)
        Absolute band power per ROI (same order as ``rois``).
    rois : sequence of ROI
        The ROIs of ``roi_values``, with ``name`` and ``hemisphere``.
    confusable : dict
        From :func:`confusable_rois`.
    band : str
        Name used in the message.

    Returns
    -------
    dict
        ``band``, ``roi``, ``hemisphere`` of the maximum, ``confusable`` (bool),
        ``median_cosine`` (or None) and ``warning`` (text or None).
    """
    rois = list(rois)
    k = int(np.argmax(roi_values))
    key = (rois[k].name, rois[k].hemisphere)
    hit = key in confusable
    warning = None
    if hit:
        warning = (
            f"the {band} maximum lies in {key[0]} ({key[1]}), an area whose scalp "
            f"pattern resembles eye activity at 19 electrodes (median r = "
            f"{confusable[key]:.2f}): it may be residual eye artefact rather than a "
            "cortical generator"
        )
    return {
        "band": band,
        "roi": key[0],
        "hemisphere": key[1],
        "confusable": hit,
        "median_cosine": confusable.get(key),
        "warning": warning,
    }


__all__ = ["source_ocular_cosine", "confusable_rois", "slow_maximum_check"]
