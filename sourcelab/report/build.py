"""Assemble the HTML report of an :class:`~sourcelab.result.AnalysisResult`."""

from __future__ import annotations

import datetime as _dt
import logging
from pathlib import Path

import numpy as np
import pandas as pd

from ..coupling.source import EDGE_ROI_COLUMNS
from ..errors import InputError
from ..provenance import atomic_write_text
from .labels import file_name, value_text
from .summary import report_summary
from .html import (
    _CSS,
    _JS,
    CAUTIONS,
    DEVIATION_Z,
    REFERENCES,
    SECTIONS,
    _esc,
    _versions,
    deviations,
    img_html,
    kv_table,
    table_html,
)

logger = logging.getLogger("sourcelab")

#: Report size ceiling for the default figure set, bytes (a design goal, checked by tests).
MAX_BYTES = 15 * 1024 * 1024


def _fig(figs: dict, key: str, caption: str) -> str:
    return img_html(figs.pop(key), caption=caption, alt=key) if key in figs else ""


def _recording(result) -> str:
    rec = result.recording.to_dict()
    rec["path"] = file_name(rec.get("path")) if rec.get("path") else "given in memory"
    cmap = rec.pop("channel_map", {}) or {}
    renamed = {k: v for k, v in cmap.items() if k != v}
    rec["channel_map"] = (
        ", ".join(f"{k} read from {v}" for k, v in renamed.items())
        if renamed
        else "the file uses the 10-20 names"
    )
    rec["annotations"] = [
        f"{d} ({n}x, {t:g} s)" for d, n, t in rec.get("annotations") or ()
    ] or "none"
    rec.setdefault("electrodes", ", ".join(result.ch_names))
    return kv_table(rec)


def _quality(result) -> str:
    q = result.quality.to_dict()
    if not q:
        return '<p class="note">No data-quality figures were recorded.</p>'
    plain = {
        k: v
        for k, v in q.items()
        if k not in ("thresholds", "ocular", "reliability", "excluded") and not isinstance(v, dict)
    }
    plain["rejected_s"] = {k: v for k, v in (q.get("rejected_s") or {}).items() if v} or "nothing"
    plain["excluded"] = [
        f"{e.get('description', 'span')} {value_text(e.get('start'))}-{value_text(e.get('stop'))} s"
        for e in q.get("excluded") or ()
    ] or "none"
    weak = {k: v for k, v in (q.get("channel_kept_fraction") or {}).items() if v < 1.0}
    plain["channel_kept_fraction"] = weak or "every site passed in every epoch"
    if q.get("mains_hz") is None:
        plain["mains_hz"] = "none found"
    out = kv_table(plain)
    if result.warnings:
        out += (
            "<h3>Warnings</h3><ul>"
            + "".join(f"<li>{_esc(w)}</li>" for w in result.warnings)
            + "</ul>"
        )
    rel = q.get("reliability")
    if isinstance(rel, dict) and rel:
        out += _reliability(rel, result.config.reliability_threshold)
    out += _ocular(result)
    th = q.get("thresholds")
    if isinstance(th, dict) and th:
        flat = {k: v for k, v in th.items() if not isinstance(v, dict)}
        out += (
            "<details><summary>Thresholds and filter edges used</summary>"
            + kv_table(flat)
            + "</details>"
        )
    return out


def _ocular(result) -> str:
    """Eye-movement correction: method, removed components and their scalp maps (when drawn)."""
    oc = result.quality.ocular or {}
    if not oc:
        return ""
    removed = oc.get("removed_components") or []
    txt = (
        f"{len(removed)} of {value_text(oc.get('n_components'))} independent components were "
        f"removed as eye activity (method: {value_text(oc.get('method'))})."
        if removed
        else "No independent component was removed as eye activity "
        f"(method: {value_text(oc.get('method'))})."
    )
    rd = oc.get("residual_delta") or {}
    if rd:
        txt += (
            f" Check of the slow-wave maximum after correction: correlation with the eye "
            f"pattern r = {value_text(rd.get('r'))} (threshold "
            f"{value_text(rd.get('threshold'))}): "
            + (
                "it looks like remaining eye activity."
                if rd.get("ocular")
                else "it does not look like eye activity."
            )
        )
    notes = oc.get("notes") or []
    if notes:
        txt += " " + " ".join(str(n) for n in notes)
    return f"<h3>Eye-movement correction</h3><p>{_esc(txt)}</p>"


