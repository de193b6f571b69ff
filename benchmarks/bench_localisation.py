"""Benchmark: naming the generating Brodmann area under model mismatch, ROI means vs peaks.

Run: ``python benchmarks/bench_localisation.py [--n 600] [--jitter 10] [--lambda2 0.111]
[--train-seeds 1] [--eval-seeds 2] [--sweep] [--ceiling] [--out FILE.json]`` (about 10 min per
mismatch seed on one core at the default, the sweep and ceiling a few minutes more; the
true-head forwards are cached in ``~/.cache/sourcelab-bench``).  Results:
``localisation_results.json``.

Held out.  A *mismatch seed* draws the 16 electrode-jitter realisations of the true head; the
simulation draws (sources, noise, people) are seeded by ``(--seed, mismatch seed)``, so they
differ between mismatch seeds too.  Naming parameters may be chosen on the ``--train-seeds``
(``--sweep`` prints the area-evidence grid on them); ``headline`` reports the ``--eval-seeds``
only (``headline_train`` beside it shows the training numbers, for the gap).  Seed 0's
realisations fitted the probability coefficients and the match parameters; seed 1 chose the
area-evidence parameters; seed 2 (and 3) are held out from both.  All seeds share the same
sphere: the held-out numbers are held out over electrode placement, sources and noise, not over
the head's shape or conductivities.

True head (``sourcelab.simulate.mismatch``): MNE's analytic 3-shell sphere (centre fitted to the
19 fsaverage electrodes, radii containing every source, conductivities 0.33/0.0042/0.33 S/m),
electrodes on the outer sphere with tangential jitter (RMS 0, 5, 10 mm).  Inverse: sourcelab's
BEM sLORETA (fixed orientation).

* **point sources**: ``--n`` random cortical sources, one jitter realisation each; noise-free
  and at amplitude SNR 3 (noise half uncorrelated cortical background, half white; 60 epochs);
* **focal deviations**: a coherent 10-15 mm patch at ``--n`` random cortical sources, power
  ratio log-uniform 0.1-1 of the background, in invented people (global and regional
  between-person variability, age trend), z-scored (predictive t, normal-equivalent) against
  per-source norms of 80 invented controls; the ROI route z-scores ROI-mean power against ROI
  norms of the same controls.

Rankings compared (true area = Brodmann area and hemisphere of the planted source / patch
centre):

* ``roi_mean_today``: areas by ROI-mean power (points) or ROI-mean z (deviations) on today's
  20,484-source space with medial-wall sources in the ROIs;
* ``roi_mean_cortex``: the same on the cortex-only space;
* ``peak_all``: areas by the highest value they contain (cortex-only), all areas;
* ``peak_default``: the same without the areas not resolvable from 19 electrodes (the default
  candidate list);
* ``match_all`` / ``match_default`` (point sources): areas by the best template match of the
  whole map (``sourcelab.trust.naming``: correlation of the map's amplitude with the template
  resolution-matrix columns of candidates within 25 mm of the peak);
* ``evidence_all`` / ``evidence_default`` (points; ``evidence_*_excess`` for deviations): areas by
  their evidence (``sourcelab.trust.naming.area_evidence``: log-sum-exp of 60 x the correlation
  over the candidates within 35 mm of the peak, a posterior over candidate sources summed per
  area), what candidate lists name when ``naming.EVIDENCE_NAMING`` is switched on.

``headline`` (10 mm jitter) collects the three numbers of the issue's targets: point sources
named first and in the top 3 (all truths, all areas eligible; noise-free and SNR 3), focal
deviations named first (|z| map, and the excess map ``max(z, 0)`` the candidate list names).

What a user's candidate list shows (the *default* rule).  ``sourcelab.targets.peaks.
peak_candidates`` names each peak over *all* areas and then leaves the peak out when the named
area is not resolvable from 19 electrodes (it is not renamed after a resolvable neighbour, as
the ``*_default`` rows above do).  Two rows score exactly that:

* ``candidate_list_first`` (deviations): the first row of the candidate list of the signed
  z-map (excess and deficit peaks beyond |z| 1.96, at most 30 per direction, a peak naming an
  unresolvable area left out, the highest focal evidence ``|peak z| x fit`` first,
  ``sourcelab.targets.peaks.focal_evidence``; ``_list_first``, checked against
  ``peak_candidates`` itself on a few maps every run, ``_check_list_first``);
  ``candidate_list_first_above_norm``: the list's first above-norm row (for a reader who knows
  the deviation is an excess; the list itself ranks below-norm peaks by the same rule);
  ``candidate_list_first_by_peak_z``: the first row under the order before the focal-evidence
  rule (the larger |peak z| first), on the same maps;
* ``evidence_default_shown`` (point sources; power maps have no candidate list, so the list's
  rule is applied at the map's highest peak with point templates): the area named there over all
  areas, shown if resolvable; top 3 from the evidence order with the unresolvable areas left
  out.

Each reports three rates side by side (the row's ``first`` / ``top3`` repeat (c)), none of
them "the" number: (a) ``first_among_shown``, the true area named first among the maps whose
list shows an area, with ``share_shown``, the share of maps that show one (what a user reading
a shown name experiences: its precision);
(b) ``first_resolvable_truth``, among the maps whose true area is resolvable (the rate where the
truth can be named at all); (c) ``first_all_maps``, over every planted map (a truth in an
unresolvable area counts as a miss).  The issue's targets are rates over *all* planted sources
and deviations, so for the default list (c) is the literal reading of "the area named first is
the true one" (>= 0.65 points, >= 0.55 deviations) and ``top3_all_maps`` of the top-3 target
(>= 0.85); (a) and (b) say where the misses come from (unresolvable truths, or wrong names).
The all-areas rows (``evidence_all``, ``evidence_patch_all_excess``, the earlier headline) are
what a list with the unresolvable areas brought back (``include_unresolvable``) names at the
highest peak.
Both rows also carry the shipped probability model's mean stated probability of the shown
names against their observed hit rate (deviations: the maps whose first row is the excess map's
highest peak, the peak the model is applied at).  The model was fitted on names with the
unresolvable areas *renamed* after the next area (``sourcelab.simulate.localisation``), so this
checks it on the maps a list actually shows.

``evidence_patch_r50_*`` (deviations, not shipped): the same patch-template evidence over
candidates within 50 mm instead of 35 (``TRIAL_RADIUS_MM``, chosen on training seed 1), all
areas and the shown rule at the highest excess peak; measured so that the held-out seed says
whether the training gain holds.

``--ceiling`` adds, for noise-free sources at *every* cortical source (18,715 x one jitter
realisation each, the first held-out seed): how often the peak vertex lies in the true area
(the bound of every rule that names the peak's area), and the rule that names, for a peak at
vertex ``p``, the true area seen most often for peaks near ``p`` (within 6 mm) on the
*training* true head (the first training seed's realisations).  That rule learns this
particular sphere-versus-BEM bias, which a real head does not share: it is measured as a bound,
not shipped.
Targets (issue 14): first >= 65 % and top 3 >= 85 % for point sources; first >= 55 % for
deviations.  Binomial SE of a rate near 0.5 with n = 600: 0.02.
"""

