"""Assemble the HTML report of an :class:`~sourcelab.result.AnalysisResult`."""

from __future__ import annotations

import datetime as _dt
import logging
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError
from ..provenance import atomic_write_text
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
    rec.setdefault("electrodes", ", ".join(result.ch_names))
    return kv_table(rec) if rec else '<p class="note">No recording information.</p>'


def _quality(result) -> str:
    q = result.quality.to_dict()
    if not q:
        return '<p class="note">No data-quality figures were recorded.</p>'
    out = kv_table({k: v for k, v in q.items() if not isinstance(v, dict)})
    for k, v in q.items():
        if k == "reliability" and isinstance(v, dict):
            out += _reliability(v, result.config.reliability_threshold)
        elif isinstance(v, dict):
            df = pd.DataFrame([list(v.values())], columns=[str(c) for c in v])
            out += f"<h3>{_esc(k)}</h3>" + table_html(df, sortable=False, z_column=None)
    return out


def _reliability(rel: dict, threshold: float) -> str:
    """Reliability per level (sensors, ROIs) and kind (split-half, test-retest) as one table."""
    rows = []
    for level, r in rel.items():
        if not isinstance(r, dict):
            continue
        for kind in ("split_half", "split_half_spearman_brown", "test_retest",
                     "test_retest_spearman_brown"):
            if isinstance(r.get(kind), dict):
                rows.append({"level": level, "estimate": kind.replace("_", " "),
                             **{b: r[kind][b] for b in r[kind]}})
    if not rows:
        return ""
    flagged = sorted({f"{lvl}: {', '.join(r.get('flagged_bands', []))}"
                      for lvl, r in rel.items()
                      if isinstance(r, dict) and r.get("flagged_bands")})
    note = (f'<p class="note">Correlation across items of log10 band power between halves of the '
            f"clean epochs (odd vs even: split half; first vs second half: test-retest), with the "
            f"Spearman-Brown full-length value. The uncorrected split-half r is flagged below "
            f"{threshold:.2f} (common practice).</p>")
    if flagged:
        note += ('<p class="caution">Reliability below the threshold: ' + _esc("; ".join(flagged))
                 + ". Treat these bands with extra care.</p>")
    return ("<h3>reliability</h3>" + table_html(pd.DataFrame(rows), sortable=False, z_column=None)
            + note)


def _sensor(result, figs: dict) -> str:
    out = [('<p class="note">Band power at the 19 10-20 sites, average reference. '
           "Maps are interpolated between electrodes; z maps share one symmetric scale.</p>")]
    for m in ("absolute", "relative"):
        out.append(_fig(figs, f"topomap/{m}", f"Sensor {m} power by band"))
        out.append(_fig(figs, f"topomap-z/{m}", f"Sensor {m} power: z by band"))
    st = result.sensor_table
    if st is not None and len(st):
        out.append("<details><summary>Sensor table (click a column to sort)</summary>"
                   + table_html(st) + "</details>")
    return "".join(out)


def _source(result, figs: dict) -> str:
    out = [('<p class="note">sLORETA source power on the 20,484 fsaverage5 cortical sources. '
           "Glass brains show, along each line of sight, the strongest value of the map "
           "projected into MNI152 grey matter; surface views show the inflated cortex "
           "(dark shading = sulci). Power scales are per band; z scales are the same "
           "for every band.</p>")]
    for band in result.bands.names:
        lo, hi = result.bands.edges[result.bands.names.index(band)]
        out.append(f'<h3 id="band-{_esc(band)}">{_esc(band)} ({lo:g}-{hi:g} Hz)</h3>')
        for m in ("absolute", "relative"):
            out.append(_fig(figs, f"glass/{band}/{m}", f"{band}: {m} power, glass brain"))
            out.append(_fig(figs, f"surface/{band}/{m}", f"{band}: {m} power, cortical surface"))
            out.append(_fig(figs, f"glass-z/{band}/{m}", f"{band}: {m} power, ROI z on sources"))
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
            out.append('<p class="note">No norms were given: the table has values but no '
                       "z-scores.</p>")
        for atlas, t in rt.groupby("atlas", sort=False):
            out.append(f"<details><summary>{_esc(atlas)}: {len(t)} rows "
                       "(click a column to sort)</summary>" + table_html(t) + "</details>")
    return "".join(out)


def _deviations(result) -> str:
    d = deviations(result.roi_table, result.sensor_table)
    intro = (f'<p class="note">Rows with |z| &gt; {DEVIATION_Z} (two-sided 5 % of a normal '
             "distribution), largest first. These are candidates to look at, not findings: "
             "across many ROIs and bands some will exceed the limit by chance.")
    if any("fdr" in c.lower() for c in d.columns):
        intro += " FDR columns give the false-discovery-rate flag across all tests."
    if "robust" in d.columns:
        intro += (" z_lo-z_hi is the 95 % bootstrap interval over clean epochs; a row is "
                  "robust when the whole interval lies beyond the same ±1.96 line, and "
                  "<b>not robust</b> when it crosses it.")
    intro += "</p>"
    if d.empty:
        return intro + "<p>None.</p>"
    return intro + table_html(d)


