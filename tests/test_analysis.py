"""End to end: a simulated generator goes through the forward model, a file and the analysis."""

import numpy as np
import pytest

from sourcelab.config import AnalysisConfig
from sourcelab.analysis import analyze
from sourcelab.errors import InputError
from sourcelab.simulate import Generator, simulate_raw


@pytest.fixture(scope="module")
def occipital_alpha_edf(tmp_path_factory):
    """Right-occipital alpha patch (~4 cm², 10 Hz) on pink background with white sensor noise,
    written to EDF and read back by the pipeline (an invented recording)."""
    import mne

    from sourcelab.headmodel import load_head_model

    rng = np.random.default_rng(7)
    model = load_head_model()
    gen = Generator((14.0, -95.0, 2.0), "right", freq=10.0, amplitude=1.5, radius_mm=12.0)
    raw = simulate_raw(
        model,
        duration_s=120.0,
        sfreq=256.0,
        generators=(gen,),
        rng=rng,
        background_uv=10.0,
        sensor_noise_uv=1.0,
    )
    path = tmp_path_factory.mktemp("sim") / "right_occipital_alpha.edf"
    mne.export.export_raw(path, raw, fmt="edf", verbose="error")
    return path


def test_right_occipital_alpha_ranks_right_visual_areas(occipital_alpha_edf):
    # Known answer (constructed input): the generator sits in right BA17/18 (Lancaster et al. 2000
    # Talairach labels).  With sLORETA's centimetre-scale blur, neighbouring medial areas (BA30,
    # 39 mm away) pick up most of the top area's mean power, so the area is named by the peak:
    # the two top Brodmann ROIs in alpha absolute power are right visual areas (BA17/18/19), the
    # source of peak power lies within 2 cm of the generator and inside a right visual area, and
    # the right occipital lobe ranks first among lobes.
    res = analyze(occipital_alpha_edf, config=AnalysisConfig())
    t = res.roi_table
    alpha = t[(t.atlas == "brodmann") & (t.band == "alpha") & (t.measure == "absolute")]
    ranked = alpha.sort_values("value", ascending=False)
    visual = {("BA17", "right"), ("BA18", "right"), ("BA19", "right")}
    pairs = list(zip(ranked.roi, ranked.hemisphere))
    assert set(pairs[:2]) <= visual, pairs[:6]
    lobes = t[(t.atlas == "lobes") & (t.band == "alpha") & (t.measure == "absolute")]
    best = lobes.sort_values("value", ascending=False).iloc[0]
    assert (best.roi, best.hemisphere) == ("occipital", "right")
    # the peak source of the alpha map lies near the generator (sLORETA blur: within 2 cm)
    from sourcelab.headmodel import load_head_model

    m = load_head_model()
    i_peak = int(np.argmax(res.source_map("alpha")))
    assert np.linalg.norm(m.src_mni[i_peak] - np.array([14.0, -95.0, 2.0])) < 20.0
    home = [(r.name, r.hemisphere) for r in res.atlas("brodmann").rois if i_peak in r.vertices]
    assert home and home[0] in visual, home
    # relative power is band power over the fixed 1-45 Hz total: the default (IFCN) bands,
    # delta 1 Hz to gamma at the 45-Hz low-pass, tile it, so they sum to one at every source
    # (exact identity of disjoint bins, as in test_relative_power_uses_the_fixed_broadband_total)
    np.testing.assert_allclose(res.source_rel.sum(axis=0), 1.0, rtol=1e-5)
    assert res.fingerprint.headmodel_sha256 == m.sha256
    assert res.quality.kept_s >= 100


def test_same_answer_from_memory_and_file(occipital_alpha_edf):
    # Reading the EDF back must not change the numbers beyond EDF's 16-bit quantisation.
    import mne

    raw = mne.io.read_raw_edf(occipital_alpha_edf, preload=True, verbose="error")
    a = analyze(occipital_alpha_edf).roi_table
    b = analyze(raw).roi_table
    np.testing.assert_allclose(a.value, b.value, rtol=1e-9)