from __future__ import annotations

import argparse
import json
import time

import numpy as np


def _ranks(order_fn, maps, true):
    first = top3 = 0
    for v, t in zip(maps, true):
        o = order_fn(v)
        first += int(o[0] == t) if o.size else 0
        top3 += int(t in o[:3])
    return first / len(true), top3 / len(true)


def _summary(name, first, top3, **extra):
    row = {
        "ranking": name,
        "first": round(first, 3),
        "top3": None if top3 is None else round(top3, 3),
    }
    row.update(extra)
    return row


def _candidates(maps, sp, *, radius_mm, patch_mm=None):
    """Per map: (peak, candidates, correlations, distances) at the largest radius any rule uses."""
    from sourcelab.trust.naming import candidate_correlations

    out = []
    for v in maps:
        p = int(np.argmax(v))
        cand, corr = candidate_correlations(v, sp, p, cand_mm=radius_mm, patch_mm=patch_mm)
        dist = np.linalg.norm(sp.mesh.pos_mm[cand] - sp.mesh.pos_mm[p], axis=1)
        out.append((p, cand, corr, dist))
    return out


def _rule_orders(info, sp, *, exclude=None, **evidence):
    """Area orders of the template-match and the area-evidence rules, one per map."""
    from sourcelab.trust.naming import CAND_MM, MatchResult, evidence_from_corr

    match, ev = [], []
    n_codes = len(sp.names)
    for _, cand, corr, dist in info:
        near = dist <= CAND_MM
        best = np.full(n_codes, -np.inf)
        np.maximum.at(best, sp.codes[cand[near]], corr[near])
        best[0] = -np.inf
        match.append(MatchResult(cand, corr, best).order(exclude))
        score = evidence_from_corr(corr, sp.codes[cand], dist, n_codes, **evidence)
        ev.append(MatchResult(cand, corr, score).order(exclude))
    return match, ev


#: Stated-probability checks deferred to the end of the run (:func:`_resolve_stated`): the
#: model file is read once every map is simulated.
_PENDING: list = []


def _stated(maps, orders, true, setup, *, kind):
    """A placeholder filled by :func:`_resolve_stated` with :func:`_stated_now`'s figures."""
    out: dict = {}
    _PENDING.append((out, np.array(maps, copy=True), orders, true, setup, kind))
    return out


def _resolve_stated(rows):
    """Fill every deferred stated-probability check (rows hold the placeholders' content).

    The shipped manifest and model are re-read (a refit written during the run is used).
    """
    from sourcelab import data
    from sourcelab.trust.probability import shipped_model

    data.manifest.cache_clear()
    data.shipped_bytes.cache_clear()
    shipped_model.cache_clear()
    for out, maps, orders, true, setup, kind in _PENDING:
        out.update(_stated_now(maps, orders, true, setup, kind=kind))
        for r in rows:
            if r.get("_stated") is out:
                r.update(out)
                del r["_stated"]
    _PENDING.clear()


def _stated_now(maps, orders, true, setup, *, kind):
    """The shipped probability model applied to the first area of each order, against hits.

    ``calibration_max_gap``: the largest |stated - observed| over the reliability bins holding
    at least 30 maps (the model is fitted for the evidence-named area on mismatch seed 0).
    """
    from sourcelab.simulate.localisation import reliability
    from sourcelab.trust.probability import area_probability

    named = np.array([int(o[0]) if o.size else 0 for o in orders])
    prob = np.array(
        [
            area_probability(v, setup.space, a, setup.own, kind=kind) if a else 0.0
            for v, a in zip(maps, named)
        ]
    )
    hit = named == true
    gaps = [abs(b["stated"] - b["observed"]) for b in reliability(prob, hit) if b["n"] >= 30]
    return {
        "mean_stated_probability": round(float(prob.mean()), 3),
        "observed_hit_rate": round(float(hit.mean()), 3),
        "calibration_max_gap": round(float(max(gaps)), 3) if gaps else None,
    }


def _stated_shown(maps, shown, sel, true, setup, *, kind):
    """:func:`_stated` for the shown area codes of the maps selected by the mask ``sel``."""
    codes = [np.array([c]) for c in np.asarray(shown)[sel]]
    return _stated(maps[sel], codes, np.asarray(true)[sel], setup, kind=kind)


def _radius(store):
    """Candidate radius, mm: the widest any rule uses (with the sweep's when sweeping)."""
    from sourcelab.trust.naming import CAND_MM, EVIDENCE_MM

    return max(CAND_MM, EVIDENCE_MM, *(SWEEP_RADIUS_MM if store is not None else ()))


def _rank_orders(orders, true):
    """First and top-3 rates of precomputed area orders."""
    return _ranks(lambda o: o, orders, true)


