"""The command line: outputs, one-line errors with exit code 2, nothing partial left behind."""

import json

import numpy as np
import pandas as pd
import pytest

from sourcelab.cli.main import main


@pytest.fixture(scope="module")
def sim_edf(tmp_path_factory):
    import mne

    from sourcelab.headmodel import load_head_model
    from sourcelab.simulate import Generator, simulate_raw

    raw = simulate_raw(
        load_head_model(),
        duration_s=90.0,
        sfreq=256.0,
        generators=(Generator((-20, -90, 5), "left", amplitude=0.5),),
        rng=np.random.default_rng(3),
    )
    path = tmp_path_factory.mktemp("cli") / "invented.edf"
    mne.export.export_raw(path, raw, fmt="edf", verbose="error")
    return path


@pytest.fixture(scope="module")
def analysed(sim_edf, tmp_path_factory):
    """One default analysis (tables, maps, provenance) of the simulated file and what it printed,
    shared by the tests that read an analysis folder (it takes ~10 s)."""
    import contextlib
    import io

    out = tmp_path_factory.mktemp("analysed") / "res"
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        code = main(["analyze", str(sim_edf), "--out", str(out), "--no-figures", "--no-report"])
    assert code == 0
    return out, printed.getvalue()


def test_analyze_writes_tables_and_provenance(analysed):
    out, printed = analysed
    t = pd.read_csv(out / "roi_table.tsv", sep="\t")
    for col in ("roi", "hemisphere", "atlas", "band", "measure", "value", "z"):
        assert col in t.columns
    assert set(t.measure) == {"absolute", "relative"}
    assert t.z.isna().all()  # no norms → z empty
    prov = json.loads((out / "provenance.json").read_text())
    assert prov["fingerprint"]["method"] == "sLORETA"
    assert len(prov["inputs"]["recording"]["sha256"]) == 64
    assert "not a diagnostic device" in printed  # the cautions line


def _bad(args, tmp_path, capsys, match):
    out = tmp_path / "out"
    code = main([*args, "--out", str(out)])
    err = capsys.readouterr().err.strip()
    assert code == 2
    errors = [line for line in err.splitlines() if line.startswith("sourcelab: error:")]
    assert len(errors) == 1 and "Traceback" not in err, err
    assert match in errors[0]
    assert not out.exists()
    assert not any(p.name.startswith(".out") for p in tmp_path.iterdir())


def test_missing_file(tmp_path, capsys):
    _bad(["analyze", str(tmp_path / "nope.edf")], tmp_path, capsys, "nope.edf")


def test_not_an_eeg_file(tmp_path, capsys):
    p = tmp_path / "notes.edf"
    p.write_text("this is not an EDF file\n")
    _bad(["analyze", str(p)], tmp_path, capsys, "notes.edf")


def test_missing_sites(tmp_path, capsys):
    import mne

    info = mne.create_info(["Fp1", "Fp2", "O1", "O2"], 256.0, "eeg")
    raw = mne.io.RawArray(
        np.random.default_rng(0).standard_normal((4, 256 * 90)) * 1e-5, info, verbose="error"
    )
    p = tmp_path / "four.edf"
    mne.export.export_raw(p, raw, fmt="edf", verbose="error")
    _bad(["analyze", str(p)], tmp_path, capsys, "F7")


def test_too_short(sim_edf, tmp_path, capsys):
    import mne

    raw = mne.io.read_raw_edf(sim_edf, preload=True, verbose="error").crop(
        0, 16
    )  # < min_clean_s (20 s)
    p = tmp_path / "short.edf"
    mne.export.export_raw(p, raw, fmt="edf", verbose="error")
    _bad(["analyze", str(p)], tmp_path, capsys, "short.edf")


def test_bad_norms(sim_edf, tmp_path, capsys):
    n = tmp_path / "norms.tsv"
    n.write_text("garbage\tcolumns\n1\t2\n")
    _bad(["analyze", str(sim_edf), "--norms", str(n), "--age", "30"], tmp_path, capsys, "norms.tsv")


def test_failed_rerun_keeps_previous_output(analysed, tmp_path, capsys):
    import shutil

    out = tmp_path / "keep"
    shutil.copytree(analysed[0], out, symlinks=True)  # a finished output, as a user has it
    before = (out / "roi_table.tsv").read_bytes()
    assert main(["analyze", str(tmp_path / "missing.edf"), "--out", str(out)]) == 2
    assert (out / "roi_table.tsv").read_bytes() == before


