"""Naming the area of a peak by template matching of the whole map (pure array functions).

Under model mismatch (a real head is not the template; electrodes are not where the template
puts them) the *peak* of an sLORETA map of one focal source moves by millimetres to centimetres,
but the map's overall shape - which distant regions receive leakage, and how much - changes
less.  :func:`match_scores` therefore compares the observed map with the map the template
predicts for a unit source at each candidate source near the peak: column ``s`` of the
resolution matrix ``R = K G`` (``K`` the sLORETA kernel, ``G`` the template gain).  The score of
candidate ``s`` is the Pearson correlation over the sources of the space between
``|m|**power`` and ``|R[:, s]|**(2 power)`` (``m`` a power or |z| map; ``power = 0.5`` compares
amplitudes).  Every candidate lies within ``cand_mm`` of the peak in the same hemisphere; the
rows are every ``row_step``-th source (the maps are smooth, so a sparse grid keeps the shape).

An area's score is the best correlation of any of its candidates (:attr:`MatchResult.
area_score`); areas are named best first.  This is the template-matching (maximum-correlation)
view of source localisation; with the template as the true head and no noise it reduces to
sLORETA's own zero localisation error (the observed map *is* column ``s`` of ``R``;
Pascual-Marqui 2002).

Area evidence (:func:`area_evidence`).  The best single correlation ignores how *many*
candidates of an area explain the map nearly as well: under mismatch the generator is one of
several sources whose template maps the observed map fits about equally.  Treating the
generator as unknown, with a uniform prior over the candidate sources and the likelihood of a
Gaussian misfit between the unit-normalised observed and template maps (``||x - t_s||**2 =
2 - 2 corr_s``, so ``L_s`` is proportional to ``exp(beta corr_s)`` with ``beta = 1 / tau**2``),
the posterior probability of an area is proportional to ``sum over its candidates of
exp(beta corr_s)``: the area's log evidence is a log-sum-exp of its candidates' scaled
correlations (:func:`evidence_from_corr`; an optional Gaussian prior on the distance from the
peak did not help).  Large ``beta`` reduces it to the best correlation above, ``beta = 0`` to
counting an area's candidates.  This is the Bayesian reading of localisation as a posterior over
source positions (Schmidt, George & Wood 1999) applied to resolution-matrix templates (Grave de
Peralta Menendez & Gonzalez Andino 1998); both from memory.  :meth:`MatchResult.posterior`
normalises the evidence, but the tempered likelihood makes it *uncalibrated*: the probability a
candidate list states comes from :mod:`sourcelab.trust.probability`.

Where it is used.  The match parameters (:data:`CAND_MM`, :data:`ROW_STEP`, :data:`POWER`) were
chosen on training simulations (``benchmarks/bench_localisation.py``'s true head with the jitter
realisations of seed 0): of powers 0.25/0.5/1, candidate radii 15/25/40 mm, rows within 40-80 mm
of the peak or all rows (every 1st or 4th), amplitudes with all rows every 4th and 25 mm named
best for the cost.  The evidence parameters (:data:`EVIDENCE_BETA` 60, :data:`EVIDENCE_MM` 35,
no distance prior) were chosen on point-source maps of mismatch seed 1 (``bench_localisation.py
--sweep``: beta 0-10^4, radii 15-50 mm, distance prior none/10/20 mm; radius 50 mm was 0.008
better on seed 1, within one binomial SE, at four times the cost) and are reported on seed 2,
held out.  One parameter set serves power maps and z-maps.  Held out (seed 2, n = 600 each,
all areas eligible), the true area is named first for 0.568 / 0.615 of noise-free / SNR-3 point
sources (peak's area 0.515 / 0.537), in the top 3 for 0.878 / 0.892 (0.835 / 0.853), and for
0.335 of focal deviations on the excess z-map (peak's area 0.300): better, but short of the
issue's 0.65 and 0.55, because the peak itself lies in the true area for only 0.53 of the
sources (``bench_localisation.py --ceiling``).

Patch templates for z-maps (:data:`ZMAP_PATCH_MM`).  A focal deviation is a patch of
synchronous excess, not a point; its z-map is wider than a point source's power map, so point
templates match it poorly (on noise-free patch z-maps the point-template evidence named the
centre's area *less* often than the peak did, 0.45 against 0.51).  For z-maps the template of
candidate ``s`` is therefore the map of a coherent patch of radius 12 mm around ``s``
(:func:`patch_gain`).  Chosen on training deviations (mismatch seed 1, n = 300, excess z-maps,
beta 60, radius 35 mm): centre's area named first 0.33 with point templates, 0.42 / 0.51 / 0.47
with 8 / 12 / 16 mm patches.  The simulated deviations are 10-15 mm patches, so the template
extent matches the simulation's: a real deviation of another extent is named less well (the
8 and 16 mm rows give the size of that effect).  Held out (seed 2, n = 600): 0.465 named first
(top 3 0.728) against 0.337 with point templates and 0.300 for the peak's area; the same
patches without person variability or sampling noise are named first 0.63 (peak's area 0.42),
so the issue's 0.55 is not reached by the naming rule alone.  Candidate lists
(:mod:`sourcelab.targets.peaks`) name the area of highest evidence through
:func:`candidate_naming` (pipeline version 4; before, the area that holds the peak).

References
----------
Pascual-Marqui RD (2002).  Methods Find Exp Clin Pharmacol 24 Suppl D:5-12.
Grave de Peralta Menendez R, Gonzalez Andino SL (1998).  A critical analysis of linear inverse
solutions to the neuroelectromagnetic inverse problem.  IEEE Trans Biomed Eng 45:440-448 (from
memory): resolution-matrix columns as the point-spread of a unit source.
Schmidt DM, George JS, Wood CC (1999).  Bayesian inference applied to the electromagnetic
inverse problem.  Hum Brain Mapp 7:195-212 (from memory): posterior probability of source
positions rather than one best estimate.
"""

