"""Training targets: candidate ranking, the target file, causal replay vs the offline analysis."""

import json

import numpy as np
import pandas as pd
import pytest

from sourcelab.config import Bands
from sourcelab.constants import SITES_1020
from sourcelab.errors import InputError
from sourcelab.inverse.sloreta import SourceOperator, source_power
from sourcelab.provenance import Fingerprint
from sourcelab.simulate import pink_noise
from sourcelab.spectra import epoch_cross_spectra
from sourcelab.targets import (
    OnlineTarget,
    candidates_html,
    expected_ratio,
    make_target,
    rank_candidates,
    read_target,
    replay_array,
    target_from_dict,
    write_candidates,
    write_target,
)
from sourcelab.headmodel.geometry import mesh_edges
from sourcelab.targets.candidates import network_members, roi_adjacency

SF = 256.0
BANDS = Bands()
FP = Fingerprint(
    headmodel_sha256="0" * 64,
    method="sLORETA",
    orientation="fixed",
    lambda2=1 / 9,
    bands=tuple((n, lo, hi) for n, (lo, hi) in zip(BANDS.names, BANDS.edges)),
)


@pytest.fixture(scope="module")
def pink_data():
    """120 s of invented 19-channel mixed pink noise (µV) and a random 'kernel' (300 x 19)."""
    rng = np.random.default_rng(3)
    n = int(120 * SF)
    mix = rng.standard_normal((19, 19))
    x = 10.0 * mix @ pink_noise(19, n, SF, rng)
    kernel = rng.standard_normal((300, 19))
    return x, kernel


def sampling_tolerance(lo: float, hi: float, seconds: float, *, psd=None, f=None) -> float:
    """Two normalised random errors of a band-power estimate, 2/sqrt(B T) (Bendat & Piersol
    2010, Random Data, 4th ed., section 8.5.4).  With a spectrum (``psd`` at frequencies ``f``),
    B is its statistical bandwidth in the band, (sum P df)^2 / (sum P^2 df), which equals
    hi - lo for a flat spectrum and is smaller for a peaked one (an alpha rhythm): fewer
    independent degrees of freedom (Bendat & Piersol, same section; from memory)."""
    band = hi - lo
    if psd is not None:
        sel = (f >= lo) & (f < hi)
        df = float(f[1] - f[0])
        band = float(psd[sel].sum() * df) ** 2 / float((psd[sel] ** 2).sum() * df)
    return 2.0 / np.sqrt(band * seconds)


def _target(kernel, band="alpha", measure="absolute", verts=np.arange(60), **kw):
    return make_target(
        kernel=kernel,
        n_comp=kw.pop("n_comp", 1),
        atlas="brodmann",
        roi="BA17",
        hemisphere="right",
        sources=verts,
        vertices=verts,
        band=band,
        bands=FP.bands,
        measure=measure,
        fingerprint=FP,
        sfreq=SF,
        reject_uv=1e9,
        **kw,
    )


def _offline(x, target):
    """Offline route: per-epoch Welch cross-spectra (2-s Hann) and the ROI matrix."""
    n = x.shape[1] // 512 * 512
    ep = x[:, :n].reshape(19, -1, 512).transpose(1, 0, 2)
    csd = epoch_cross_spectra(ep, SF, BANDS).mean(axis=0)
    return csd


# ---------------------------------------------------------------- spatial filter (known answer)


@pytest.mark.parametrize("n_comp", [1, 3])
def test_roi_matrix_equals_mean_source_power(rng, n_comp):
    # Two routes must agree (as MNE's test_apply_inverse_cov): tr(M C) vs the mean over the ROI of
    # sourcelab's per-source power Σ_rows diag(K C Kᵀ).
    n_src = 40
    op = SourceOperator(
        kernel=rng.standard_normal((n_src * n_comp, 19)),
        orientation="fixed" if n_comp == 1 else "free",
        lambda2=1 / 9,
        n_src=n_src,
    )
    a = rng.standard_normal((19, 50))
    c = a @ a.T
    verts = np.array([1, 5, 7, 30])
    from sourcelab.inverse import roi_power_matrices, roi_rows

    m = roi_power_matrices(op, [verts])[0]
    rows = roi_rows(op, verts)
    np.testing.assert_allclose(np.trace(m @ c), source_power(op, c)[verts].mean(), rtol=1e-12)
    assert rows.shape == (verts.size * n_comp, 19)
    target = make_target(
        kernel=op.kernel,
        n_comp=n_comp,
        atlas="t",
        roi="r",
        hemisphere="left",
        sources=verts,
        vertices=verts,
        band="alpha",
        bands=FP.bands,
        measure="absolute",
        fingerprint=FP,
        sfreq=SF,
    )
    np.testing.assert_allclose(target.matrix, m, rtol=1e-12)