def _shown_rates(shown, true, exclude, *, top3_orders=None):
    """The default rule's three first-named rates (and top 3) side by side.

    ``shown``: per map, the area code the candidate list shows first (0: nothing shown);
    ``top3_orders`` (optional): per map, the areas listed in order with the unresolvable ones
    left out, for the top-3 rates (the true area among the first three, over the same three
    sets of maps).
    """
    shown = np.asarray(shown, dtype=np.int64)
    true = np.asarray(true, dtype=np.int64)
    is_shown = shown != 0
    ok = ~np.isin(true, exclude)
    hit = shown == true
    out = {
        "share_shown": round(float(is_shown.mean()), 3),
        "first_among_shown": round(float(hit[is_shown].mean()), 3) if is_shown.any() else None,
        "first_resolvable_truth": round(float(hit[ok].mean()), 3) if ok.any() else None,
        "first_all_maps": round(float(hit.mean()), 3),
        "n_shown": int(is_shown.sum()),
        "n_resolvable_truth": int(ok.sum()),
    }
    if top3_orders is not None:
        in3 = np.array([t in o[:3] for o, t in zip(top3_orders, true)])
        out.update(
            top3_among_shown=round(float(in3[is_shown].mean()), 3) if is_shown.any() else None,
            top3_resolvable_truth=round(float(in3[ok].mean()), 3) if ok.any() else None,
            top3_all_maps=round(float(in3.mean()), 3),
        )
    return out


def _point_shown(orders_all, exclude):
    """Area shown for each power map: the one named at its peak over all areas, if resolvable.

    Power maps have no candidate list (no threshold, no norms); the candidate list's rule is
    applied at the map's highest peak: every area may be named, and a peak whose named area is
    not resolvable is left out rather than renamed after a resolvable neighbour.
    """
    excl = set(int(c) for c in exclude)
    return [int(o[0]) if o.size and int(o[0]) not in excl else 0 for o in orders_all]


def _list_first(z, sp, exclude, *, threshold=None, max_peaks=None, signs=(1.0, -1.0)):
    """Area code, direction (+1 excess, -1 deficit, 0 none) and peak rank (0: the direction's
    highest) of the first row of the candidate list of one z-map (code 0: the list is empty).

    The rule of :func:`sourcelab.targets.peaks.peak_candidates` for one (measure, band) map,
    evaluated lazily: for the excess ``max(z, 0)`` and the deficit ``max(-z, 0)``, the local
    maxima beyond the threshold in decreasing order (at most ``max_peaks``), each named by
    :func:`~sourcelab.trust.naming.listed_naming` (the list's own rule: over all areas, shown
    when resolvable); a peak whose area is new (for its direction) and shown is a row, and the
    first row is the one of highest focal
    evidence (:func:`sourcelab.targets.peaks.focal_evidence`; ties: the larger |peak z|, then
    the excess, then the higher peak).  The evidence never exceeds |peak z|, so the peaks below
    the best evidence so far are not named.  ``signs=(1.0,)``: the list's first above-norm row.
    """
    from sourcelab.targets.peaks import DEVIATION_Z, _named_fit, focal_evidence
    from sourcelab.trust.localise import local_maxima
    from sourcelab.trust.naming import listed_naming

    threshold = DEVIATION_Z if threshold is None else threshold
    max_peaks = 30 if max_peaks is None else max_peaks
    excl = set(int(c) for c in exclude)
    best, best_key = (0, 0, 0), (-np.inf, -np.inf)
    for sign in signs:
        v = np.clip(sign * np.asarray(z, dtype=float), 0.0, None)
        if not v.max() > threshold:
            continue
        memo = np.full(sp.n_src, np.nan)
        seen = set()
        for k, s in enumerate(local_maxima(v, sp.mesh, threshold=threshold)[:max_peaks]):
            if v[s] < best_key[0]:
                break
            code, ev, shown = listed_naming(v, sp, int(s), exclude=excl, kind="z", memo=memo)
            if code == 0 or code in seen:
                continue
            seen.add(code)
            if not shown:
                continue
            key = (float(focal_evidence(v[s], _named_fit(ev, sp, code))), float(v[s]))
            if key > best_key:
                best, best_key = (code, int(sign), k), key
    return best


def _list_first_by_peak_z(
    z, sp, exclude, *, first_code=None, threshold=None, max_peaks=None, signs=(1.0, -1.0)
):
    """:func:`_list_first` under the list's order before the focal-evidence rule: by |peak z|.

    Area code, direction and peak rank of the first row, evaluated lazily: for the excess
    ``max(z, 0)`` and the deficit ``max(-z, 0)``, the local maxima beyond the threshold in
    decreasing order (at most ``max_peaks``), each named by
    :func:`~sourcelab.trust.naming.candidate_naming` over all areas, the first one whose area
    is new and resolvable is that direction's first row; the list's first row is the
    direction whose row has the larger |peak z| (the excess on a tie).  ``first_code``: the
    name of the excess map's highest peak when already known; ``signs=(1.0,)``: the first
    above-norm row.
    """
    from sourcelab.targets.peaks import DEVIATION_Z
    from sourcelab.trust.localise import local_maxima
    from sourcelab.trust.naming import candidate_naming

    threshold = DEVIATION_Z if threshold is None else threshold
    max_peaks = 30 if max_peaks is None else max_peaks
    excl = set(int(c) for c in exclude)
    best_code, best_value, best_sign, best_k = 0, -np.inf, 0, 0
    for sign in signs:
        v = np.clip(sign * np.asarray(z, dtype=float), 0.0, None)
        if not v.max() > max(threshold, best_value):
            continue
        memo = np.full(sp.n_src, np.nan)
        seen = set()
        for k, s in enumerate(local_maxima(v, sp.mesh, threshold=threshold)[:max_peaks]):
            if not v[s] > best_value:
                break
            if sign > 0 and k == 0 and first_code is not None:
                code = int(first_code)
            else:
                code = candidate_naming(v, sp, int(s), kind="z", memo=memo)[0]
            if code == 0 or code in seen:
                continue
            seen.add(code)
            if code in excl:
                continue
            best_code, best_value, best_sign, best_k = code, float(v[s]), int(sign), k
            break
    return best_code, best_sign, best_k