def _reliability(rel: dict, threshold: float) -> str:
    """Agreement between halves of the recording: ICC(2,1) with its 95 % interval per level,
    split and band (:func:`~sourcelab.report.labels.reliability_table`)."""
    from .labels import reliability_table

    table = reliability_table(rel)
    if not len(table):
        return ""
    flagged = sorted(
        {
            f"{'sensors' if lvl == 'sensors' else lvl + ' areas'}: "
            f"{', '.join(r.get('flagged_bands', []))}"
            for lvl, r in rel.items()
            if isinstance(r, dict) and r.get("flagged_bands")
        }
    )
    note = (
        '<p class="note">How well two halves of the clean epochs agree on the pattern of '
        "log10 band power across sensors or areas: intraclass correlation ICC(2,1) "
        "(absolute agreement, Shrout &amp; Fleiss 1979) with its 95 % interval (McGraw "
        "&amp; Wong 1996) in brackets. 1 is perfect agreement; a shift of power between the "
        "halves lowers it as much as a change of pattern. A band is flagged when the "
        f"correlation of odd and even epochs is below {threshold:.2f}.</p>"
    )
    if flagged:
        note += (
            '<p class="caution">Reliability below the threshold: '
            + _esc("; ".join(flagged))
            + ". Treat these bands with extra care.</p>"
        )
    return "<h3>Reliability</h3>" + table_html(table, sortable=False, z_column=None) + note


def _summary(summary) -> str:
    """The first section: who/what/when, data quality in words, top candidates, cautions.

    Laid out so that a 1400 x 900 screen shows the short caution, the top candidates and the
    cautions' first lines: facts and quality side by side, the table below.
    """
    from ..cautions import SHORT

    facts = "".join(f"<tr><th>{_esc(k)}</th><td>{_esc(v)}</td></tr>" for k, v in summary.facts)
    quality = "".join(f"<li>{_esc(q)}</li>" for q in summary.quality)
    out = (
        f'<div class="summary"><p class="caution short">{_esc(SHORT)}</p>'
        f'<div class="top"><div><table class="kv facts"><tbody>{facts}</tbody></table></div>'
        f'<div><h3>Data quality</h3><ul class="quality">{quality}</ul></div></div>'
        f'<h3>Top candidates</h3><p class="headline">{_esc(summary.headline)}</p>'
    )
    if len(summary.candidates):
        out += table_html(summary.candidates, sortable=False, z_column=None, human=False)
    if summary.candidate_note:
        out += f'<p class="note">{_esc(summary.candidate_note)}</p>'
    out += "<h3>Cautions</h3>" + "".join(
        f'<p class="caution">{_esc(c)}</p>' for c in summary.cautions
    )
    return out + "</div>"


def _sensor(result, figs: dict) -> str:
    out = [
        (
            '<p class="note">Band power at the 19 10-20 sites, average reference. '
            "Maps are interpolated between electrodes; z maps share one symmetric scale.</p>"
        )
    ]
    for m in ("absolute", "relative"):
        out.append(_fig(figs, f"topomap/{m}", f"Sensor {m} power by band"))
        out.append(_fig(figs, f"topomap-z/{m}", f"Sensor {m} power: z by band"))
    st = result.sensor_table
    if st is not None and len(st):
        out.append(
            "<details><summary>Sensor table (click a column to sort)</summary>"
            + table_html(st)
            + "</details>"
        )
    return "".join(out)


def _source(result, figs: dict) -> str:
    out = [
        (
            '<p class="note">sLORETA source power on the 20,484 fsaverage5 cortical sources. '
            "Glass brains show, along each line of sight, the strongest value of the map "
            "projected into MNI152 grey matter; surface views show the inflated cortex "
            "(dark shading = sulci). Power scales are per band; z scales are the same "
            "for every band.</p>"
        )
    ]
    for band in result.bands.names:
        lo, hi = result.bands.edges[result.bands.names.index(band)]
        out.append(f'<h3 id="band-{_esc(band)}">{_esc(band)} ({lo:g}-{hi:g} Hz)</h3>')
        for m in ("absolute", "relative"):
            out.append(_fig(figs, f"glass/{band}/{m}", f"{band}: {m} power, glass brain"))
            out.append(_fig(figs, f"surface/{band}/{m}", f"{band}: {m} power, cortical surface"))
            out.append(_fig(figs, f"glass-z/{band}/{m}", f"{band}: {m} power, ROI z on sources"))
            out.append(
                _fig(
                    figs,
                    f"surface-z/{band}/{m}",
                    f"{band}: {m} power, z per source on the cortical surface",
                )
            )
    return "".join(out)


