"""HTML report: sections, cautions, self-containment, size."""

import matplotlib

matplotlib.use("Agg")

import html
import re
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest

from matplotlib.image import AxesImage

from sourcelab.figures import result_figures
from sourcelab.report import (
    CAUTIONS,
    MAX_BYTES,
    MAX_PAGES,
    SECTIONS,
    pdf_pages,
    report_summary,
    write_pdf,
    write_report,
)
from sourcelab.rois.names import area_name, natural_sorted


class _Collector(HTMLParser):
    def __init__(self):
        super().__init__()
        self.ids, self.refs, self.imgs, self.scripts_src, self.text = [], [], [], [], []
        self.stack = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.stack.append(tag)
        if "id" in a:
            self.ids.append(a["id"])
        for key in ("src", "href", "data", "action", "poster"):
            if key in a:
                self.refs.append((tag, key, a[key]))
        if tag == "img":
            self.imgs.append(a.get("src", ""))
        if tag in ("script", "link", "iframe") and ("src" in a or "href" in a):
            self.scripts_src.append(tag)

    def handle_endtag(self, tag):
        if self.stack and self.stack[-1] == tag:
            self.stack.pop()

    def handle_data(self, data):
        self.text.append(data)


@pytest.fixture(scope="module")
def result(demo_result):
    return demo_result


@pytest.fixture(scope="module")
def small_figures(result):
    return result_figures(
        result,
        surfaces=False,
        measures=("absolute",),
        resolution=3,
        z_map_atlas=None,
        bands=("alpha",),
        as_png=True,
    )


def _parse(path):
    p = _Collector()
    text = path.read_text(encoding="utf-8")
    p.feed(text)
    p.close()
    return p, text


def _assert_self_contained(p, text):
    for tag, key, value in p.refs:
        assert value.startswith(("data:image/png;base64,", "#")), (tag, key, value[:60])
    assert not p.scripts_src
    # no external resources anywhere, including CSS url() and @import (embedded PNG data removed
    # first: base64 text may contain "//")
    low = re.sub(r"data:image/png;base64,[A-Za-z0-9+/=]*", "", text).lower()
    found = [s for s in ("http:", "https:", "//", "url(", "@import") if s in low]
    assert not found, found


def test_report_sections_cautions_and_self_contained(result, small_figures, tmp_path):
    out = write_report(
        result,
        tmp_path / "sub" / "report.html",
        figures=small_figures,
        extra_sections=[
            ("Clinician notes", "<script>alert(1)</script>\n\nsecond"),
            ("Extra table", pd.DataFrame({"a": [1.5]})),
        ],
    )
    assert out.exists() and not [f for f in out.parent.iterdir() if f.name.startswith(".")]
    p, text = _parse(out)
    for sid, title in SECTIONS:
        assert sid in p.ids and title in text
    joined = " ".join(p.text)
    for caution in CAUTIONS:
        assert caution in joined
    assert "not a diagnostic device" in joined.lower()
    assert "Pascual-Marqui" in joined  # sLORETA reference in the methods
    _assert_self_contained(p, text)
    # every figure given is embedded once, as a PNG
    assert len(p.imgs) == len(small_figures) and all(s.startswith("data:image/png") for s in p.imgs)
    # user text is escaped, not executed
    assert "<script>alert(1)" not in text
    assert "&lt;script&gt;alert(1)" in text
    assert "Clinician notes" in p.ids or "Clinician notes" in text
    assert out.stat().st_size < MAX_BYTES


def test_deviation_table_lists_large_z_with_fdr(result, small_figures, tmp_path):
    out = write_report(result, tmp_path / "r.html", figures=small_figures)
    text = out.read_text(encoding="utf-8")
    start = text.index('id="deviations"')
    section = text[start : text.index("<section", start)]
    # the largest deviation is listed with its z, and the FDR column is there
    t = result.roi_table
    top = t.loc[t["z"].abs().idxmax()]
    assert top["roi"] in section and f"{top['z']:.3f}" in section and "FDR q" in section
    n_rows = section.count("<tr") - 1
    rt, st = result.roi_table, result.sensor_table
    expected = int((rt["z"].abs() > 1.96).sum() + (st["z"].abs() > 1.96).sum())
    assert n_rows == expected


