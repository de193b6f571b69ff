"""One self-contained HTML report per analysis: inline CSS and JS, figures as base64 PNG.

No external resource of any kind is referenced (no URLs, web fonts or scripts), so the file opens
offline and can be archived as is.
"""

from __future__ import annotations

import base64
import html
import logging
import platform
from pathlib import Path

import numpy as np
import pandas as pd

from ..cautions import CAUTIONS  # noqa: F401  (re-exported for the report)
from ..constants import ROI_KEY, Z_THRESHOLD
from ..errors import InputError
from .labels import MISSING_NUMBER, column_label, field_label, human_table, value_text

logger = logging.getLogger("sourcelab")

#: Section ids and titles, in order.
SECTIONS = (
    ("summary", "Summary"),
    ("recording", "Recording"),
    ("quality", "Data quality"),
    ("sensor", "Sensor results"),
    ("source", "Source results by band"),
    ("roi", "ROI and network tables"),
    ("deviations", "All deviations beyond the limit"),
    ("methods", "Methods and references"),
    ("cautions", "Cautions"),
    ("provenance", "Provenance"),
)

#: Limit of |z| for the candidate-deviation list (two-sided 5 % normal point; common practice).
DEVIATION_Z = Z_THRESHOLD

REFERENCES = (
    (
        "Pascual-Marqui RD (2002). Standardized low-resolution brain electromagnetic tomography "
        "(sLORETA): technical details. Methods Find Exp Clin Pharmacol 24 Suppl D:5-12."
    ),
    (
        "Fischl B, Sereno MI, Tootell RBH, Dale AM (1999). High-resolution intersubject averaging "
        "and "
        "a coordinate system for the cortical surface. Hum Brain Mapp 8:272-284 (fsaverage "
        "template)."
    ),
    "Gramfort A et al. (2013). MEG and EEG data analysis with MNE-Python. Front Neurosci 7:267.",
    (
        "Lancaster JL et al. (2000). Automated Talairach atlas labels for functional brain "
        "mapping. "
        "Hum Brain Mapp 10:120-131 (Brodmann-area labels)."
    ),
    (
        "Yeo BTT et al. (2011). The organization of the human cerebral cortex estimated by "
        "intrinsic "
        "functional connectivity. J Neurophysiol 106:1125-1165 (functional networks)."
    ),
    (
        "Benjamini Y, Hochberg Y (1995). Controlling the false discovery rate. J R Stat Soc B "
        "57:289-300 (FDR flags, where present)."
    ),
    (
        "Fonov V et al. (2011). Unbiased average age-appropriate atlases for pediatric studies. "
        "NeuroImage 54:313-327 (MNI152 2009 template used for volume figures)."
    ),
    (
        "Shrout PE, Fleiss JL (1979). Intraclass correlations: uses in assessing rater "
        "reliability. "
        "Psychol Bull 86:420-428 (agreement between halves of the recording)."
    ),
    (
        "McGraw KO, Wong SP (1996). Forming inferences about some intraclass correlation "
        "coefficients. Psychol Methods 1:30-46 (intervals of the intraclass correlation)."
    ),
)