def test_sine_in_band_gives_half_amplitude_squared():
    # Known answer: a sinusoid of amplitude A has power A²/2 (common practice); at the band
    # centre the Butterworth band-pass has gain 1 (its design), so the replay must return A²/2.
    t = np.arange(int(30 * SF)) / SF
    # the other 18 channels carry invented noise: all-zero channels would be flat (unclean)
    x = 2.0 * np.random.default_rng(1).standard_normal((19, t.size))
    x[4] = 20.0 * np.sin(2 * np.pi * np.sqrt(8 * 12) * t)  # geometric band centre of 8-12 Hz
    m = np.zeros((19, 19))
    m[4, 4] = 1.0  # a "spatial filter" that reads Fz alone
    tg = _target(np.eye(19), verts=np.array([4]))
    tg = type(tg)(**{**tg.__dict__, "matrix": m})
    res = replay_array(x, SF, tg)
    np.testing.assert_allclose(res.power[res.clean].mean(), 200.0, rtol=0.005)
    # a 1-s window holds a non-integer number of cycles: mean of sin² over T deviates from 1/2 by
    # at most 1/(4π f T), i.e. a relative ripple <= 1/(2π f T)
    ripple = 1 / (2 * np.pi * np.sqrt(8 * 12) * 1.0)
    np.testing.assert_allclose(res.power[res.clean], 200.0, rtol=ripple + 0.003)


# ---------------------------------------------------------------- replay: causality, streaming


def test_replay_is_causal(pink_data):
    # Changing the future must not change any window that ends before the change.
    x, k = pink_data
    x = x[:, : int(20 * SF)]
    tg = _target(k)
    a = replay_array(x, SF, tg)
    y = x.copy()
    cut = int(12 * SF)
    y[:, cut:] = 1e3 * np.random.default_rng(0).standard_normal(y[:, cut:].shape)
    b = replay_array(y, SF, tg)
    before = a.time_s <= cut / SF
    np.testing.assert_array_equal(a.power[before], b.power[before])
    assert not np.allclose(a.power[~before], b.power[~before])


def test_streaming_equals_batch(pink_data, rng):
    # Feeding irregular chunks (as an amplifier would) gives the same numbers as one array.
    x, k = pink_data
    x = x[:, : int(15 * SF)]
    tg = _target(k, measure="relative")
    ref = replay_array(x, SF, tg)
    online = OnlineTarget(tg, SF)
    rows, start = [], 0
    while start < x.shape[1]:
        n = int(rng.integers(1, 200))
        rows += online.push(x[:, start : start + n])
        start += n
    power = np.array([r[1] for r in rows])
    np.testing.assert_allclose(power, ref.power, rtol=1e-10, equal_nan=True)


def test_relative_replay_equals_ratio_of_absolute_replays(pink_data):
    # For a one-source ROI, relative power is absolute band power over the sum across bands:
    # the relative replay must equal that ratio of absolute replays, window by window.
    x, k = pink_data
    x = x[:, : int(20 * SF)]
    v = np.array([17])
    rel = replay_array(x, SF, _target(k, band="theta", measure="relative", verts=v))
    absolute = np.array(
        [replay_array(x, SF, _target(k, band=b, verts=v)).power for b in BANDS.names]
    )
    np.testing.assert_allclose(rel.power, absolute[1] / absolute.sum(axis=0), rtol=1e-10)


# ---------------------------------------------------------------- replay vs offline analysis