def _roi(result, figs: dict) -> str:
    out = []
    for m in ("absolute", "relative"):
        out.append(_fig(figs, f"networks/{m}", f"Networks, {m} power: z per band"))
        out.append(_fig(figs, f"roi-heatmap/{m}", f"ROI z by band, {m} power"))
        bars = [k for k in list(figs) if k.startswith("roi-bars/") and k.endswith(f"/{m}")]
        if bars:
            out.append(f"<details><summary>ROIs ranked by |z| per band ({m} power)</summary>")
            for k in bars:
                out.append(_fig(figs, k, k.split("/")[1] + f": ROIs ranked by |z| ({m})"))
            out.append("</details>")
    rt = result.roi_table
    if rt is None or not len(rt):
        out.append('<p class="note">No ROI table.</p>')
    else:
        if not ("z" in rt.columns and np.isfinite(rt["z"].astype(float)).any()):
            out.append(
                '<p class="note">No norms were given: the table has values but no z-scores.</p>'
            )
        for atlas, t in rt.groupby("atlas", sort=False):
            out.append(
                f"<details><summary>{_esc(atlas)}: {len(t)} rows "
                "(click a column to sort)</summary>" + table_html(t) + "</details>"
            )
    return "".join(out)


def _deviations(result) -> str:
    d = deviations(result.roi_table, result.sensor_table)
    intro = (
        f'<p class="note">Rows with |z| &gt; {DEVIATION_Z} (two-sided 5 % of a normal '
        "distribution), largest first. These are candidates to look at, not findings: "
        "across many ROIs and bands some will exceed the limit by chance."
    )
    if any("fdr" in c.lower() for c in d.columns):
        intro += " FDR columns give the false-discovery-rate flag across all tests."
    if "robust" in d.columns:
        intro += (
            " 'z low' to 'z high' is the 95 % bootstrap interval over clean epochs; a row is "
            "robust when the whole interval lies beyond the same ±1.96 line, and "
            "<b>not robust</b> when it crosses it."
        )
    intro += "</p>"
    if d.empty:
        return intro + "<p>None.</p>"
    return intro + table_html(d)


def _methods(result) -> str:
    cfg = result.config
    bands = ", ".join(
        f"{n} {lo:g}-{hi:g} Hz" for n, (lo, hi) in zip(cfg.bands.names, cfg.bands.edges)
    )
    norms = result.norms
    norms_txt = (
        "No norms were used; no z-scores are reported."
        if not norms
        else "Norms: "
        + _esc(file_name(norms.path) if norms.path else "given in memory")
        + ". z = (value − norm mean) / norm SD after the norms' transform."
    )
    return (
        "<p>The recording was re-referenced to the common average, cleaned epoch by epoch "
        f"({cfg.epoch_s:g} s epochs, peak-to-peak limit {cfg.reject_uv:g} µV) and band-passed "
        f"{cfg.l_freq:g}-{cfg.h_freq:g} Hz. Cross-spectra were estimated with Welch's method "
        f"and summed over each band ({_esc(bands)}).</p>"
        f"<p>Source power was computed with {_esc(cfg.method)} ({_esc(cfg.orientation)} "
        f"orientation, λ² = 1/SNR² = {cfg.lambda2:.4g}) on a three-layer boundary-element "
        "model of the fsaverage template with electrodes at MNE's fsaverage-fitted 10-20 "
        "positions; the 20,484 sources are the fsaverage5 cortical vertices. Relative power "
        "is each band's share of the summed power of all bands.</p>"
        "<p>Areas and networks average the sources they contain. Volume figures place each "
        "source at its mid-thickness position, map fsaverage (MNI305) to MNI152 with "
        "FreeSurfer's published affine, and fill grey-matter voxels within 5 mm of a source "
        f"with the nearest source's value.</p><p>{norms_txt}</p>"
        "<h3>References</h3><ol>"
        + "".join(f"<li>{_esc(r)}</li>" for r in REFERENCES)
        + "</ol>"
        + _atlas_sources(result)
    )


