"""Candidates ranked by the peaks of per-source z-maps.

For every band and measure, the per-source z-map (against per-source norms) is searched for local
maxima of ``z`` (excess) and of ``-z`` (deficit) beyond the deviation threshold on the cortical
mesh (:mod:`sourcelab.trust.localise`).  Each peak names the Brodmann area of highest
template-match evidence around it (:func:`sourcelab.trust.naming.listed_naming`; under
model mismatch more often the true area than the area that contains the peak), and reports its
signed distance to that area's border (negative when the peak lies outside the named area); one
candidate per (measure, band, direction, area) keeps the strongest peak.  Order:

1. **absolute-power** candidates, by their *focal evidence* (below);
2. then **relative-power** candidates, by focal evidence, labelled ``supporting``: relative
   power is compositional (one band's excess lowers every other band's share), so a relative
   deviation is shown as supporting evidence and never above an absolute one.

Focal evidence (:func:`focal_evidence`).  A candidate claims a *focal* generator in the named
area, and 19 electrodes cannot produce a focal map sharper than sLORETA's blur: the image of
any single source or patch is a smooth blob whose half-maximum region is a disc of radius
~36 mm (:mod:`sourcelab.targets.candidates`).  Each candidate therefore
carries ``fit``, the correlation of the direction's deviation map (``max(z, 0)`` or
``max(-z, 0)``) with the map a 12 mm patch of deviation at the named area's best candidate
source predicts (the template match the name is read from, :mod:`sourcelab.trust.naming`;
``fit ** 2`` is the share of the map's spatial variance a focal generator there explains), and
is ranked by ``|peak z| x max(fit, 0)``: the peak height discounted by how well a focal
generator explains the map.  A sharp spike of one or a few sources, which no source seen
through the blur can produce, or a map of excursions scattered over several places fits
badly and ranks below a blur-shaped cluster of the same height; between two peaks that fit
equally, the higher ranks first (ties: the higher |peak z|).  Below-norm peaks are ranked by
the same rule as above-norm ones.  Chosen on simulated focal deviations of training seeds only
(``benchmarks/bench_localisation.py``, row ``candidate_list_first``; its README gives the
figures).  There, the peaks that outranked a planted excess were the map's own null
excursions (people without a planted patch have a highest peak of median |z| 2.3-2.4), not
sources with small norm SDs (the per-source SD at them is typical); they were no sharper
than the weak planted excesses they outranked (both just above the threshold, a few to a few
tens of sources), so cluster extent and cluster mass (supra-threshold sources, and their
summed excess over the threshold) ranked no better than |peak z|; but their maps were
scattered, with no single focal generator explaining them (median ``fit`` 0.31, against
0.79 for the planted excess peaks named correctly).  The evidence is a ranking key, not a
test: ``peak_z`` keeps its p-value meaning, and the rule shows the same rows, so it does not
make a map's noise peaks go away.

Areas not resolvable from 19 scalp electrodes (:mod:`sourcelab.trust.resolvability`) are left
out unless ``include_unresolvable``.  Each candidate carries the area's leakage own-share and the
calibrated probability that the generator lies in the named area
(:func:`sourcelab.trust.probability.area_probability`; calibrated for the area named at a map's
highest peak under the simulation model of :mod:`sourcelab.simulate.localisation`).
Statistical deviation only: whether an area is worth training is for a practitioner to decide.
"""

from __future__ import annotations

import numpy as np

from ..constants import Z_THRESHOLD

#: |z| from which a peak is a candidate (two-sided p < 0.05; common practice).
DEVIATION_Z = Z_THRESHOLD

#: Where a peak candidate lies and how far it deviates (shared by the table and its listing).
_PEAK_PLACE = (
    "direction",
    "area",
    "hemisphere",
    "lobe",
    "peak_z",
    "x_mni152",
    "y_mni152",
    "z_mni152",
    "border_mm",
)
PEAK_CANDIDATE_COLUMNS = (
    "rank",
    "role",
    "measure",
    "band",
    *_PEAK_PLACE,
    "fit",
    "cluster_size",
    "cluster_areas",
    "own_share",
    "probability",
    "resolvable",
    "source",
    "vertex",
)
#: Columns ``sourcelab targets list`` prints of peak candidates (band before measure).
PEAK_LIST_COLUMNS = (
    "rank",
    "role",
    "band",
    "measure",
    *_PEAK_PLACE,
    "fit",
    "own_share",
    "probability",
)


def focal_evidence(peak_z, fit):
    """Ranking key of peak candidates: ``|peak z| x max(fit, 0)`` (module docstring).

    Parameters
    ----------
    peak_z : float or ndarray
        z at the peak (either sign).
    fit : float or ndarray
        Correlation of the deviation map with the named area's best focal template, in
        [-1, 1]; NaN (no template) counts as 0.

    Returns
    -------
    float or ndarray
        Non-negative; larger ranks first.
    """
    f = np.nan_to_num(np.asarray(fit, dtype=float), nan=0.0)
    return np.abs(np.asarray(peak_z, dtype=float)) * np.clip(f, 0.0, None)


def _named_fit(evidence, space, code: int) -> float:
    """Best template correlation of the named area's candidates (NaN without evidence)."""
    if evidence is None:
        return float("nan")
    mine = space.codes[evidence.candidates] == code
    return float(evidence.corr[mine].max()) if mine.any() else float("nan")