def _methods(result) -> str:
    cfg = result.config
    bands = ", ".join(f"{n} {lo:g}-{hi:g} Hz" for n, (lo, hi) in
                      zip(cfg.bands.names, cfg.bands.edges))
    norms = result.norms
    norms_txt = ("No norms were used; no z-scores are reported." if not norms else
                 "Norms: " + _esc(norms.path or "user-supplied")
                 + ". z = (value − norm mean) / norm SD after the norms' transform.")
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
        "<h3>References</h3><ol>" + "".join(f"<li>{_esc(r)}</li>" for r in REFERENCES)
        + "</ol>" + _atlas_sources(result))


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
        items.append(f"<li><b>{_esc(name)}</b>: {_esc(at.description)} "
                     f"<i>{_esc(at.citation)}</i></li>")
    return ("<h3>Atlases</h3><ul>" + "".join(items) + "</ul>") if items else ""


def _cautions() -> str:
    return "".join(f'<p class="caution">{_esc(c)}</p>' for c in CAUTIONS)


def _provenance(result) -> str:
    fp = result.fingerprint.to_dict()
    fp["bands"] = "; ".join(f"{b[0]} {b[1]:g}-{b[2]:g}" for b in fp["bands"])
    inputs = {"recording": result.recording.path or "–",
              "recording sha256": result.recording.sha256 or "–"}
    if result.norms:
        inputs["norms"] = result.norms.path or "–"
        inputs["norms sha256"] = result.norms.sha256 or "–"
    cfg = result.config.to_dict()
    cfg["bands"] = "; ".join(f"{b[0]} {b[1]:g}-{b[2]:g} Hz" for b in cfg["bands"])
    cfg = {k: ("none" if v is None else v) for k, v in sorted(cfg.items())}
    return ("<h3>Pipeline fingerprint</h3>" + kv_table(fp) + "<h3>Inputs</h3>" + kv_table(inputs)
            + "<h3>Software</h3>" + kv_table(_versions())
            + "<h3>Effective configuration</h3>" + kv_table(cfg))


def _extra_section(i: int, item) -> tuple[str, str, str]:
    """(id, title, html) of one extra section given as (title, content[, note])."""
    try:
        title, content, *rest = item
    except (TypeError, ValueError):
        raise ValueError("extra_sections: each item must be (title, content[, note])") from None
    if len(rest) > 1:
        raise ValueError("extra_sections: each item must be (title, content[, note])")
    note = f'<p class="note">{_esc(rest[0])}</p>' if rest else ""
    return f"extra-{i}", str(title), note + _extra_body(title, content)


def _extra_body(title, content) -> str:
    if isinstance(content, pd.DataFrame):
        return table_html(content)
    if isinstance(content, (bytes, bytearray, Path)) or hasattr(content, "savefig"):
        return img_html(content, caption=str(title))
    return "".join(f"<p>{_esc(p)}</p>" for p in str(content).split("\n\n"))


def _answer_sections(result, figs: dict) -> list:
    """Candidates, neighbour blur check and leakage figure, from what the analysis computed."""
    out = []
    if "leakage" in figs:
        out.append(("Leakage between areas", figs.pop("leakage"),
                    "Share of each row area's expected sLORETA power that comes from equal, "
                    "uncorrelated activity in each column area (from the resolution matrix; "
                    "log colour scale). Large off-diagonal shares mean the two areas cannot "
                    "be told apart well with a template head and 19 electrodes."))
    if result.candidates is not None:
        out.append(("Candidate regions and networks", result.candidates.head(40),
                    "Statistical deviations only, FDR-significant first, then by |z|. The "
                    "choice of any training target rests with a licensed practitioner who "
                    "weighs symptoms and history. Full list: candidates.tsv."))
    if result.leakage_hints is not None:
        out.append(("Neighbour blur check", result.leakage_hints.head(60),
                    "For each deviating Brodmann area, the areas that leak most power into "
                    "it and whether they deviate the same way: if they do, the deviation may "
                    "be a neighbour's activity blurred by the inverse."))
    return out


def build_html(result, figures: dict, *, extra_sections=None, title: str | None = None) -> str:
    """The report as one HTML string (see :func:`write_report`)."""
    figs = dict(figures)
    extra_sections = _answer_sections(result, figs) + list(extra_sections or [])
    bodies = {
        "recording": _recording(result),
        "quality": _quality(result),
        "sensor": _sensor(result, figs),
        "source": _source(result, figs),
        "roi": _roi(result, figs),
        "deviations": _deviations(result),
        "methods": _methods(result),
        "cautions": _cautions(),
        "provenance": _provenance(result),
    }
    sections = [(sid, t, bodies[sid]) for sid, t in SECTIONS]
    extras = [_extra_section(i, it) for i, it in enumerate(extra_sections or [])]
    if figs:  # figures no section claimed
        extras.append(("extra-figures", "Additional figures",
                       "".join(img_html(v, caption=k, alt=k) for k, v in figs.items())))
    sections = sections[:6] + extras + sections[6:]
    when = _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    title = title or "sourcelab source-level EEG report"
    nav = "".join(f'<a href="#{sid}">{_esc(t)}</a>' for sid, t, _ in sections)
    body = "".join(f'<section id="{sid}"><h2>{_esc(t)}</h2>{b}</section>'
                   for sid, t, b in sections)
    return ("<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>{_esc(title)}</title><meta name=\"viewport\" "
            "content=\"width=device-width, initial-scale=1\">"
            f"<style>{_CSS}</style></head><body>"
            f"<header><h1>{_esc(title)}</h1><p>Generated {when} · not a diagnostic device"
            "</p></header>"
            f"<nav>{nav}</nav><main>{body}</main><script>{_JS}</script></body></html>")


def write_report(result, path, *, figures: dict | None = None,
                 extra_sections: list | None = None) -> Path:
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
        raise ValueError(f"path: {path} is a folder; give an .html file name")
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
