"""`sourcelab demo`: the README's first command, end to end on invented data."""

import contextlib
import io
import json
import re
from html.parser import HTMLParser
from pathlib import Path

import pandas as pd
import pytest

from sourcelab.cli.main import main


def test_demo_norms_match_pipeline():
    # The shipped invented demo norms must have been built by the current pipeline (head-model
    # hash, method, λ², bands, pipeline version); rebuild with `sourcelab demo --rebuild-norms`.
    from sourcelab.config import AnalysisConfig
    from sourcelab.demo import demo_norms_path
    from sourcelab.norms import read_norms
    from sourcelab.analysis import fingerprint_for

    norms = read_norms(demo_norms_path())
    assert norms.fingerprint.differences(fingerprint_for(AnalysisConfig())) == []
    assert any("INVENTED" in n for n in norms.notes)
    assert norms.cohort["n"] >= 60


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    """``sourcelab demo`` run once: (output folder, what it printed)."""
    out = tmp_path_factory.mktemp("demo") / "demo"
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        assert main(["demo", "--out", str(out)]) == 0
    return out, buf.getvalue()


def test_demo_end_to_end(demo_run):
    out, text = demo_run
    assert "INVENTED" in text and "not a diagnostic device" in text
    for name in (
        "roi_table.tsv",
        "sensor_table.tsv",
        "provenance.json",
        "report.html",
        "candidates.tsv",
        "leakage_brodmann.tsv",
        "demo-01_invented_eeg.edf",
    ):
        assert (out / name).is_file(), name
    t = pd.read_csv(out / "roi_table.tsv", sep="\t")
    # issue 14: candidate #1 is the planted (invented) left dorsolateral prefrontal theta excess,
    # absolute power, named by its z-map peak (sourcelab/demo.py: MNI (-40, 30, 30), BA8/9/46)
    cand = pd.read_csv(out / "candidates.tsv", sep="\t")  # a plain table (issue 16)
    first = cand.iloc[0]
    assert (first.band, first.measure, first.direction) == ("theta", "absolute", "above norm")
    assert (first.area, first.hemisphere) in {("BA8", "left"), ("BA9", "left"), ("BA46", "left")}
    assert first.peak_z > 1.96 and 0 < first.probability < 1
    # relative power is compositional: no relative row may reach |z| > 6 (issue 14)
    s = pd.read_csv(out / "sensor_table.tsv", sep="\t")
    for table in (t, s):
        assert table.loc[table.measure == "relative", "z"].abs().max() <= 6
    # bootstrap intervals are present and contain the value
    assert ((t.value_lo <= t.value) & (t.value <= t.value_hi)).all()
    prov = json.loads((out / "provenance.json").read_text())
    assert prov["inputs"]["norms"]["condition"] == "eyes closed"
    assert len(list((out / "figures").glob("*.png"))) >= 40
    # power and, with the per-source demo norms, z: 5 bands x (2 power + 2 z) volumes
    assert len(list((out / "maps").glob("*.nii.gz"))) == 20
    assert (out / "report.pdf").read_bytes().startswith(b"%PDF")
    html = (out / "report.html").read_text()
    assert "Cautions" in html and "http://" not in html and "https://" not in html


# --- issue 16: no Python values, "from memory" marks or install paths in what users read -------

#: Cells that are Python's or pandas' spelling of "missing" (a user reads "n/a" or an empty cell).
_PY_CELLS = {"None", "<NA>", "[]", "{}", "nan", "NaN", "()"}
#: Words that must never reach a user (the rules keep them in code comments).
_PY_WORDS = re.compile(r"(?<![\w-])(?:None|<NA>|nan|NaN)(?![\w-])|\[\]|from memory|site-packages")


class _Text(HTMLParser):
    """Visible text of an HTML page (no tags, scripts, styles, attribute values)."""

    def __init__(self):
        super().__init__()
        self.parts, self._skip = [], 0

    def handle_starttag(self, tag, attrs):
        self._skip += tag in ("script", "style")

    def handle_endtag(self, tag):
        self._skip -= tag in ("script", "style") and self._skip > 0

    def handle_data(self, data):
        if not self._skip:
            self.parts.append(data)


def _package_dir() -> str:
    import sourcelab

    return str(Path(sourcelab.__file__).resolve().parent)


def _json_strings(o, where=""):
    if isinstance(o, dict):
        for k, v in o.items():
            yield from _json_strings(v, f"{where}.{k}")
    elif isinstance(o, list):
        for i, v in enumerate(o):
            yield from _json_strings(v, f"{where}[{i}]")
    elif isinstance(o, str):
        yield where, o


def test_tables_and_messages_have_no_python_values_or_install_paths(demo_run):
    out, printed = demo_run
    bad = []
    pkg = _package_dir()
    # every table: plain TSV (pandas reads it as it is), no Python spellings of "missing"
    for tsv in sorted(out.rglob("*.tsv")):
        text = tsv.read_text(encoding="utf-8")
        if text.startswith("#"):
            bad.append(f"{tsv.name}: begins with a '#' line")
        pd.read_csv(tsv, sep="\t")
        for k, line in enumerate(text.splitlines()):
            cells = set(line.split("\t")) & _PY_CELLS
            if cells:
                bad.append(f"{tsv.name} line {k + 1}: {sorted(cells)}")
                break
        if "from memory" in text or "site-packages" in text or pkg in text:
            bad.append(f"{tsv.name}: a 'from memory' mark or an install path")
    # every JSON file: no Python spellings as values, no marks, no install paths outside the
    # provenance's input paths (which must stay resolvable for targets and compare)
    for js in sorted(out.rglob("*.json")):
        data = json.loads(js.read_text(encoding="utf-8"))
        for where, s in _json_strings(data):
            input_path = where.endswith(".path")  # a file read, recorded where it was
            if s in _PY_CELLS or "from memory" in s:
                bad.append(f"{js.name}{where}: {s[:60]!r}")
            elif ("site-packages" in s or pkg in s) and not input_path:
                bad.append(f"{js.name}{where}: install path {s[:60]!r}")
    # what the command printed
    for m in _PY_WORDS.finditer(printed):
        bad.append(f"demo output: {printed[max(0, m.start() - 40) : m.end() + 20]!r}")
    if pkg in printed:
        bad.append("demo output: shows the install path of sourcelab")
    assert not bad, "\n".join(bad[:30])


# The report (HTML and what a reader sees) carries no raw keys, Python values or install paths.
def test_report_text_has_no_python_values_or_install_paths(demo_run):
    out, _ = demo_run
    parser = _Text()
    parser.feed((out / "report.html").read_text(encoding="utf-8"))
    visible = " ".join(parser.parts)
    bad = [
        f"report.html: {visible[max(0, m.start() - 40) : m.end() + 20]!r}"
        for m in _PY_WORDS.finditer(visible)
    ]
    if _package_dir() in visible:
        bad.append("report.html: shows the install path of sourcelab")
    assert not bad, "\n".join(bad[:30])


def _helps(parser, prog="sourcelab"):
    import argparse

    yield prog, parser.format_help()
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for name, sub in action.choices.items():
                yield from _helps(sub, f"{prog} {name}")


def test_cli_help_has_no_python_values():
    from sourcelab.cli.main import _get_parser

    bad = []
    helps = list(_helps(_get_parser()))
    assert len(helps) > 10  # every command and action
    for prog, text in helps:
        for m in _PY_WORDS.finditer(text):
            bad.append(f"{prog} --help: {text[max(0, m.start() - 40) : m.end() + 20]!r}")
    assert not bad, "\n".join(bad[:30])
