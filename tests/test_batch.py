"""Batch analysis: per-recording outputs, group tables, failures, resume, and engine equivalence.

Reference checks: the group table must equal each recording's own ``analyze`` result (two routes
to the same numbers), and every engine (serial, Dask LocalCluster, process pool) must give the
same numbers as the serial run.  Recordings are invented (simulated through the template head).
"""

import json
import os
import sys

import numpy as np
import pandas as pd
import pytest

from sourcelab.batch import (
    BatchItem,
    DaskEngine,
    ProcessEngine,
    SerialEngine,
    discover,
    make_engine,
    run_batch,
)
from sourcelab.batch.engines import (
    THREAD_ENV,
    one_thread_environment,
    run_unordered,
    worker_threads,
)
from sourcelab.config import AnalysisConfig
from sourcelab.errors import InputError

DURATION_S = 70.0  # just above the 60 s minimum of clean data
AGES = {"sub-01": 23.5, "sub-02": 41.0, "sub-03": 65.2}


def _simulate(model, seed):
    from sourcelab.simulate import Generator, simulate_raw

    rng = np.random.default_rng(seed)
    a = rng.uniform(0.2, 0.45)
    gens = (
        Generator((-18, -92, 4), "left", amplitude=a),
        Generator((20, -92, 4), "right", amplitude=a),
        Generator((4, 40, 20), "right", freq=6.0, amplitude=rng.uniform(0.1, 0.4)),
    )
    return simulate_raw(
        model, duration_s=DURATION_S, sfreq=256.0, generators=gens, background_uv=10.0, rng=rng
    )


@pytest.fixture(scope="module")
def cohort(tmp_path_factory):
    """Two EDF and one FIF invented recordings, one broken EDF, and a participants.tsv."""
    import mne

    from sourcelab.headmodel import load_head_model

    model = load_head_model()
    d = tmp_path_factory.mktemp("cohort")
    mne.export.export_raw(
        d / "sub-01_task-rest_eeg.edf", _simulate(model, 1), fmt="edf", verbose="error"
    )
    mne.export.export_raw(
        d / "sub-02_task-rest_eeg.edf", _simulate(model, 2), fmt="edf", verbose="error"
    )
    _simulate(model, 3).save(d / "sub-03_task-rest_eeg.fif", verbose="error")
    (d / "sub-04_task-rest_eeg.edf").write_bytes(b"0       not an EDF header" * 4)
    parts = d / "participants.tsv"
    parts.write_text("participant_id\tage\n" + "".join(f"{k}\t{v}\n" for k, v in AGES.items()))
    return d


@pytest.fixture(scope="module")
def serial_run(cohort, tmp_path_factory):
    out = tmp_path_factory.mktemp("serial") / "out"
    items = discover([cohort], participants=cohort / "participants.tsv")
    summary = run_batch(items, out, config=AnalysisConfig(), progress=False)
    return items, summary


# ------------------------------------------------------------------ discovery (no analysis)


def test_discover_names_participants_and_ages(cohort):
    items = discover([cohort], participants=cohort / "participants.tsv")
    assert [i.name for i in items] == [f"sub-0{k}_task-rest" for k in (1, 2, 3, 4)]
    assert [i.participant for i in items] == ["sub-01", "sub-02", "sub-03", "sub-04"]
    assert [i.age for i in items] == [23.5, 41.0, 65.2, None]  # sub-04 is not listed


def test_discover_deduplicates_and_sanitises(tmp_path):
    for sub in ("a", "b"):
        (tmp_path / sub).mkdir()
        (tmp_path / sub / "rest.edf").write_bytes(b"x")
    odd = tmp_path / "a" / "..weird name;rm -rf.fif"
    odd.write_bytes(b"x")
    items = discover(
        [
            tmp_path / "a" / "rest.edf",
            str(tmp_path / "b" / "*.edf"),
            odd,
            tmp_path / "a" / "rest.edf",
        ]
    )  # the repeat is dropped
    assert [i.name for i in items] == ["rest", "rest-2", "weird_name_rm_-rf"]
    assert all(isinstance(i, BatchItem) and i.path.is_absolute() for i in items)