def _check_list_first(zs, shown, sp, setup, *, n_check=3):
    """Check :func:`_list_first` against the shipped candidate list on a few maps.

    The maps checked are the first ``n_check`` and the first ``n_check`` whose excess peak
    names an unresolvable area (where the list falls back on a later peak); raises when the
    rank-1 area of :func:`sourcelab.targets.peaks.peak_candidates` differs; returns the number
    of maps checked.
    """
    from sourcelab.targets.peaks import peak_candidates
    from sourcelab.trust.localise import local_maxima

    excl = set(int(c) for c in setup.exclude)
    later = []
    for i, z in enumerate(zs):
        if len(later) >= n_check:
            break
        p = local_maxima(np.clip(z, 0.0, None), sp.mesh)[:1]
        if p.size and int(sp.codes[p[0]]) in excl:
            later.append(i)
    checked = list(range(min(n_check, len(zs)))) + later
    for i in checked:
        table = peak_candidates(
            {("absolute", "theta"): zs[i]}, sp, own=setup.own, exclude=setup.exclude
        )
        code = 0
        if len(table):
            r = table.iloc[0]
            code = int(
                np.flatnonzero(
                    (np.asarray(sp.names) == r["area"])
                    & (np.asarray(sp.hemispheres) == r["hemisphere"])
                )[0]
            )
        if code != shown[i]:
            raise RuntimeError(f"map {i}: candidate list shows area {code}, benchmark {shown[i]}")
    return len(checked)


def bench_points(setup, full, *, n, snr, rng, jitter_label, store=None):
    from sourcelab.simulate import localisation as cal
    from sourcelab.trust.localise import rank_areas, rank_areas_by_mean

    sp = setup.space
    src = rng.integers(0, sp.n_src, n)
    maps, real = cal.point_source_maps(
        setup, src, rng=np.random.default_rng(rng.integers(1e9)), snr=snr
    )
    true = sp.codes[src]
    # today's full-space maps from the same sensor data: recompute with the full kernel
    from sourcelab.simulate.mismatch import noisy_csd

    rng2 = np.random.default_rng(rng.integers(1e9))
    maps_full = np.empty((n, full.n_src))
    for i, (s, r) in enumerate(zip(src, real)):
        g = setup.true_gain[r][:, s]
        if snr is None:
            maps_full[i] = (full.op.kernel @ g) ** 2
        else:
            c = noisy_csd(
                g[:, None], snr=snr, n_epochs=cal.N_EPOCHS, rng=rng2, background=setup.background[r]
            )[0]
            maps_full[i] = cal.power_map(full.op.kernel, c)
    err = np.linalg.norm(sp.mesh.pos_mm[maps.argmax(1)] - sp.mesh.pos_mm[src], axis=1)
    rows = []
    rows.append(
        _summary(
            "roi_mean_today",
            *_ranks(lambda v: rank_areas_by_mean(v, full.codes, full.n_areas), maps_full, true),
        )
    )
    rows.append(
        _summary(
            "roi_mean_cortex",
            *_ranks(lambda v: rank_areas_by_mean(v, sp.codes, sp.n_areas), maps, true),
        )
    )
    rows.append(
        _summary(
            "peak_all",
            *_ranks(lambda v: rank_areas(v, sp.codes, sp.n_areas), maps, true),
            peak_error_median_mm=round(float(np.median(err)), 1),
            peak_error_p90_mm=round(float(np.percentile(err, 90)), 1),
        )
    )
    f, t3 = _ranks(lambda v: rank_areas(v, sp.codes, sp.n_areas, exclude=setup.exclude), maps, true)
    ok = ~np.isin(true, setup.exclude)
    f_r, t3_r = _ranks(
        lambda v: rank_areas(v, sp.codes, sp.n_areas, exclude=setup.exclude), maps[ok], true[ok]
    )
    rows.append(
        _summary(
            "peak_default",
            f,
            t3,
            first_resolvable_truth=round(f_r, 3),
            top3_resolvable_truth=round(t3_r, 3),
            n_resolvable_truth=int(ok.sum()),
        )
    )

    t0 = time.perf_counter()
    info = _candidates(maps, sp, radius_mm=_radius(store))
    sec = (time.perf_counter() - t0) / n
    if store is not None:
        store.append(("point_" + ("noise_free" if snr is None else "snr3"), info, true))
    ev_all = ev_default = None
    for excl, tag in ((None, "all"), (setup.exclude, "default")):
        match, ev = _rule_orders(info, sp, exclude=excl)
        if tag == "all":
            ev_all = ev
        else:
            ev_default = ev
        for name, orders in (("match", match), ("evidence", ev)):
            extra = {}
            if tag == "all" and name == "evidence":
                extra["seconds_per_map"] = round(sec, 4)
            if tag == "default":
                extra["first_resolvable_truth"] = round(
                    _rank_orders([o for o, k in zip(orders, ok) if k], true[ok])[0], 3
                )
            if tag == "default" and name == "evidence":
                extra["_stated"] = _stated(maps, orders, true, setup, kind="power")
            rows.append(_summary(f"{name}_{tag}", *_rank_orders(orders, true), **extra))
    # the default rule as a candidate list applies it: named over all areas, left out (not
    # renamed) when the named area is not resolvable; top 3 from the list without them
    shown = _point_shown(ev_all, setup.exclude)
    rates = _shown_rates(shown, true, setup.exclude, top3_orders=ev_default)
    on = np.asarray(shown) != 0
    rows.append(
        _summary(
            "evidence_default_shown",
            rates["first_all_maps"],
            rates["top3_all_maps"],
            **rates,
            # the stated probability of the shown names against their observed hit rate
            _stated=_stated_shown(maps, shown, on, true, setup, kind="power"),
        )
    )
    for r in rows:
        r.update(
            kind="point", jitter_mm=jitter_label, snr="noise-free" if snr is None else snr, n=n
        )
    return rows


