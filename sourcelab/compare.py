"""Change across sessions of one person: per ROI x band x measure, with intervals and a reliable-
change index.

``compare_sessions([A, B, ...])`` compares every later session with the first (the baseline).
Sessions are analysis folders of the same pipeline (the fingerprints must be equal) holding
``roi_table.tsv``, ``provenance.json`` and ``epochs.npz``; two analyses of one recording (eyes
closed vs eyes open, ``analyze --select``) compare the same way.

Per row, with ``T`` the normalising transform (log10 for absolute, logit for relative power):

* **change** in value ``v_B - v_A`` and on the transformed scale ``T(v_B) - T(v_A)``, and in z
  ``z_B - z_A`` when both sessions were z-scored against the same norms;
* **bootstrap intervals**: each session's clean epochs are resampled independently
  (:func:`sourcelab.trust.bootstrap.roi_bootstrap`, ``n_boot`` replicates, different seeds), the
  change is recomputed per replicate pair, and the percentile interval is reported (Efron &
  Tibshirani 1993).  ``p`` is the two-sided normal p-value of the transformed change with the
  replicates' SD as standard error, ``q`` its Benjamini-Hochberg value over all rows of the pair;
* **reliable-change index** (Jacobson & Truax 1991): ``RCI = (T_B - T_A) / S_diff``,
  ``S_diff = sqrt(S_E,A² + S_E,B²)``, ``S_E = s_1 sqrt(1 - r_xx)``; ``|RCI| >= 1.96`` is a reliable
  change.  Which reliability: the analysis' **test-retest** reliability of ROI band power (first
  half of the clean epochs vs the second half, correlated across the Brodmann areas,
  ``quality.reliability.brodmann.test_retest_spearman_brown``), **Spearman-Brown corrected**
  to the full length, per band and per session.  Why: first vs second half includes the drift
  over a recording as a retest does (odd vs even epochs interleave and cancel slow drift, which
  overstates reliability); the corrected value is the reliability of a value made from all the
  epochs, which is what each session reports.  Because that r is a correlation *across areas*,
  ``s_1`` is taken from the same population: the SD across the session's Brodmann areas of
  ``T(value)`` in that band and measure, so ``S_E² = s_1² (1 - r_xx)`` is the classical error
  variance of one area's value (assumed equal across areas).  Mixing a between-person norm SD
  with an across-area r would not give an error variance.  For relative power the absolute-power
  r is used (the analysis measures no other); for lobes and networks the Brodmann-area S_E
  (conservative: pooled ROIs have less error).

A row **changed** (``verdict`` increase / decrease) when both hold: ``q <= 0.05`` and
``|RCI| >= 1.96``.  ``excludes_zero`` reports the uncorrected 95 % interval alone (about 5 % of
unchanged rows exclude 0 by chance).

References
----------
Jacobson NS, Truax P (1991) Clinical significance: a statistical approach to defining meaningful
change in psychotherapy research.  J Consult Clin Psychol 59:12-19.
Efron B, Tibshirani RJ (1993) An Introduction to the Bootstrap.  Chapman & Hall (from memory).
Benjamini Y, Hochberg Y (1995) J R Stat Soc B 57:289-300.
Spearman C (1910), Brown W (1910) Br J Psychol 3:271-295, 296-322.
"""

from __future__ import annotations

import html
import logging
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .constants import FDR_ALPHA, ROI_KEY, Z_THRESHOLD
from .errors import InputError

log = logging.getLogger("sourcelab")

#: |RCI| from which a change is reliable (Jacobson & Truax 1991: 1.96).
RCI_THRESHOLD = Z_THRESHOLD
#: Atlas whose test-retest reliability the analysis measures.
RELIABILITY_ATLAS = "brodmann"
#: Columns of the comparison table, in order.
#: The two sessions' labels and the row key.
SESSION_KEY = ("session_a", "session_b", *ROI_KEY)
COMPARE_COLUMNS = (
    *SESSION_KEY,
    "value_a",
    "value_b",
    "change",
    "change_lo",
    "change_hi",
    "change_t",
    "change_t_lo",
    "change_t_hi",
    "z_a",
    "z_b",
    "change_z",
    "change_z_lo",
    "change_z_hi",
    "p",
    "q",
    "excludes_zero",
    "s_e_a",
    "s_e_b",
    "rci",
    "reliable",
    "verdict",
)


