"""HTML report: sections, cautions, self-containment, size."""

import matplotlib

matplotlib.use("Agg")

import re
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest

from sourcelab.figures import result_figures
from sourcelab.report import CAUTIONS, MAX_BYTES, SECTIONS, write_report


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
    return result_figures(result, surfaces=False, measures=("absolute",), resolution=3,
                          z_map_atlas=None, bands=("alpha",), as_png=True)


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
    out = write_report(result, tmp_path / "sub" / "report.html", figures=small_figures,
                       extra_sections=[("Clinician notes", "<script>alert(1)</script>\n\nsecond"),
                                       ("Extra table", pd.DataFrame({"a": [1.5]}))])
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
    section = text[start:text.index("<section", start)]
    # the largest deviation is listed with its z, and the FDR column is there
    t = result.roi_table
    top = t.loc[t["z"].abs().idxmax()]
    assert top["roi"] in section and f"{top['z']:.3f}" in section and "fdr" in section
    n_rows = section.count("<tr") - 1
    rt, st = result.roi_table, result.sensor_table
    expected = int((rt["z"].abs() > 1.96).sum() + (st["z"].abs() > 1.96).sum())
    assert n_rows == expected


def test_report_without_norms(plain_result, tmp_path):
    r = plain_result
    figs = result_figures(r, surfaces=False, measures=("relative",), resolution=3,
                          bands=("alpha",), as_png=True)
    out = write_report(r, tmp_path / "r.html", figures=figs)
    text = out.read_text(encoding="utf-8")
    assert "No norms were given" in text and "No norms were used" in text
    start = text.index('id="deviations"')
    section = text[start:text.index("<section", start)]
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