def bench_deviations(setup, full, *, n, rng, jitter_label, n_controls=80, store=None):
    from sourcelab.trust.naming import EVIDENCE_MM, PATCH_MM
    from sourcelab.norms.predictive import predictive_t
    from sourcelab.norms.source_norms import fit_source_models
    from sourcelab.simulate import localisation as cal
    from sourcelab.trust.localise import rank_areas

    sp = setup.space
    ages = rng.uniform(18, 65, n_controls)
    ctrl_cx, ctrl_full = cal.simulate_people(
        setup, ages, rng, kernels=(sp.op.kernel, full.op.kernel)
    )
    # per-source norms (cortex) and ROI-mean norms (today's full space, and cortex)
    roi_full = _roi_means(ctrl_full, full)
    roi_cx = _roi_means(ctrl_cx, sp)
    fits = {
        "src": fit_source_models(ages, np.log10(ctrl_cx), 1),
        "roi_full": fit_source_models(ages, np.log10(roi_full), 1),
        "roi_cx": fit_source_models(ages, np.log10(roi_cx), 1),
    }
    centres = rng.integers(0, sp.n_src, n)
    radii = rng.uniform(10.0, 15.0, n)
    ratios = np.exp(rng.uniform(np.log(0.1), np.log(1.0), n))
    ages_d = rng.uniform(18, 65, n)
    patches = [cal.patch_sources(setup, c, r) for c, r in zip(centres, radii)]
    dev_cx, dev_full = cal.simulate_people(
        setup, ages_d, rng, kernels=(sp.op.kernel, full.op.kernel), patches=patches, ratios=ratios
    )
    true = sp.codes[centres]

    def zmap(key, values, age):
        coef, sd, nk, xtx = fits[key]
        x0 = np.array([1.0, np.log10(age)])
        h = float(x0 @ xtx @ x0) * n_controls / nk
        return predictive_t(np.log10(values), x0 @ coef, sd, n=nk, degree=1, h0=h)["z_equivalent"]

    zs_src = np.array([zmap("src", dev_cx[i], ages_d[i]) for i in range(n)])
    zs_rf = np.array(
        [zmap("roi_full", _roi_means(dev_full[i : i + 1], full)[0], ages_d[i]) for i in range(n)]
    )
    zs_rc = np.array(
        [zmap("roi_cx", _roi_means(dev_cx[i : i + 1], sp)[0], ages_d[i]) for i in range(n)]
    )
    z_src, z_rf, z_rc = np.abs(zs_src), np.abs(zs_rf), np.abs(zs_rc)

    def by_roi(space):
        present = np.flatnonzero(space.sizes[1:] > 0) + 1

        def order(v):
            return present[np.argsort(-v, kind="stable")]

        return order

    rows = [
        _summary("roi_mean_today", *_ranks(by_roi(full), z_rf, true)),
        _summary("roi_mean_cortex", *_ranks(by_roi(sp), z_rc, true)),
        _summary("peak_all", *_ranks(lambda v: rank_areas(v, sp.codes, sp.n_areas), z_src, true)),
        # direction known (excess): rank by signed z, ROI means and peaks alike
        _summary("roi_mean_today_excess", *_ranks(by_roi(full), zs_rf, true)),
        _summary(
            "peak_all_excess", *_ranks(lambda v: rank_areas(v, sp.codes, sp.n_areas), zs_src, true)
        ),
    ]
    f, t3 = _ranks(
        lambda v: rank_areas(v, sp.codes, sp.n_areas, exclude=setup.exclude), z_src, true
    )
    ok = ~np.isin(true, setup.exclude)
    f_r, t3_r = _ranks(
        lambda v: rank_areas(v, sp.codes, sp.n_areas, exclude=setup.exclude), z_src[ok], true[ok]
    )
    peak = z_src.max(1)
    strong = peak >= 4
    f_s, _ = _ranks(
        lambda v: rank_areas(v, sp.codes, sp.n_areas, exclude=setup.exclude),
        z_src[strong & ok],
        true[strong & ok],
    )
    rows.append(
        _summary(
            "peak_default",
            f,
            t3,
            first_resolvable_truth=round(f_r, 3),
            top3_resolvable_truth=round(t3_r, 3),
            first_resolvable_truth_peak_z_ge_4=round(f_s, 3),
            n_peak_z_ge_4=int((strong & ok).sum()),
            peak_z_median=round(float(np.median(peak)), 2),
        )
    )
    ex = np.clip(zs_src, 0.0, None)
    rows.append(
        _summary(
            "peak_default_excess",
            *_ranks(lambda v: rank_areas(v, sp.codes, sp.n_areas, exclude=setup.exclude), ex, true),
        )
    )

    info = _candidates(ex, sp, radius_mm=_radius(store))
    match, evd = _rule_orders(info, sp)
    _, evd_default = _rule_orders(info, sp, exclude=setup.exclude)
    # what candidate lists name: the evidence of patch templates (naming.PATCH_MM["z"])
    info_p = _candidates(ex, sp, radius_mm=EVIDENCE_MM, patch_mm=PATCH_MM["z"])
    _, evp = _rule_orders(info_p, sp)
    _, evp_default = _rule_orders(info_p, sp, exclude=setup.exclude)
    # what a user's candidate list shows first for this z-map (both directions, |z| > 1.96,
    # later peaks when the highest names an unresolvable area): peaks.peak_candidates' rule
    first_rows = [_list_first(z, sp, setup.exclude) for z in zs_src]
    shown = [c for c, _, _ in first_rows]
    n_checked = _check_list_first(zs_src, shown, sp, setup)
    top_row = np.array([c != 0 and d > 0 and k == 0 for c, d, k in first_rows])
    rates = _shown_rates(shown, true, setup.exclude)
    rows.append(
        _summary(
            "candidate_list_first",
            rates["first_all_maps"],
            None,
            **rates,
            share_first_row_deficit=round(float(np.mean([d < 0 for _, d, _ in first_rows])), 3),
            maps_checked_against_candidate_list=n_checked,
            # the stated probability where the first row is the excess map's highest peak
            # (the peak the model is fitted at), against the observed hit rate there
            _stated=_stated_shown(ex, shown, top_row, true, setup, kind="z"),
            n_first_row_highest_excess_peak=int(top_row.sum()),
        )
    )
    # the list's first above-norm row (a reader who knows the deviation is an excess)
    above = [_list_first(z, sp, setup.exclude, signs=(1.0,))[0] for z in zs_src]
    rates_a = _shown_rates(above, true, setup.exclude)
    rows.append(
        _summary("candidate_list_first_above_norm", rates_a["first_all_maps"], None, **rates_a)
    )
    # the list's order before the focal-evidence rule (by |peak z|), on the same maps
    before = [
        _list_first_by_peak_z(
            zs_src[i], sp, setup.exclude, first_code=int(o[0]) if o.size else None
        )
        for i, o in enumerate(evp)
    ]
    rates_b = _shown_rates([c for c, _, _ in before], true, setup.exclude)
    rows.append(
        _summary(
            "candidate_list_first_by_peak_z",
            rates_b["first_all_maps"],
            None,
            **rates_b,
            share_first_row_deficit=round(float(np.mean([d < 0 for _, d, _ in before])), 3),
        )
    )
    # not shipped: the evidence of patch templates over candidates within TRIAL_RADIUS_MM
    # (chosen on training seed 1; see TRIAL_RADIUS_MM), named at the highest excess peak
    info_w = _candidates(ex, sp, radius_mm=TRIAL_RADIUS_MM, patch_mm=PATCH_MM["z"])
    _, evw = _rule_orders(info_w, sp, radius_mm=TRIAL_RADIUS_MM)
    rates_w = _shown_rates(_point_shown(evw, setup.exclude), true, setup.exclude)
    rows += [
        _summary("evidence_patch_r50_all_excess", *_rank_orders(evw, true)),
        _summary(
            "evidence_patch_r50_shown_excess",
            rates_w["first_all_maps"],
            None,
            **rates_w,
        ),
    ]
    rows += [
        _summary("match_all_excess", *_rank_orders(match, true)),
        _summary("evidence_all_excess", *_rank_orders(evd, true)),
        _summary("evidence_default_excess", *_rank_orders(evd_default, true)),
        _summary("evidence_patch_all_excess", *_rank_orders(evp, true)),
        _summary(
            "evidence_patch_default_excess",
            *_rank_orders(evp_default, true),
            _stated=_stated(ex, evp_default, true, setup, kind="z"),
        ),
    ]
    # a patch of 10-15 mm radius often straddles a border: the same rankings judged against
    # the area holding most of the patch's sources (ties: the centre's area)
    major = np.array([_majority(sp.codes[pt], c) for pt, c in zip(patches, true)])
    straddle = float(np.mean([np.mean(sp.codes[pt] == c) < 1 for pt, c in zip(patches, true)]))
    rows.append(
        _summary(
            "peak_all_excess_majority_truth",
            *_ranks(lambda v: rank_areas(v, sp.codes, sp.n_areas), ex, major),
            patches_straddling_a_border=round(straddle, 3),
            centre_area_is_majority=round(float(np.mean(major == true)), 3),
        )
    )
    rows.append(
        _summary("evidence_all_excess_majority_truth", *_rank_orders(evd, major)),
    )
    rows.append(
        _summary("evidence_patch_all_excess_majority_truth", *_rank_orders(evp, major)),
    )
    if store is not None:
        store.append(("deviation_excess", info, true))
    rows += _noise_free_patches(setup, patches, ratios, fits["src"][1], true, rng)
    for r in rows:
        r.update(kind="deviation", jitter_mm=jitter_label, n=n, n_controls=n_controls)
    return rows