def test_relative_power_uses_the_fixed_broadband_total(occipital_alpha_edf):
    # Relative power = band power / power over BROADBAND_HZ (1-45 Hz), whatever the band list:
    # bands that tile 1-45 Hz sum to one at every source and channel (exact identity of the
    # one-sided spectrum summed over disjoint bins), and a band's relative value does not
    # change when other bands are added or removed.
    from sourcelab.config import Bands

    tiled = Bands(names=("a", "b", "c"), edges=((1.0, 8.0), (8.0, 20.0), (20.0, 45.0)))
    res = analyze(occipital_alpha_edf, config=AnalysisConfig(bands=tiled, n_boot=0))
    np.testing.assert_allclose(res.source_rel.sum(axis=0), 1.0, rtol=1e-5)
    np.testing.assert_allclose(res.sensor_rel.sum(axis=0), 1.0, rtol=1e-9)
    one = Bands(names=("b",), edges=((8.0, 20.0),))
    res1 = analyze(occipital_alpha_edf, config=AnalysisConfig(bands=one, n_boot=0))
    np.testing.assert_allclose(res1.source_rel[0], res.source_rel[1], rtol=1e-5)


def test_overlapping_or_out_of_range_bands_are_refused(occipital_alpha_edf):
    from sourcelab.config import Bands

    with pytest.raises(InputError, match="overlap"):
        Bands(names=("a", "b"), edges=((4.0, 8.0), (7.0, 12.0)))
    gamma = Bands(names=("gamma",), edges=((30.0, 60.0),))
    with pytest.raises(InputError, match="outside the filter pass band"):
        AnalysisConfig(bands=gamma, n_boot=0)
    slow = Bands(names=("slow",), edges=((0.5, 4.0),))  # inside the pass band, below 1 Hz
    with pytest.raises(InputError, match="outside the 1-45 Hz"):
        analyze(occipital_alpha_edf, config=AnalysisConfig(bands=slow, n_boot=0))


def _stages_must_not_run(monkeypatch):
    """Make reading, cleaning and the inverse fail loudly: a refusal must come before them."""
    import sourcelab.intake
    import sourcelab.inverse

    def never(*args, **kwargs):
        raise AssertionError("the pipeline ran before the norms were checked")

    for module, name in (
        (sourcelab.intake, "read_recording"),
        (sourcelab.intake, "clean_recording"),
        (sourcelab.inverse, "inverse_operator"),
    ):
        monkeypatch.setattr(module, name, never)


@pytest.mark.parametrize(
    "kwargs, message",
    [
        # the demo norms' sidecar states eyes closed, ages about 18-65 y and the default
        # pipeline (lambda2 = 1/9); messages as match_norms words them (this project's contract)
        (dict(age=30.0, condition="eyes open"), "differs from the norms' condition"),
        (dict(age=90.0, condition="eyes closed"), "outside the norms' age ranges"),
        (
            dict(age=30.0, condition="eyes closed", config=AnalysisConfig(snr=2.0)),
            r"fingerprint of the norms differs from the analysis \(lambda2: ",
        ),
    ],
)
def test_norms_that_do_not_fit_are_refused_before_the_pipeline(monkeypatch, kwargs, message):
    from sourcelab.demo import demo_norms_path

    _stages_must_not_run(monkeypatch)
    with pytest.raises(InputError, match=message):
        analyze("never-read.edf", norms=demo_norms_path(), **kwargs)


