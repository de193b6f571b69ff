"""Which Brodmann areas cannot be resolved from 19 scalp electrodes (cortex-only source space).

Rule (decided per Brodmann area, both hemispheres pooled, because the template is nearly
symmetric and a left/right split of the flag would only echo atlas noise):

An area is *not resolvable from 19 scalp electrodes* when

A. **mostly not cortex**: more than half of its template sources lie on the medial wall (the
   area loses them in the cortex-only space; BA27, BA33 and BA34 lose all); or
B. **mostly deep or mesial and drowned by its neighbours**: its leakage own-share
   (:func:`sourcelab.trust.leakage_matrix` on the cortex-only operator: the fraction of the area's
   expected power that comes from its own sources under spatially white cortical activity) is
   below :data:`OWN_SHARE_MIN` = 5 % (the issue's figure: 95 % of its value comes from other
   areas) **and** more than half of its sources are farther than :data:`COVER_MM` from every
   electrode; or
C. **smaller than the blur**: own-share below 5 % and fewer than
   :data:`sourcelab.rois.SMALL_MIN_VERTICES` (50) cortical sources in a hemisphere.

:data:`COVER_MM` = 45 mm is derived from the montage, not taken from a paper: neighbouring 10-20
sites are 36° apart (about 60 mm on this scalp), so a point of the convexity lies at most about
30·√2 ≈ 42 mm tangentially from its nearest electrode, and cortex lies 12-15 mm below the scalp
(from memory); √(42² + 15²) ≈ 45 mm.  A source farther than that from *every* electrode is
outside the montage's cover (mesial, basal or deep).

References
----------
Hauk O, Stenroos M, Treder MS (2019).  NeuroImage 186 (from memory): resolution metrics.
Yeo BTT et al. (2011).  J Neurophysiol 106:1125-1165: medial-wall label.
"""

from __future__ import annotations

import functools

import numpy as np

from .._docs import fill_doc

#: Leakage own-share below which an area's value is mostly other areas' activity.
OWN_SHARE_MIN = 0.05
#: Distance (mm) from every electrode beyond which a source is outside the montage's cover.
COVER_MM = 45.0
#: Fraction of an area that makes it "mostly" (medial wall, far from the electrodes).
MOSTLY = 0.5

RESOLVABILITY_COLUMNS = (
    "area",
    "n_template",
    "n_cortex",
    "medial_wall_fraction",
    "own_share_left",
    "own_share_right",
    "own_share",
    "far_fraction",
    "min_hemisphere_sources",
    "resolvable",
    "reason",
)


def own_shares(space) -> np.ndarray:
    """Leakage own-share of every area code of a :class:`~sourcelab.trust.cortex.CortexSpace`.

    Parameters
    ----------
    space : CortexSpace
        Cortical sources, their fixed-orientation gain and sLORETA operator; the leakage is
        computed on :meth:`CortexSpace.atlas` (areas with at least one source).

    Returns
    -------
    ndarray, shape (n_codes,)
        NaN for codes without sources (and for code 0).
    """
    from .leakage import leakage_matrix

    leak = leakage_matrix(space.op, space.gain, space.atlas())
    out = np.full(len(space.names), np.nan)
    idx = {(n, h): c for c, (n, h) in enumerate(zip(space.names, space.hemispheres))}
    for n, h, s in zip(leak.names, leak.hemispheres, leak.self_share):
        out[idx[(n, h)]] = s
    return out