def _noise_free_patches(setup, patches, ratios, sd, true, rng):
    """The deviation ceiling: the same patches with no person variability and no sampling noise.

    The z-map of each patch alone, ``log10(P_patch+background / P_background) / sd`` (expected
    power maps of the mean person through the template kernel, the norms' per-source SD), is
    named by its peak's area and by the area evidence.  What noise-free naming of a 10-15 mm
    patch can reach under this mismatch; the truth is still the centre's area.
    """
    from sourcelab.simulate import localisation as cal
    from sourcelab.spectra import average_reference_projector
    from sourcelab.trust.localise import rank_areas
    from sourcelab.trust.naming import PATCH_MM, area_evidence

    sp = setup.space
    rng = np.random.default_rng(rng.integers(1e9))
    proj = average_reference_projector(sp.gain.shape[0])
    peak_hit, ev_hit, evp_hit = [], [], []
    for pt, ratio, t in zip(patches, ratios, true):
        g = setup.true_gain[int(rng.choice(setup.realisations))]
        cov = g @ g.T
        bg = np.trace(proj @ cov @ proj) / g.shape[0]
        cov = cov + cal.SENSOR_NOISE_SHARE * bg * np.eye(g.shape[0])
        top = g[:, pt].sum(axis=1)
        add = (ratio * bg / (np.sum((proj @ top) ** 2) / g.shape[0])) * np.outer(top, top)
        base = cal.power_map(sp.op.kernel, cov)
        z = np.log10(cal.power_map(sp.op.kernel, cov + add) / base) / sd
        peak_hit.append(rank_areas(z, sp.codes, sp.n_areas)[0] == t)
        p = int(np.argmax(z))
        ev_hit.append(area_evidence(z, sp, p).order()[0] == t)
        evp_hit.append(area_evidence(z, sp, p, patch_mm=PATCH_MM["z"]).order()[0] == t)
    return [
        _summary("peak_all_noise_free_patch", float(np.mean(peak_hit)), None),
        _summary("evidence_all_noise_free_patch", float(np.mean(ev_hit)), None),
        _summary("evidence_patch_all_noise_free_patch", float(np.mean(evp_hit)), None),
    ]


def _majority(codes, centre_code):
    """Most frequent area code of a patch (the centre's on a tie)."""
    c, n = np.unique(codes, return_counts=True)
    best = c[n == n.max()]
    return int(centre_code) if centre_code in best else int(best[0])