def test_report_without_norms(plain_result, tmp_path):
    r = plain_result
    figs = result_figures(
        r, surfaces=False, measures=("relative",), resolution=3, bands=("alpha",), as_png=True
    )
    out = write_report(r, tmp_path / "r.html", figures=figs)
    text = out.read_text(encoding="utf-8")
    assert "No norms were given" in text and "No norms were used" in text
    start = text.index('id="deviations"')
    section = text[start : text.index("<section", start)]
    assert "<table" not in section


def test_report_rejects_bad_figures(result, tmp_path):
    with pytest.raises(ValueError, match="not a PNG"):
        write_report(result, tmp_path / "r.html", figures={"x": b"GIF89a"})
    with pytest.raises(TypeError, match="figures"):
        write_report(result, tmp_path / "r.html", figures={"x": 3})
    assert not (tmp_path / "r.html").exists()


@pytest.mark.slow
def test_full_report_size(result, tmp_path):
    # design goal: 5 bands x 2 measures with all default figures stays under 15 MB
    out = write_report(result, tmp_path / "full.html")
    p, text = _parse(out)
    _assert_self_contained(p, text)
    assert out.stat().st_size <= MAX_BYTES
    assert sum(s.startswith("data:image/png") for s in p.imgs) >= 30
    assert np.isfinite(out.stat().st_size)


def _visible_text(text: str) -> str:
    """Text a reader sees: tags, script and style removed."""
    text = re.sub(r"<(script|style)[^>]*>.*?</\1>", " ", text, flags=re.S)
    return re.sub(r"<[^>]+>", " ", text)


# issue 16 "done when": no user-visible string contains these (Python/pandas reprs, developer
# notes, install paths)
_FORBIDDEN = ("None", "<NA>", "[]", "from memory", "site-packages", "nan ", "NaN", "True", "False")


def test_summary_is_first_and_in_words(result, small_figures, tmp_path):
    out = write_report(result, tmp_path / "r.html", figures=small_figures)
    p, text = _parse(out)
    sections = re.findall(r'<section id="([^"]+)"', text)
    assert sections[0] == "summary"
    start = text.index('id="summary"')
    summary = text[start : text.index("<section", start)]
    # the top candidate (peak-based localisation) with its area name, MNI position and how sure
    c = result.candidates.iloc[0]
    assert f"{c['area']} {area_name(c['area'])}" in summary
    assert f"{c['x_mni152']:.0f}, {c['y_mni152']:.0f}, {c['z_mni152']:.0f}" in summary
    assert f"{c['probability']:.0%}" in summary and "own share" in summary
    for caution in CAUTIONS:
        assert html.escape(caution) in summary
    # data quality in words, not raw keys
    assert "clean data in" in summary and "sfreq" not in summary and "mains_hz" not in summary
    vis = _visible_text(text)
    found = [w for w in _FORBIDDEN if w in vis]
    assert not found, found
    # raw record keys do not reach the reader
    for key in ("sfreq", "channel_map", "interpolated []", "kept_s", "mains_hz"):
        assert key not in vis


def test_summary_without_norms_says_so(plain_result):
    s = report_summary(plain_result)
    assert len(s.candidates) == 0 and "No norms" in s.headline
    assert dict(s.facts)["Norms"].startswith("none given")


