"""The PDF report: A4 pages drawn with matplotlib (``PdfPages``), no browser needed.

Page 1 is the summary (:func:`~sourcelab.report.summary.report_summary`); the figures and tables
that matter most follow, within :data:`MAX_PAGES` pages.  Text is wrapped and table cells are
wrapped inside their columns so that nothing runs past the page margins.
"""

from __future__ import annotations

import io
import logging
import re
import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from ..cautions import CAUTIONS
from ..constants import ROI_KEY
from .html import REFERENCES, deviations
from .labels import file_name, human_table, value_text
from .summary import report_summary

logger = logging.getLogger("sourcelab")

#: Columns of the PDF's largest-deviations table (those present in :func:`deviations`).
DEVIATION_PDF_COLUMNS = ("level", *ROI_KEY, "z", "fdr", "robust")
#: Largest number of pages of the PDF report.
MAX_PAGES = 12
#: A4 portrait, inches (ISO 216: 210 x 297 mm).
PAGE_SIZE = (8.27, 11.69)
#: Page margin, inches.
MARGIN = 0.6
#: Average glyph width as a fraction of the font size (DejaVu Sans runs about 0.55 em for mixed
#: text; 0.6 leaves room): used to wrap text before drawing.
_EM = 0.6
#: The same for running text (prose has fewer wide glyphs than numbers and capitals).
_EM_TEXT = 0.53
_NUMERIC = re.compile(r"[-+0-9.,% ]+")
_ACCENT = "#2f5d62"
_CAUTION = "#b5651d"