def _atlas_sources(result) -> str:
    """Description and citation of each atlas in the ROI table (when the atlas loads)."""
    rt = result.roi_table
    names = list(dict.fromkeys(rt["atlas"])) if rt is not None and len(rt) else []
    items = []
    for name in names:
        try:
            from ..rois import load_atlas

            at = load_atlas(name)
        except (ImportError, InputError, KeyError, ValueError) as exc:
            logger.debug("atlas %r not described in the report: %s", name, exc)
            items.append(f"<li><b>{_esc(name)}</b>: no description available.</li>")
            continue
        items.append(
            f"<li><b>{_esc(name)}</b>: {_esc(_reader_text(at.description))} "
            f"<i>{_esc(_reader_text(at.citation))}</i></li>"
        )
    return ("<h3>Atlases</h3><ul>" + "".join(items) + "</ul>") if items else ""


def _reader_text(text) -> str:
    """Text for readers: notes meant for developers ("from memory") removed."""
    import re

    t = re.sub(r"\s*\(\s*from memory\s*\)", "", str(text), flags=re.IGNORECASE)
    t = re.sub(r"\s*[;,]\s*from memory", "", t, flags=re.IGNORECASE)
    return re.sub(r"\s*from memory", "", t, flags=re.IGNORECASE).strip()


def _cautions() -> str:
    return "".join(f'<p class="caution">{_esc(c)}</p>' for c in CAUTIONS)


def _provenance(result) -> str:
    fp = result.fingerprint.to_dict()
    fp["bands"] = "; ".join(f"{b[0]} {b[1]:g}-{b[2]:g}" for b in fp["bands"])
    inputs = {
        "recording": file_name(result.recording.path),
        "recording sha256": result.recording.sha256 or "not given",
    }
    if result.norms:
        inputs["norms"] = file_name(result.norms.path)
        inputs["norms sha256"] = result.norms.sha256 or "not given"
    cfg = result.config.to_dict()
    cfg["bands"] = "; ".join(f"{b[0]} {b[1]:g}-{b[2]:g} Hz" for b in cfg["bands"])
    cfg = {k: ("none" if v is None else v) for k, v in sorted(cfg.items())}
    return (
        "<h3>Pipeline fingerprint</h3>"
        + kv_table(fp)
        + "<h3>Inputs</h3>"
        + kv_table(inputs)
        + "<h3>Software</h3>"
        + kv_table(_versions())
        + "<h3>Effective configuration</h3>"
        + kv_table(cfg)
    )


def _extra_section(i: int, item) -> tuple[str, str, str]:
    """(id, title, html) of one extra section given as (title, content[, note])."""
    try:
        title, content, *rest = item
    except (TypeError, ValueError):
        raise InputError(
            "extra_sections: each item must be (title, content[, note])", field="extra_sections"
        ) from None
    if len(rest) > 1:
        raise InputError(
            "extra_sections: each item must be (title, content[, note])", field="extra_sections"
        )
    note = f'<p class="note">{_esc(rest[0])}</p>' if rest else ""
    return f"extra-{i}", str(title), note + _extra_body(title, content)


def _extra_body(title, content) -> str:
    if isinstance(content, pd.DataFrame):
        return table_html(content)
    if isinstance(content, (bytes, bytearray, Path)) or hasattr(content, "savefig"):
        return img_html(content, caption=str(title))
    return "".join(f"<p>{_esc(p)}</p>" for p in str(content).split("\n\n"))


#: Candidate columns that index internal arrays (not for readers).
_INTERNAL_COLUMNS = ("source", "vertex")
#: Rows of each coupling table listed in the report.
N_COUPLING_ROWS = 15