@dataclass(frozen=True, eq=False)
class Session:
    """One analysis folder read for comparison."""

    path: Path
    label: str
    folder: object  # targets.candidates.ResultFolder
    epochs: object  # epochfile.EpochSpectra

    @property
    def table(self) -> pd.DataFrame:
        return self.folder.roi_table

    @property
    def fingerprint(self):
        return self.folder.fingerprint


def read_session(path, *, label: str | None = None) -> Session:
    """Read an analysis folder (tables, provenance, ``epochs.npz``).

    Parameters
    ----------
    path : str | Path
        An analysis output folder written by ``sourcelab analyze``.
    label : str, optional
        Name of the session in tables and figures; default the folder name.

    Returns
    -------
    Session
        The folder, its label, the tables and the per-epoch spectra.

    Raises
    ------
    InputError
        If the folder cannot be read, or ``epochs.npz`` and the tables come from different
        pipelines.
    """
    from .epochfile import FILENAME, read_epochs
    from .targets.candidates import read_result_folder

    folder = read_result_folder(path)
    ep = read_epochs(Path(path) / FILENAME)
    diffs = ep.fingerprint.differences(folder.fingerprint)
    if diffs:
        raise InputError(
            "epochs.npz and the tables come from different pipelines (" + "; ".join(diffs) + ")",
            path=path,
        )
    return Session(Path(path), label or Path(path).name, folder, ep)


def _transform(values, measure) -> np.ndarray:
    from .targets.live import transform

    v = np.asarray(values, dtype=float)
    out = np.empty(v.shape)
    m = np.asarray(measure)
    for name, tname in (("absolute", "log10"), ("relative", "logit")):
        sel = m == name
        out[sel] = transform(v[sel], tname)
    return out


def _norm_affine(session: Session, rows: pd.DataFrame) -> tuple[np.ndarray, np.ndarray] | None:
    """Per-row norm mean and SD (transformed scale) of a z-scored session, or None.

    Recovered exactly from :func:`sourcelab.norms.apply_norms` (the authority) by z-scoring two
    values whose transforms are 0 and 1: ``z0 = -mu/sd``, ``z1 = (1 - mu)/sd``.
    """
    from .norms import apply_norms, read_norms

    prov = session.folder.provenance
    info = (prov.get("inputs") or {}).get("norms")
    if not info or not info.get("path"):
        return None
    p = Path(info["path"])
    if not p.is_file():
        log.warning("%s: norms file %s is gone; z-change intervals not available", session.path, p)
        return None
    nm = read_norms(p)
    if info.get("sha256") and nm.sha256 != info["sha256"]:
        log.warning(
            "%s: norms file %s changed since the analysis; z-change intervals not available",
            session.path,
            p,
        )
        return None
    rec = prov.get("recording", {})
    opts = dict(
        age=rec.get("age"),
        fingerprint=session.fingerprint,
        condition=rec.get("condition"),
        allow_extrapolation=True,
        allow_condition_mismatch=True,
    )
    if opts["age"] is None:
        return None
    t = rows[["atlas", "roi", "hemisphere", "band", "measure"]].copy()
    zs = []
    for level in (0.0, 1.0):
        v = np.where(t["measure"] == "absolute", 10.0**level, 1 / (1 + math.exp(-level)))
        quiet = log.level
        log.setLevel(logging.ERROR)
        try:
            zs.append(apply_norms(t.assign(value=v), nm, kind="roi", **opts)["z"].to_numpy(float))
        finally:
            log.setLevel(quiet)
    sd = 1.0 / (zs[1] - zs[0])
    return -zs[0] * sd, sd


def _error_sd(session: Session, table: pd.DataFrame) -> dict:
    """S_E per (band, measure) for the RCI: s_1 sqrt(1 - r_SB) (see the module docstring)."""
    rel = (
        session.folder.provenance.get("quality", {})
        .get("reliability", {})
        .get(RELIABILITY_ATLAS, {})
        .get("test_retest_spearman_brown", {})
    )
    out = {}
    b = table[table["atlas"] == RELIABILITY_ATLAS]
    for (band, measure), g in b.groupby(["band", "measure"]):
        r = rel.get(band)
        tv = _transform(g["value"].to_numpy(float), g["measure"].to_numpy())
        tv = tv[np.isfinite(tv)]
        if r is None or tv.size < 3 or not np.isfinite(r):
            out[(band, measure)] = np.nan
            continue
        out[(band, measure)] = float(np.std(tv, ddof=1) * math.sqrt(max(0.0, 1.0 - float(r))))
    return out