def test_discover_bids_dataset_ignores_derivatives(tmp_path):
    (tmp_path / "dataset_description.json").write_text("{}")
    eeg = tmp_path / "sub-07" / "ses-1" / "eeg"
    eeg.mkdir(parents=True)
    (eeg / "sub-07_ses-1_task-rest_eeg.vhdr").write_text("x")
    (eeg / "sub-07_ses-1_task-rest_eeg.eeg").write_text("x")  # BrainVision data: no item
    (eeg / "sub-07_ses-1_task-rest_channels.tsv").write_text("x")
    der = tmp_path / "derivatives" / "sub-07"
    der.mkdir(parents=True)
    (der / "sub-07_task-rest_eeg.fif").write_text("x")
    items = discover([tmp_path])
    assert [(i.name, i.participant) for i in items] == [("sub-07_ses-1_task-rest", "sub-07")]


@pytest.mark.parametrize("bad", ["missing.edf", "nothing-*.edf", "empty_folder"])
def test_discover_wrong_input_is_an_input_error(tmp_path, bad):
    (tmp_path / "empty_folder").mkdir()
    with pytest.raises(InputError):
        discover([tmp_path / bad])


def test_engine_choice_and_errors():
    assert isinstance(make_engine(None, workers=1), SerialEngine)
    with pytest.raises(InputError, match="engine"):
        make_engine("threads")
    with pytest.raises(InputError, match="workers"):
        make_engine(None, workers=0)
    with pytest.raises(InputError, match="scheduler"):
        make_engine("processes", workers=2, scheduler="tcp://127.0.0.1:8786")


def test_run_unordered_bounds_in_flight_and_keeps_errors():
    # A failing task is reported with its exception; the others still run, all indices appear.
    def f(x):
        if x == 3:
            raise RuntimeError("boom")
        return x * x

    got = {i: (r, e) for i, r, e in run_unordered(SerialEngine(), f, range(6), max_in_flight=2)}
    assert sorted(got) == list(range(6))
    assert isinstance(got[3][1], RuntimeError)
    assert [got[i][0] for i in (0, 1, 2, 4, 5)] == [0, 1, 4, 16, 25]


# ------------------------------------------------------------------ running


def test_batch_outputs_group_table_and_failure_line(serial_run, cohort):
    items, summary = serial_run
    assert [o.status for o in summary.outcomes] == ["done", "done", "done", "failed"]
    assert summary.exit_code == 1
    fail = summary.failures[0]
    assert fail.name == "sub-04_task-rest" and "\n" not in fail.message and fail.message
    out = summary.out
    failures = pd.read_csv(out / "failures.tsv", sep="\t")
    assert list(failures.recording) == ["sub-04_task-rest"]
    status = pd.read_csv(out / "batch_status.tsv", sep="\t", keep_default_na=False)
    assert list(status.status) == ["done", "done", "done", "failed"]
    group = pd.read_csv(summary.tables["roi"], sep="\t")
    assert list(group.columns[:3]) == ["recording", "participant", "age"]
    assert list(pd.unique(group.recording)) == [i.name for i in items[:3]]
    for it in items[:3]:
        own = pd.read_csv(out / it.name / "roi_table.tsv", sep="\t")
        mine = group[group.recording == it.name]
        assert len(mine) == len(own) > 0
        np.testing.assert_array_equal(mine.value.to_numpy(), own.value.to_numpy())
        assert set(mine.age) == {AGES[it.participant]}
        prov = json.loads((out / it.name / "provenance.json").read_text())
        assert prov["recording"]["age"] == AGES[it.participant]
    sensors = pd.read_csv(summary.tables["sensor"], sep="\t")
    assert set(sensors.recording) == {i.name for i in items[:3]}
    assert not (out / "sub-04_task-rest").exists()  # nothing partial for the broken file
    assert not [p for p in out.iterdir() if p.name.startswith(".")]


def test_group_table_matches_a_direct_analysis(serial_run):
    # Two routes to the same numbers: batch (file → worker → TSV → group table) and analyze().
    from sourcelab.analysis import analyze

    items, summary = serial_run
    direct = analyze(items[2].path, config=AnalysisConfig()).roi_table
    group = pd.read_csv(summary.tables["roi"], sep="\t")
    mine = group[group.recording == items[2].name]
    np.testing.assert_allclose(mine.value.to_numpy(), direct.value.to_numpy(), rtol=5e-6)