@pytest.mark.parametrize("band", BANDS.names)
def test_replay_mean_agrees_with_offline_welch(pink_data, band):
    # Offline: Hann-windowed 2-s Welch bins lo <= f < hi (Welch 1967); replay: causal Butterworth.
    # Expected ratio = ∫|H|²S / ∫E S with E the Welch band's spectral window (Harris 1978) and S the
    # ROI-projected spectrum at 1/16 Hz resolution.  The two estimates weight time differently
    # (Hann taper vs uniform), so they differ by estimation noise: the tolerance is two normalised
    # random errors of one band-power estimate, 2/sqrt(B T) for bandwidth B over T seconds
    # (Bendat & Piersol 2010, Random Data, 4th ed., section 8.5.4).
    from scipy.signal import welch

    x, k = pink_data
    tg = _target(k, band=band)
    res = replay_array(x, SF, tg)
    b = BANDS.names.index(band)
    offline = np.trace(tg.matrix @ _offline(x, tg)[b])
    d, v = np.linalg.eigh(tg.matrix)
    y = (np.sqrt(np.clip(d, 0, None))[:, None] * v.T) @ x
    f, p = welch(y, fs=SF, nperseg=int(16 * SF), detrend=False)
    lo, hi = tg.band_edges
    exp = expected_ratio(p.sum(axis=0), f, tg.sos[band], lo, hi, sfreq=SF, epoch_s=2.0)
    obs = res.clean_mean() / offline
    assert abs(obs / exp - 1) < sampling_tolerance(lo, hi, x.shape[1] / SF), (obs, exp)


# ---------------------------------------------------------------- the file


def test_json_round_trip_is_exact(tmp_path, pink_data):
    x, k = pink_data
    norm = {"mean": 1.5, "sd": 0.2, "transform": "log10", "age": 30.0}
    for measure in ("absolute", "relative"):
        tg = _target(k, measure=measure, norm=norm, z=2.5, offline={"value": 3.0, "z": 2.5})
        path = write_target(tg, tmp_path / f"t_{measure}.json")
        back = read_target(path, current=FP)
        np.testing.assert_array_equal(back.matrix, tg.matrix)
        np.testing.assert_array_equal(back.vertices, tg.vertices)
        for b in tg.sos:
            np.testing.assert_array_equal(back.sos[b], tg.sos[b])
        if measure == "relative":
            np.testing.assert_array_equal(back.kernel_rows, tg.kernel_rows)
        else:
            assert back.kernel_rows is None
        assert back.direction == "decrease" and back.norm == norm
        assert back.to_dict() == tg.to_dict()
        a = replay_array(x[:, :2560], SF, tg)
        b2 = replay_array(x[:, :2560], SF, back)
        np.testing.assert_array_equal(a.z, b2.z)


def test_load_rejects_wrong_schema_channels_and_fingerprint(tmp_path, pink_data):
    _, k = pink_data
    d = _target(k).to_dict()
    cases = {
        "schema": ({**d, "schema": "other/1"}, "schema"),
        "channels": ({**d, "channels": list(reversed(SITES_1020))}, "channels"),
        "matrix": ({**d, "spatial_filter": {**d["spatial_filter"], "matrix": [[1.0]]}}, "matrix"),
    }
    for name, (bad, word) in cases.items():
        p = tmp_path / f"{name}.json"
        p.write_text(json.dumps(bad))
        with pytest.raises(InputError, match=word) as err:
            read_target(p, current=FP)
        assert str(p) in str(err.value)
    other = Fingerprint(**{**FP.__dict__, "lambda2": 1 / 4})
    p = tmp_path / "t.json"
    write_target(_target(k), p)
    with pytest.raises(InputError, match="lambda2") as err:
        read_target(p, current=other)
    assert str(p) in str(err.value)
    with pytest.raises(InputError, match="relative"):
        target_from_dict({**d, "measure": "relative"}, current=FP)