class _Layout:
    """Places blocks top to bottom on A4 pages, starting a new page when one does not fit."""

    def __init__(self, title: str, footer: str):
        self.pages: list[Figure] = []
        self.title = title
        self.footer = footer
        self.width = PAGE_SIZE[0] - 2 * MARGIN
        self._new_page()

    # ------------------------------------------------------------------ pages
    def _new_page(self) -> None:
        fig = Figure(figsize=PAGE_SIZE)
        n = len(self.pages) + 1
        fig.text(
            MARGIN / PAGE_SIZE[0],
            0.35 / PAGE_SIZE[1],
            self.footer,
            fontsize=7,
            color="0.35",
            va="bottom",
        )
        fig.text(
            1 - MARGIN / PAGE_SIZE[0],
            0.35 / PAGE_SIZE[1],
            f"page {n}",
            fontsize=7,
            color="0.35",
            ha="right",
            va="bottom",
        )
        self.pages.append(fig)
        self.y = PAGE_SIZE[1] - MARGIN  # cursor, inches from the bottom
        self.bottom = 0.75

    @property
    def fig(self) -> Figure:
        return self.pages[-1]

    def room(self) -> float:
        return self.y - self.bottom

    def page_break(self) -> None:
        if self.y < PAGE_SIZE[1] - MARGIN - 1e-6:
            self._new_page()

    def _need(self, h: float) -> None:
        if h > self.room():
            self._new_page()

    def _text(self, x_in: float, y_in: float, s: str, **kw) -> None:
        self.fig.text(x_in / PAGE_SIZE[0], y_in / PAGE_SIZE[1], s, va="top", **kw)

    # ------------------------------------------------------------------ blocks
    def heading(self, s: str, *, size: float = 13, keep: float = 1.0) -> None:
        """A heading; ``keep`` inches of what follows must fit on the same page."""
        h = size / 72 * 1.6
        self._need(h + keep)
        self._text(MARGIN, self.y, s, fontsize=size, fontweight="bold", color=_ACCENT)
        self.y -= h

    def paragraph(
        self, s: str, *, size: float = 9, color: str = "k", indent: float = 0.0, bullet: str = ""
    ) -> None:
        width_chars = max(20, int((self.width - indent - 0.1) * 72 / (size * _EM_TEXT)))
        lines = textwrap.wrap(s, width_chars) or [""]
        line_h = size / 72 * 1.35
        for i, line in enumerate(lines):
            self._need(line_h)
            x = MARGIN + indent
            if bullet and i == 0:
                self._text(x - 0.15, self.y, bullet, fontsize=size, color=color)
            self._text(x, self.y, line, fontsize=size, color=color)
            self.y -= line_h
        self.y -= size / 72 * 0.5

    def kv(self, items, *, size: float = 8.5, key_w: float = 1.9) -> None:
        """Label-value rows, values wrapped."""
        line_h = size / 72 * 1.35
        val_chars = max(20, int((self.width - key_w - 0.1) * 72 / (size * _EM_TEXT)))
        key_chars = max(10, int((key_w - 0.1) * 72 / (size * _EM)))
        for k, v in items:
            klines = textwrap.wrap(str(k), key_chars) or [""]
            vlines = textwrap.wrap(str(v), val_chars) or [""]
            h = line_h * max(len(klines), len(vlines))
            self._need(h)
            self._text(
                MARGIN, self.y, "\n".join(klines), fontsize=size, fontweight="bold", linespacing=1.2
            )
            self._text(MARGIN + key_w, self.y, "\n".join(vlines), fontsize=size, linespacing=1.2)
            self.y -= h + 0.02
        self.y -= 0.08

    def table(
        self,
        df: pd.DataFrame,
        *,
        size: float = 7.5,
        max_rows: int | None = None,
        shade_z: str | None = None,
    ) -> int:
        """A table that fits the text width: columns sized by content, cells wrapped.

        Returns the number of rows drawn (rows continue on new pages with the header repeated).
        """
        if df is None or not len(df.columns):
            return 0
        df = df if max_rows is None else df.head(max_rows)
        header = [str(c) for c in df.columns]
        cells = [[_cell(v) for v in row] for row in df.itertuples(index=False)]
        char_w = size * _EM / 72  # inches per character
        pad = 0.08
        # natural width (longest cell) and least width (longest word) per column, characters
        nat, least = [], []
        for j, h in enumerate(header):
            col = [r[j] for r in cells]
            # numbers (and coordinate triples) are never broken
            words = [
                w for t in col + [h] for w in ([t] if _NUMERIC.fullmatch(t) else t.split())
            ] or [""]
            least.append(min(max(max(len(w) for w in words), 2), 24))
            nat.append(max(min(max([len(t) for t in col] + [least[-1]]), 44), least[-1]))
        nat_w = (np.array(nat) + 1) * char_w + pad
        least_w = (np.array(least) + 1) * char_w + pad
        if nat_w.sum() <= self.width:
            widths = nat_w
        elif least_w.sum() <= self.width:  # words whole; the rest shared by the long columns
            extra = nat_w - least_w
            widths = least_w + extra * (self.width - least_w.sum()) / extra.sum()
        else:
            widths = least_w * self.width / least_w.sum()
        chars = [max(2, int((w - pad) / char_w)) for w in widths]
        line_h = size / 72 * 1.3
        xs = np.concatenate([[0.0], np.cumsum(widths)])

        def wrapped(row):
            return [textwrap.wrap(t, c, break_long_words=True) or [""] for t, c in zip(row, chars)]

        head = wrapped(header)
        head_h = line_h * max(len(h) for h in head) + 0.04

        def draw_header():
            self._need(head_h + line_h * 2)
            top = self.y
            self.fig.add_artist(_rect(self.fig, MARGIN, top - head_h, xs[-1], head_h, "#eef2f6"))
            for j, lines in enumerate(head):
                self._text(
                    MARGIN + xs[j] + 0.04,
                    top - 0.02,
                    "\n".join(lines),
                    fontsize=size,
                    fontweight="bold",
                    linespacing=1.1,
                )
            self.y -= head_h

        draw_header()
        zi = header.index(shade_z) if shade_z in header else None
        for r, row in zip(df.itertuples(index=False), cells):
            lines = wrapped(row)
            h = line_h * max(len(c) for c in lines) + 0.03
            if h > self.room():
                self._new_page()
                draw_header()
            if zi is not None:
                z = r[zi]
                if isinstance(z, (float, np.floating)) and np.isfinite(z) and abs(z) > 1.96:
                    self.fig.add_artist(
                        _rect(
                            self.fig,
                            MARGIN,
                            self.y - h,
                            xs[-1],
                            h,
                            "#fbeaea" if z > 0 else "#e8f0fb",
                        )
                    )
            for j, c in enumerate(lines):
                self._text(
                    MARGIN + xs[j] + 0.04,
                    self.y - 0.015,
                    "\n".join(c),
                    fontsize=size,
                    linespacing=1.1,
                )
            self.y -= h
            self.fig.add_artist(_hline(self.fig, MARGIN, self.y, xs[-1]))
        self.y -= 0.12
        return len(cells)

    def image(self, png: bytes, *, caption: str = "", max_h: float | None = None) -> None:
        """A PNG scaled to the text width (or to ``max_h`` / the page height)."""
        import matplotlib.image as mpimg

        img = mpimg.imread(io.BytesIO(png), format="png")
        ih, iw = img.shape[:2]
        cap_h = 0.25 if caption else 0.0
        w = self.width
        h = w * ih / iw
        limit = min(max_h or 1e9, PAGE_SIZE[1] - 2 * MARGIN - 0.4 - cap_h)
        if h > limit:
            h, w = limit, limit * iw / ih
        if h + cap_h > self.room():
            self._new_page()
        ax = self.fig.add_axes(
            (MARGIN / PAGE_SIZE[0], (self.y - h) / PAGE_SIZE[1], w / PAGE_SIZE[0], h / PAGE_SIZE[1])
        )
        # unsampled: the PNG goes into the PDF as it is (no resampling), scaled by the viewer
        ax.imshow(img, interpolation="none")
        ax.set_axis_off()
        self.y -= h
        if caption:
            self.y -= 0.04
            self.paragraph(caption, size=7.5, color="0.3")
        else:
            self.y -= 0.1