def _roi_means(maps, space):
    """ROI-mean of per-source maps over the space's area codes, shape (n, n_present)."""
    present = np.flatnonzero(space.sizes[1:] > 0) + 1
    out = np.empty((maps.shape[0], present.size))
    for j, c in enumerate(present):
        out[:, j] = maps[:, space.codes == c].mean(1)
    return out


def main(argv=None) -> int:
    p = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    p.add_argument("--n", type=int, default=600)
    p.add_argument("--jitter", default="10", help="RMS electrode jitter values, mm (e.g. 0,5,10)")
    p.add_argument(
        "--ceiling",
        action="store_true",
        help="also measure the peak-in-true-area rate at every source (slow)",
    )
    p.add_argument("--lambda2", type=float, default=1 / 9)
    p.add_argument("--seed", type=int, default=2024)
    p.add_argument(
        "--train-seeds",
        default="1",
        help="mismatch (electrode-jitter) seeds the naming parameters may be chosen on",
    )
    p.add_argument(
        "--eval-seeds", default="2", help="held-out mismatch seeds: the only ones reported"
    )
    p.add_argument(
        "--sweep",
        action="store_true",
        help="evaluate the area-evidence parameter grid on the training seeds",
    )
    p.add_argument("--out", help="write the rows as JSON here")
    args = p.parse_args(argv)

    from sourcelab.headmodel import load_head_model
    from sourcelab.simulate import localisation as cal
    from sourcelab.trust.cortex import cortex_space

    t0 = time.perf_counter()
    model = load_head_model()
    sp = cortex_space(args.lambda2)
    # "today" (ROI-mean naming) on the same cortical sources; the 0.1.0 figures on all 20,484
    # surface vertices are kept in localisation_results_0.1.json
    full = sp
    train = [int(x) for x in args.train_seeds.split(",") if x]
    held = [int(x) for x in args.eval_seeds.split(",") if x]
    if set(train) & set(held):
        p.error("--train-seeds and --eval-seeds overlap")
    rows, sweep_maps = [], []
    for mseed in train + held:
        split = "train" if mseed in train else "held_out"
        for jit in [float(j) for j in args.jitter.split(",")]:
            # simulation draws differ between mismatch seeds as well
            rng = np.random.default_rng([args.seed, mseed])
            if jit == 0:
                setup = cal.make_setup(model, sp, seed=mseed, realisations=(0,))
            else:
                setup = _setup_jitter(model, sp, jit, seed=mseed)
            store = sweep_maps if (args.sweep and split == "train" and jit == 10.0) else None
            new = []
            for snr in (None, 3.0):
                new += bench_points(
                    setup, full, n=args.n, snr=snr, rng=rng, jitter_label=jit, store=store
                )
            new += bench_deviations(setup, full, n=args.n, rng=rng, jitter_label=jit, store=store)
            for r in new:
                r.update(mismatch_seed=mseed, split=split)
            _print(new)
            rows += new
    _resolve_stated(rows)
    out = {
        "rows": rows,
        "lambda2": args.lambda2,
        "n": args.n,
        "seed": args.seed,
        "train_seeds": train,
        "eval_seeds": held,
        "headline": _headline([r for r in rows if r["split"] == "held_out"]),
        "headline_train": _headline([r for r in rows if r["split"] == "train"]),
    }
    if args.sweep:
        out["sweep"] = sweep(sweep_maps, sp)
        _print_sweep(out["sweep"])
    if args.ceiling:
        out["ceiling"] = ceiling(model, sp, eval_seed=held[0], train_seed=train[0])
        print(json.dumps(out["ceiling"], indent=1))
    out["seconds"] = round(time.perf_counter() - t0, 1)
    print(json.dumps(out["headline"], indent=1))
    if args.out:
        with open(args.out, "w", encoding="utf-8") as f:
            json.dump(out, f, indent=1)
    print(f"total {out['seconds']} s")
    return 0


#: Candidate radius (mm) of the trial rows ``evidence_patch_r50_*`` (not what lists name, 35 mm).
#: On training seed 1 (two sets of 1,000 excess z-maps, simulation seeds 2025 and 2026, patch
#: templates 12 mm, beta 60) the centre's area was named first 0.469 / 0.465 within 35 mm and
#: 0.482 / 0.480 within 50 mm (61 maps won, 33 lost of 2,000); beta 0-100, patch radii 8-16 mm,
#: an area-size prior, correlation rows near the peak only, and excess-power maps instead of z
#: did not do better beyond one binomial SE.  Shipping it would change the names (and need a
#: refit of the probability model), so it is measured here only.
TRIAL_RADIUS_MM = 50.0

#: The area-evidence grid of ``--sweep`` (beta, radius mm, distance-prior SD mm or None).
SWEEP_BETA = (0.0, 20.0, 40.0, 60.0, 100.0, 1e4)
SWEEP_RADIUS_MM = (25.0, 35.0)
SWEEP_SIGMA_MM = (None, 20.0)


def sweep(stored, sp):
    """First / top-3 of every grid point on the stored training maps (all areas eligible)."""
    out = []
    for beta in SWEEP_BETA:
        for radius in SWEEP_RADIUS_MM:
            for sigma in SWEEP_SIGMA_MM:
                row = {"beta": beta, "radius_mm": radius, "sigma_mm": sigma}
                for kind, info, true in stored:
                    _, ev = _rule_orders(
                        info,
                        sp,
                        beta=beta,
                        radius_mm=radius,
                        sigma_mm=sigma,
                    )
                    f, t3 = _rank_orders(ev, true)
                    row[kind] = {"first": round(f, 3), "top3": round(t3, 3)}
                out.append(row)
    return out


def _print_sweep(rows):
    for r in rows:
        cells = "  ".join(
            f"{k} {v['first']:.3f}/{v['top3']:.3f}" for k, v in r.items() if isinstance(v, dict)
        )
        print(f"beta {r['beta']:>7} r {r['radius_mm']:>4} sigma {r['sigma_mm']!s:>5}  {cells}")