from __future__ import annotations

from dataclasses import dataclass

import functools

import numpy as np

from .._docs import fill_doc
from ..checks import check_option
from ..errors import InputError

#: Candidates within this distance (mm, same hemisphere) of the peak are matched.
CAND_MM = 25.0
#: Every ROW_STEP-th source is used as a row of the correlation.
ROW_STEP = 4
#: Exponent: maps compared as ``|m| ** POWER`` (0.5: amplitudes of power maps).
POWER = 0.5
#: Area evidence (:func:`area_evidence`): candidates within this radius of the peak, mm ...
EVIDENCE_MM = 35.0
#: ... weighted by ``exp(EVIDENCE_BETA * corr)`` ...
EVIDENCE_BETA = 60.0
#: ... and by a Gaussian prior of this SD (mm) on their distance from the peak (None: flat).
EVIDENCE_SIGMA_MM: float | None = None
#: Templates of z-maps (focal deviations): coherent patches of this radius (mm) around each
#: candidate instead of single sources (:func:`patch_gain`); power maps keep point templates.
ZMAP_PATCH_MM = 12.0
#: Template patch radius (mm) per map kind (None: point templates).
PATCH_MM = {"power": None, "z": ZMAP_PATCH_MM}


@dataclass(frozen=True)
class MatchResult:
    """Template-match scores of one peak.

    Attributes
    ----------
    candidates : ndarray of int, shape (n_cand,)
        Source indices matched.
    corr : ndarray, shape (n_cand,)
        Correlation of each candidate's predicted map with the observed map.
    area_score : ndarray, shape (n_codes,)
        Best correlation per area code (``-inf`` where no candidate lies).
    """

    candidates: np.ndarray
    corr: np.ndarray
    area_score: np.ndarray

    def order(self, exclude=None) -> np.ndarray:
        """Area codes by decreasing score (codes without candidates dropped).

        Parameters
        ----------
        exclude : array of int, optional
            Area codes left out (e.g. not resolvable from 19 electrodes).

        Returns
        -------
        ndarray of int
            Area codes, best template match first.
        """
        s = self.area_score.copy()
        if exclude is not None and len(exclude):
            s[np.asarray(exclude, dtype=np.int64)] = -np.inf
        o = np.argsort(-s, kind="stable")
        return o[np.isfinite(s[o])]

    def posterior(self) -> np.ndarray:
        """Scores turned into weights that sum to 1 over the areas with candidates.

        Returns
        -------
        ndarray, shape (n_codes,)
            ``exp(score)`` normalised (0 where the score is ``-inf``); for
            :func:`area_evidence` the uncalibrated area posterior of the module docstring.
        """
        s = self.area_score
        ok = np.isfinite(s)
        w = np.zeros(s.size)
        if ok.any():
            w[ok] = np.exp(s[ok] - s[ok].max())
            w /= w.sum()
        return w

    def margin(self, area: int) -> float:
        """Score of ``area`` minus the best score of any other area (0 when alone).

        Parameters
        ----------
        area : int
            Area code.

        Returns
        -------
        margin : float
            Difference of correlations, in [-2, 2] for an area with candidates (``-inf``
            without); positive when ``area`` matches best.
        """
        other = np.delete(self.area_score, area)
        other = other[np.isfinite(other)]
        best = float(other.max()) if other.size else self.area_score[area]
        return float(self.area_score[area] - best)