def _replicates(
    session: Session, rows: pd.DataFrame, atlases: dict, *, n_boot: int, seed: int
) -> np.ndarray:
    """Bootstrap replicates of each row's value, shape (n_boot, n_rows)."""
    from .inverse import inverse_operator
    from .trust.bootstrap import bootstrap_weights, roi_bootstrap

    fp = session.fingerprint
    op = inverse_operator(fp.method, fp.orientation, fp.lambda2)
    col, verts = {}, []
    for at in atlases.values():
        for r in at.rois:
            col[(at.name, r.name, r.hemisphere)] = len(verts)
            verts.append(r.vertices)
    w = bootstrap_weights(session.epochs.n_epochs, n_boot=n_boot, seed=seed)
    meas = rows["measure"].to_numpy()
    s = roi_bootstrap(session.epochs.csd, op, verts, w, relative=bool((meas == "relative").any()))
    bands = list(session.epochs.band_names)
    bi = np.array([bands.index(b) for b in rows["band"]])
    ci = np.array([col[k] for k in zip(rows["atlas"], rows["roi"], rows["hemisphere"])])
    out = np.empty((n_boot, len(rows)))
    for m, arr in s.items():
        sel = meas == m
        out[:, sel] = arr[:, bi[sel], ci[sel]]
    return out