_CSS = """
:root{--ink:#1d2430;--muted:#5b6472;--line:#d5dae1;--band:#eef2f6;--accent:#2f5d62}
*{box-sizing:border-box}
body{margin:0;font:14px/1.5 system-ui,-apple-system,"Segoe UI",Roboto,sans-serif;color:var(--ink);
background:#f7f8fa}
header{background:var(--accent);color:#fff;padding:18px 28px}
header h1{margin:0;font-size:22px;font-weight:600}
header p{margin:4px 0 0;opacity:.85}
nav{padding:10px 28px;background:#fff;border-bottom:1px solid var(--line);position:sticky;top:0;
z-index:2}
nav a{color:var(--accent);margin-right:14px;text-decoration:none;font-size:13px}
main{max-width:1180px;margin:0 auto;padding:10px 20px 40px}
section{background:#fff;border:1px solid var(--line);border-radius:6px;margin:18px 0;
padding:6px 20px 16px}
h2{font-size:18px;border-bottom:2px solid var(--band);padding-bottom:4px}
h3{font-size:15px;color:var(--muted);margin-bottom:4px}
figure{margin:8px 0 14px}
figure img{max-width:100%;height:auto;border:1px solid var(--band)}
figcaption{color:var(--muted);font-size:12px}
table{border-collapse:collapse;font-size:12.5px;margin:6px 0 12px}
th,td{border-bottom:1px solid var(--line);padding:3px 8px;text-align:left;vertical-align:top}
th{background:var(--band);position:sticky;top:38px}
table.sortable th{cursor:pointer}
table.sortable th:after{content:" \\2195";color:#9aa3ad;font-size:11px}
td.num{text-align:right;font-variant-numeric:tabular-nums}
tr.hi td{background:#fbeaea}tr.lo td{background:#e8f0fb}
.kv th{width:240px;position:static}
.caution{border-left:4px solid #b5651d;background:#fdf6ee;padding:8px 12px;margin:8px 0}
.note{color:var(--muted);font-size:12.5px}
details summary{cursor:pointer;color:var(--accent);margin:6px 0}
.bandgrid{display:grid;grid-template-columns:1fr;gap:4px}
.tablewrap{max-width:100%;overflow-x:auto}
.tablewrap th{top:0}
.pager{font-size:12px;color:var(--muted);margin:-6px 0 10px}
.pager button{font:inherit;margin-right:6px;cursor:pointer}
.summary .facts th{width:150px}
.summary .top{display:grid;grid-template-columns:minmax(0,1.1fr) minmax(0,1fr);gap:18px}
.summary .top h3{margin-top:4px}
.caution.short{font-size:12.5px;margin:4px 0 6px}
td.num{white-space:nowrap}
p.unit{margin:-8px 0 12px}
.summary .headline{font-size:15px;font-weight:600}
.summary ul.quality{margin:4px 0 8px 18px;padding:0}
.summary .tablewrap td,.summary .tablewrap th{white-space:nowrap}
.summary .facts td{word-break:break-word}
@media print{nav,.pager{display:none}th{position:static}section{break-inside:auto;border:none}
table.paged tr{display:table-row!important}.tablewrap{overflow:visible}
table{font-size:10px}figure{break-inside:avoid}}
"""

_JS = """
document.querySelectorAll('table.sortable').forEach(function(t){
 t.querySelectorAll('th').forEach(function(th,i){th.addEventListener('click',function(){
  var b=t.tBodies[0],rows=Array.prototype.slice.call(b.rows),asc=th.dataset.asc!=='1';
  th.dataset.asc=asc?'1':'0';
  rows.sort(function(x,y){var a=x.cells[i].textContent,c=y.cells[i].textContent,
   p=parseFloat(a),q=parseFloat(c);
   var r=(!isNaN(p)&&!isNaN(q))?p-q:a.localeCompare(c);return asc?r:-r;});
  rows.forEach(function(r){b.appendChild(r);});
  if(t.classList.contains('paged')){t._show(0);}});});});
document.querySelectorAll('table.paged').forEach(function(t){
 var n=parseInt(t.dataset.page,10),p=0,bar=document.createElement('div');bar.className='pager';
 var prev=document.createElement('button'),next=document.createElement('button'),
  info=document.createElement('span');prev.textContent='previous';next.textContent='next';
 bar.appendChild(prev);bar.appendChild(next);bar.appendChild(info);
 (t.parentNode.parentNode||t.parentNode).insertBefore(bar,t.parentNode.nextSibling);
 t._show=function(q){var rows=t.tBodies[0].rows,m=Math.ceil(rows.length/n);
  p=Math.max(0,Math.min(q,m-1));for(var i=0;i<rows.length;i++){
   rows[i].style.display=(i>=p*n&&i<(p+1)*n)?'':'none';}
  info.textContent='rows '+(p*n+1)+'-'+Math.min((p+1)*n,rows.length)+' of '+rows.length;};
 prev.addEventListener('click',function(){t._show(p-1);});
 next.addEventListener('click',function(){t._show(p+1);});t._show(0);});
"""


def _esc(x) -> str:
    return html.escape(str(x), quote=True)


