"""`sourcelab demo`: the README's first command, end to end on invented data."""

import json

import pandas as pd

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


def test_demo_end_to_end(tmp_path, capsys):
    out = tmp_path / "demo"
    assert main(["demo", "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert "INVENTED" in text and "not a diagnostic device" in text
    for name in ("roi_table.tsv", "sensor_table.tsv", "provenance.json", "report.html",
                 "candidates.tsv", "leakage_brodmann.tsv", "demo-01_invented_eeg.edf"):
        assert (out / name).is_file(), name
    t = pd.read_csv(out / "roi_table.tsv", sep="\t")
    # issue 14: candidate #1 is the planted (invented) left dorsolateral prefrontal theta excess,
    # absolute power, named by its z-map peak (sourcelab/demo.py: MNI (-40, 30, 30), BA8/9/46)
    cand = pd.read_csv(out / "candidates.tsv", sep="\t", comment="#")
    first = cand.iloc[0]
    assert (first.band, first.measure, first.direction) == ("theta", "absolute", "above norm")
    assert (first.area, first.hemisphere) in {("BA8", "left"), ("BA9", "left"),
                                              ("BA46", "left")}
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