def compare_sessions(
    sessions, *, n_boot: int = 1000, seed: int = 0, ci: float = 0.95, labels=None
) -> pd.DataFrame:
    """Change of every ROI row between the first session and each later one.

    Parameters
    ----------
    sessions : sequence of path | Session
        At least two analysis folders of the same pipeline; the first is the baseline.
    n_boot : int
        Bootstrap replicates per session.
    seed : int
        Session i uses seed ``seed + i`` (independent resampling).
    ci : float
        Interval coverage.
    labels : sequence of str, optional
        Session labels (default: folder names).

    Returns
    -------
    DataFrame
        Columns :data:`COMPARE_COLUMNS`; ``attrs["per_session"]`` holds each session's
        replicate interval of ``T(value)`` per row (for :func:`plot_sessions`).

    Raises
    ------
    InputError
        Fewer than two sessions, different pipelines, missing ``epochs.npz``.
    """
    from .norms.zscore import bh_adjust
    from .rois import load_atlas
    from .trust.bootstrap import percentile_interval

    if len(sessions) < 2:
        raise InputError("compare: need at least two analysis folders")
    labels = list(labels) if labels is not None else [None] * len(sessions)
    ss = [
        s if isinstance(s, Session) else read_session(s, label=lab)
        for s, lab in zip(sessions, labels)
    ]
    base = ss[0]
    for s in ss[1:]:
        diffs = base.fingerprint.differences(s.fingerprint)
        if diffs:
            raise InputError(
                f"different pipelines, not comparable ({'; '.join(diffs)})", path=s.path
            )
    key = ["atlas", "roi", "hemisphere", "band", "measure"]
    common = base.table[key]
    for s in ss[1:]:
        common = common.merge(s.table[key], on=key)
    from .rois import available_atlases

    shipped = set(available_atlases())
    custom = sorted(set(common["atlas"]) - shipped)
    if custom:
        log.warning("rows of atlases %s are not compared (their ROIs are not shipped)", custom)
        common = common[common["atlas"].isin(shipped)]
    rows = common.drop_duplicates().reset_index(drop=True)
    if rows.empty:
        raise InputError("the sessions share no ROI rows")
    atlases = {a: load_atlas(a) for a in dict.fromkeys(rows["atlas"])}
    meas = rows["measure"].to_numpy()
    per = []
    for i, s in enumerate(ss):
        t = rows.merge(s.table, on=key, how="left")
        reps = _replicates(s, rows, atlases, n_boot=n_boot, seed=seed + i)
        per.append(
            dict(
                value=t["value"].to_numpy(float),
                z=pd.to_numeric(t["z"], errors="coerce").to_numpy(float),
                reps=reps,
                t_reps=_transform(reps, np.broadcast_to(meas, reps.shape)),
                affine=_norm_affine(s, rows),
                s_e=_error_sd(s, s.table),
                norms=((s.folder.provenance.get("inputs") or {}).get("norms") or {}).get("sha256"),
            )
        )
    out = []
    for i in range(1, len(ss)):
        a, b = per[0], per[i]
        d = rows.copy()
        d.insert(0, "session_b", ss[i].label)
        d.insert(0, "session_a", base.label)
        d["value_a"], d["value_b"] = a["value"], b["value"]
        d["change"] = b["value"] - a["value"]
        lo, hi = percentile_interval(b["reps"] - a["reps"], ci=ci)
        d["change_lo"], d["change_hi"] = lo, hi
        ta, tb = _transform(a["value"], meas), _transform(b["value"], meas)
        d["change_t"] = tb - ta
        dt = b["t_reps"] - a["t_reps"]
        lo, hi = percentile_interval(dt, ci=ci)
        d["change_t_lo"], d["change_t_hi"] = lo, hi
        same_norms = a["norms"] is not None and a["norms"] == b["norms"]
        d["z_a"], d["z_b"] = a["z"], b["z"]
        d["change_z"] = (b["z"] - a["z"]) if same_norms else np.nan
        if same_norms and a["affine"] is not None and b["affine"] is not None:
            (ma, sa), (mb, sb) = a["affine"], b["affine"]
            zr = (b["t_reps"] - mb) / sb - (a["t_reps"] - ma) / sa
            lo, hi = percentile_interval(zr, ci=ci)
        else:
            lo = hi = np.full(len(rows), np.nan)
            if not same_norms and (np.isfinite(a["z"]).any() or np.isfinite(b["z"]).any()):
                log.warning(
                    "%s and %s were not z-scored against the same norms: no z change",
                    base.label,
                    ss[i].label,
                )
        d["change_z_lo"], d["change_z_hi"] = lo, hi
        se = np.nanstd(dt, axis=0, ddof=1)
        from scipy.special import ndtr  # scipy.stats.norm.sf(x) is ndtr(-x)

        with np.errstate(invalid="ignore", divide="ignore"):
            p = 2 * ndtr(-(np.abs(d["change_t"].to_numpy(float)) / se))
        d["p"] = p
        d["q"] = bh_adjust(p)
        d["excludes_zero"] = (d["change_t_lo"] > 0) | (d["change_t_hi"] < 0)
        sea = np.array([a["s_e"].get((bb, m), np.nan) for bb, m in zip(rows["band"], meas)])
        seb = np.array([b["s_e"].get((bb, m), np.nan) for bb, m in zip(rows["band"], meas)])
        d["s_e_a"], d["s_e_b"] = sea, seb
        with np.errstate(invalid="ignore", divide="ignore"):
            d["rci"] = d["change_t"] / np.sqrt(sea**2 + seb**2)
        d["reliable"] = np.abs(d["rci"]) >= RCI_THRESHOLD
        changed = (d["q"] <= FDR_ALPHA) & d["reliable"]
        d["verdict"] = np.where(
            ~changed, "no change", np.where(d["change_t"] > 0, "increase", "decrease")
        )
        out.append(d)
    table = pd.concat(out, ignore_index=True)[list(COMPARE_COLUMNS)]
    sess_ci = []
    for s, pp in zip(ss, per):
        lo, hi = percentile_interval(pp["t_reps"], ci=ci)
        sess_ci.append(
            {
                "label": s.label,
                "t": _transform(pp["value"], meas),
                "t_lo": lo,
                "t_hi": hi,
                "z": pp["z"],
                "affine": pp["affine"],
            }
        )
    table.attrs = {
        "rows": rows,
        "per_session": sess_ci,
        "n_boot": int(n_boot),
        "ci": ci,
        "seed": int(seed),
    }
    return table


def targeted_rows(table: pd.DataFrame, targets=None, *, max_rows: int = 8) -> pd.DataFrame:
    """The rows to show across sessions.

    Those named by ``targets``; without targets the changed rows of the first session pair,
    then the others, by decreasing |RCI|, at most ``max_rows``.

    Parameters
    ----------
    table : DataFrame
        From :func:`compare_sessions` (its ``attrs["rows"]`` are the compared rows).
    targets : sequence, optional
        Each a TargetDefinition, a path to a target file, or
        ``(atlas, roi, hemisphere, band, measure)``; targets without a compared row are skipped.
    max_rows : int
        Rows shown without targets.

    Returns
    -------
    DataFrame
        The selected rows of ``table.attrs["rows"]`` with their position in column ``_i``.

    Raises
    ------
    InputError
        If targets are given and none matches a compared row.
    """
    from .targets import read_target

    rows = table.attrs["rows"]
    keys = []
    for t in targets or ():
        if isinstance(t, (str, Path)):
            t = read_target(t, check_fingerprint=False)
        if hasattr(t, "roi"):
            t = (t.atlas, t.roi, t.hemisphere, t.band, t.measure)
        keys.append(tuple(t))
    k = list(zip(rows["atlas"], rows["roi"], rows["hemisphere"], rows["band"], rows["measure"]))
    if keys:
        idx = [k.index(x) for x in keys if x in k]
        if not idx:
            raise InputError(f"no compared row matches the targets {keys}")
    else:
        first = table[table["session_b"] == table["session_b"].iloc[0]].reset_index(drop=True)
        order = np.argsort(
            -np.nan_to_num(np.abs(first["rci"].to_numpy(float)), nan=-1), kind="stable"
        )
        changed = first["verdict"].to_numpy() != "no change"
        ch = [int(i) for i in order if changed[i]]
        idx = (ch + [int(i) for i in order if not changed[i]])[:max_rows]
    return rows.iloc[idx].assign(_i=idx)


