"""The scripts in examples/ run, on small invented inputs, as a user would run them."""

import runpy
import sys
from pathlib import Path

import pytest

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"


def _run(name, argv, capsys):
    old = sys.argv
    sys.argv = [name, *argv]
    try:
        ns = runpy.run_path(str(EXAMPLES / name), run_name="example")
        code = ns["main"](argv)
    finally:
        sys.argv = old
    return code, capsys.readouterr().out


def test_examples_folder_lists_the_scripts_tested_here():
    assert {p.name for p in EXAMPLES.glob("*.py")} == {
        "analyse_file.py",
        "build_norms_from_folder.py",
        "export_and_replay_target.py",
        "batch_on_dask.py",
    }


def test_analyse_file(tmp_path, capsys):
    code, out = _run("analyse_file.py", ["--out", str(tmp_path)], capsys)
    assert code == 0 and "first candidate" in out and "not a diagnostic device" in out
    assert (tmp_path / "result" / "roi_table.tsv").is_file()


def test_build_norms_from_folder(tmp_path, capsys):
    code, out = _run(
        "build_norms_from_folder.py",
        ["--n", "23", "--seconds", "60", "--out", str(tmp_path)],
        capsys,
    )
    assert code == 0 and "invented adults" in out
    assert (tmp_path / "norms.tsv").is_file() and (tmp_path / "norms_calibration.tsv").is_file()


def test_export_and_replay_target(tmp_path, capsys):
    code, out = _run("export_and_replay_target.py", ["--out", str(tmp_path)], capsys)
    assert code == 0 and "replayed" in out
    assert (tmp_path / "target.json").is_file() and (tmp_path / "replay" / "replay.tsv").is_file()


@pytest.mark.parametrize("engine", ["dask"])
def test_batch_on_dask(tmp_path, capsys, engine):
    pytest.importorskip("distributed")
    code, out = _run(
        "batch_on_dask.py", ["--n", "2", "--engine", engine, "--out", str(tmp_path)], capsys
    )
    assert code == 0 and "2 done, 0 failed" in out