def test_cli_refuses_unfit_norms_before_the_pipeline_without_output(monkeypatch, tmp_path, capsys):
    from sourcelab.cli.main import main
    from sourcelab.demo import demo_norms_path

    _stages_must_not_run(monkeypatch)
    rec = tmp_path / "never-read.edf"
    rec.write_bytes(b"not read")
    out = tmp_path / "out"
    argv = ["analyze", str(rec), "--norms", str(demo_norms_path()), "--out", str(out)]
    assert main(argv + ["--age", "90", "--condition", "EC"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "--allow-extrapolation" in err
    assert not out.exists()


def test_norms_matched_before_the_pipeline_are_those_of_the_tables(plain_result, demo_result):
    # the early match (on tables of the same rows) must give each row the z that matching the
    # finished tables afterwards gives (apply_norms on the table of the same recording)
    from sourcelab.demo import DEMO_AGE, DEMO_CONDITION, demo_norms_path
    from sourcelab.norms import apply_norms, read_norms

    nm = read_norms(demo_norms_path())
    opts = dict(age=DEMO_AGE, fingerprint=plain_result.fingerprint, condition=DEMO_CONDITION)
    for name, kind in (("roi_table", "roi"), ("sensor_table", "sensor")):
        late = apply_norms(getattr(plain_result, name), nm, kind=kind, **opts)
        early = getattr(demo_result, name)
        np.testing.assert_array_equal(early["z"].to_numpy(), late["z"].to_numpy())
        np.testing.assert_array_equal(early["norm_n"].to_numpy(), late["norm_n"].to_numpy())


def test_stages_beside_each_other_give_the_same_tables(monkeypatch):
    # with a second core the ROI bootstrap is drawn beside the coupling stage: the same draw
    # (the same seeded replicates, Efron & Tibshirani 1993 ch. 6), so the same tables to the
    # last bit as the analysis made in one thread
    import pandas as pd

    import sourcelab.analysis as analysis
    from sourcelab.demo import demo_recording

    made = {}
    for beside in (True, False):
        monkeypatch.setattr(analysis, "parallel_stages", lambda b=beside: b)
        made[beside] = analyze(demo_recording())
    for name in ("roi_table", "sensor_table", "pair_table", "coupling_table"):
        pd.testing.assert_frame_equal(getattr(made[True], name), getattr(made[False], name))


def test_processes_pinned_to_one_thread_run_no_stage_beside(monkeypatch):
    # batch workers get OMP_NUM_THREADS=1 etc. (one worker per core): no second thread
    from sourcelab._threads import parallel_stages

    import os

    monkeypatch.setattr(os, "sched_getaffinity", lambda pid: {0, 1}, raising=False)
    monkeypatch.setattr(os, "getloadavg", lambda: (0.2, 0.2, 0.2), raising=False)
    for k in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        monkeypatch.delenv(k, raising=False)
    assert parallel_stages() is True
    monkeypatch.setenv("OPENBLAS_NUM_THREADS", "1")
    assert parallel_stages() is False


def test_no_stage_beside_on_a_busy_machine(monkeypatch):
    # two cores, both busy with other processes (load average 2.7): a second thread would
    # only queue behind them
    import os

    from sourcelab._threads import parallel_stages

    for k in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        monkeypatch.delenv(k, raising=False)
    monkeypatch.setattr(os, "sched_getaffinity", lambda pid: {0, 1}, raising=False)
    monkeypatch.setattr(os, "getloadavg", lambda: (2.7, 2.5, 2.0), raising=False)
    assert parallel_stages() is False
    monkeypatch.setattr(os, "getloadavg", lambda: (1.1, 1.0, 1.0), raising=False)
    assert parallel_stages() is True


def test_no_stage_beside_while_a_warmed_renderer_uses_the_second_core(monkeypatch):
    # sourcelab.figures.warm: the renderer forked before the analysis draws on the core the
    # analysis leaves idle; a stage beside the analysis would take that core from it
    import sourcelab.analysis as analysis
    from sourcelab.figures import warm

    monkeypatch.setattr(analysis, "parallel_stages", lambda: True)
    assert analysis._second_core_free()
    monkeypatch.setattr(warm, "_ACTIVE", object())
    assert not analysis._second_core_free()