def test_rerun_skips_finished_work_and_force_recomputes(serial_run, tmp_path):
    import shutil

    items, first = serial_run
    out = tmp_path / "out"  # a copy: later runs rewrite the group tables for their own inputs
    shutil.copytree(first.out, out)
    stamp = {i.name: (out / i.name / "provenance.json").stat().st_mtime_ns for i in items[:3]}
    again = run_batch(items, out, config=AnalysisConfig(), progress=False)
    assert [o.status for o in again.outcomes] == ["skipped", "skipped", "skipped", "failed"]
    assert all((out / n / "provenance.json").stat().st_mtime_ns == t for n, t in stamp.items())
    pd.testing.assert_frame_equal(
        pd.read_csv(again.tables["roi"], sep="\t"),
        pd.read_csv(first.tables["roi"], sep="\t"),
        check_exact=True,
    )
    # another λ² is another pipeline fingerprint: recomputed, not skipped
    other = run_batch(items[:1], out, config=AnalysisConfig(snr=5.0), progress=False)
    assert [o.status for o in other.outcomes] == ["done"]
    forced = run_batch(items[:2], out, config=AnalysisConfig(), force=True, progress=False)
    assert [o.status for o in forced.outcomes] == ["done", "done"]
    assert (out / items[1].name / "provenance.json").stat().st_mtime_ns != stamp[items[1].name]


def test_dask_local_cluster_gives_identical_numbers(serial_run, tmp_path):
    items, serial = serial_run
    with DaskEngine(n_workers=2, processes=False) as engine:
        assert engine.n_workers == 2
        summary = run_batch(
            items, tmp_path / "dask", config=AnalysisConfig(), engine=engine, progress=False
        )
    assert [o.status for o in summary.outcomes] == ["done", "done", "done", "failed"], [
        o.message for o in summary.outcomes
    ]
    for kind in ("roi", "sensor"):
        a = pd.read_csv(serial.tables[kind], sep="\t")
        b = pd.read_csv(summary.tables[kind], sep="\t")
        pd.testing.assert_frame_equal(a, b, check_exact=True)


@pytest.mark.slow
def test_process_pool_gives_identical_numbers(serial_run, tmp_path):
    items, serial = serial_run
    with ProcessEngine(2) as engine:
        summary = run_batch(
            items, tmp_path / "procs", config=AnalysisConfig(), engine=engine, progress=False
        )
    assert [o.status for o in summary.outcomes] == ["done", "done", "done", "failed"]
    assert len({o.worker for o in summary.outcomes}) >= 1
    pd.testing.assert_frame_equal(
        pd.read_csv(serial.tables["roi"], sep="\t"),
        pd.read_csv(summary.tables["roi"], sep="\t"),
        check_exact=True,
    )


def _pools() -> dict:
    from threadpoolctl import threadpool_info

    return {(lib["user_api"], lib["filepath"]): lib["num_threads"] for lib in threadpool_info()}


def test_thread_limits_set_the_pools_they_name_and_restore_them():
    # The one home of the thread limit (sourcelab._threads): threadpoolctl's own report
    # (threadpool_info) is the reference.  From a known start of two threads per pool: the
    # default limits every pool to BLAS_THREADS, user_api="blas" only the BLAS pools (the
    # coupling step's decorator), and leaving the block restores the start.
    import scipy.linalg  # noqa: F401 - loads the OpenMP runtime beside BLAS, as the pipeline does
    from threadpoolctl import threadpool_limits

    from sourcelab._threads import limited_threads, thread_limits
    from sourcelab.constants import BLAS_THREADS

    with threadpool_limits(2):
        start = _pools()
        with thread_limits():
            assert set(_pools().values()) == {BLAS_THREADS}

        @limited_threads(user_api="blas")
        def inside():
            """Docstring kept."""
            return _pools()

        seen = inside()
        assert inside.__name__ == "inside" and inside.__doc__ == "Docstring kept."
        assert {n for (api, _), n in seen.items() if api == "blas"} == {BLAS_THREADS}
        assert {n for (api, _), n in seen.items() if api != "blas"} <= {2}
        assert _pools() == start


def test_process_workers_start_with_one_blas_thread(monkeypatch):
    # Each worker must run one BLAS/OpenMP thread (workers == cores; oversubscribed threads slow
    # a batch down, common practice).  The libraries read their thread variables when they load,
    # which in a spawned worker is before any initialiser runs, so the variables must be in the
    # worker's environment from its start; threadpoolctl reports what the libraries use.
    for k in THREAD_ENV:
        monkeypatch.delenv(k, raising=False)
    with ProcessEngine(1) as engine:
        info = engine.result(engine.submit(worker_threads, None))
    assert info["env"] == {k: "1" for k in THREAD_ENV}
    assert info["pools"] and set(info["pools"].values()) == {1}, info
    assert not any(k in os.environ for k in THREAD_ENV)  # the parent's environment is restored