def _cell(v) -> str:
    if isinstance(v, (float, np.floating)):
        if not np.isfinite(v):
            return "–"
        return f"{v:.3g}" if abs(v) < 1e-2 or abs(v) >= 1e4 else f"{v:.3f}"
    return value_text(v, missing="–")


def _rect(fig, x, y, w, h, colour):
    from matplotlib.patches import Rectangle

    W, H = PAGE_SIZE
    return Rectangle(
        (x / W, y / H),
        w / W,
        h / H,
        transform=fig.transFigure,
        facecolor=colour,
        edgecolor="none",
        zorder=-1,
    )


def _hline(fig, x, y, w):
    from matplotlib.lines import Line2D

    W, H = PAGE_SIZE
    return Line2D(
        [x / W, (x + w) / W], [y / H, y / H], transform=fig.transFigure, color="#d5dae1", lw=0.5
    )


# ---------------------------------------------------------------------- content
def _summary_page(lay: _Layout, result, summary, *, scale: float = 1.0) -> None:
    """The summary, type sizes times ``scale``."""
    k = scale
    lay.heading("Summary", size=15 * k)
    lay.kv(summary.facts, size=8.5 * k)
    lay.heading("Data quality", size=11 * k, keep=0.3)
    for q in summary.quality:
        lay.paragraph(q, size=8.5 * k, indent=0.2, bullet="•")
    lay.heading("Top candidates", size=11 * k, keep=1.2)
    lay.paragraph(summary.headline, size=9 * k, color=_ACCENT)
    if len(summary.candidates):
        lay.table(summary.candidates, size=7 * k)
    if summary.candidate_note:
        lay.paragraph(summary.candidate_note, size=7.5 * k, color="0.3")
    lay.heading("Cautions", size=11 * k, keep=0.5)
    for c in summary.cautions:
        lay.paragraph(c, size=8 * k, color=_CAUTION, indent=0.2, bullet="!")