def test_norm_at_age_reproduces_apply_norms(tmp_path):
    # Two routes: the target's z = (log10(value) - mean)/sd must equal apply_norms' z.
    from sourcelab.norms import Norms, apply_norms
    from sourcelab.norms.predictive import V_COLUMNS, pack_v, xtx_inverse
    from sourcelab.targets import norm_at_age

    rows = []
    ages = np.linspace(5.0, 90.0, 40)
    for i, (lo, hi, model, deg, coef) in enumerate(
        [
            (5.0, 20.0, "binned", 0, (0.9, 0, 0, 0)),
            (20.0, 90.0, "regression", 2, (0.4, 0.8, -0.3, 0)),
        ]
    ):
        rows.append(
            dict(
                kind="roi",
                atlas="brodmann",
                name="BA17",
                hemisphere="right",
                band="alpha",
                measure="absolute",
                age_min=lo,
                age_max=hi,
                model=model,
                degree=deg,
                transform="log10",
                b0=coef[0],
                b1=coef[1],
                b2=coef[2],
                b3=coef[3],
                sd=0.25,
                n=40,
                df=40 - deg - 1,
                **dict(zip(V_COLUMNS, pack_v(xtx_inverse(ages, deg)))),
            )
        )
    norms = Norms(table=pd.DataFrame(rows), fingerprint=FP, condition="eyes closed")
    table = pd.DataFrame(
        [
            dict(
                atlas="brodmann",
                roi="BA17",
                hemisphere="right",
                band="alpha",
                measure="absolute",
                value=7.3,
                z=np.nan,
            )
        ]
    )
    for age in (12.0, 20.0, 47.0):
        z = apply_norms(table, norms, age=age, fingerprint=FP, condition="eyes closed")["z"][0]
        nm = norm_at_age(
            norms,
            atlas="brodmann",
            roi="BA17",
            hemisphere="right",
            band="alpha",
            measure="absolute",
            age=age,
            fingerprint=FP,
            condition="eyes closed",
        )
        np.testing.assert_allclose((np.log10(7.3) - nm["mean"]) / nm["sd"], z, rtol=1e-12)
    with pytest.raises(InputError, match="outside"):
        norm_at_age(
            norms,
            atlas="brodmann",
            roi="BA17",
            hemisphere="right",
            band="alpha",
            measure="absolute",
            age=95.0,
            fingerprint=FP,
        )


# ---------------------------------------------------------------- candidates


def _toy_atlases():
    """Four ROIs on a line of 'sources' 0..39, 20 mm apart, and one network over ROIs 0-1."""
    from sourcelab.rois.atlas import ROI, Atlas

    rois = tuple(
        ROI(f"A{i}", "left", np.arange(10 * i, 10 * i + 10), (20.0 * i, 0.0, 0.0), small=i == 3)
        for i in range(4)
    )
    net = Atlas("networks", "", "", (ROI("net", "left", np.arange(0, 20), (10.0, 0, 0)),))
    return {"brodmann": Atlas("brodmann", "", "", rois), "networks": net}


def _toy_table():
    rows = []
    zs = {"A0": 3.1, "A1": 2.2, "A2": -0.3, "A3": -4.0}
    for name, z in zs.items():
        rows.append(
            dict(
                atlas="brodmann",
                roi=name,
                hemisphere="left",
                band="alpha",
                measure="absolute",
                value=1.0,
                z=z,
                fdr=abs(z) > 3,
                n_vertices=10,
                small=name == "A3",
            )
        )
    rows.append(
        dict(
            atlas="networks",
            roi="net",
            hemisphere="left",
            band="alpha",
            measure="absolute",
            value=1.0,
            z=2.5,
            fdr=False,
            n_vertices=20,
            small=False,
        )
    )
    return pd.DataFrame(rows)