def test_analyze_custom_rois_and_bids(sim_edf, tmp_path):
    # User-defined ROIs are reported under their own atlas name; a BIDS-derivatives copy is written
    # with the participant label made safe for file names (BIDS derivatives convention).
    rois = tmp_path / "mine.toml"
    rois.write_text(
        'name = "mine"\n[[roi]]\nname = "left-dlpfc"\nkind = "sphere"\n'
        'center = [-40.0, 30.0, 30.0]\nradius_mm = 12.0\nhemisphere = "left"\n'
    )
    out = tmp_path / "res"
    bids = tmp_path / "bids"
    assert (
        main(
            [
                "analyze",
                str(sim_edf),
                "--out",
                str(out),
                "--no-figures",
                "--no-report",
                "--no-maps",
                "--rois",
                str(rois),
                "--bids-root",
                str(bids),
                "--participant-id",
                "../x 01",
            ]
        )
        == 0
    )
    t = pd.read_csv(out / "roi_table.tsv", sep="\t")
    mine = t[t.atlas == "mine"]
    assert set(mine.roi) == {"left-dlpfc"} and len(mine) == 10  # 5 bands x 2 measures
    assert (bids / "derivatives" / "sourcelab" / "dataset_description.json").is_file()
    subs = [p.name for p in (bids / "derivatives" / "sourcelab").glob("sub-*")]
    assert subs == ["sub-x01"]


def test_norms_build_check_and_use(tmp_path, capsys):
    # Issue workflow end to end on an invented cohort: a folder of recordings + participants.tsv
    # (BIDS convention) → norms + calibration report with one command (two worker processes),
    # `norms check`, then an analysis z-scored against them.
    import mne

    from sourcelab.demo import cohort

    # A standard BIDS participants.tsv (participant_id, age, sex; no condition column), with
    # the README's command plus --condition (EC = eyes closed).
    root = tmp_path / "cohort"
    rows = ["participant_id\tage\tsex"]
    # 22 invented people: like a real lab, a few may lose too much data to rejection (the
    # builder needs 20)
    for k, (pid, age, raw) in enumerate(cohort(22, duration_s=75.0, seed=5)):
        d = root / f"sub-{pid}" / "eeg"
        d.mkdir(parents=True)
        mne.export.export_raw(d / f"sub-{pid}_task-rest_eeg.edf", raw, fmt="edf", verbose="error")
        rows.append(f"sub-{pid}\t{age:.1f}\t{'FM'[k % 2]}")
    (root / "participants.tsv").write_text("\n".join(rows) + "\n")
    norms = tmp_path / "norms.tsv"
    assert (
        main(
            [
                "norms",
                "build",
                str(root),
                "--participants",
                str(root / "participants.tsv"),
                "--out",
                str(norms),
                "--workers",
                "2",
                "--condition",
                "EC",
            ]
        )
        == 0
    )
    assert norms.is_file() and (tmp_path / "norms_calibration.tsv").is_file()
    from sourcelab.norms import read_norms

    built = read_norms(norms)
    assert built.condition == "eyes closed" and set(built.cohort["sex"]) == {"F", "M"}
    assert 20 <= sum(built.cohort["sex"].values()) <= 22  # counts of the people used
    assert main(["norms", "check", str(norms)]) == 0
    out = capsys.readouterr().out
    assert "n_listed=22" in out
    assert "pair: 171 pairs" in out and "edge: lobes: 66 edges" in out  # coupling norms too
    edf = next(root.glob("sub-*/eeg/*.edf"))
    res = tmp_path / "res"
    assert (
        main(
            [
                "analyze",
                str(edf),
                "--out",
                str(res),
                "--norms",
                str(norms),
                "--age",
                "40",
                "--condition",
                "eyes closed",
                "--no-figures",
                "--no-report",
                "--no-maps",
            ]
        )
        == 0
    )
    t = pd.read_csv(res / "roi_table.tsv", sep="\t")
    # with only 20 controls a few rows lose controls to the outlier rule and fall below the
    # minimum n: they carry no z and are flagged, never silently zero
    assert t.z.notna().mean() > 0.95
    assert t[t.z.isna()].no_norm.all()
    # coupling rows are z-scored too; their wider-tailed cohort spread loses more rows to the
    # outlier rule at 20 controls (measured: 6 % of pair rows, 4 % of edge rows)
    for name in ("pair_table", "coupling_table"):
        c = pd.read_csv(res / f"{name}.tsv", sep="\t")
        assert c.z.notna().mean() > 0.9 and c[c.z.isna()].no_norm.all()


def test_norms_build_plain_bids_file_needs_condition(tmp_path, capsys):
    # A plain BIDS participants.tsv without --condition: one line, exit 2, naming the CLI flag
    # (never a Python keyword such as "condition=").
    root = tmp_path / "cohort"
    root.mkdir()
    tsv = root / "participants.tsv"
    tsv.write_text("participant_id\tage\tsex\nsub-01\t30\tF\n")
    assert (
        main(
            [
                "norms",
                "build",
                str(root),
                "--participants",
                str(tsv),
                "--out",
                str(tmp_path / "n.tsv"),
            ]
        )
        == 2
    )
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "--condition" in err and "condition=" not in err
    assert not (tmp_path / "n.tsv").exists()


