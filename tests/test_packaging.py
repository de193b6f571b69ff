"""Packaging: every sub-package and shipped data file reaches the installed wheel."""

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_every_subpackage_is_listed():
    # pyproject lists packages explicitly (atlases/ is mapped to sourcelab.atlases); a forgotten
    # sub-package would import in an editable checkout but be missing from a wheel.
    conf = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]
    listed = set(conf["packages"])
    found = {".".join(p.parent.relative_to(ROOT).parts)
             for p in (ROOT / "sourcelab").rglob("__init__.py")}
    assert found <= listed, sorted(found - listed)
    assert conf["package-dir"]["sourcelab.atlases"] == "atlases"


def test_shipped_data_is_package_data():
    conf = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]
    patterns = conf["package-data"]["*"]
    for folder in (ROOT / "sourcelab" / "data", ROOT / "atlases"):
        for f in folder.iterdir():
            if f.is_file() and f.suffix not in (".py", ".pyc"):
                assert any(f.match(p) for p in patterns), f