def _outside(fig):
    """Text, patch and line artists whose drawn extent leaves the page (Agg renderer)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    ren = canvas.get_renderer()
    box = fig.bbox
    bad = []
    for a in fig.findobj(lambda a: a is not fig and a.get_visible()):
        ax = getattr(a, "axes", None)
        if ax is not None and not ax.axison and a is not ax and not isinstance(a, AxesImage):
            continue  # tick artists of a switched-off axis are not drawn
        try:
            e = a.get_window_extent(ren)
        except (AttributeError, TypeError, RuntimeError):
            continue
        if e.width <= 0 or e.height <= 0:
            continue
        if e.x0 < box.x0 - 0.5 or e.x1 > box.x1 + 0.5 or e.y0 < box.y0 - 0.5 or e.y1 > box.y1 + 0.5:
            bad.append((type(a).__name__, getattr(a, "get_text", lambda: "")()[:40]))
    return bad


def test_pdf_report_fits_pages(result, small_figures, tmp_path):
    # issue 16: page count <= 12 and no table or text past the page edge; first page = summary
    pages = pdf_pages(result, small_figures)
    assert 2 <= len(pages) <= MAX_PAGES == 12
    first = " ".join(t.get_text() for t in pages[0].texts)
    assert "Summary" in first and "Top candidates" in first and "Cautions" in first
    assert result.candidates.iloc[0]["area"] in first
    # the whole summary, down to the last caution, is on page 1
    assert all(c[:30] in first for c in CAUTIONS)
    for i, page in enumerate(pages):
        assert not _outside(page), (i + 1, _outside(page)[:5])
        words = " ".join(t.get_text() for t in page.texts)
        found = [w for w in _FORBIDDEN if w in words]
        assert not found, (i + 1, found)
    out = write_pdf(result, tmp_path / "r.pdf", figures=small_figures)
    data = out.read_bytes()
    assert data.startswith(b"%PDF")
    # page objects in the file (matplotlib writes them uncompressed): same count as drawn
    assert len(re.findall(rb"/Type\s*/Page\b", data)) == len(pages)
    assert not [f for f in out.parent.iterdir() if f.name.startswith(".")]


@pytest.mark.slow
def test_pdf_report_full_figure_set_stays_within_12_pages(result, tmp_path):
    # every default figure offered: the PDF still keeps to the page limit
    figs = result_figures(result, surfaces=False, resolution=3, as_png=True, dpi=50)
    pages = pdf_pages(result, figs)
    assert len(pages) <= MAX_PAGES
    for page in pages:
        assert not _outside(page)


def test_area_names_and_natural_sort():
    # Brodmann (1909): area 17 is the striate (primary visual) cortex, 4 the primary motor
    assert area_name("BA17") == "primary visual" and area_name("BA4") == "primary motor"
    assert area_name("frontal") == ""
    assert natural_sorted(["BA10", "BA2", "BA1", "BA11"]) == ["BA1", "BA2", "BA10", "BA11"]


def test_z_maps_exported_like_power(result, plain_result, tmp_path):
    # issue 16: per-source z written to maps/ like power (GIfTI here; STC/NIfTI share _maps)
    import nibabel as nib

    from sourcelab.exports import export_gifti, map_measures
    from sourcelab.headmodel import load_head_model

    assert map_measures(plain_result) == ("absolute", "relative")
    assert {"z_absolute", "z_relative"} <= set(map_measures(result))
    paths = export_gifti(result, tmp_path, measures=("z_absolute",))
    img = nib.load(paths[0])  # left hemisphere first
    assert [d.meta["Name"] for d in img.darrays] == list(result.bands.names)
    m = load_head_model()
    got = np.stack([d.data for d in img.darrays])[:, m.vertno[: m.n_left]]
    want = np.asarray(result.source_z["absolute"])[:, : m.n_left]
    np.testing.assert_allclose(got, want, rtol=1e-6)


def test_reports_and_maps_written_alike_in_parallel(result, small_figures, tmp_path, monkeypatch):
    # contract: with two drawing processes the PDF is written by a forked process beside the
    # HTML report and the maps; the folder must hold what the one-process writer writes
    from sourcelab.outputs import write_analysis_into

    monkeypatch.setattr(type(result), "figures", lambda self, **kw: dict(small_figures))
    names = {}
    for jobs in ("1", "2"):
        monkeypatch.setenv("SOURCELAB_FIGURE_JOBS", jobs)
        folder = tmp_path / f"jobs{jobs}"
        folder.mkdir()
        pngs = write_analysis_into(result, folder, command=["test"])
        assert pngs == small_figures
        data = (folder / "report.pdf").read_bytes()
        assert data.startswith(b"%PDF")
        assert len(re.findall(rb"/Type\s*/Page\b", data)) == len(pdf_pages(result, small_figures))
        assert (folder / "report.html").stat().st_size > 10_000
        names[jobs] = sorted(str(p.relative_to(folder)) for p in folder.rglob("*"))
    assert names["1"] == names["2"] and any(n.startswith("maps/") for n in names["2"])