def test_candidates_rank_neighbours_and_members(tmp_path):
    # Constructed answer: FDR rows first by |z| (A3 -4.0, A0 3.1), then the rest by |z|.
    c = rank_candidates(_toy_table(), atlases=_toy_atlases())
    assert list(zip(c.roi, c.kind)) == [
        ("A3", "roi"),
        ("A0", "roi"),
        ("net", "network"),
        ("A1", "roi"),
    ]
    assert list(c["rank"]) == [1, 2, 3, 4]
    a0 = c[c.roi == "A0"].iloc[0]
    # A0's neighbours within 35 mm: A1 (20 mm) deviating the same way; A2 (40 mm) is not one.
    assert (a0.direction, a0.neighbours_same, a0.n_neighbours, a0.neighbours) == (
        "above norm",
        1,
        1,
        "A1-left",
    )
    a3 = c[c.roi == "A3"].iloc[0]
    assert a3.direction == "below norm" and a3.neighbours_same == 0 and a3.small
    net = c[c.kind == "network"].iloc[0]
    assert (net.members_deviating, net.n_members) == (2, 2)
    assert len(rank_candidates(_toy_table(), max_n=2)) == 2
    write_candidates(c, tmp_path / "c.tsv")
    text = (tmp_path / "c.tsv").read_text()
    # issue 16: a plain table (pandas reads it as it is); the cautions are in the sidecar
    assert text.startswith("rank\t") and "#" not in text
    back = pd.read_csv(tmp_path / "c.tsv", sep="\t")
    assert list(back.roi) == list(c.roi)
    side = json.loads((tmp_path / "c.json").read_text())
    assert any("licensed" in c for c in side["Cautions"])
    assert all(side[col]["Description"] for col in back.columns)
    # and a table of sourcelab 0.2 (cautions as '#' lines) still reads
    from sourcelab.targets.candidates import read_candidates

    (tmp_path / "old").mkdir()
    (tmp_path / "old" / "candidates.tsv").write_text("# a caution\n# another\n" + text)
    assert list(read_candidates(tmp_path / "old").roi) == list(c.roi)


def test_candidates_need_z_scores():
    t = _toy_table().assign(z=np.nan)
    with pytest.raises(InputError, match="norms"):
        rank_candidates(t)


def test_mesh_edge_neighbours():
    # Two ROIs whose centroids are 100 mm apart are still neighbours when a triangle joins them.
    faces = np.array([[0, 1, 2], [2, 3, 4]])
    sets = [np.array([0, 1, 2]), np.array([3, 4]), np.array([5])]
    cent = np.array([[0.0, 0, 0], [100.0, 0, 0], [300.0, 0, 0]])
    adj = roi_adjacency(sets, cent, edges=mesh_edges(faces))
    assert adj[0, 1] and adj[1, 0] and not adj[0, 2] and not adj.diagonal().any()
    assert not roi_adjacency(sets, cent)[0, 1]
    # members need more than half of their sources inside: {3, 4} is half inside 0..3
    assert network_members([np.arange(4), np.arange(5)], sets) == [[0], [0, 1]]


def test_candidates_html_escapes_and_cautions():
    t = _toy_table()
    t.loc[0, "roi"] = "<A0>"
    html = candidates_html(rank_candidates(t))
    assert "&lt;A0&gt;" in html and "<A0>" not in html
    assert "licensed practitioner" in html and "not a diagnostic device" in html
    assert html.count("<tr>") == 5  # header + 4 candidates


# ---------------------------------------------------------------- CLI parser


def test_cli_parser_actions():
    import argparse

    from sourcelab.cli import targets as cli

    p = argparse.ArgumentParser()
    cli.add_parser(p.add_subparsers(dest="command"))
    a = p.parse_args(
        [
            "targets",
            "export",
            "res",
            "--roi",
            "BA17",
            "--band",
            "alpha",
            "--hemisphere",
            "right",
            "--out",
            "t.json",
        ]
    )
    # --measure and --atlas default per target kind (ROI: absolute, brodmann)
    assert (a.targets_cmd, a.roi, a.measure, a.atlas) == ("export", "BA17", None, None)
    a = p.parse_args(
        ["targets", "list", "res", "--max", "5", "--atlas", "brodmann", "--atlas", "networks"]
    )
    assert a.max_n == 5 and a.atlas == ["brodmann", "networks"]


# ---------------------------------------------------------------- integration (head model, atlases)


@pytest.fixture(scope="module")
def analysed(tmp_path_factory):
    """An invented recording with a right-occipital alpha patch, analysed and written to disk."""
    import mne

    from sourcelab.analysis import analyze
    from sourcelab.config import AnalysisConfig
    from sourcelab.headmodel import load_head_model
    from sourcelab.simulate import Generator, simulate_raw

    rng = np.random.default_rng(11)
    gen = Generator((14.0, -95.0, 2.0), "right", freq=10.0, amplitude=1.5, radius_mm=12.0)
    raw = simulate_raw(
        load_head_model(),
        duration_s=120.0,
        sfreq=SF,
        generators=(gen,),
        rng=rng,
        background_uv=10.0,
        sensor_noise_uv=1.0,
    )
    d = tmp_path_factory.mktemp("targets")
    edf = d / "occipital_alpha.edf"
    mne.export.export_raw(edf, raw, fmt="edf", verbose="error")
    res = analyze(edf, config=AnalysisConfig(), atlases=("brodmann",))  # the defaults
    res.write(d / "result", figures=False, report=False)
    return d, edf, res


