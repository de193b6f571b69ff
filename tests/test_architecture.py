"""The import graph follows the data path one way; the front door is small and fast to import.

Layers (lowest first) are the project's own design (DEVELOPERS.md, "Architecture"): a module may
import from its own layer or below, never from above.  Imports are read with ``ast`` from every
module (including imports inside functions), so a lazily imported upward dependency fails too.
"""

import ast
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PKG = ROOT / "sourcelab"

#: top-level module or sub-package of sourcelab -> layer (DEVELOPERS.md)
LAYERS = {
    "__init__": 0,
    "__main__": 20,
    "_docs": 0,
    "_threads": 0,
    "_lazy": 0,
    "constants": 0,
    "errors": 0,
    "checks": 0,
    "data": 0,
    "progress": 0,
    "cautions": 0,
    "tsv": 0,
    "config": 1,
    "provenance": 1,
    "epochfile": 1,
    "intake": 2,
    "spectra": 3,
    "headmodel": 4,
    "inverse": 5,
    "rois": 6,
    "coupling": 7,
    "norms": 8,
    "trust": 9,
    "targets": 10,
    "figures": 11,
    "report": 12,
    "exports": 13,
    "outputs": 14,
    "result": 15,
    "analysis": 15,
    "simulate": 16,
    "batch": 17,
    "cohort": 18,
    "compare": 18,
    "demo": 19,
    "cli": 20,
}


def _modules():
    for path in sorted(PKG.rglob("*.py")):
        rel = path.relative_to(PKG).with_suffix("")
        yield path, ("sourcelab",) + rel.parts


def _is_type_checking(node) -> bool:
    test = node.test
    return (isinstance(test, ast.Name) and test.id == "TYPE_CHECKING") or (
        isinstance(test, ast.Attribute) and test.attr == "TYPE_CHECKING"
    )


def _imports(path, parts):
    """Absolute sourcelab module names imported anywhere in one file."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    is_pkg = parts[-1] == "__init__"
    package = parts[:-1]  # the package holding this module (for an __init__: the package itself)
    skip = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.If) and _is_type_checking(node):
            skip |= {id(n) for n in ast.walk(node)}
    out = []
    for node in ast.walk(tree):
        if id(node) in skip:
            continue
        if isinstance(node, ast.Import):
            out += [a.name for a in node.names if a.name.split(".")[0] == "sourcelab"]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[: len(package) - node.level + 1]
                mod = ".".join(base + ((node.module,) if node.module else ()))
            else:
                mod = node.module or ""
            if mod.split(".")[0] != "sourcelab":
                continue
            out.append(mod)
            # "from . import x" / "from ..pkg import sub" may name sub-modules
            out += [f"{mod}.{a.name}" for a in node.names]
    del is_pkg
    return out


def _layer(name: str):
    parts = name.split(".")
    if len(parts) == 1:
        return LAYERS["__init__"]
    return LAYERS.get(parts[1])


def test_every_module_has_a_layer():
    missing = sorted(
        {parts[1] for _, parts in _modules() if len(parts) > 1 and parts[1] not in LAYERS}
    )
    assert not missing, f"add {missing} to LAYERS (and to DEVELOPERS.md)"


def test_no_import_runs_back_up_the_data_path():
    bad = []
    for path, parts in _modules():
        here = _layer(".".join(parts))
        for target in _imports(path, parts):
            there = _layer(target)
            if there is None:  # "from sourcelab import x" of a name, not a module
                continue
            if there > here:
                bad.append(f"{'.'.join(parts)} (layer {here}) imports {target} (layer {there})")
    assert not bad, "\n".join(sorted(set(bad)))


def _run(code: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=300, cwd=ROOT
    )


def test_front_door_is_small_and_lazy():
    import sourcelab

    assert set(sourcelab.__all__) == {
        "PIPELINE_VERSION",
        "__version__",
        "analyze",
        "AnalysisConfig",
        "AnalysisResult",
        "read_norms",
        "build_norms",
        "load_atlas",
    }
    assert callable(sourcelab.analyze) and callable(sourcelab.build_norms)
    # importing the package alone loads no heavy library (start-up time of the CLI)
    proc = _run(
        "import sys, sourcelab; heavy = [m for m in ('mne', 'scipy', 'pandas', "
        "'matplotlib', 'nilearn', 'sklearn') if m in sys.modules]; print(heavy)"
    )
    assert proc.returncode == 0 and proc.stdout.strip() == "[]", proc.stdout + proc.stderr
    with pytest.raises(AttributeError):
        sourcelab.no_such_name  # noqa: B018


def test_runs_without_posix_only_modules():
    # The build helpers use the POSIX-only `resource` module; the analysis path must not need it
    # (Windows has no `resource`): block it and load the head model and an atlas.
    proc = _run(
        "import sys; sys.modules['resource'] = None\n"
        "import sourcelab\n"
        "from sourcelab.headmodel import load_head_model\n"
        "m = load_head_model(); a = sourcelab.load_atlas('lobes')\n"
        "import sourcelab.analysis, sourcelab.cli.main\n"
        "print(m.n_src, len(a.rois))"
    )
    assert proc.returncode == 0, proc.stderr[-2000:]


def test_every_test_module_has_a_tier():
    # The tests mirror the package in tiers (conftest.MODULE_TIERS; DEVELOPERS.md, "Tests").
    from conftest import MODULE_TIERS, TIERS

    modules = {p.stem for p in (ROOT / "tests").glob("test_*.py")}
    assert not sorted(modules - set(MODULE_TIERS)), "add these to conftest.MODULE_TIERS"
    assert set(MODULE_TIERS.values()) <= set(TIERS)
    assert not sorted(set(MODULE_TIERS) - modules), "stale entries in conftest.MODULE_TIERS"