def _figure_groups(result, names) -> list:
    """The figure pages' groups: ``(title, figure names, largest height in inches)``, the
    names those of ``names`` (the figures drawn) each group shows, in order."""
    have = set(names)

    def pick(keys):
        return [k for k in keys if k in have]

    bands = list(result.bands.names)
    c = result.candidates
    top_band = (
        str(c.iloc[0]["band"])
        if c is not None and len(c) and "band" in c.columns
        else (bands[0] if bands else None)
    )
    return [
        (
            "Sensor maps",
            pick(["topomap-z/absolute", "topomap-z/relative"])
            or pick(["topomap/absolute", "topomap/relative"]),
            4.2,
        ),
        (
            "Source z maps (per-source z, surface)",
            pick([f"surface-z/{top_band}/absolute", f"surface-z/{top_band}/relative"]),
            4.3,
        ),
        (
            "Source z maps (area z, glass brain)",
            pick([f"glass-z/{b}/absolute" for b in bands]),
            1.7,
        ),
        (
            "Source power",
            pick([f"glass/{b}/absolute" for b in bands])
            if not any(k.startswith("glass-z/") for k in have)
            else [],
            1.95,
        ),
        ("Areas and networks", pick(["roi-heatmap/absolute", "networks/absolute"]), 5.0),
        ("Coupling", pick([f"pairs/{top_band}/lagcoh", "coupling/lagcoh"]), 4.6),
    ]


def figure_names(result, names) -> list[str]:
    """The figures the PDF report of ``result`` shows when ``names`` were drawn.

    Parameters
    ----------
    result : AnalysisResult
    names : iterable of str
        Names of the drawn figures (keys of :func:`sourcelab.figures.result_figures`).

    Returns
    -------
    list of str
        In the order of the pages.
    """
    return [k for _, keys, _ in _figure_groups(result, list(names)) for k in keys]


def _figure_pages(lay: _Layout, result, figs: dict, summary) -> None:
    for title, keys, max_h in _figure_groups(result, figs):
        if not keys:
            continue
        lay.page_break()
        lay.heading(title)
        for key in keys:
            lay.image(figs[key], caption=_caption(key, result), max_h=max_h)


def _caption(key: str, result) -> str:
    parts = key.split("/")
    what = {
        "topomap-z": "sensor z by band",
        "topomap": "sensor power by band",
        "surface-z": "per-source z on the cortical surface",
        "glass-z": "area z painted on the sources",
        "glass": "source power",
        "roi-heatmap": "area z by band",
        "networks": "network z per band",
        "pairs": "electrode pairs beyond the limit",
        "coupling": "network coupling",
    }
    kind = what.get(parts[0], parts[0])
    rest = ", ".join(p for p in parts[1:])
    return f"{kind} ({rest})" if rest else kind


def _detail_pages(lay: _Layout, result) -> None:
    d = deviations(result.roi_table, result.sensor_table)
    lay.page_break()
    lay.heading("Largest deviations")
    if d.empty:
        lay.paragraph("No z-scores (no norms given)." if not result.has_z else "None.")
    else:
        n = 40
        lay.paragraph(
            f"{len(d)} area, network and sensor values lie beyond ±1.96; the "
            f"{min(n, len(d))} "
            "with the largest |z| are listed (full list in the HTML report and "
            "roi_table.tsv).",
            size=8.5,
        )
        keep = [c for c in DEVIATION_PDF_COLUMNS if c in d.columns]
        lay.table(human_table(d[keep].head(n)), size=7, shade_z="z")
    lay.page_break()
    lay.heading("Recording and data quality")
    rec = result.recording
    lay.kv(
        [
            ("file", file_name(rec.path) if rec.path else "given in memory"),
            ("SHA-256", rec.sha256 or "not given"),
            ("electrodes", ", ".join(result.ch_names)),
            ("interpolated", value_text(list(rec.interpolated))),
            ("warnings", "; ".join(result.warnings) or "none"),
        ]
    )
    from .labels import reliability_table

    rel_table = reliability_table(result.quality.reliability or {})
    if len(rel_table):
        lay.heading("Reliability of band power", size=11, keep=0.8)
        lay.paragraph(
            "Agreement of two halves of the clean epochs on log10 band power across "
            "sensors or areas: ICC(2,1) with its 95 % interval in brackets.",
            size=8,
        )
        lay.table(rel_table.rename(columns={"halves": "halves compared"}), size=7)
    lay.heading("Methods", size=11, keep=0.8)
    cfg = result.config
    lay.paragraph(
        f"Average reference; {cfg.epoch_s:g} s epochs cleaned one by one; band-pass "
        f"{cfg.l_freq:g}-{cfg.h_freq:g} Hz; Welch cross-spectra summed per band; "
        f"{cfg.method} ({cfg.orientation} orientation, λ² = {cfg.lambda2:.4g}) on a "
        "three-layer boundary-element model of the fsaverage template with 19 template "
        "electrode positions; areas and networks average their sources; z = (value - norm "
        "mean) / norm SD after the norms' transform.",
        size=8.5,
    )
    lay.heading("References", size=11, keep=0.6)
    for i, r in enumerate(REFERENCES, 1):
        lay.paragraph(f"{i}. {r}", size=7.5)
    lay.heading("Cautions", size=11, keep=0.6)
    for c in CAUTIONS:
        lay.paragraph(c, size=8, color=_CAUTION)
    fp = result.fingerprint.to_dict()
    lay.heading("Pipeline fingerprint", size=11, keep=0.6)
    lay.kv(
        [
            (
                k,
                "; ".join(f"{b[0]} {b[1]:g}-{b[2]:g} Hz" for b in v)
                if k == "bands"
                else value_text(v),
            )
            for k, v in fp.items()
        ],
        size=7.5,
    )


