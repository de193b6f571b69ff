"""Change across sessions: a planted change is found, untouched rows show no change."""

import json

import numpy as np
import pandas as pd
import pytest

from sourcelab.errors import InputError

SF = 256.0
AGE = 41.0
#: The planted change: right BA19 theta, +1 between-person SD (the demo norm's SD of that row).
PLANT = ("brodmann", "BA19", "right", "theta", "absolute")


def _person(model, rng, duration_s, extra=None):
    """One invented person (fixed generators), fresh noise from ``rng``; µV-scaled volts."""
    from sourcelab.simulate import Generator, simulate_sensor_data

    gens = (
        Generator((-18, -92, 4), "left", freq=10.0, amplitude=0.45),
        Generator((20, -92, 4), "right", freq=10.0, amplitude=0.45),
        Generator((-4, 40, 20), "left", freq=6.0, amplitude=0.3),
        Generator((38, -20, 55), "right", freq=18.0, bandwidth=6.0, amplitude=0.25),
    )
    x = simulate_sensor_data(
        model, duration_s=duration_s, sfreq=SF, generators=gens, background_uv=10.0, rng=rng
    )
    if extra is not None:
        x = x + extra
    return x


def _raw(x):
    import mne

    from sourcelab.headmodel import make_info

    return mne.io.RawArray(x, make_info(SF), verbose="error")