def resolvability_table(
    space, ch_pos: np.ndarray, src_pos: np.ndarray, *, own: np.ndarray | None = None
):
    """Apply the module's rule to every Brodmann area.

    Parameters
    ----------
    space : CortexSpace
        The cortical sources of the head model (:func:`sourcelab.trust.cortex.cortex_space`).
    ch_pos : ndarray, shape (n_ch, 3)
        Electrode positions, metres (head frame).
    src_pos : ndarray, shape (n_src, 3)
        Source positions, metres (head frame), in the space's source order.
    own : ndarray, shape (n_codes,), optional
        :func:`own_shares` of ``space`` if already computed.

    Returns
    -------
    DataFrame
        One row per area, columns :data:`RESOLVABILITY_COLUMNS`.
    """
    import pandas as pd

    from ..rois.registry import SMALL_MIN_VERTICES
    from .cortex import template_area_counts

    own = own_shares(space) if own is None else np.asarray(own)
    template = template_area_counts(space)
    far = np.linalg.norm(src_pos[space.sources][:, None] - ch_pos[None], axis=-1).min(1)
    far = far * 1e3 > COVER_MM
    n_a = space.n_areas // 2
    rows = []
    for k in range(1, n_a + 1):
        codes = (k, k + n_a)
        n_t = int(sum(template[c] for c in codes))
        per_h = [int((space.codes == c).sum()) for c in codes]
        n_c = sum(per_h)
        wall = 1.0 - n_c / n_t if n_t else 1.0
        o = np.array([own[c] for c in codes])
        o_mean = float(np.nanmean(o)) if np.isfinite(o).any() else np.nan
        sel = np.isin(space.codes, codes)
        far_frac = float(far[sel].mean()) if sel.any() else np.nan
        low = not (o_mean >= OWN_SHARE_MIN)
        reason = []
        if wall > MOSTLY:
            reason.append(f"medial wall {wall:.0%}")
        if low and far_frac > MOSTLY:
            reason.append(
                f"own-share {o_mean:.1%} < 5 % and {far_frac:.0%} of sources "
                f"> {COVER_MM:g} mm from every electrode"
            )
        if low and min(per_h) < SMALL_MIN_VERTICES and wall <= MOSTLY:
            reason.append(
                f"own-share {o_mean:.1%} < 5 % and {min(per_h)} sources in a hemisphere (< 50)"
            )
        rows.append(
            dict(
                area=space.names[k],
                n_template=n_t,
                n_cortex=n_c,
                medial_wall_fraction=round(wall, 3),
                own_share_left=o[0],
                own_share_right=o[1],
                own_share=o_mean,
                far_fraction=far_frac,
                min_hemisphere_sources=min(per_h),
                resolvable=not reason,
                reason="; ".join(reason),
            )
        )
    return pd.DataFrame(rows, columns=list(RESOLVABILITY_COLUMNS))


def unresolvable_codes(space, table) -> np.ndarray:
    """Area codes (both hemispheres) of the areas the table marks not resolvable.

    Parameters
    ----------
    space : CortexSpace
        The space whose ``names`` give the area of each code.
    table : DataFrame
        From :func:`resolvability_table` (columns ``area`` and ``resolvable``).

    Returns
    -------
    ndarray of int64, shape (n_excluded,)
        Codes ``1..n_codes-1`` whose area is not resolvable, in increasing order (left and
        right codes of the same area both included).
    """
    bad = set(table.loc[~table["resolvable"], "area"])
    return np.array(
        [c for c in range(1, len(space.names)) if space.names[c] in bad], dtype=np.int64
    )


@functools.lru_cache(maxsize=4)
def localisation_context(lambda2: float = 1 / 9):
    """The cortical space, the own-share per area code and the codes not resolvable (cached).

    Parameters
    ----------
    lambda2 : float
        λ² of the fixed-orientation sLORETA operator the shares are computed for.

    Returns
    -------
    space : CortexSpace
        :func:`sourcelab.trust.cortex.cortex_space` for ``lambda2``.
    own : ndarray, shape (n_codes,)
        Leakage own-share per area code (fraction, 0-1; NaN without sources), from
        :func:`own_shares`.
    exclude : ndarray of int
        Area codes (both hemispheres) not resolvable from 19 scalp electrodes.
    table : DataFrame
        :func:`resolvability_table`.
    """
    from ..headmodel import load_head_model
    from .cortex import cortex_space

    model = load_head_model()
    space = cortex_space(float(lambda2))
    own = own_shares(space)
    table = resolvability_table(space, model.ch_pos, model.src_pos, own=own)
    return space, own, unresolvable_codes(space, table), table


@fill_doc
def resolvable_areas(lambda2: float = 1 / 9) -> dict[str, bool]:
    """Brodmann area name (``"BA17"``) -> resolvable from 19 scalp electrodes (this module's
    rule; both hemispheres share the verdict).

    Parameters
    ----------
    %(lambda2_fixed_sloreta)s

    Returns
    -------
    dict of str to bool
        One entry per Brodmann area of the template, ``True`` when resolvable.
    """
    table = localisation_context(lambda2)[3]
    return dict(zip(table["area"], table["resolvable"].astype(bool)))