def _dask_worker_setup(_task=None) -> dict:
    import dask

    return {
        "malloc_trim": os.environ.get("MALLOC_TRIM_THRESHOLD_"),
        "profiler": dask.config.get("distributed.worker.profile.enabled"),
        **worker_threads(),
    }


def test_dask_local_workers_are_set_up_as_the_pool_workers(monkeypatch):
    # A local cluster's worker processes run as the process pool's: one BLAS/OpenMP thread each
    # (common practice, as above), the caller's allocator settings (Dask's nanny would export
    # MALLOC_TRIM_THRESHOLD_=65536, which fixes glibc's mmap threshold: Dask's documentation on
    # pre-spawn-environ and glibc's mallopt manual, from memory) and no statistical profiler.
    pytest.importorskip("distributed")
    for k in (*THREAD_ENV, "MALLOC_TRIM_THRESHOLD_"):
        monkeypatch.delenv(k, raising=False)
    with DaskEngine(n_workers=1) as engine:
        info = engine.result(engine.submit(_dask_worker_setup, None))
    assert info["malloc_trim"] is None and info["profiler"] is False, info
    assert info["env"] == {k: "1" for k in THREAD_ENV}
    assert info["pools"] and set(info["pools"].values()) == {1}, info
    assert not any(k in os.environ for k in THREAD_ENV)  # the parent's environment is restored


def test_one_thread_environment_keeps_the_users_setting(monkeypatch):
    monkeypatch.setenv("OMP_NUM_THREADS", "3")
    monkeypatch.delenv("OPENBLAS_NUM_THREADS", raising=False)
    with one_thread_environment():
        assert os.environ["OMP_NUM_THREADS"] == "3"
        assert os.environ["OPENBLAS_NUM_THREADS"] == "1"
    assert os.environ["OMP_NUM_THREADS"] == "3" and "OPENBLAS_NUM_THREADS" not in os.environ


# ------------------------------------------------------------------ command line


@pytest.fixture
def cli(monkeypatch):
    from sourcelab.cli import main as cli_main

    monkeypatch.setitem(cli_main.COMMANDS, "batch", "sourcelab.cli.batch")
    return cli_main.main


def test_cli_exit_codes(cli, cohort, serial_run, tmp_path, capsys):
    _, first = serial_run
    base = ["--no-figures", "--no-report", "--no-maps", "--no-progress"]
    # 1: one recording failed (the others are up to date and skipped)
    assert (
        cli(
            [
                "batch",
                str(cohort),
                "--out",
                str(first.out),
                "--participants",
                str(cohort / "participants.tsv"),
                *base,
            ]
        )
        == 1
    )
    captured = capsys.readouterr()
    assert "3 up to date, 1 failed of 4" in captured.out
    assert [ln for ln in captured.err.splitlines() if ln.startswith("sourcelab: failed:")] == [
        ln for ln in captured.err.splitlines() if "sub-04_task-rest" in ln and "failed:" in ln
    ]
    # 0: only good recordings
    assert cli(["batch", str(cohort / "*_eeg.fif"), "--out", str(tmp_path / "fif"), *base]) == 0
    assert (tmp_path / "fif" / "sub-03_task-rest" / "roi_table.tsv").is_file()
    capsys.readouterr()
    # 2: wrong input, one line, nothing written
    assert cli(["batch", str(tmp_path / "nope.edf"), "--out", str(tmp_path / "x"), *base]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "not found" in err
    assert not (tmp_path / "x").exists()


def test_cli_without_dask_says_so_in_one_line(cli, cohort, tmp_path, capsys, monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed → ImportError
    code = cli(
        [
            "batch",
            str(cohort),
            "--out",
            str(tmp_path / "o"),
            "--engine",
            "dask",
            "--workers",
            "2",
            "--no-progress",
        ]
    )
    err = capsys.readouterr().err.strip()
    assert code == 2 and err.count("\n") == 0 and "dask[distributed]" in err


def test_parquet_group_table_equals_tsv(serial_run):
    # With pyarrow installed the group tables are also written as Parquet (same rows/values).
    pytest.importorskip("pyarrow", reason="Parquet output needs the optional pyarrow")
    _, summary = serial_run
    tsv = pd.read_csv(summary.tables["roi"], sep="\t")
    pq = pd.read_parquet(summary.tables["roi_parquet"])
    assert list(pq.columns) == list(tsv.columns)
    assert list(pq.recording) == list(tsv.recording)
    np.testing.assert_allclose(pq.value.to_numpy(), tsv.value.to_numpy(), rtol=5e-6)