def peak_candidates(
    zmaps: dict,
    space,
    *,
    own: np.ndarray,
    exclude=(),
    threshold: float = DEVIATION_Z,
    include_unresolvable: bool = False,
    max_peaks: int = 30,
    probability_model: dict | None = None,
):
    """Rank candidate areas by z-map peaks.

    Parameters
    ----------
    zmaps : dict
        ``{(measure, band): ndarray (n_src,)}`` per-source z on ``space``'s sources.
    space : CortexSpace
        Localisation space: area codes, names, lobes, mesh (MNI305 mm) and border distances.
    own : ndarray, shape (n_codes,)
        Leakage own-share per area code.
    exclude : sequence of int
        Area codes not resolvable from 19 electrodes.
    threshold : float
        |z| a peak must exceed.
    include_unresolvable : bool
        Keep candidates in excluded areas (flagged ``resolvable = False``).
    max_peaks : int
        Peaks examined per map and direction.
    probability_model : dict, optional
        Coefficients (default: the shipped ones).

    Returns
    -------
    DataFrame
        Columns :data:`PEAK_CANDIDATE_COLUMNS`.
    """
    import pandas as pd

    from ..headmodel.geometry import mni305_to_mni152
    from ..trust.probability import area_probability
    from ..trust.localise import clusters, local_maxima, signed_border_distance
    from ..trust.naming import listed_naming

    excl = set(int(c) for c in exclude)
    rows = []
    for (measure, band), z in zmaps.items():
        z = np.asarray(z, dtype=float)
        for sign, direction in ((1.0, "above norm"), (-1.0, "below norm")):
            v = np.clip(sign * z, 0.0, None)
            peaks = local_maxima(v, space.mesh, threshold=threshold)[:max_peaks]
            if not peaks.size:
                continue
            cl = clusters(v, space.mesh, threshold)
            seen = set()
            memo = np.full(space.n_src, np.nan)  # template correlations shared by v's peaks
            for s in peaks:
                # every area may be named: a peak whose best area is not resolvable is left
                # out (below), not renamed after a resolvable neighbour
                code, evidence, resolvable = listed_naming(
                    v, space, s, exclude=excl, kind="z", memo=memo
                )
                if code == 0 or code in seen:
                    continue
                seen.add(code)
                if not resolvable and not include_unresolvable:
                    continue
                members = np.flatnonzero(cl == cl[s])
                codes, counts = np.unique(space.codes[members], return_counts=True)
                o = np.argsort(-counts, kind="stable")
                spans = ";".join(f"{space.label(c)}:{n}" for c, n in zip(codes[o], counts[o]))
                xyz = mni305_to_mni152(space.mesh.pos_mm[s])
                rows.append(
                    dict(
                        role="primary" if measure == "absolute" else "supporting",
                        measure=measure,
                        band=band,
                        direction=direction,
                        area=space.names[code],
                        hemisphere=space.hemispheres[code],
                        lobe=space.lobes[code],
                        peak_z=float(z[s]),
                        fit=_named_fit(evidence, space, code),
                        x_mni152=round(float(xyz[0]), 1),
                        y_mni152=round(float(xyz[1]), 1),
                        z_mni152=round(float(xyz[2]), 1),
                        border_mm=round(
                            signed_border_distance(
                                space.codes, space.mesh, space.border_mm, s, code
                            ),
                            1,
                        ),
                        cluster_size=int(members.size),
                        cluster_areas=spans,
                        own_share=float(own[code]),
                        probability=area_probability(
                            v,
                            space,
                            code,
                            own,
                            kind="z",
                            model=probability_model,
                            peak=s,
                            evidence=evidence,
                        ),
                        resolvable=resolvable,
                        source=int(s),
                        vertex=int(space.vertices[s]),
                    )
                )
    out = pd.DataFrame(rows, columns=[c for c in PEAK_CANDIDATE_COLUMNS if c != "rank"])
    if len(out):
        out["_m"] = (out["measure"] != "absolute").astype(int)
        out["_e"] = -focal_evidence(out["peak_z"], out["fit"])
        out["_a"] = -out["peak_z"].abs()
        out = out.sort_values(["_m", "_e", "_a"], kind="stable")
        out = out.drop(columns=["_m", "_e", "_a"])
        out = out.reset_index(drop=True)
    out.insert(0, "rank", np.arange(1, len(out) + 1))
    return out


def peak_candidates_for(zmaps: dict, *, lambda2: float = 1 / 9, include_unresolvable: bool = False):
    """:func:`peak_candidates` on the shipped template (cached space, own-shares, resolvability).

    Parameters
    ----------
    zmaps : dict
        ``{(measure, band): ndarray (n_src,)}`` per-source z on the head model's sources.
    lambda2 : float
        λ² of the analysis (own-shares and resolvability are those of its operator).
    include_unresolvable : bool
        Keep candidates in areas not resolvable from 19 electrodes (flagged
        ``resolvable = False``).

    Returns
    -------
    DataFrame
        Columns :data:`PEAK_CANDIDATE_COLUMNS`, as :func:`peak_candidates`.
    """
    from ..trust.resolvability import localisation_context

    space, own, exclude, _ = localisation_context(float(lambda2))
    return peak_candidates(
        zmaps, space, own=own, exclude=exclude, include_unresolvable=include_unresolvable
    )