def pdf_pages(result, figures: dict | None = None, *, title: str | None = None) -> list[Figure]:
    """The PDF report's pages as matplotlib figures (page 1: the summary).

    Parameters
    ----------
    result : AnalysisResult
    figures : dict of str -> bytes, optional
        PNG bytes by figure name (the keys of :func:`sourcelab.figures.result_figures`).
    title : str, optional

    Returns
    -------
    list of Figure
        At most :data:`MAX_PAGES`.
    """
    title = title or "sourcelab source-level EEG report"
    # the summary must fit page 1: fewer candidate rows (then smaller type) until it does
    for n_top, size in ((8, 1.0), (6, 1.0), (5, 0.92), (4, 0.85), (3, 0.8)):
        summary = report_summary(result, n_top=n_top)
        when = dict(summary.facts).get("Analysed", "")
        lay = _Layout(title, f"{title} · {when} · not a diagnostic device")
        lay.fig.text(
            MARGIN / PAGE_SIZE[0],
            1 - 0.35 / PAGE_SIZE[1],
            title,
            fontsize=9,
            color=_ACCENT,
            va="top",
        )
        lay.y -= 0.1
        _summary_page(lay, result, summary, scale=size)
        if len(lay.pages) == 1:
            break
    _figure_pages(lay, result, dict(figures or {}), summary)
    _detail_pages(lay, result)
    pages = lay.pages
    if len(pages) > MAX_PAGES:
        logger.info(
            "PDF report: %d pages drawn, the last %d left out", len(pages), len(pages) - MAX_PAGES
        )
        pages = pages[:MAX_PAGES]
    return pages


def write_pdf(result, path, *, figures: dict | None = None, title: str | None = None) -> Path:
    """Write the PDF report (A4, at most :data:`MAX_PAGES` pages; page 1 the summary).

    Parameters
    ----------
    result : AnalysisResult
    path : str | Path
        Output ``.pdf`` file; written to a temporary name, then renamed.
    figures : dict of str -> bytes, optional
        PNG bytes by figure name.
    title : str, optional

    Returns
    -------
    Path
    """
    import io

    from matplotlib.backends.backend_pdf import PdfPages

    from ..provenance import atomic_write_bytes

    path = Path(path)
    pages = pdf_pages(result, figures, title=title)
    buf = io.BytesIO()
    with PdfPages(
        buf, metadata={"Title": title or "sourcelab report", "Creator": "sourcelab"}
    ) as pdf:
        for fig in pages:
            pdf.savefig(fig)
    # temporary name + rename; an existing file is replaced only when sourcelab wrote it
    atomic_write_bytes(path, buf.getvalue())
    logger.info("PDF report written: %s (%d pages)", path, len(pages))
    return path