#: The default rule's rates the headline carries (see the module docstring).
SHOWN_KEYS = (
    "share_shown",
    "first_among_shown",
    "first_resolvable_truth",
    "first_all_maps",
    "top3_among_shown",
    "top3_resolvable_truth",
    "top3_all_maps",
    "n_shown",
    "n_resolvable_truth",
    "share_first_row_deficit",
    "n_first_row_highest_excess_peak",
    "mean_stated_probability",
    "observed_hit_rate",
    "calibration_max_gap",
)


def _headline(rows):
    """The issue's three numbers at 10 mm jitter (all truths, all areas eligible), per seed."""
    out = {}
    for r in rows:
        if r["jitter_mm"] != 10.0:
            continue
        key = None
        if r["kind"] == "point" and r["ranking"] in ("peak_all", "match_all", "evidence_all"):
            key = f"point_{r['ranking']}_{'noise_free' if r['snr'] == 'noise-free' else 'snr3'}"
        if r["kind"] == "deviation" and r["ranking"] in (
            "peak_all",
            "peak_all_excess",
            "peak_default_excess",
            "peak_all_excess_majority_truth",
            "evidence_all_excess",
            "evidence_default_excess",
            "evidence_all_excess_majority_truth",
            "evidence_patch_all_excess",
            "evidence_patch_default_excess",
            "evidence_patch_all_excess_majority_truth",
            "peak_all_noise_free_patch",
            "evidence_all_noise_free_patch",
            "evidence_patch_all_noise_free_patch",
            "evidence_patch_r50_all_excess",
        ):
            key = f"deviation_{r['ranking']}"
        shown = r["ranking"] in (
            "evidence_default_shown",
            "candidate_list_first",
            "candidate_list_first_above_norm",
            "candidate_list_first_by_peak_z",
            "evidence_patch_r50_shown_excess",
        )
        if shown and r["kind"] == "point":
            key = f"point_{r['ranking']}_{'noise_free' if r['snr'] == 'noise-free' else 'snr3'}"
        if shown and r["kind"] == "deviation":
            key = f"deviation_{r['ranking']}"
        if key:
            key = f"{key}_seed{r.get('mismatch_seed', 1)}"
            out[key] = {"first": r["first"], "top3": r["top3"], "n": r["n"]}
            if shown:
                out[key].update({k: r[k] for k in SHOWN_KEYS if k in r})
    out["targets"] = {"point_first": 0.65, "point_top3": 0.85, "deviation_first": 0.55}
    return out


def _peaks_all_sources(model, sp, seed):
    """Peak source of the noise-free map of every cortical source (one jitter each)."""
    from sourcelab.simulate.mismatch import mismatch_forward

    mf = mismatch_forward(model, n_jitter=16, seed=seed)
    real = 1 + np.arange(sp.n_src) % 16
    peak = np.empty(sp.n_src, dtype=np.int64)
    for r in range(1, 17):
        cols = np.flatnonzero(real == r)
        for c in np.array_split(cols, max(1, cols.size // 400)):
            peak[c] = np.argmax(np.abs(sp.op.kernel @ mf.gain[r][:, sp.sources[c]]), axis=0)
    return peak


def ceiling(model, sp, *, eval_seed, train_seed, radius_mm=6.0):
    """Peak-in-true-area rate at every source, and the learned-bias bound (see docstring)."""
    from scipy.spatial import cKDTree

    codes = sp.codes
    pos = sp.mesh.pos_mm
    right = sp.vertices >= 10_242
    ev = _peaks_all_sources(model, sp, eval_seed)
    tr = _peaks_all_sources(model, sp, train_seed)
    err = np.linalg.norm(pos[ev] - pos, axis=1)
    # learned rule: per vertex, the true areas of training sources whose peak fell within
    # radius_mm (same hemisphere); vote
    tree = cKDTree(pos[tr])
    named = np.zeros(sp.n_src, dtype=np.int64)
    for i, p in enumerate(ev):
        near = np.asarray(tree.query_ball_point(pos[p], radius_mm), dtype=np.int64)
        near = near[right[tr[near]] == right[p]] if near.size else near
        if near.size == 0:
            named[i] = codes[p]
            continue
        named[i] = np.bincount(codes[near]).argmax()
    return {
        "n": int(sp.n_src),
        "jitter_mm": 10.0,
        "mismatch_seed_eval": eval_seed,
        "mismatch_seed_train": train_seed,
        "peak_in_true_area": round(float(np.mean(codes[ev] == codes)), 3),
        "peak_error_median_mm": round(float(np.median(err)), 1),
        "peak_error_p90_mm": round(float(np.percentile(err, 90)), 1),
        "learned_bias_rule_first": round(float(np.mean(named == codes)), 3),
        "learned_bias_radius_mm": radius_mm,
    }


def _setup_jitter(model, sp, jit, *, seed):
    """A SimSetup on the mismatch forward of ``seed`` with RMS jitter ``jit`` mm."""
    from sourcelab.simulate import localisation as cal
    from sourcelab.simulate.mismatch import mismatch_forward

    base = cal.make_setup(model, sp, seed=seed, realisations=range(1, 17))
    if jit == 10.0:
        return base
    mf = mismatch_forward(model, n_jitter=16, seed=seed, jitter_mm=jit)
    gain = mf.gain[:, :, sp.sources]
    return cal.SimSetup(
        space=sp,
        true_gain=gain,
        background=np.einsum("rcs,rds->rcd", gain, gain),
        own=base.own,
        exclude=base.exclude,
        realisations=tuple(range(1, 17)),
    )


def _print(rows):
    for r in rows:
        extra = {
            k: v
            for k, v in r.items()
            if k not in ("ranking", "first", "top3", "kind", "jitter_mm", "snr", "n", "n_controls")
        }
        t3 = "-" if r["top3"] is None else f"{r['top3']:.3f}"
        print(
            f"{r['kind']:9s} jitter {r['jitter_mm']:>4} mm snr {str(r.get('snr', '-')):>10}  "
            f"{r['ranking']:16s} first {r['first']:.3f} top3 {t3}  {extra}"
        )


if __name__ == "__main__":
    raise SystemExit(main())