def plot_sessions(
    table: pd.DataFrame, targets=None, *, use_z: bool | None = None, figure=None, max_rows: int = 8
):
    """The selected rows across sessions with each session's bootstrap interval.

    Parameters
    ----------
    table : DataFrame
        From :func:`compare_sessions`.
    targets : sequence, optional
        Rows to show, see :func:`targeted_rows`.
    use_z : bool, optional
        Plot z against the norm rather than the transformed value (log10 µV² or logit);
        default: z when every session was z-scored.
    figure : matplotlib.figure.Figure, optional
        Figure to draw into; default a new one.
    max_rows : int
        Rows shown without targets.

    Returns
    -------
    matplotlib.figure.Figure
        One line per selected row, sessions on the x axis.
    """
    from matplotlib.figure import Figure

    sel = targeted_rows(table, targets, max_rows=max_rows)
    per = table.attrs["per_session"]
    if use_z is None:
        use_z = all(p["affine"] is not None for p in per)
    fig = (
        figure
        if figure is not None
        else Figure(figsize=(8, 1.0 + 0.9 * len(sel) + 1.5), layout="constrained")
    )
    ax = fig.subplots()
    x = np.arange(len(per))
    for j, (_, r) in enumerate(sel.iterrows()):
        i = int(r["_i"])
        y = np.array([p["t"][i] for p in per])
        lo = np.array([p["t_lo"][i] for p in per])
        hi = np.array([p["t_hi"][i] for p in per])
        if use_z:
            mu = np.array([p["affine"][0][i] for p in per])
            sd = np.array([p["affine"][1][i] for p in per])
            y, lo, hi = (y - mu) / sd, (lo - mu) / sd, (hi - mu) / sd
        off = (j - (len(sel) - 1) / 2) * 0.04
        label = f"{r['roi']} {r['hemisphere']} {r['band']} {r['measure']} ({r['atlas']})"
        ax.errorbar(x + off, y, yerr=[y - lo, hi - y], marker="o", capsize=3, label=label)
    ax.set_xticks(x, [p["label"] for p in per])
    if use_z:
        ax.axhline(0, color="0.5", lw=0.6)
        for lim in (-1.96, 1.96):
            ax.axhline(lim, color="0.6", lw=0.6, ls=":")
    ax.set_ylabel("z against the norm" if use_z else "log10 / logit of the value")
    ax.set_xlabel("session")
    ax.set_title(
        f"Across sessions ({int(100 * table.attrs['ci'])} % bootstrap intervals over "
        "each session's clean epochs)",
        fontsize=9,
    )
    ax.legend(fontsize=7, loc="best")
    return fig


