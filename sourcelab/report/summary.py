"""The one-page summary that opens the HTML and PDF reports.

:func:`report_summary` collects, in words and one small table, what a reader needs first: who and
what was recorded and when it was analysed, the data quality, the top candidates (with how sure
the localisation is and how blurred) and the cautions.  The HTML and PDF writers only lay it out.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..cautions import CAUTIONS
from ..constants import Z_THRESHOLD
from ..rois.names import area_name
from .labels import NOT_GIVEN, file_name, number_text, value_text

#: Candidates shown on the summary page.
N_TOP = 8


@dataclass(frozen=True)
class Summary:
    """What the first page says.

    Attributes
    ----------
    facts : tuple of (str, str)
        Who / what / when, as (label, text).
    quality : tuple of str
        Data quality, one sentence each.
    candidates : DataFrame
        Top candidates with human column names (empty without norms).
    candidate_note : str
        How the candidates were found, how sure and how blurred they are.
    headline : str
        One sentence on the deviations found.
    cautions : tuple of str
    """

    facts: tuple
    quality: tuple
    candidates: pd.DataFrame
    candidate_note: str
    headline: str
    cautions: tuple = CAUTIONS


def _band_text(result, band) -> str:
    names = list(result.bands.names)
    if band not in names:
        return str(band)
    lo, hi = result.bands.edges[names.index(band)]
    return f"{band} {lo:g}-{hi:g} Hz"


def _facts(result, when: str) -> tuple:
    rec = result.recording
    norms = result.norms
    participant = []
    if rec.age is not None and np.isfinite(rec.age):
        participant.append(f"age {rec.age:g} years")
    participant.append(f"condition {rec.condition}" if rec.condition else "condition not given")
    n_interp = len(rec.interpolated)
    electrodes = f"{len(result.ch_names)} sites of the 10-20 system"
    if n_interp:
        electrodes += f" ({n_interp} interpolated: {', '.join(rec.interpolated)})"
    facts = [
        ("Recording", file_name(rec.path) if rec.path else "given in memory (no file)"),
        ("Participant", ", ".join(participant)),
        ("Length", f"{rec.duration_s / 60:.1f} min at {rec.sfreq:g} Hz; {electrodes}"),
        ("Reference as recorded", value_text(rec.original_reference)),
    ]
    if norms is None:
        facts.append(("Norms", "none given: values only, no z-scores"))
    else:
        c = norms.cohort or {}
        bits = [file_name(norms.path) if norms.path else "given in memory"]
        if c.get("n"):
            bits.append(f"{int(c['n'])} people")
        if c.get("age_min") is not None and c.get("age_max") is not None:
            bits.append(f"ages {float(c['age_min']):.0f}-{float(c['age_max']):.0f}")
        if norms.condition:
            bits.append(str(norms.condition))
        src = c.get("source")
        if src:
            bits.append(str(src))
        facts.append(("Norms", ", ".join(bits)))
    cfg = result.config
    facts.append(
        (
            "Method",
            f"{cfg.method} on the fsaverage template, "
            f"{len(result.bands.names)} bands "
            f"({', '.join(_band_text(result, b) for b in result.bands.names)})",
        )
    )
    facts.append(("Analysed", when))
    return tuple(facts)


def _quality(result) -> tuple:
    q = result.quality
    rec = result.recording
    out = []
    share = q.kept_s / rec.duration_s if rec.duration_s else np.nan
    epoch = result.config.epoch_s
    txt = f"{q.kept_s:.0f} s of clean data in {q.n_epochs} epochs of {epoch:g} s" + (
        f" ({share:.0%} of the recording)." if np.isfinite(share) else "."
    )
    out.append(txt)
    removed = {
        k: float(v)
        for k, v in (q.rejected_s or {}).items()
        if isinstance(v, (int, float, np.floating)) and v > 0
    }
    if removed:
        out.append(
            "Removed: "
            + ", ".join(
                f"{v:.0f} s {k.replace('-', ' ')}"
                for k, v in sorted(removed.items(), key=lambda kv: -kv[1])
            )
            + "."
        )
    else:
        out.append("Nothing had to be removed for artefacts.")
    weak = {
        ch: f
        for ch, f in (q.channel_kept_fraction or {}).items()
        if isinstance(f, (int, float, np.floating)) and f < 0.8
    }
    if weak:
        out.append(
            "Sites that failed their own checks in more than 20 % of epochs: "
            + ", ".join(f"{ch} ({f:.0%} kept)" for ch, f in weak.items())
            + "."
        )
    if rec.interpolated:
        out.append(f"Interpolated from their neighbours: {', '.join(rec.interpolated)}.")
    out.append(
        f"Mains interference at {q.mains_hz:g} Hz was notched out."
        if q.mains_hz
        else "No mains interference was found."
    )
    oc = q.ocular or {}
    removed_c = oc.get("removed_components") or []
    if removed_c:
        out.append(
            f"{len(removed_c)} eye-movement component(s) removed ({value_text(oc.get('method'))})."
        )
    elif oc:
        out.append("No eye-movement components needed removing.")
    rd = oc.get("residual_delta") or {}
    if rd.get("ocular"):
        out.append(
            "The slow-wave maximum looks like remaining eye activity: read frontal delta with care."
        )
    rel = {k: (v if isinstance(v, dict) else v.to_dict()) for k, v in (q.reliability or {}).items()}
    from .labels import lowest_agreement

    sens = rel.get("sensors") or {}
    sh = {b: v for b, v in (sens.get("split_half") or {}).items() if v is not None}
    low = lowest_agreement(rel)
    if low is not None:
        band, c = low
        ci = (
            ""
            if c.get("low") is None or c.get("high") is None
            else f", 95 % interval {c['low']:.2f} to {c['high']:.2f}"
        )
        out.append(
            f"Agreement of two halves of the recording on sensor band power (ICC): "
            f"lowest {c['icc']:.2f} in {band}{ci}."
        )
    elif sh:
        lo_band = min(sh, key=lambda b: sh[b])
        out.append(
            f"Split-half reliability of sensor band power: lowest {sh[lo_band]:.2f} ({lo_band})."
        )
    flagged = [
        f"{'sensors' if lvl == 'sensors' else lvl.capitalize() + ' areas'} in "
        f"{', '.join(r['flagged_bands'])}"
        for lvl, r in rel.items()
        if r.get("flagged_bands")
    ]
    if flagged:
        thr = next(iter(rel.values())).get("threshold", 0.9)
        out.append(
            f"Reliability below {thr:.2f} at "
            + "; ".join(flagged)
            + ": read those bands with care."
        )
    elif rel:
        out.append("Reliability above the threshold in every band.")
    if result.warnings:
        out.append(
            f"{len(result.warnings)} warning(s) from reading and cleaning: see Data quality."
        )
    return tuple(out)


def _candidate_head(result, r, area: str) -> dict:
    """The columns every summary candidate row starts with (rank, band, measure, direction,
    area with its name, side)."""
    return {
        "rank": int(r.rank),
        "band": _band_text(result, r.band),
        "measure": str(r.measure),
        "direction": str(getattr(r, "direction", "")),
        "area": f"{area} {area_name(area)}".strip(),
        "side": str(r.hemisphere),
    }


def _peak_candidates(result, c: pd.DataFrame) -> pd.DataFrame:
    rows = []
    for r in c.itertuples(index=False):
        rows.append(
            {
                **_candidate_head(result, r, r.area),
                "peak z": f"{r.peak_z:+.1f}",
                "MNI x, y, z (mm)": f"{r.x_mni152:.0f}, {r.y_mni152:.0f}, {r.z_mni152:.0f}",
                "fit to a focal source": (
                    f"{r.fit:.2f}" if np.isfinite(getattr(r, "fit", np.nan)) else NOT_GIVEN
                ),
                "probability in area": (
                    f"{r.probability:.0%}" if np.isfinite(r.probability) else NOT_GIVEN
                ),
                "own share": f"{r.own_share:.0%}" if np.isfinite(r.own_share) else NOT_GIVEN,
                "spread over": _spans(r.cluster_areas),
            }
        )
    return pd.DataFrame(rows)


def _spans(text) -> str:
    """``"BA9 left:45;BA8 left:42;..."`` -> ``"BA9, BA8, BA46 (+2)"`` (areas the cluster spans)."""
    if not isinstance(text, str) or not text:
        return NOT_GIVEN
    areas = [
        p.split(":")[0].replace(" left", " L").replace(" right", " R") for p in text.split(";") if p
    ]
    more = f" (+{len(areas) - 3})" if len(areas) > 3 else ""
    return ", ".join(areas[:3]) + more


def _roi_candidates(result, c: pd.DataFrame) -> pd.DataFrame:
    rows = []
    for r in c.itertuples(index=False):
        rows.append(
            {
                **_candidate_head(result, r, r.roi),
                "z": f"{r.z:+.1f}",
                "FDR significant": value_text(getattr(r, "fdr", None)),
            }
        )
    return pd.DataFrame(rows)


def report_summary(result, *, when: str | None = None, n_top: int = N_TOP) -> Summary:
    """The summary page's content.

    Parameters
    ----------
    result : AnalysisResult
    when : str, optional
        Analysis time text (default: now, UTC).
    n_top : int
        Candidates listed.

    Returns
    -------
    Summary
    """
    when = when or _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    c = result.candidates
    peak = c is not None and "peak_z" in c.columns
    if c is None or not len(c):
        table = pd.DataFrame()
    elif peak:
        table = _peak_candidates(result, c.head(n_top))
    else:
        table = _roi_candidates(result, c.head(n_top))
    if not result.has_z:
        headline = "No norms were given, so nothing is compared with a reference group."
        note = ""
    else:
        t = result.roi_table
        z = t["z_equivalent" if "z_equivalent" in t else "z"].to_numpy(dtype=float)
        n = int(np.isfinite(z).sum())
        big = int(np.sum(np.abs(z[np.isfinite(z)]) > Z_THRESHOLD))
        headline = (
            f"{big} of {n} area and network z-scores lie beyond ±{Z_THRESHOLD:g} "
            f"(about {0.05 * n:.0f} would by chance alone)."
        )
        if c is not None and len(c):
            headline += f" {len(c)} candidate(s); the first {min(n_top, len(c))} are listed."
        else:
            headline += " No candidate area."
        if peak:
            note = (
                "Candidates are peaks of the per-source z map, named after the Brodmann "
                "area whose predicted maps best explain the map around the peak (not always "
                "the area holding the peak), absolute power first, then by the peak's |z| "
                "times its 'fit to a focal source' (how well the map a focal patch in the "
                "named area would give through sLORETA's blur matches the map: a spike of a "
                "few sources or excursions scattered over several places fit badly). How "
                "sure: 'probability in area' is the calibrated chance that the generator "
                "lies in the named area "
                "under a simulated head (a real head can differ more). How blurred: 'own "
                "share' is the part of the area's estimated power that comes from the area "
                "itself rather than from its neighbours, and 'spread over' lists the areas "
                "the deviating cluster covers. MNI coordinates mark a region of about a "
                "centimetre or more, not a point. Statistical deviations only: choosing a "
                "training target rests with a licensed practitioner."
            )
        else:
            note = (
                "Candidates are areas whose mean z lies beyond the limit, FDR-significant "
                "first. Areas next to each other share much of their signal (see the "
                "neighbour blur check). Statistical deviations only: choosing a training "
                "target rests with a licensed practitioner."
            )
    return Summary(_facts(result, when), _quality(result), table, note, headline)


__all__ = ["N_TOP", "Summary", "report_summary", "number_text"]
