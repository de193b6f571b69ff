"""Packaging: a built wheel holds every sub-package and every shipped data file."""

import json
import subprocess
import sys
import tomllib
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def test_every_subpackage_is_listed():
    # pyproject lists packages explicitly; a forgotten sub-package would import in an editable
    # checkout but be missing from a wheel.
    conf = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]
    listed = set(conf["packages"])
    found = {
        ".".join(p.parent.relative_to(ROOT).parts)
        for p in (ROOT / "sourcelab").rglob("__init__.py")
    }
    assert found == listed, (sorted(found - listed), sorted(listed - found))


@pytest.fixture(scope="module")
def wheel(tmp_path_factory):
    # Common practice: build the wheel as pip would for a user (setuptools and wheel come with
    # the test extra, so no build isolation is needed) and read what it holds.
    out = tmp_path_factory.mktemp("wheel")
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "pip",
            "wheel",
            "--no-deps",
            "--no-build-isolation",
            "-q",
            "-w",
            str(out),
            str(ROOT),
        ],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert proc.returncode == 0, proc.stderr[-2000:]
    (whl,) = out.glob("sourcelab-*.whl")
    with zipfile.ZipFile(whl) as zf:
        return set(zf.namelist())


def test_wheel_holds_packages_and_every_shipped_file(wheel):
    manifest = json.loads((ROOT / "sourcelab" / "data" / "MANIFEST.json").read_text())["files"]
    for name in manifest:
        assert f"sourcelab/data/{name}" in wheel, name
    assert "sourcelab/data/MANIFEST.json" in wheel and "sourcelab/data/README.md" in wheel
    conf = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]
    for pkg in conf["packages"]:
        assert pkg.replace(".", "/") + "/__init__.py" in wheel, pkg
    # documentation shipped beside modules (norms format, target schema)
    assert "sourcelab/norms/FORMAT.md" in wheel and "sourcelab/targets/SCHEMA.md" in wheel
    # the atlas build scripts and the tests stay in the source checkout
    assert not [n for n in wheel if n.startswith(("atlases/", "tests/", "benchmarks/"))]
    entry = next(n for n in wheel if n.endswith("entry_points.txt"))
    assert entry
