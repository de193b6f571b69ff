"""Pair and edge training targets: the portable file, causal replay, agreement with the offline
analysis, and the CLI."""

import json

import numpy as np
import pytest
from coupling_sim import coupled_recording, norms_shifted_from

from sourcelab.errors import InputError
from sourcelab.targets import (
    CouplingTarget,
    OnlineCoupling,
    export_coupling_target,
    read_target,
    replay_coupling_array,
    replay_recording,
    write_target,
)

FS = 256.0


@pytest.fixture(scope="module")
def analysed(tmp_path_factory, head_model):
    """Invented recording (left-frontal patch leading a right-occipital one by 10 ms in alpha,
    120 s, EDF) analysed with the default configuration against invented norms that put every
    value 2.5 SD above its norm (norms file on disk, recorded in the provenance)."""
    import mne

    from sourcelab.analysis import analyze
    from sourcelab.config import AnalysisConfig
    from sourcelab.headmodel import make_info
    from sourcelab.norms import write_norms

    d = tmp_path_factory.mktemp("coupling_targets")
    x = coupled_recording(
        head_model,
        duration_s=120.0,
        sfreq=FS,
        rng=np.random.default_rng(3),
        patches=[
            ((-30, 40, 30), "left", 0.6, 0.0, 15.0),
            ((25, -90, 5), "right", 0.6, 0.010, 15.0),
        ],
    )
    edf = d / "coupled.edf"
    mne.export.export_raw(
        edf, mne.io.RawArray(x * 1e-6, make_info(FS), verbose="error"), fmt="edf", verbose="error"
    )
    cfg = AnalysisConfig(n_boot=0)  # band-power intervals are not needed here
    nm = write_norms(norms_shifted_from(analyze(edf, config=cfg), shift_sd=2.5), d / "n.tsv")
    res = analyze(edf, config=cfg, norms=nm.path, age=40.0, condition="eyes closed")
    res.write(d / "result", figures=False, report=False, maps=False)
    return d, edf


@pytest.mark.parametrize(
    "kind, label, measure",
    [
        ("pair", "O2-F3", "msc"),  # given in reverse: the table's order is kept
        ("pair", "F3-F4", "imcoh"),
        ("pair", "O1-O2", "asymmetry"),
        ("pair", "F3-O2", "phase_deg"),
        ("edge", "frontal.left|occipital.right", "lagcoh"),
        ("edge", "occipital.right|frontal.left", "aec_orth"),
    ],
)
def test_replay_agrees_with_the_offline_analysis(analysed, kind, label, measure, tmp_path):
    # The replay's value over all clean segments is the offline estimator applied to the replay's
    # segments: the same 2-s grid over the same samples.  It differs only by the pre-filter
    # (causal 0.5-45 Hz instead of the analysis' zero-phase one: the same on every channel, so
    # phase and coherence are unchanged) and by the warm-up segment it drops.  Dropping one of K
    # epochs moves an estimate by about SE/sqrt(K) (one epoch's influence is sqrt(K) SE / K), so
    # the stated tolerance is 3 SE/sqrt(K), SE taken from the offline 95 % bootstrap interval
    # (width / 3.92): 0.1 of the interval's width for K = 60 (measured: 0.01-0.08 of the width).
    d, edf = analysed
    t = export_coupling_target(
        d / "result",
        kind=kind,
        label=label,
        band="alpha",
        measure=measure,
        atlas="lobes" if kind == "edge" else None,
    )
    path = write_target(t, tmp_path / "t.json")
    back = read_target(path)
    assert isinstance(back, CouplingTarget) and back.to_dict() == t.to_dict()
    np.testing.assert_allclose(back.node_weights.sum(axis=1), 0.0, atol=1e-9)
    assert t.label in (label, "|".join(label.split("|")[::-1]), "-".join(label.split("-")[::-1]))
    # the norm puts the offline value at z = +2.5: the target trains downwards
    assert t.offline["z"] == pytest.approx(2.5) and t.direction == "decrease"
    s = replay_recording(back, edf, tmp_path / "replay")
    assert {p.name for p in (tmp_path / "replay").iterdir()} == {
        "replay.tsv",
        "replay.png",
        "replay.json",
        "provenance.json",
    }
    # the folder says what wrote it: a replay, as for area targets (so it is never taken for
    # an analysis folder, and a later replay may replace it)
    from sourcelab.provenance import recognise_output_dir

    assert recognise_output_dir(tmp_path / "replay").kind == "replay"
    off = t.offline
    se = (off["value_hi"] - off["value_lo"]) / 3.92
    assert abs(s["pooled_value"] - off["value"]) <= 3 * se / np.sqrt(off["n_epochs"]), s
    assert s["n_clean"] >= s["n_segments"] - 1  # only the warm-up segment
    assert s["pooled_z"] > 1.96  # still beyond the norm, as offline (z = 2.5)