def _fmt(v) -> tuple[str, bool]:
    """Format one table cell; returns (text, is_number).  Missing values read as a dash."""
    if isinstance(v, (bool, np.bool_)):
        return ("yes" if v else "no"), False
    if isinstance(v, (int, np.integer)):
        return str(int(v)), True
    if isinstance(v, (float, np.floating)):
        if not np.isfinite(v):
            return MISSING_NUMBER, True
        return (f"{v:.3g}" if abs(v) < 1e-2 or abs(v) >= 1e4 else f"{v:.3f}"), True
    txt = value_text(v, missing=MISSING_NUMBER)
    return _esc(txt), False


def table_html(
    df: pd.DataFrame,
    *,
    sortable: bool = True,
    max_rows: int = 5000,
    z_column: str | None = "z",
    page_rows: int = 25,
    human: bool = True,
) -> str:
    """An HTML table from a DataFrame; rows with |z| > 1.96 get a class for shading.

    Headers are put in words and Brodmann areas get their names (``human``); tables longer than
    ``page_rows`` are shown a page at a time (the report's script adds the page buttons; every
    row is in the file and prints).  The table scrolls sideways inside its card when wider.

    Parameters
    ----------
    df : DataFrame
        The table; a ``unit`` column with one value for every row is said once, under the table.
    sortable : bool
        Add the ``sortable`` class (the report's script sorts by a header click).
    max_rows : int
        Rows beyond this are left out (logged).
    z_column : str | None
        Column whose |z| > 1.96 shades the row (``hi`` above 0, ``lo`` below); None for none.
    page_rows : int
        Rows per page for longer tables.
    human : bool
        Headers in words and area names (see :func:`human_table`).

    Returns
    -------
    str
        HTML: the table inside a ``tablewrap`` div, and the unit note when there is one; every
        cell escaped.
    """
    if len(df) > max_rows:
        logger.info("table truncated to %d of %d rows in the report", max_rows, len(df))
        df = df.head(max_rows)
    unit_note = ""
    if human and "unit" in df.columns and df["unit"].nunique(dropna=True) == 1 and len(df) > 1:
        # one unit for every row: said once under the table, not repeated per row
        unit_note = f'<p class="note unit">value unit: {_esc(df["unit"].dropna().iloc[0])}</p>'
        df = df.drop(columns="unit")
    zi = list(df.columns).index(z_column) if z_column in df.columns else None
    if human:
        shown = human_table(df)
        if zi is not None:
            zi = list(shown.columns).index(column_label(z_column))
    else:
        shown = df
    classes = (["sortable"] if sortable else []) + (["paged"] if len(df) > page_rows else [])
    cls = f' class="{" ".join(classes)}"' if classes else ""
    page = f' data-page="{int(page_rows)}"' if len(df) > page_rows else ""
    head = "".join(f"<th>{_esc(c)}</th>" for c in shown.columns)
    body = []
    for row in shown.itertuples(index=False):
        rc = ""
        if zi is not None:
            z = row[zi]
            if isinstance(z, (float, np.floating)) and np.isfinite(z) and abs(z) > DEVIATION_Z:
                rc = ' class="hi"' if z > 0 else ' class="lo"'
        cells = []
        for v in row:
            txt, num = _fmt(v)
            cells.append(f'<td class="num">{txt}</td>' if num else f"<td>{txt}</td>")
        body.append(f"<tr{rc}>{''.join(cells)}</tr>")
    return (
        f'<div class="tablewrap"><table{cls}{page}><thead><tr>{head}</tr></thead>'
        f"<tbody>{''.join(body)}</tbody></table></div>{unit_note}"
    )


def kv_table(d: dict) -> str:
    """Two-column table of labelled fields; values in words (never a Python repr).

    Parameters
    ----------
    d : dict
        Field name -> value (labels from :func:`field_label`, values from :func:`value_text`).

    Returns
    -------
    str
        HTML ``<table class="kv">``, escaped.
    """
    rows = [
        f"<tr><th>{_esc(field_label(k))}</th><td>{_esc(value_text(v))}</td></tr>"
        for k, v in d.items()
    ]
    return f'<table class="kv"><tbody>{"".join(rows)}</tbody></table>'