def test_export_and_replay_agree_with_offline_analysis(analysed):
    # End to end on a simulated recording: export right BA17 alpha, replay it causally on the
    # same file; the mean over clean windows must match the analysis' ROI value within the
    # ratio expected from the filter responses (2/sqrt(B T), as for the pink-noise test above).
    from scipy.signal import welch

    from sourcelab.inverse import inverse_operator, roi_power_matrices
    from sourcelab.rois import load_atlas
    from sourcelab.targets import export_target, replay_recording

    d, edf, res = analysed
    tg = export_target(d / "result", roi="BA17", hemisphere="right", band="alpha")
    write_target(tg, d / "ba17.json")
    tg = read_target(d / "ba17.json")
    at = load_atlas("brodmann")
    i = [j for j, r in enumerate(at.rois) if (r.name, r.hemisphere) == ("BA17", "right")][0]
    op = inverse_operator("sLORETA", "fixed", 1 / 9)
    np.testing.assert_allclose(tg.matrix, roi_power_matrices(op, at.vertex_sets())[i], rtol=1e-12)
    s = replay_recording(tg, edf, d / "replay")
    assert (d / "replay" / "replay.tsv").is_file() and (d / "replay" / "replay.png").is_file()
    raw = __import__("mne").io.read_raw_edf(edf, preload=True, verbose="error")
    x = raw.get_data() * 1e6
    dd, v = np.linalg.eigh(tg.matrix)
    f, p = welch(
        (np.sqrt(np.clip(dd, 0, None))[:, None] * v.T) @ x,
        fs=SF,
        nperseg=int(16 * SF),
        detrend=False,
    )
    lo, hi = tg.band_edges
    exp = expected_ratio(p.sum(axis=0), f, tg.sos["alpha"], lo, hi, sfreq=SF, epoch_s=2.0)
    ratio = s["ratio_to_offline"]
    # the simulated 10 Hz patch makes the alpha spectrum peaked: the statistical bandwidth of
    # the measured spectrum, not the band's width, sets the sampling error
    tol = sampling_tolerance(lo, hi, res.quality.kept_s, psd=p.sum(axis=0), f=f)
    assert abs(ratio / exp - 1) < tol, (ratio, exp, tol)
    assert s["n_clean"] > 0.9 * s["n_windows"]


def test_cli_export_replay_and_list_without_norms(analysed, capsys):
    import argparse

    from sourcelab.cli import targets as cli

    d, edf, _ = analysed
    p = argparse.ArgumentParser()
    cli.add_parser(p.add_subparsers(dest="command"))
    out = d / "cli_t.json"
    assert (
        cli.run(
            p.parse_args(
                [
                    "targets",
                    "export",
                    str(d / "result"),
                    "--roi",
                    "BA17",
                    "--hemisphere",
                    "right",
                    "--band",
                    "alpha",
                    "--out",
                    str(out),
                ]
            )
        )
        == 0
    )
    assert json.loads(out.read_text())["schema"] == "sourcelab-target/1"
    assert (
        cli.run(
            p.parse_args(["targets", "replay", str(out), str(edf), "--out", str(d / "cli_replay")])
        )
        == 0
    )
    assert "windows clean" in capsys.readouterr().out
    # an analysis without norms has no z: listing candidates is a user error naming the fix
    with pytest.raises(InputError, match="norms"):
        cli.run(p.parse_args(["targets", "list", str(d / "result")]))
    with pytest.raises(InputError, match="hemisphere"):
        cli.run(
            p.parse_args(
                [
                    "targets",
                    "export",
                    str(d / "result"),
                    "--roi",
                    "BA17",
                    "--band",
                    "alpha",
                    "--out",
                    str(out),
                ]
            )
        )