def test_replay_is_causal_and_streaming_equals_batch(analysed, rng):
    import mne

    d, edf = analysed
    t = export_coupling_target(
        d / "result", kind="pair", label="F3-O2", band="alpha", measure="lagcoh", window_segments=5
    )
    x = mne.io.read_raw_edf(edf, preload=True, verbose="error").get_data()[:, : int(40 * FS)] * 1e6
    ref = replay_coupling_array(x, FS, t)
    online = OnlineCoupling(t, FS)
    rows, start = [], 0
    while start < x.shape[1]:
        n = int(rng.integers(1, 700))
        rows += online.push(x[:, start : start + n])
        start += n
    np.testing.assert_allclose([r[1] for r in rows], ref.value, rtol=1e-12, equal_nan=True)
    assert ref.pooled_value == pytest.approx(online.pooled_value(), rel=1e-12)
    # changing the future leaves every earlier value unchanged
    y = x.copy()
    cut = int(24 * FS)
    y[:, cut:] = rng.standard_normal(y[:, cut:].shape) * 20.0
    other = replay_coupling_array(y, FS, t)
    before = ref.time_s <= cut / FS
    np.testing.assert_array_equal(ref.value[before], other.value[before])
    assert not np.allclose(ref.value[~before], other.value[~before], equal_nan=True)
    # the window holds at most 5 segments, the first segment is warm-up
    assert ref.n_clean.max() == 5 and not ref.clean[0] and ref.clean[1:].all()


def test_export_errors_and_file_checks(analysed, tmp_path):
    d, _ = analysed
    with pytest.raises(InputError, match="no pair"):
        export_coupling_target(d / "result", kind="pair", label="F3-XX", band="alpha")
    with pytest.raises(InputError, match="measure"):
        export_coupling_target(
            d / "result", kind="pair", label="F3-F4", band="alpha", measure="aec_orth"
        )
    with pytest.raises(InputError, match="band"):
        # beta2 is not one of the default bands
        export_coupling_target(d / "result", kind="pair", label="F3-F4", band="beta2")
    with pytest.raises(InputError, match="several|--atlas"):
        export_coupling_target(
            d / "result", kind="edge", label="visual.left|visual.right", band="alpha"
        )
    t = export_coupling_target(
        d / "result", kind="edge", label="visual.left|visual.right", band="alpha", atlas="yeo7"
    )
    assert t.atlas == "yeo7" and len(t.details["vertices_a"]) > 100
    dd = t.to_dict()
    for bad, word in (
        ({**dd, "kind": "voxel"}, "kind"),
        ({**dd, "coupling": {**dd["coupling"], "node_weights": [[1.0] * 19] * 2}}, "sum to 0"),
        ({**dd, "measure": "asymmetry"}, "measure"),
    ):
        p = tmp_path / "bad.json"
        p.write_text(json.dumps(bad))
        with pytest.raises(InputError, match=word) as err:
            read_target(p)
        assert str(p) in str(err.value)


def test_cli_export_and_replay_pair(analysed, tmp_path, capsys):
    from sourcelab.cli.main import main

    d, edf = analysed
    out = tmp_path / "pair.json"
    assert (
        main(
            [
                "targets",
                "export",
                str(d / "result"),
                "--pair",
                "F4-F3",
                "--band",
                "alpha",
                "--measure",
                "imcoh",
                "--out",
                str(out),
            ]
        )
        == 0
    )
    assert "pair F3-F4 alpha imcoh" in capsys.readouterr().out
    t = read_target(out)
    assert t.kind == "pair" and t.nodes == ("F3", "F4")
    assert main(["targets", "replay", str(out), str(edf), "--out", str(tmp_path / "rp")]) == 0
    assert "clean segments" in capsys.readouterr().out
    assert (
        main(
            [
                "targets",
                "export",
                str(d / "result"),
                "--roi",
                "BA17",
                "--band",
                "alpha",
                "--measure",
                "msc",
                "--out",
                str(tmp_path / "x.json"),
            ]
        )
        == 2
    )
    assert "absolute or relative" in capsys.readouterr().err
    # a pair target is not streamed live (area targets only): one line, exit 2, not a traceback
    pytest.importorskip("mne_lsl")
    assert main(["targets", "stream", str(out), "--duration", "1"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "not streamed live" in err and str(out) in err