def test_cli_errors_name_flags_not_python_keywords(sim_edf, tmp_path, capsys):
    # Norms of another condition: refused, and the message names --allow-condition-mismatch;
    # an age outside the norms' range names --allow-extrapolation (not "...=True").
    from sourcelab.demo import demo_norms_path

    base = [
        "analyze",
        str(sim_edf),
        "--norms",
        str(demo_norms_path()),
        "--no-figures",
        "--no-report",
        "--no-maps",
    ]
    assert main(base + ["--out", str(tmp_path / "a"), "--age", "30", "--condition", "EO"]) == 2
    err = capsys.readouterr().err
    assert "--allow-condition-mismatch" in err and "=True" not in err
    assert main(base + ["--out", str(tmp_path / "b"), "--age", "90", "--condition", "EC"]) == 2
    err = capsys.readouterr().err
    assert "--allow-extrapolation" in err and "=True" not in err


def _damaged(sim_edf, tmp_path, how):
    import mne

    p = tmp_path / f"{how}.edf"
    if how == "truncated":
        p.write_bytes(sim_edf.read_bytes()[: sim_edf.stat().st_size // 2])
    elif how == "corrupt-header":
        data = bytearray(sim_edf.read_bytes())
        data[252:256] = b"xx!!"  # number of signals (EDF header field, Kemp et al. 1992)
        p.write_bytes(bytes(data))
    elif how == "low-rate":
        raw = mne.io.read_raw_edf(sim_edf, preload=True, verbose="error").resample(80.0)
        mne.export.export_raw(p, raw, fmt="edf", verbose="error")
    return p


@pytest.mark.parametrize(
    "how, match",
    [("truncated", "truncated"), ("corrupt-header", "corrupt"), ("low-rate", "100 Hz")],
)
def test_damaged_files(sim_edf, tmp_path, capsys, how, match):
    p = _damaged(sim_edf, tmp_path, how)
    _bad(["analyze", str(p)], tmp_path, capsys, match)


def test_selection_matching_nothing(sim_edf, tmp_path, capsys):
    _bad(["analyze", str(sim_edf), "--select", "eyes open"], tmp_path, capsys, "invented.edf")


def test_select_time_range(sim_edf, tmp_path):
    out = tmp_path / "sel"
    assert (
        main(
            [
                "analyze",
                str(sim_edf),
                "--out",
                str(out),
                "--select",
                "0-70",
                "--no-figures",
                "--no-report",
                "--no-maps",
            ]
        )
        == 0
    )
    prov = json.loads((out / "provenance.json").read_text())
    assert prov["quality"]["kept_s"] <= 70


def test_atlas_show_names_and_natural_order(capsys):
    assert main(["atlas", "show", "brodmann"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert "name" in lines[0].split()
    # Brodmann (1909): area 17 = striate, primary visual cortex
    ba17 = [ln for ln in lines if ln.split()[0] == "BA17"]
    assert ba17 and "primary visual" in ba17[0]
    left = [ln.split()[0] for ln in lines[1:] if " left " in ln]
    nums = [int(x[2:]) for x in left]
    assert nums == sorted(nums) and nums[:2] == [1, 2]  # BA1, BA2, ..., not BA1, BA10


def test_atlas_plot_has_a_legend(tmp_path, capsys):
    import matplotlib.pyplot as plt

    from sourcelab.figures import plot_atlas

    fig = plot_atlas("lobes")
    legends = fig.legends
    assert len(legends) == 1
    names = {t.get_text() for t in legends[0].get_texts()}
    assert {"frontal", "occipital"} <= names
    plt.close(fig)
    out = tmp_path / "a.png"
    assert main(["atlas", "plot", "yeo7", "--out", str(out)]) == 0
    assert out.read_bytes().startswith(b"\x89PNG")


def test_python_dash_m_runs_the_same_command_line(tmp_path):
    # ``python -m sourcelab`` is the documented fallback when the console script is not on PATH
    # (Python docs, "__main__ — Top-level code environment"): same version, same refusal code.
    import os
    import subprocess
    import sys

    from sourcelab import __version__

    env = dict(os.environ, MPLBACKEND="Agg")
    r = subprocess.run(
        [sys.executable, "-m", "sourcelab", "--version"],
        capture_output=True,
        text=True,
        env=env,
        cwd=tmp_path,
        timeout=120,
    )
    assert r.returncode == 0 and r.stdout.strip() == f"sourcelab {__version__}", r
    r = subprocess.run(
        [sys.executable, "-m", "sourcelab", "analyze", str(tmp_path / "absent.edf"), "--out", "o"],
        capture_output=True,
        text=True,
        env=env,
        cwd=tmp_path,
        timeout=120,
    )
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1, r.stderr
    assert "absent.edf" in r.stderr and not (tmp_path / "o").exists()