def _png_bytes(fig) -> bytes:
    """PNG bytes from bytes, a path to a PNG, or a matplotlib Figure (closed afterwards)."""
    if isinstance(fig, (bytes, bytearray)):
        data = bytes(fig)
    elif isinstance(fig, (str, Path)):
        data = Path(fig).read_bytes()
    elif hasattr(fig, "savefig"):
        from ..figures.figure_set import figure_png

        data = figure_png(fig, dpi=90)
    else:
        raise TypeError(
            f"figures: values must be PNG bytes, a PNG path or a Figure, got {type(fig).__name__}"
        )
    if not data.startswith(b"\x89PNG\r\n\x1a\n"):
        raise InputError("figures: image is not a PNG", field="figures")
    return data


def img_html(fig, *, caption: str = "", alt: str = "") -> str:
    """A figure embedded as a base64 PNG ``<figure>`` with an optional caption.

    Parameters
    ----------
    fig : bytes | str | Path | matplotlib.figure.Figure
        PNG bytes, a PNG file, or a Figure (rendered at 90 dpi and closed).
    caption : str
        Caption text (escaped); none when empty.
    alt : str
        Alternative text; default the caption.

    Returns
    -------
    str
        HTML ``<figure>`` element.

    Raises
    ------
    InputError
        The image is not a PNG.
    """
    b64 = base64.b64encode(_png_bytes(fig)).decode("ascii")
    cap = f"<figcaption>{_esc(caption)}</figcaption>" if caption else ""
    return (
        f'<figure><img alt="{_esc(alt or caption)}" src="data:image/png;base64,{b64}">'
        f"{cap}</figure>"
    )


def _versions() -> dict:
    import importlib.metadata as md

    out = {"python": platform.python_version()}
    for pkg in ("sourcelab", "mne", "nilearn", "numpy", "scipy", "nibabel", "matplotlib", "pandas"):
        try:
            out[pkg] = md.version(pkg)
        except md.PackageNotFoundError:
            out[pkg] = "not installed"
    return out


def deviations(
    roi_table: pd.DataFrame,
    sensor_table: pd.DataFrame | None = None,
    *,
    z_limit: float = DEVIATION_Z,
) -> pd.DataFrame:
    """Rows with |z| > z_limit from the ROI (and sensor) tables, sorted by |z| descending.

    FDR columns (any column whose name contains ``fdr``) are kept when present.

    Parameters
    ----------
    roi_table : DataFrame
        Tidy ROI table with a ``z`` column (tables without one contribute nothing).
    sensor_table : DataFrame, optional
        Tidy sensor table; its ``channel`` becomes ``roi`` with atlas "10-20 sites".
    z_limit : float
        Rows with |z| strictly above it are kept (SD units; default 1.96).

    Returns
    -------
    DataFrame
        Columns ``level`` ("ROI"/"sensor"), ``atlas``, ``roi``, ``hemisphere``, ``band``,
        ``measure``, ``value``, ``unit``, ``z``, FDR columns, ``z_lo``, ``z_hi``, ``robust``
        (those present); empty with the core columns when nothing deviates.
    """
    parts = []
    for kind, t in (("ROI", roi_table), ("sensor", sensor_table)):
        if t is None or "z" not in t.columns or t.empty:
            continue
        z = t["z"].astype(float)
        sel = t[np.isfinite(z) & (z.abs() > z_limit)].copy()
        if sel.empty:
            continue
        if kind == "sensor":
            sel = sel.rename(columns={"channel": "roi"})
            sel["atlas"] = "10-20 sites"
            sel["hemisphere"] = ""
        sel.insert(0, "level", kind)
        parts.append(sel)
    if not parts:
        return pd.DataFrame(columns=["level", *ROI_KEY, "value", "z"])
    d = pd.concat(parts, ignore_index=True)
    fdr = [c for c in d.columns if "fdr" in str(c).lower()]
    cols = (
        ["level", *ROI_KEY, "value", "unit", "z"] + fdr + ["z_lo", "z_hi", "robust"]
    )  # bootstrap interval of z, when present
    d = d[[c for c in cols if c in d.columns]]
    return d.reindex(d["z"].abs().sort_values(ascending=False).index).reset_index(drop=True)