def compare_html(
    table: pd.DataFrame, *, figure_png: bytes | None = None, max_rows: int = 60
) -> str:
    """A ``<section>`` for a report: changed rows, how change is judged, cautions.

    Parameters
    ----------
    table : DataFrame
        From :func:`compare_sessions`.
    figure_png : bytes, optional
        PNG embedded in the section (e.g. of :func:`plot_sessions`).
    max_rows : int
        Most changed rows listed.

    Returns
    -------
    str
        An HTML fragment (all text escaped).
    """
    import base64

    from .cautions import CAUTIONS

    from .report.html import table_html

    changed = table[table["verdict"] != "no change"]
    cols = [
        c
        for c in (
            *SESSION_KEY,
            "change_t",
            "change_t_lo",
            "change_t_hi",
            "change_z",
            "rci",
            "q",
            "verdict",
        )
        if c in table.columns
    ]
    n = len(table)
    img = ""
    if figure_png is not None:
        img = (
            f'<figure><img alt="targeted rows across sessions" src="data:image/png;base64,'
            f'{base64.b64encode(figure_png).decode()}"><figcaption>Targeted rows across '
            "sessions with their bootstrap intervals.</figcaption></figure>"
        )
    note = (
        f"{len(changed)} of {n} rows changed: Benjamini-Hochberg q &le; {FDR_ALPHA:g} for the "
        "bootstrap change and a reliable-change index |RCI| &ge; 1.96 (Jacobson &amp; Truax "
        "1991, with the analysis' test-retest reliability). A change between sessions is a "
        "statistical statement about these recordings, not evidence that training caused "
        "it: state, time of day, drowsiness, medication and recording conditions change "
        "band power too."
    )
    rows = (
        table_html(changed[cols].head(max_rows), z_column=None)
        if len(changed)
        else "<p>No row changed.</p>"
    )
    if len(changed) > max_rows:
        rows += (
            f'<p class="note">The first {max_rows} of {len(changed)} changed rows; all rows: '
            "compare.tsv.</p>"
        )
    caut = "".join(f'<p class="caution">{html.escape(c)}</p>' for c in CAUTIONS)
    return (
        f'<section class="compare" id="compare"><h2>Change across sessions</h2>'
        f"<p>{note}</p>{img}{rows}<h3>Cautions</h3>{caut}</section>"
    )


def compare_page(table: pd.DataFrame, *, figure_png: bytes | None = None) -> str:
    """The comparison as a self-contained HTML page (the report's style, no external resources).

    Parameters
    ----------
    table : DataFrame
        From :func:`compare_sessions`.
    figure_png : bytes, optional
        The :func:`plot_sessions` figure as PNG.

    Returns
    -------
    str
    """
    from .report.html import _CSS, _JS

    sessions = ", ".join(str(p["label"]) for p in table.attrs.get("per_session", []))
    title = "sourcelab session comparison"
    return (
        '<!DOCTYPE html><html lang="en"><head><meta charset="utf-8">'
        f"<title>{title}</title><style>{_CSS}</style></head><body>"
        f"<header><h1>{title}</h1><p>Sessions: {html.escape(sessions) or 'not given'} · "
        "not a diagnostic device</p></header><main>"
        f"{compare_html(table, figure_png=figure_png)}</main><script>{_JS}</script>"
        "</body></html>"
    )


def write_comparison(table: pd.DataFrame, out, *, targets=None, inputs=()) -> dict:
    """Write the comparison into the folder ``out``.

    Writes ``compare.tsv``, ``compare.png``, ``compare.html`` (a page in the report's style) and
    ``compare.json``;
    the folder is replaced atomically.

    Parameters
    ----------
    table : DataFrame
        From :func:`compare_sessions`.
    out : str | Path
        Output folder.
    targets : sequence, optional
        Rows plotted, see :func:`targeted_rows`.
    inputs : sequence of path
        The folders and files read, which ``out`` may not hold.

    Returns
    -------
    dict
        The summary written to ``compare.json`` (row counts, bootstrap settings, thresholds,
        session labels, cautions).
    """
    import json

    from .cautions import CAUTIONS
    from .figures import figure_png
    from .provenance import atomic_output_dir

    fig = plot_sessions(table, targets)
    png = figure_png(fig)
    summary = {
        "n_rows": int(len(table)),
        "changed": int((table["verdict"] != "no change").sum()),
        "excludes_zero": int(table["excludes_zero"].sum()),
        "n_boot": table.attrs.get("n_boot"),
        "ci": table.attrs.get("ci"),
        "rci_threshold": RCI_THRESHOLD,
        "fdr_alpha": FDR_ALPHA,
        "sessions": [p["label"] for p in table.attrs["per_session"]],
        "cautions": list(CAUTIONS),
    }
    with atomic_output_dir(Path(out), kind="compare", inputs=inputs) as tmp:
        # a plain table (reads with pandas.read_csv(sep="\t")); the cautions are in compare.json
        table.to_csv(tmp / "compare.tsv", sep="\t", index=False, na_rep="", float_format="%.6g")
        (tmp / "compare.png").write_bytes(png)
        (tmp / "compare.html").write_text(compare_page(table, figure_png=png), encoding="utf-8")
        (tmp / "compare.json").write_text(json.dumps(summary, indent=2), encoding="utf-8")
    return summary