@fill_doc
def match_scores(values: np.ndarray, space, peak: int, **match) -> MatchResult:
    """Template-match the map around ``peak`` (see the module docstring).

    Parameters
    ----------
    %(match_map_space_peak)s
    **match
        ``cand_mm``, ``row_step`` and ``power`` of :func:`candidate_correlations` (defaults
        :data:`CAND_MM`, :data:`ROW_STEP`, :data:`POWER`).

    Returns
    -------
    MatchResult
        Candidate sources, their correlations and the best correlation per area code.
    """
    cand, corr = candidate_correlations(values, space, peak, **match)
    score = np.full(len(space.names), -np.inf)
    np.maximum.at(score, space.codes[cand], corr)
    score[0] = -np.inf
    return MatchResult(candidates=cand, corr=corr, area_score=score)


@fill_doc
def candidate_correlations(
    values: np.ndarray,
    space,
    peak: int,
    *,
    cand_mm: float = CAND_MM,
    row_step: int = ROW_STEP,
    power: float = POWER,
    patch_mm: float | None = None,
    memo: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Candidates within ``cand_mm`` of ``peak`` (same hemisphere) and their correlations.

    Parameters
    ----------
    %(match_map_space_peak)s
    cand_mm : float
        Candidate radius, mm.
    row_step : int
        Row subsampling of the correlation.
    power : float
        Exponent of the compared maps.
    patch_mm : float or None
        Template of candidate ``s``: a coherent patch of this radius around it
        (:func:`patch_gain`); None: the single source.
    memo : ndarray, shape (n_src,), optional
        Correlations already computed for these ``values`` and options (NaN: not yet), read
        and filled in place: peaks of one map share their candidates' correlations.

    Returns
    -------
    candidates : ndarray of int, shape (n_cand,)
        Source indices, ascending.
    corr : ndarray, shape (n_cand,)
        Pearson correlation of ``|values| ** power`` with each candidate's template map
        ``|K g_s| ** (2 power)`` over every ``row_step``-th source (``g_s`` the template gain
        of the source or patch: ``K g_s = R[:, s]`` for a single source).
    """
    v = np.asarray(values, dtype=float)
    if v.shape != (space.n_src,):
        raise InputError(f"values: need shape ({space.n_src},), got {v.shape}")
    if not 0 <= int(peak) < space.n_src:
        raise InputError(f"peak: source {peak} is not in 0..{space.n_src - 1}")
    if row_step < 1 or cand_mm <= 0 or power <= 0:
        raise InputError("row_step must be >= 1, cand_mm and power > 0")
    pos = space.mesh.pos_mm
    right = space.right
    d = np.linalg.norm(pos - pos[peak], axis=1)
    cand = np.flatnonzero((d <= cand_mm) & (right == right[peak]))
    gain = space.gain if patch_mm is None else patch_gain(space, float(patch_mm))
    todo = cand if memo is None else cand[np.isnan(memo[cand])]
    corr = _template_correlations(v, space, gain[:, todo], int(row_step), power)
    if memo is None:
        return cand, corr
    memo[todo] = corr
    return cand, memo[cand]


def _template_correlations(v, space, g, row_step: int, power: float) -> np.ndarray:
    """Correlation of ``|v| ** power`` with the template maps ``|K g| ** (2 power)``."""
    a, gram = _row_kernel(space, row_step)
    x = np.abs(v[::row_step]) ** power
    x = x - x.mean()
    nx = np.linalg.norm(x)
    if nx == 0:
        return np.zeros(g.shape[1])
    t = a @ g
    np.abs(t, out=t)
    if 2.0 * power == 1.0:
        # |K g| squared sums to g' (K'K) g: the column norms without a second pass over t
        sq = np.einsum("ij,ij->j", g, gram @ g)
    else:
        t **= 2.0 * power
        sq = np.einsum("ij,ij->j", t, t)
    total = t.sum(axis=0)
    spread = np.sqrt(np.maximum(sq - total * total / t.shape[0], 0.0)) + 1e-300
    return (x / nx) @ t / spread


@functools.lru_cache(maxsize=4)
def _row_kernel(space, row_step: int) -> tuple[np.ndarray, np.ndarray]:
    """Every ``row_step``-th operator row, contiguous, and its Gram matrix (cached per space)."""
    a = np.ascontiguousarray(space.op.kernel[::row_step])
    return a, a.T @ a


@functools.lru_cache(maxsize=4)
def patch_gain(space, radius_mm: float) -> np.ndarray:
    """Template gain of a coherent unit patch around every source (cached per space).

    Column ``s`` sums the gain columns of the sources within ``radius_mm`` of source ``s``
    (straight-line, mid-thickness positions, same hemisphere): the topography of a patch of
    equal, synchronous activity, as a focal deviation of 1-2 cm is modelled
    (:mod:`sourcelab.simulate.localisation`).

    Parameters
    ----------
    space : CortexSpace
        Supplies the template gain and mesh positions.
    radius_mm : float
        Patch radius, mm (> 0).

    Returns
    -------
    gain : ndarray, shape (n_ch, n_src)
        Same unit as ``space.gain`` (summed over each patch).
    """
    from scipy import sparse
    from scipy.spatial import cKDTree

    if not radius_mm > 0:
        raise InputError(f"patch radius must be > 0 mm, got {radius_mm}")
    pos = space.mesh.pos_mm
    right = space.right
    pairs = cKDTree(pos).query_pairs(radius_mm, output_type="ndarray")
    pairs = pairs[right[pairs[:, 0]] == right[pairs[:, 1]]]
    diag = np.arange(space.n_src)
    i = np.r_[pairs[:, 0], pairs[:, 1], diag]
    j = np.r_[pairs[:, 1], pairs[:, 0], diag]
    member = sparse.csr_matrix((np.ones(i.size), (i, j)), shape=(space.n_src, space.n_src))
    return np.asarray((member @ space.gain.T).T)


def evidence_from_corr(
    corr: np.ndarray,
    area_codes: np.ndarray,
    dist_mm: np.ndarray,
    n_codes: int,
    *,
    beta: float = EVIDENCE_BETA,
    radius_mm: float = EVIDENCE_MM,
    sigma_mm: float | None = EVIDENCE_SIGMA_MM,
) -> np.ndarray:
    """Log evidence per area from candidate correlations (the area posterior's numerator).

    ``log sum over candidates s in the area within radius_mm of exp(beta * corr_s -
    dist_s**2 / (2 sigma_mm**2))``: a uniform prior over candidate sources, the Gaussian misfit
    likelihood of unit-normalised maps (module docstring), and, when ``sigma_mm`` is given, a
    Gaussian prior on the distance between the generator and the map's peak.

    Parameters
    ----------
    corr : ndarray, shape (n_cand,)
        Correlation of each candidate's template map with the observed map.
    area_codes : ndarray of int, shape (n_cand,)
        Area code of each candidate (0 = none: never named).
    dist_mm : ndarray, shape (n_cand,)
        Distance of each candidate from the peak, mm.
    n_codes : int
        Number of area codes (including 0).
    beta : float
        Inverse temperature ``1 / tau**2`` of the likelihood (>= 0; 0: candidates counted).
    radius_mm : float
        Candidates farther than this from the peak are left out, mm.
    sigma_mm : float or None
        SD of the distance prior, mm; None: flat.

    Returns
    -------
    ndarray, shape (n_codes,)
        Log evidence per area code (``-inf`` for code 0 and for areas without a candidate).

    Raises
    ------
    sourcelab.errors.InputError
        When ``beta`` is negative or ``radius_mm`` / ``sigma_mm`` is not positive.
    """
    if not (beta >= 0 and radius_mm > 0 and (sigma_mm is None or sigma_mm > 0)):
        raise InputError("beta must be >= 0, radius_mm and sigma_mm > 0")
    corr = np.asarray(corr, dtype=float)
    dist_mm = np.asarray(dist_mm, dtype=float)
    sel = dist_mm <= radius_mm
    e = beta * corr[sel]
    if sigma_mm is not None:
        e = e - 0.5 * (dist_mm[sel] / sigma_mm) ** 2
    out = np.full(int(n_codes), -np.inf)
    if not e.size:
        return out
    top = e.max()
    acc = np.zeros(int(n_codes))
    np.add.at(acc, np.asarray(area_codes, dtype=np.int64)[sel], np.exp(e - top))
    with np.errstate(divide="ignore"):
        out = np.log(acc) + top
    out[0] = -np.inf
    return out


@fill_doc
def area_evidence(values: np.ndarray, space, peak: int, **options) -> MatchResult:
    """Area posterior of the generator of the map around ``peak`` (see the module docstring).

    Parameters
    ----------
    %(match_map_space_peak)s
    **options
        ``beta``, ``radius_mm`` and ``sigma_mm`` of :func:`evidence_from_corr` (defaults
        :data:`EVIDENCE_BETA`, :data:`EVIDENCE_MM`, :data:`EVIDENCE_SIGMA_MM`); ``row_step``,
        ``power``, ``patch_mm`` and ``memo`` of :func:`candidate_correlations` (defaults
        :data:`ROW_STEP`, :data:`POWER`, point templates).

    Returns
    -------
    MatchResult
        Candidate sources, their correlations, and the log evidence per area code as
        ``area_score`` (:meth:`MatchResult.posterior` normalises it).
    """
    ev = {k: options.pop(k) for k in ("beta", "radius_mm", "sigma_mm") if k in options}
    radius = ev.setdefault("radius_mm", EVIDENCE_MM)
    cand, corr = candidate_correlations(values, space, peak, cand_mm=radius, **options)
    dist = np.linalg.norm(space.mesh.pos_mm[cand] - space.mesh.pos_mm[peak], axis=1)
    score = evidence_from_corr(corr, space.codes[cand], dist, len(space.names), **ev)
    return MatchResult(candidates=cand, corr=corr, area_score=score)


@fill_doc
def name_area(values: np.ndarray, space, peak: int, *, exclude=None, **kw) -> int:
    """Area code named for ``peak`` (best template match; 0 when no candidate is eligible).

    Parameters
    ----------
    %(match_map_space_peak)s
    exclude : array of int, optional
        Area codes that cannot be named (e.g. not resolvable from 19 electrodes).
    **kw
        ``cand_mm``, ``row_step`` and ``power`` of :func:`match_scores`.

    Returns
    -------
    code : int
        The named area's code, or 0.
    """
    o = match_scores(values, space, peak, **kw).order(exclude)
    return int(o[0]) if o.size else 0


@fill_doc
def candidate_naming(
    values: np.ndarray, space, peak: int, *, exclude=(), kind: str = "z", memo=None
) -> tuple[int, MatchResult | None]:
    """Area code a candidate list names for ``peak``, with the evidence behind it.

    The area of highest evidence (:func:`area_evidence` with the templates of ``kind``,
    :data:`PATCH_MM`), areas in ``exclude`` left out; the peak's own area (and no evidence)
    when no candidate is eligible.

    Parameters
    ----------
    %(match_map_space_peak)s
    exclude : sequence of int
        Area codes that cannot be named (e.g. not resolvable from 19 electrodes).
    kind : {"z", "power"}
        Map kind: excess z-maps (patch templates; what candidate lists name) or power maps
        without norms (point templates).
    memo : ndarray, shape (n_src,), optional
        Shared by the peaks of one map and ``kind`` (:func:`candidate_correlations`).

    Returns
    -------
    code : int
        Area code (0 only when no candidate is eligible and the peak lies outside every area).
    evidence : MatchResult or None
        The area evidence the name was read from (None in the fallback).
    """
    check_option("kind", kind, sorted(PATCH_MM))
    ev = area_evidence(values, space, peak, patch_mm=PATCH_MM[kind], memo=memo)
    o = ev.order(np.asarray(tuple(exclude), dtype=np.int64))
    if not o.size:
        return int(space.codes[int(peak)]), None
    return int(o[0]), ev


@fill_doc
def listed_naming(
    values: np.ndarray, space, peak: int, *, exclude=(), kind: str = "z", memo=None
) -> tuple[int, MatchResult | None, bool]:
    """What a candidate list names for ``peak``, and whether it shows it by default.

    Every area may be named (:func:`candidate_naming` over all areas); a peak whose named area
    is in ``exclude`` is not renamed after an eligible neighbour but marked not shown (the list
    leaves it out unless asked to keep it).  The shared rule of
    :func:`sourcelab.targets.peaks.peak_candidates` and of the simulations the localisation
    probability is fitted and checked on (:mod:`sourcelab.simulate.localisation`).

    Parameters
    ----------
    %(match_map_space_peak)s
    exclude : sequence of int
        Area codes a list does not show by default (e.g. not resolvable from 19 electrodes).
    kind : {"z", "power"}
        Map kind, as :func:`candidate_naming`.
    memo : ndarray, shape (n_src,), optional
        As :func:`candidate_naming`.

    Returns
    -------
    code : int
        Area code of highest evidence over all areas (0 only when the peak lies outside every
        area and no candidate is eligible).
    evidence : MatchResult or None
        The area evidence the name was read from.
    shown : bool
        False when ``code`` is 0 or in ``exclude``.
    """
    code, ev = candidate_naming(values, space, peak, kind=kind, memo=memo)
    shown = code != 0 and code not in {int(c) for c in exclude}
    return code, ev, shown


def candidate_area_code(
    values: np.ndarray, space, peak: int, *, exclude=(), kind: str = "z"
) -> int:
    """Area code a candidate list names for ``peak`` (:func:`candidate_naming`'s code).

    Parameters
    ----------
    values, space, peak, exclude, kind
        As :func:`candidate_naming`.

    Returns
    -------
    code : int
        Area code of highest evidence; the peak's own area when no candidate is eligible.
    """
    return candidate_naming(values, space, peak, exclude=exclude, kind=kind)[0]