def _answer_sections(result, figs: dict) -> list:
    """Candidates, neighbour blur check and leakage figure, from what the analysis computed."""
    out = []
    if result.candidates is not None:
        c = result.candidates.drop(
            columns=[k for k in _INTERNAL_COLUMNS if k in result.candidates.columns]
        )
        out.append(
            (
                "Candidates in detail",
                c.head(40),
                "Every column of the first 40 candidates (full list: candidates.tsv). "
                "Statistical deviations only; the choice of any training target rests with "
                "a licensed practitioner who weighs symptoms and history.",
            )
        )
    if result.leakage_hints is not None:
        out.append(
            (
                "Neighbour blur check",
                result.leakage_hints.head(60),
                "For each deviating Brodmann area, the areas that leak most power into "
                "it and whether they deviate the same way: if they do, the deviation may "
                "be a neighbour's activity blurred by the inverse.",
            )
        )
    if "leakage" in figs:
        out.append(
            (
                "Leakage between areas",
                figs.pop("leakage"),
                "Share of each row area's expected sLORETA power that comes from equal, "
                "uncorrelated activity in each column area (from the resolution matrix; "
                "log colour scale). Large off-diagonal shares mean the two areas cannot "
                "be told apart well with a template head and 19 electrodes.",
            )
        )
    return out


def top_coupling_rows(table, *, n: int = N_COUPLING_ROWS):
    """The rows of a pair or coupling table with the largest |z| beyond the limit (or None).

    Parameters
    ----------
    table : DataFrame | None
        ``pair_table`` or ``coupling_table`` of a result.
    n : int
        Rows kept.

    Returns
    -------
    DataFrame | None
        Identifying columns, value, z, FDR and robustness columns, largest |z| first; None
        without z.
    """
    if table is None or "z" not in table.columns or not len(table):
        return None
    z = table["z"].astype(float)
    sel = table[np.isfinite(z) & (z.abs() > DEVIATION_Z)]
    keep = [
        c
        for c in (
            "pair",
            *EDGE_ROI_COLUMNS,
            "band",
            "measure",
            "value",
            "unit",
            "z",
            "fdr",
            "robust",
            "leakage_explained",
        )
        if c in sel.columns
    ]
    sel = sel.reindex(sel["z"].abs().sort_values(ascending=False).index)[keep]
    sel = sel.head(n).reset_index(drop=True)
    if "measure" in sel.columns:
        from ..figures.coupling import MEASURE_TITLES

        sel["measure"] = [MEASURE_TITLES.get(m, m) for m in sel["measure"]]
    return sel


def _coupling(result, figs: dict) -> str:
    """Pair and network coupling: head maps, ROI matrices and the largest deviations."""
    from ..figures.coupling import MEASURE_TITLES

    pt, ct = result.pair_table, result.coupling_table
    if pt is None and ct is None:
        return ""
    out = [
        '<p class="note">Coupling between electrode pairs (coherence, lagged coherence, '
        "power asymmetry ...) and between networks and lobes at source level. Zero-lag "
        "measures between nearby sites are inflated by volume conduction and by the "
        "inverse's blur; lagged measures and orthogonalised envelope correlation are not. "
        "'explained by blur' marks a value the inverse's leakage alone can produce.</p>"
    ]
    pair_keys = [k for k in list(figs) if k.startswith("pairs/")]
    if pair_keys:
        out.append("<details open><summary>Electrode pairs beyond the limit on the head</summary>")
        for k in pair_keys:
            _, band, m = k.split("/")
            out.append(
                _fig(
                    figs, k, f"{band}: {MEASURE_TITLES.get(m, m)}, pairs with |z| > {DEVIATION_Z:g}"
                )
            )
        out.append("</details>")
    for k in [k for k in list(figs) if k.startswith("coupling/")]:
        m = k.split("/")[1]
        out.append(_fig(figs, k, f"Network coupling: {MEASURE_TITLES.get(m, m)}, per band"))
    for name, t in (("electrode pairs", pt), ("networks and lobes", ct)):
        top = top_coupling_rows(t)
        if top is None:
            continue
        n_tot = int(np.isfinite(t["z"].astype(float)).sum())
        n_big = int((t["z"].astype(float).abs() > DEVIATION_Z).sum())
        out.append(
            f'<h3>Largest deviations: {_esc(name)}</h3><p class="note">{n_big} of '
            f"{n_tot} z-scores beyond ±{DEVIATION_Z:g} (about {0.05 * n_tot:.0f} by "
            "chance alone); the first "
            f"{len(top)} by |z|. Full tables: pair_table.tsv, coupling_table.tsv.</p>"
        )
        out.append(table_html(top, sortable=True) if len(top) else "<p>None.</p>")
    return "".join(out)