@pytest.fixture(scope="module")
def sessions(tmp_path_factory):
    """Two invented sessions of one person, analysed against the invented demo norms; session B
    carries extra theta activity in right BA19 sized to raise that row by one norm SD."""
    from sourcelab.config import AnalysisConfig
    from sourcelab.demo import demo_norms_path
    from sourcelab.headmodel import load_head_model
    from sourcelab.norms import read_norms
    from sourcelab.outputs import write_analysis
    from sourcelab.analysis import analyze
    from sourcelab.inverse import inverse_operator, roi_power_matrices
    from sourcelab.rois import load_atlas
    from sourcelab.simulate import narrowband
    from sourcelab.spectra import epoch_cross_spectra
    from sourcelab.targets import norm_at_age

    model = load_head_model()
    norms = read_norms(demo_norms_path())
    cfg = AnalysisConfig(n_boot=0, reject_uv=400.0)
    dur = 240.0
    d = tmp_path_factory.mktemp("compare")
    xa = _person(model, np.random.default_rng(101), dur)
    # the planted component: one theta (4-8 Hz) time course over right BA19's sources
    at = load_atlas("brodmann")
    roi = [r for r in at.rois if (r.name, r.hemisphere) == PLANT[1:3]][0]
    topo = model.gain_fixed[:, roi.vertices].sum(axis=1)
    s = narrowband(int(dur * SF), SF, 6.0, 4.0, np.random.default_rng(7))
    unit = np.outer(topo, s)
    unit -= unit.mean(axis=0, keepdims=True)  # average reference, as the simulated recording
    op = inverse_operator(cfg.method, cfg.orientation, cfg.lambda2)
    m = roi_power_matrices(op, at.vertex_sets())[at.rois.index(roi)]
    n = int(2 * SF)

    def roi_theta(x):
        ep = x[:, : x.shape[1] // n * n].reshape(19, -1, n).transpose(1, 0, 2) * 1e6
        return float(np.einsum("cd,dc->", m, epoch_cross_spectra(ep, SF, cfg.bands).mean(0)[1]))

    sd = norm_at_age(
        norms,
        atlas=PLANT[0],
        roi=PLANT[1],
        hemisphere=PLANT[2],
        band=PLANT[3],
        measure=PLANT[4],
        age=AGE,
        fingerprint=norms.fingerprint,
    )["sd"]
    # ROI power adds (independent components): a² E_unit = (10^sd - 1) P_baseline
    amp = np.sqrt((10**sd - 1) * roi_theta(xa) / roi_theta(unit))
    xb = _person(model, np.random.default_rng(202), dur, extra=amp * unit)
    out = {}
    for name, x in (("A", xa), ("B", xb)):
        res = analyze(
            _raw(x), config=cfg, age=AGE, norms=demo_norms_path(), condition="eyes closed"
        )
        out[name] = write_analysis(
            res, d / f"session_{name}", figures=False, report=False, exports=False
        )
    out["planted"] = amp * unit
    out["sd"] = sd
    out["dir"] = d
    return out


def _expected_z_change(sessions, table):
    """Per row, the z change the planted component alone causes (from session A's mean
    cross-spectrum plus the component's, through the pipeline's operator and ROI means)."""
    from sourcelab.compare import _norm_affine, read_session
    from sourcelab.epochfile import read_epochs
    from sourcelab.inverse import inverse_operator
    from sourcelab.rois import load_atlas, roi_reduce
    from sourcelab.spectra import epoch_cross_spectra, relative_power

    ep = read_epochs(sessions["A"])
    n = int(2 * SF)
    x = sessions["planted"]
    e = x[:, : x.shape[1] // n * n].reshape(19, -1, n).transpose(1, 0, 2) * 1e6
    from sourcelab.config import Bands

    c_extra = epoch_cross_spectra(e, SF, Bands()).mean(0)
    c_a = ep.csd.mean(0)
    op = inverse_operator("sLORETA", "fixed", 1 / 9)
    rows = table.attrs["rows"]
    vals = {}
    for tag, c in (("a", c_a), ("b", c_a + c_extra)):
        pa = op.power(c)
        pr = relative_power(pa)
        v = np.empty(len(rows))
        for atlas in dict.fromkeys(rows["atlas"]):
            at = load_atlas(atlas)
            ra, rr = roi_reduce(pa, at), roi_reduce(pr, at)
            idx = {(r.name, r.hemisphere): i for i, r in enumerate(at.rois)}
            for j, r in rows.iterrows():
                if r["atlas"] == atlas:
                    src = ra if r["measure"] == "absolute" else rr
                    v[j] = src[ep.band_names.index(r["band"]), idx[(r["roi"], r["hemisphere"])]]
        vals[tag] = v
    from sourcelab.compare import _transform

    mu, sd = _norm_affine(read_session(sessions["A"]), rows)
    t = rows["measure"].to_numpy()
    return (_transform(vals["b"], t) - _transform(vals["a"], t)) / sd


def test_planted_change_is_found_and_untouched_rows_show_none(sessions):
    # Issue 18 acceptance: a planted +1 between-person SD in one area must be found (its
    # bootstrap interval excludes 0, and it is judged a change), and >= 95 % of the untouched
    # rows must show no change.  "Untouched": rows whose expected change caused by the planted
    # component (computed through the operator) is below 0.1 norm SD, a tenth of the planted
    # effect (sLORETA blur spreads it into neighbours, networks and relative power).
    from sourcelab.compare import compare_sessions

    table = compare_sessions([sessions["A"], sessions["B"]], n_boot=500, seed=3)
    key = table.set_index(["atlas", "roi", "hemisphere", "band", "measure"])
    row = key.loc[PLANT]
    assert row["change_t_lo"] > 0 and row["change_z_lo"] > 0, row
    assert row["verdict"] == "increase" and row["reliable"]
    # the measured z change is about one SD (sampling noise of both sessions: ±0.3 z)
    assert 0.6 < row["change_z"] < 1.4, row["change_z"]
    exp = _expected_z_change(sessions, table)
    np.testing.assert_allclose(
        exp[
            (table["atlas"] == PLANT[0])
            & (table["roi"] == PLANT[1])
            & (table["hemisphere"] == PLANT[2])
            & (table["band"] == PLANT[3])
            & (table["measure"] == PLANT[4])
        ].item(),
        1.0,
        atol=0.15,
    )
    untouched = np.abs(exp) < 0.1
    assert untouched.sum() > 0.5 * len(table)
    no_change = (table.loc[untouched, "verdict"] == "no change").mean()
    assert no_change >= 0.95, no_change
    print(
        f"compare: planted row z change {row['change_z']:+.2f} "
        f"[{row['change_z_lo']:+.2f}, {row['change_z_hi']:+.2f}], RCI {row['rci']:.1f}; "
        f"untouched rows {int(untouched.sum())}: no change {no_change:.3f}, uncorrected "
        f"interval excludes 0 {table.loc[untouched, 'excludes_zero'].mean():.3f}"
    )


def test_same_recording_twice_shows_no_change(sessions):
    # Known answer: a session compared with itself (identical epochs, independent resampling)
    # has zero change on every row and no verdict of change.
    from sourcelab.compare import compare_sessions

    t = compare_sessions([sessions["A"], sessions["A"]], n_boot=200)
    assert np.allclose(t["change"], 0) and (t["verdict"] == "no change").all()
    assert np.nanmax(np.abs(t["rci"])) == 0


def test_refuses_other_pipeline_and_missing_epochs(sessions, tmp_path):
    import shutil

    from sourcelab.compare import compare_sessions

    other = tmp_path / "other"
    shutil.copytree(sessions["B"], other)
    prov = json.loads((other / "provenance.json").read_text())
    prov["fingerprint"]["lambda2"] = 0.25
    (other / "provenance.json").write_text(json.dumps(prov))
    with pytest.raises(InputError, match="pipeline") as err:
        compare_sessions([sessions["A"], other])
    assert "\n" not in str(err.value)
    (other / "epochs.npz").unlink()
    with pytest.raises(InputError, match="epochs.npz"):
        compare_sessions([sessions["A"], other])


def test_cli_figure_and_report_section(sessions, tmp_path, capsys):
    from sourcelab.cli.main import main
    from sourcelab.compare import compare_sessions, compare_html, plot_sessions

    t = compare_sessions([sessions["A"], sessions["B"]], n_boot=200)
    fig = plot_sessions(t, [PLANT])
    ax = fig.axes[0]
    assert len(ax.lines) >= 1 and [x.get_text() for x in ax.get_xticklabels()] == [
        "session_A",
        "session_B",
    ]
    assert "z" in ax.get_ylabel()
    sec = compare_html(t)
    assert sec.startswith("<section") and "BA19" in sec and "not a diagnostic device" in sec
    out = tmp_path / "cmp"
    rc = main(
        ["compare", str(sessions["A"]), str(sessions["B"]), "--out", str(out), "--n-boot", "200"]
    )
    assert rc == 0
    # provenance.json: the marker every sourcelab output folder carries (listing its files)
    assert {p.name for p in out.iterdir()} == {
        "compare.tsv",
        "compare.png",
        "compare.html",
        "compare.json",
        "provenance.json",
    }
    assert not (out / "compare.tsv").read_text(encoding="utf-8").startswith("#")
    back = pd.read_csv(out / "compare.tsv", sep="\t")  # plain read (issue 16)
    assert len(back) == len(t)
    assert "changed" in capsys.readouterr().out
    rc = main(["compare", str(sessions["A"]), "--out", str(tmp_path / "x")])
    assert rc == 2


def _visible_text(page: str) -> tuple[list[str], list[tuple[str, dict]]]:
    """Text nodes outside <style>/<script>, and every start tag with its attributes."""
    from html.parser import HTMLParser

    class P(HTMLParser):
        def __init__(self):
            super().__init__()
            self.skip, self.text, self.tags = 0, [], []

        def handle_starttag(self, tag, attrs):
            self.tags.append((tag, dict(attrs)))
            self.skip += tag in ("style", "script")

        def handle_endtag(self, tag):
            self.skip -= tag in ("style", "script")

        def handle_data(self, data):
            if not self.skip and data.strip():
                self.text.append(data.strip())

    p = P()
    p.feed(page)
    return p.text, p.tags


def test_compare_page_self_contained_with_cautions_and_human_labels(sessions):
    # Issue 16 (user text): a page that opens offline (no external resources), shows the
    # cautions, and names columns and values in words (no None, <NA>, [] or raw column keys).
    import html as _html

    from sourcelab.cautions import CAUTIONS
    from sourcelab.compare import compare_page, compare_sessions, plot_sessions
    from sourcelab.figures import figure_png

    t = compare_sessions([sessions["A"], sessions["B"]], n_boot=100)
    page = compare_page(t, figure_png=figure_png(plot_sessions(t, [PLANT])))
    assert page.startswith("<!DOCTYPE html>") and page.rstrip().endswith("</html>")
    text, tags = _visible_text(page)
    # self-contained: no link/script/img pointing anywhere but into the page itself
    assert not [tg for tg, a in tags if tg == "link" or (tg == "script" and "src" in a)]
    srcs = [a.get("src", "") for tg, a in tags if tg == "img"]
    assert srcs and all(s.startswith("data:image/png;base64,") for s in srcs)
    assert "http://" not in page and "https://" not in page
    # the cautions, each in full
    joined = " ".join(text)
    for c in CAUTIONS:
        assert _html.escape(c) in page or c in joined, c[:60]
    assert "not a diagnostic device" in joined
    # human labels: the sessions are named; no Python or pandas reprs in any cell or header
    assert "session_A" in joined and "session_B" in joined
    bad = {"None", "<NA>", "[]", "nan", "NaN", "True", "False"}
    assert not [s for s in text if s in bad], [s for s in text if s in bad]
    headers = [s for s in text if s in set(t.columns)]
    raw = [h for h in headers if "_" in h]  # e.g. change_z, session_a: keys, not words
    assert not raw, raw
    assert "change in z" in text or not len(t[t["verdict"] != "no change"])