def _ocular_figures(figs: dict) -> str:
    return "".join(
        _fig(figs, k, "Scalp maps of the removed eye-movement components")
        for k in [k for k in list(figs) if k.startswith("ocular")]
    )


def build_html(result, figures: dict, *, extra_sections=None, title: str | None = None) -> str:
    """The report as one HTML string (see :func:`write_report`).

    Parameters
    ----------
    result : AnalysisResult
        The analysed recording.
    figures : dict
        Name -> PNG bytes, PNG path or matplotlib Figure; names no section claims go to
        "Additional figures".
    extra_sections : list of (title, content[, note]), optional
        Sections added after the deviations (content: text, a DataFrame or an image).
    title : str, optional
        Page title and heading; default "sourcelab source-level EEG report".

    Returns
    -------
    str
        A self-contained HTML document (styles, script and images inline), stamped with the
        current UTC time.
    """
    figs = dict(figures)
    when = _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    answers = [_extra_section(i, it) for i, it in enumerate(_answer_sections(result, figs))]
    bodies = {
        "summary": _summary(report_summary(result, when=when)),
        "recording": _recording(result),
        "quality": _quality(result) + _ocular_figures(figs),
        "sensor": _sensor(result, figs),
        "source": _source(result, figs),
        "roi": _roi(result, figs),
        "deviations": _deviations(result),
        "methods": _methods(result),
        "cautions": _cautions(),
        "provenance": _provenance(result),
    }
    coupling = _coupling(result, figs)
    sections = [(sid, t, bodies[sid]) for sid, t in SECTIONS]
    user = [_extra_section(i + len(answers), it) for i, it in enumerate(extra_sections or [])]
    extras = [("coupling", "Coupling between sites and networks", coupling)] if coupling else []
    cut = [sid for sid, _, _ in sections].index("roi") + 1
    middle = extras + sections[cut : cut + 1] + answers + user  # coupling, deviations, answers
    if figs:  # figures no section claimed
        middle.append(
            (
                "extra-figures",
                "Additional figures",
                "".join(img_html(v, caption=k, alt=k) for k, v in figs.items()),
            )
        )
    sections = sections[:cut] + middle + sections[cut + 1 :]
    title = title or "sourcelab source-level EEG report"
    nav = "".join(f'<a href="#{sid}">{_esc(t)}</a>' for sid, t, _ in sections)
    body = "".join(f'<section id="{sid}"><h2>{_esc(t)}</h2>{b}</section>' for sid, t, b in sections)
    return (
        '<!DOCTYPE html><html lang="en"><head><meta charset="utf-8">'
        f'<title>{_esc(title)}</title><meta name="viewport" '
        'content="width=device-width, initial-scale=1">'
        f"<style>{_CSS}</style></head><body>"
        f"<header><h1>{_esc(title)}</h1><p>Generated {when} · not a diagnostic device"
        "</p></header>"
        f"<nav>{nav}</nav><main>{body}</main><script>{_JS}</script></body></html>"
    )


def write_report(
    result, path, *, figures: dict | None = None, extra_sections: list | None = None
) -> Path:
    """Write the self-contained HTML report of one analysis.

    Parameters
    ----------
    result : AnalysisResult
    path : str | Path
        Output ``.html`` file; written atomically (temporary name, then rename).
    figures : dict | None
        Name → PNG bytes, PNG path or matplotlib Figure.  Names from
        :func:`sourcelab.figures.result_figures` are placed in their sections; other names go to
        "Additional figures".  None: the default figure set is made here.
    extra_sections : list of (title, content) | None
        Sections added before "Methods"; content is text (paragraphs split on blank lines,
        escaped), a DataFrame (table) or an image (PNG bytes/path/Figure).

    Returns
    -------
    path : Path
    """
    path = Path(path)
    if path.exists() and path.is_dir():
        raise InputError("is a folder; give an .html file name", path=path)
    if figures is None:
        from ..figures import figure_png, result_figures

        figures = {k: figure_png(f) for k, f in result_figures(result).items()}
    text = build_html(result, figures, extra_sections=extra_sections)
    path.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_text(path, text)
    size = path.stat().st_size
    if size > MAX_BYTES:
        logger.warning("report %s is %.1f MB (design limit 15 MB)", path, size / 1e6)
    logger.info("report written: %s (%.1f MB)", path, size / 1e6)
    return path
