"""Generator of sourcelab's bad-input corpus: hostile, careless and broken inputs for the CLI.

Each case is a small folder built by one function: the inputs it needs, usually a copy ``prev/``
of a real earlier sourcelab output (so that "the previous output is intact" can be checked), and
the command line to run from inside that folder.  :func:`build` makes the folder and returns a
:class:`Case`; ``tests/test_bad_inputs.py`` runs them and checks the contract of issue 13:
exit code 2, exactly one stderr line naming the file or option, no traceback, nothing partial
left and every file that was there before unchanged (byte for byte).

The fuzzed EDF headers come from a **seeded mutator** (``random.Random(FUZZ_SEED)``, not
hypothesis): each mutant overwrites one header field of a valid EDF with a hostile value drawn
from a fixed pool, so the corpus is the same on every run and a failure is reproducible by its
id.  A mutant may also be a valid file (e.g. a harmless label change); for those the contract
is "exit 0 with a complete output, or a clean refusal".

All recordings are tiny (12 s, 128 Hz, invented by :mod:`sourcelab.simulate`); analyses that do
run use ``fast.toml`` (no bootstrap, 4 s of clean data suffice) and skip figures, report and
maps.
"""

from __future__ import annotations

import functools
import json
import os
import random
import shutil
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

FUZZ_SEED = 20240613
N_FUZZ = 30
FAST = ("--no-figures", "--no-report", "--no-maps")
FAST_TOML = "n_boot = 0\nmin_clean_s = 4.0\nwarn_clean_s = 4.0\n"


@dataclass
class Case:
    """One corpus case.

    Attributes
    ----------
    id : str
    argv : list of str
        Command line after ``sourcelab``, run with the case folder as current folder.
    names : tuple of str
        The error line must contain at least one of these (the file or option concerned).
    outcome : {"refuse", "either"}
        ``either``: a valid-looking mutant may also be analysed (exit 0, complete output).
    out : str | None
        The output folder of the command (for the "either" outcome).
    """

    id: str
    argv: list[str]
    names: tuple[str, ...]
    outcome: str = "refuse"
    out: str | None = "prev"
    notes: str = ""
    extra: dict = field(default_factory=dict)


# --------------------------------------------------------------------------------------------
# Base inputs (built once per test session)
# --------------------------------------------------------------------------------------------


@dataclass
class Base:
    root: Path
    edf: Path
    prev: Path  # a real analysis output
    replay_prev: Path  # a real replay output
    target: Path  # a valid target definition
    norms: Path  # the shipped (invented) demo norms
    raw: object  # the mne Raw behind edf
    config: Path  # fast.toml


def simulated_raw(duration_s: float = 12.0, sfreq: float = 128.0, seed: int = 3):
    """An invented 19-site recording (template head, one occipital generator)."""
    from sourcelab.headmodel import load_head_model
    from sourcelab.simulate import Generator, simulate_raw

    return simulate_raw(
        load_head_model(),
        duration_s=duration_s,
        sfreq=sfreq,
        generators=(Generator((-20, -90, 5), "left", amplitude=0.5),),
        rng=np.random.default_rng(seed),
    )


def write_edf(raw, path: Path) -> Path:
    import mne

    mne.export.export_raw(path, raw, fmt="edf", verbose="error", overwrite=True)
    return path


def make_target(path: Path) -> Path:
    """A valid ``sourcelab-target/1`` file made with the shipped head model (pure route)."""
    from sourcelab.analysis import fingerprint_for
    from sourcelab.config import AnalysisConfig
    from sourcelab.headmodel import load_head_model
    from sourcelab.inverse import inverse_operator
    from sourcelab.rois import load_atlas
    from sourcelab.targets import make_target as mk
    from sourcelab.targets import write_target

    cfg = AnalysisConfig()
    fp = fingerprint_for(cfg)
    op = inverse_operator(fp.method, fp.orientation, fp.lambda2)
    roi = [r for r in load_atlas("brodmann").rois if r.name == "BA17"][0]
    t = mk(
        kernel=op.kernel,
        n_comp=op.n_comp,
        atlas="brodmann",
        roi=roi.name,
        hemisphere=roi.hemisphere,
        sources=roi.vertices,
        vertices=load_head_model().vertno[roi.vertices],
        band="alpha",
        bands=fp.bands,
        measure="absolute",
        fingerprint=fp,
        sfreq=128.0,
        norm={"mean": 0.5, "sd": 0.2, "transform": "log10", "age": 40.0, "n": 80},
        reject_uv=1e9,
    )
    return write_target(t, path)


def build_base(root: Path, main) -> Base:
    """Make the shared inputs and two real outputs (analysis and replay) with ``main``."""
    from sourcelab.norms.io import NORMS_MAX_BYTES  # noqa: F401  (import check)
    import sourcelab.demo as demo

    root.mkdir(parents=True, exist_ok=True)
    raw = simulated_raw()
    edf = write_edf(raw, root / "good.edf")
    cfg = root / "fast.toml"
    cfg.write_text(FAST_TOML)
    prev = root / "prev"
    code = main(["analyze", str(edf), "--out", str(prev), "--config", str(cfg), *FAST])
    assert code == 0, "the base analysis must succeed"
    target = make_target(root / "target.json")
    replay_prev = root / "replay_prev"
    assert main(["targets", "replay", str(target), str(edf), "--out", str(replay_prev)]) == 0
    norms = root / "norms.tsv"
    shutil.copy(demo.demo_norms_path(), norms)
    shutil.copy(demo.demo_norms_path().with_suffix(".json"), norms.with_suffix(".json"))
    return Base(
        root=root,
        edf=edf,
        prev=prev,
        replay_prev=replay_prev,
        target=target,
        norms=norms,
        raw=raw,
        config=cfg,
    )


# --------------------------------------------------------------------------------------------
# Helpers for building case folders
# --------------------------------------------------------------------------------------------

_SIGNAL_FIELDS = (16, 80, 8, 8, 8, 8, 8, 80, 8, 32)
_SIGNAL_NAMES = (
    "label",
    "transducer",
    "dimension",
    "physical_min",
    "physical_max",
    "digital_min",
    "digital_max",
    "prefilter",
    "samples_per_record",
    "reserved",
)
MAIN_FIELDS = {
    "version": (0, 8),
    "patient": (8, 80),
    "recording": (88, 80),
    "startdate": (168, 8),
    "starttime": (176, 8),
    "header_bytes": (184, 8),
    "reserved": (192, 44),
    "n_records": (236, 8),
    "record_s": (244, 8),
    "n_signals": (252, 4),
}


def signal_field(data: bytes, name: str, signal: int = 0) -> tuple[int, int]:
    """(offset, width) of a per-signal header field."""
    ns = int(data[252:256].decode().strip())
    k = _SIGNAL_NAMES.index(name)
    off = 256 + sum(w * ns for w in _SIGNAL_FIELDS[:k]) + _SIGNAL_FIELDS[k] * signal
    return off, _SIGNAL_FIELDS[k]


def patch(data: bytes, off: int, width: int, value: bytes | str) -> bytes:
    if isinstance(value, str):
        value = value.encode("latin-1")
    value = value[:width].ljust(width, b" ")
    return data[:off] + value + data[off + width :]


def patch_main(data: bytes, name: str, value) -> bytes:
    return patch(data, *MAIN_FIELDS[name], value)


def patch_signal(data: bytes, name: str, value, signal: int = 0) -> bytes:
    return patch(data, *signal_field(data, name, signal), value)


def prev_copy(base: Base, d: Path, name: str = "prev") -> Path:
    shutil.copytree(base.prev, d / name, symlinks=True)
    return d / name


def rec_copy(base: Base, d: Path, name: str = "rec.edf") -> Path:
    shutil.copy(base.edf, d / name)
    return d / name


def analyze(rec: str = "rec.edf", *extra, out: str = "prev") -> list[str]:
    return ["analyze", rec, "--out", out, "--config", "fast.toml", *FAST, *extra]


def write_config(d: Path, text: str, name: str = "bad.toml") -> Path:
    (d / name).write_text(text)
    return d / name


def _fast(d: Path) -> None:
    (d / "fast.toml").write_text(FAST_TOML)


# --------------------------------------------------------------------------------------------
# The cases
# --------------------------------------------------------------------------------------------

BUILDERS: dict = {}


def case(cid: str):
    def deco(fn):
        assert cid not in BUILDERS, cid
        BUILDERS[cid] = fn
        return fn

    return deco


def _edf_case(cid: str, mutate, names=("rec.edf",), notes=""):
    @case(cid)
    def _build(d: Path, base: Base) -> Case:
        _fast(d)
        prev_copy(base, d)
        (d / "rec.edf").write_bytes(mutate(base.edf.read_bytes()))
        return Case(cid, analyze(), names, notes=notes)


def _config_case(cid: str, text: str, names=("bad.toml",), notes=""):
    @case(cid)
    def _build(d: Path, base: Base) -> Case:
        _fast(d)
        prev_copy(base, d)
        rec_copy(base, d)
        write_config(d, text)
        return Case(
            cid,
            ["analyze", "rec.edf", "--out", "prev", "--config", "bad.toml", *FAST],
            names,
            notes=notes,
        )


# --- output safety --------------------------------------------------------------------------


@case("out-user-folder")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    (d / "mine").mkdir()
    (d / "mine" / "thesis.docx").write_bytes(b"years of work")
    return Case("out-user-folder", analyze(out="mine"), ("mine",))


@case("out-folder-holding-input")
def _(d, base):
    _fast(d)
    (d / "data").mkdir()
    rec_copy(base, d, "data/rec.edf")
    return Case("out-folder-holding-input", analyze("data/rec.edf", out="data"), ("data",))


@case("out-ancestor-holding-input")
def _(d, base):
    _fast(d)
    (d / "study" / "sub-01").mkdir(parents=True)
    rec_copy(base, d, "study/sub-01/rec.edf")
    return Case(
        "out-ancestor-holding-input", analyze("study/sub-01/rec.edf", out="study"), ("study",)
    )


@case("out-sourcelab-folder-holding-input")
def _(d, base):
    _fast(d)
    p = prev_copy(base, d)
    rec_copy(base, d, "prev/rec.edf")
    assert p.is_dir()
    return Case("out-sourcelab-folder-holding-input", analyze("prev/rec.edf"), ("prev",))


for _cid, _out in (
    ("out-dot", "."),
    ("out-empty", ""),
    ("out-dotdot", ".."),
    ("out-dot-slash", "./"),
    ("out-root", "/"),
):

    def _mk(cid=_cid, out=_out):
        @case(cid)
        def _(d, base):
            _fast(d)
            rec_copy(base, d)
            prev_copy(base, d)
            return Case(cid, analyze(out=out), ("--out",))

    _mk()


@case("out-symlink-to-folder")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    prev_copy(base, d)
    os.symlink("prev", d / "link")
    return Case("out-symlink-to-folder", analyze(out="link"), ("link",))


@case("out-symlink-dangling")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    os.symlink("nowhere", d / "link")
    return Case("out-symlink-dangling", analyze(out="link"), ("link",))


@case("out-is-a-file")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    (d / "results").write_text("a file of the user's")
    return Case("out-is-a-file", analyze(out="results"), ("results",))


@case("out-parent-is-a-file")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    (d / "notes.txt").write_text("the user's notes")
    return Case("out-parent-is-a-file", analyze(out="notes.txt/res"), ("notes.txt",))


@case("out-not-writable")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    # /sys is mounted read-only (or refuses new entries) even for root, unlike chmod 555.
    return Case("out-not-writable", analyze(out="/sys/sourcelab-out"), ("/sys",))


@case("out-name-300-chars")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    return Case("out-name-300-chars", analyze(out="r" * 300), ("--out",))


@case("out-name-too-long-for-temporary")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    return Case("out-name-too-long-for-temporary", analyze(out="r" * 248), ("--out",))


@case("out-sourcelab-folder-with-user-file")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    prev_copy(base, d)
    (d / "prev" / "my_comments.txt").write_text("notes on this result")
    return Case("out-sourcelab-folder-with-user-file", analyze(), ("my_comments.txt",))


@case("out-sourcelab-folder-with-symlink")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    prev_copy(base, d)
    (d / "precious.txt").write_text("keep me")
    os.symlink("../precious.txt", d / "prev" / "link.txt")
    return Case("out-sourcelab-folder-with-symlink", analyze(), ("link.txt",))


@case("out-sourcelab-folder-with-user-subfolder")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    prev_copy(base, d)
    (d / "prev" / "extra").mkdir()
    (d / "prev" / "extra" / "data.csv").write_text("1,2,3\n")
    return Case("out-sourcelab-folder-with-user-subfolder", analyze(), ("extra/data.csv",))


@case("out-fake-provenance")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    (d / "other").mkdir()
    (d / "other" / "provenance.json").write_text('{"tool": "another program"}')
    (d / "other" / "result.csv").write_text("x\n")
    return Case("out-fake-provenance", analyze(out="other"), ("other",))


@case("out-provenance-not-json")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    (d / "other").mkdir()
    (d / "other" / "provenance.json").write_text("{not json")
    return Case("out-provenance-not-json", analyze(out="other"), ("other",))


@case("out-provenance-is-symlink")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    (d / "other").mkdir()
    shutil.copy(base.prev / "provenance.json", d / "real_provenance.json")
    os.symlink("../real_provenance.json", d / "other" / "provenance.json")
    return Case("out-provenance-is-symlink", analyze(out="other"), ("other",))


@case("out-marker-with-escaping-file-list")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    (d / "other").mkdir()
    doc = json.loads((base.prev / "provenance.json").read_text())
    doc["sourcelab_output"]["files"] = ["../precious.txt", "provenance.json"]
    (d / "other" / "provenance.json").write_text(json.dumps(doc))
    (d / "other" / "precious.txt").write_text("keep")
    (d / "precious.txt").write_text("keep")
    return Case("out-marker-with-escaping-file-list", analyze(out="other"), ("precious.txt",))


@case("out-is-replay-output")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    shutil.copytree(base.replay_prev, d / "rp")
    return Case("out-is-replay-output", analyze(out="rp"), ("rp",))


@case("out-is-current-folder-by-path")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    return Case("out-is-current-folder-by-path", analyze(out=f"../{d.name}"), ("--out",))


@case("bids-root-is-a-file")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    prev_copy(base, d)
    (d / "bids").write_text("not a folder")
    return Case(
        "bids-root-is-a-file",
        analyze("rec.edf", "--bids-root", "bids", "--participant-id", "01"),
        ("bids",),
    )


@case("bids-root-without-participant")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    prev_copy(base, d)
    return Case(
        "bids-root-without-participant",
        analyze("rec.edf", "--bids-root", "bids"),
        ("--participant-id",),
    )


@case("bids-participant-unusable")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    prev_copy(base, d)
    return Case(
        "bids-participant-unusable",
        analyze("rec.edf", "--bids-root", "bids", "--participant-id", "///"),
        ("participant",),
    )


@case("bids-subject-folder-is-users")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    prev_copy(base, d)
    sub = d / "bids" / "derivatives" / "sourcelab" / "sub-01"
    sub.mkdir(parents=True)
    (sub / "handmade.tsv").write_text("x\n")
    return Case(
        "bids-subject-folder-is-users",
        analyze("rec.edf", "--bids-root", "bids", "--participant-id", "01"),
        ("sub-01",),
    )


@case("bids-description-is-users")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    prev_copy(base, d)
    deriv = d / "bids" / "derivatives" / "sourcelab"
    deriv.mkdir(parents=True)
    (deriv / "dataset_description.json").write_text('{"Name": "my own pipeline"}')
    return Case(
        "bids-description-is-users",
        analyze("rec.edf", "--bids-root", "bids", "--participant-id", "01"),
        ("dataset_description.json",),
    )


@case("replay-out-folder-holding-recording")
def _(d, base):
    (d / "data").mkdir()
    rec_copy(base, d, "data/rec.edf")
    shutil.copy(base.target, d / "target.json")
    return Case(
        "replay-out-folder-holding-recording",
        ["targets", "replay", "target.json", "data/rec.edf", "--out", "data"],
        ("data",),
    )


@case("replay-out-user-folder")
def _(d, base):
    rec_copy(base, d)
    shutil.copy(base.target, d / "target.json")
    (d / "mine").mkdir()
    (d / "mine" / "a.txt").write_text("mine")
    return Case(
        "replay-out-user-folder",
        ["targets", "replay", "target.json", "rec.edf", "--out", "mine"],
        ("mine",),
    )


@case("replay-out-is-analysis-output")
def _(d, base):
    rec_copy(base, d)
    prev_copy(base, d)
    shutil.copy(base.target, d / "target.json")
    return Case(
        "replay-out-is-analysis-output",
        ["targets", "replay", "target.json", "rec.edf", "--out", "prev"],
        ("prev",),
    )


@case("demo-out-user-folder")
def _(d, base):
    (d / "mine").mkdir()
    (d / "mine" / "a.txt").write_text("mine")
    return Case("demo-out-user-folder", ["demo", "--out", "mine", *FAST], ("mine",))


@case("demo-out-dot")
def _(d, base):
    return Case("demo-out-dot", ["demo", "--out", ".", *FAST], ("--out",))


@case("demo-rebuild-norms-over-user-file")
def _(d, base):
    (d / "table.tsv").write_text("a\tb\n1\t2\n")
    return Case(
        "demo-rebuild-norms-over-user-file",
        ["demo", "--rebuild-norms", "table.tsv"],
        ("table.tsv",),
    )


@case("batch-out-user-folder")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    (d / "mine").mkdir()
    (d / "mine" / "a.txt").write_text("mine")
    return Case(
        "batch-out-user-folder",
        ["batch", "rec.edf", "--out", "mine", "--config", "fast.toml", *FAST],
        ("mine",),
    )


@case("batch-out-is-a-file")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    (d / "mine.txt").write_text("mine")
    return Case(
        "batch-out-is-a-file",
        ["batch", "rec.edf", "--out", "mine.txt", "--config", "fast.toml", *FAST],
        ("mine.txt",),
    )


@case("batch-out-holding-input")
def _(d, base):
    _fast(d)
    (d / "data").mkdir()
    rec_copy(base, d, "data/rec.edf")
    return Case(
        "batch-out-holding-input",
        ["batch", "data", "--out", "data", "--config", "fast.toml", *FAST],
        ("data",),
    )


@case("atlas-plot-suffix")
def _(d, base):
    return Case(
        "atlas-plot-suffix", ["atlas", "plot", "brodmann", "--out", "x.txt"], ("x.txt",), out=None
    )


@case("atlas-plot-over-user-png")
def _(d, base):
    (d / "holiday.png").write_bytes(b"\x89PNG\r\n\x1a\n" + b"\0" * 64)
    return Case(
        "atlas-plot-over-user-png",
        ["atlas", "plot", "brodmann", "--out", "holiday.png"],
        ("holiday.png",),
        out=None,
    )


@case("atlas-plot-out-is-folder")
def _(d, base):
    (d / "pics.png").mkdir()
    return Case(
        "atlas-plot-out-is-folder",
        ["atlas", "plot", "brodmann", "--out", "pics.png"],
        ("pics.png",),
        out=None,
    )


@case("atlas-plot-parent-is-file")
def _(d, base):
    (d / "f").write_text("x")
    return Case(
        "atlas-plot-parent-is-file",
        ["atlas", "plot", "brodmann", "--out", "f/x.png"],
        ("f",),
        out=None,
    )


@case("leakage-tsv-over-user-file")
def _(d, base):
    (d / "mine.tsv").write_text("a\tb\n")
    return Case(
        "leakage-tsv-over-user-file",
        ["leakage", "BA17", "--hemisphere", "left", "--tsv", "mine.tsv"],
        ("mine.tsv",),
        out=None,
    )


@case("leakage-plot-and-tsv-same-file")
def _(d, base):
    return Case(
        "leakage-plot-and-tsv-same-file",
        ["leakage", "BA17", "--tsv", "x.tsv", "--plot", "x.tsv"],
        ("x.tsv",),
        out=None,
    )


@case("targets-export-over-user-json")
def _(d, base):
    prev_copy(base, d)
    (d / "settings.json").write_text('{"theme": "dark"}')
    return Case(
        "targets-export-over-user-json",
        ["targets", "export", "prev", "--roi", "BA17", "--band", "alpha", "--out", "settings.json"],
        ("settings.json",),
    )


@case("targets-list-out-is-folder")
def _(d, base):
    prev_copy(base, d)
    (d / "table.tsv").mkdir()
    return Case(
        "targets-list-out-is-folder",
        ["targets", "list", "prev", "--out", "table.tsv"],
        ("table.tsv",),
    )


@case("norms-build-out-is-participants")
def _(d, base):
    _fast(d)
    (d / "cohort").mkdir()
    (d / "participants.tsv").write_text("participant_id\tage\nsub-01\t30\n")
    return Case(
        "norms-build-out-is-participants",
        [
            "norms",
            "build",
            "cohort",
            "--participants",
            "participants.tsv",
            "--out",
            "participants.tsv",
            "--config",
            "fast.toml",
            *FAST,
        ],
        ("participants.tsv",),
        out=None,
    )


@case("norms-build-out-over-user-tsv")
def _(d, base):
    _fast(d)
    (d / "cohort").mkdir()
    (d / "participants.tsv").write_text("participant_id\tage\nsub-01\t30\n")
    (d / "norms.tsv").write_text("my\ttable\n")
    return Case(
        "norms-build-out-over-user-tsv",
        [
            "norms",
            "build",
            "cohort",
            "--participants",
            "participants.tsv",
            "--out",
            "norms.tsv",
            "--config",
            "fast.toml",
            *FAST,
        ],
        ("norms.tsv",),
        out=None,
    )


@case("norms-build-participants-is-folder")
def _(d, base):
    _fast(d)
    (d / "cohort").mkdir()
    (d / "participants").mkdir()
    return Case(
        "norms-build-participants-is-folder",
        [
            "norms",
            "build",
            "cohort",
            "--participants",
            "participants",
            "--out",
            "n.tsv",
            "--config",
            "fast.toml",
            *FAST,
        ],
        ("participants",),
        out=None,
    )


# --- configuration --------------------------------------------------------------------------


@case("config-is-folder")
def _(d, base):
    rec_copy(base, d)
    prev_copy(base, d)
    (d / "conf.toml").mkdir()
    return Case(
        "config-is-folder",
        ["analyze", "rec.edf", "--out", "prev", "--config", "conf.toml", *FAST],
        ("conf.toml",),
    )


@case("config-missing")
def _(d, base):
    rec_copy(base, d)
    prev_copy(base, d)
    return Case(
        "config-missing",
        ["analyze", "rec.edf", "--out", "prev", "--config", "nope.toml", *FAST],
        ("nope.toml",),
    )


_config_case("config-not-toml", "this is = = not toml\n")
_config_case("config-bands-string", 'bands = "alpha"\n')
_config_case("config-band-reversed", "[bands]\nalpha = [12, 8]\n")
_config_case("config-band-above-lowpass", "[bands]\ngamma = [30, 80]\n")
_config_case("config-band-one-number", "[bands]\nalpha = [8]\n")
_config_case("config-band-text-edges", '[bands]\nalpha = ["8", "12"]\n')
_config_case("config-band-name-path", '[bands]\n"../../evil" = [8, 12]\n')
_config_case("config-band-too-narrow", "[bands]\nalpha = [10.0, 10.2]\n")
_config_case("config-lfreq-above-hfreq", "l_freq = 40.0\nh_freq = 4.0\n")
_config_case("config-lfreq-negative", "l_freq = -1.0\n")
_config_case("config-nboot-fraction", "n_boot = 150.5\n")
_config_case("config-nboot-bool", "n_boot = true\n")
_config_case("config-nboot-small", "n_boot = 5\n")
_config_case("config-min-clean-negative", "min_clean_s = -10.0\n")
_config_case("config-snr-text", 'snr = "3"\n')
_config_case("config-snr-nan", "snr = nan\n")
_config_case("config-reject-zero", "reject_uv = 0\n")
_config_case("config-ci-above-one", "ci = 1.5\n")
_config_case("config-unknown-key", "smoothing = 3\n")
_config_case("config-method-unknown", 'method = "MNE"\n')
_config_case("config-epoch-tiny", "epoch_s = 1e-9\n")
_config_case("config-notch-55", "notch = 55\n")
_config_case("config-seed-negative", "boot_seed = -1\n")
_config_case("config-nested-deep", "x = " + "[" * 100_000 + "]" * 100_000 + "\n")
_config_case("config-huge", "# " + "x" * (2 << 20) + "\n")


@case("config-not-utf8")
def _(d, base):
    _fast(d)
    prev_copy(base, d)
    rec_copy(base, d)
    (d / "bad.toml").write_bytes(b"snr = 3\n# caf\xe9\n")
    return Case(
        "config-not-utf8",
        ["analyze", "rec.edf", "--out", "prev", "--config", "bad.toml", *FAST],
        ("bad.toml",),
    )


@case("config-hfreq-above-nyquist")
def _(d, base):
    _fast(d)
    prev_copy(base, d)
    rec_copy(base, d)
    write_config(d, "h_freq = 100.0\n[bands]\nalpha = [8, 12]\ngamma = [30, 80]\n")
    return Case(
        "config-hfreq-above-nyquist",
        ["analyze", "rec.edf", "--out", "prev", "--config", "bad.toml", *FAST],
        ("rec.edf",),
        notes="known only once the 128-Hz recording is read",
    )


for _cid, _args, _names in (
    ("cli-snr-negative", ["--snr", "-1"], ("--snr",)),
    ("cli-snr-nan", ["--snr", "nan"], ("--snr",)),
    ("cli-snr-text", ["--snr", "abc"], ("--snr",)),
    ("cli-age-negative", ["--age", "-5"], ("--age",)),
    ("cli-age-inf", ["--age", "inf"], ("--age",)),
    ("cli-select-negative-range", ["--select", "-5-100"], ("--select",)),
    ("cli-select-reversed-range", ["--select", "100-5"], ("--select",)),
    ("cli-method-unknown", ["--method", "MNE"], ("--method",)),
    ("cli-unknown-option", ["--frobnicate"], ("--frobnicate",)),
    ("cli-norms-folder", ["--norms", "."], ("--norms",)),
    ("cli-rois-folder", ["--rois", "."], ("--rois",)),
    ("cli-rois-missing", ["--rois", "nope.toml"], ("nope.toml",)),
):

    def _mk(cid=_cid, args=_args, names=_names):
        @case(cid)
        def _(d, base):
            _fast(d)
            prev_copy(base, d)
            rec_copy(base, d)
            return Case(cid, analyze("rec.edf", *args), names)

    _mk()


@case("cli-missing-out")
def _(d, base):
    rec_copy(base, d)
    return Case("cli-missing-out", ["analyze", "rec.edf"], ("--out",), out=None)


@case("cli-unknown-command")
def _(d, base):
    return Case("cli-unknown-command", ["analyse-everything"], ("analyse-everything",), out=None)


@case("cli-leakage-top-zero")
def _(d, base):
    return Case("cli-leakage-top-zero", ["leakage", "BA17", "--top", "0"], ("--top",), out=None)


@case("cli-batch-workers-zero")
def _(d, base):
    _fast(d)
    rec_copy(base, d)
    return Case(
        "cli-batch-workers-zero",
        ["batch", "rec.edf", "--out", "b", "--workers", "0", "--config", "fast.toml", *FAST],
        ("--workers",),
    )


@case("cli-targets-max-zero")
def _(d, base):
    prev_copy(base, d)
    return Case("cli-targets-max-zero", ["targets", "list", "prev", "--max", "0"], ("--max",))


@case("cli-export-filter-order")
def _(d, base):
    prev_copy(base, d)
    return Case(
        "cli-export-filter-order",
        [
            "targets",
            "export",
            "prev",
            "--roi",
            "BA17",
            "--band",
            "alpha",
            "--filter-order",
            "99",
            "--out",
            "t.json",
        ],
        ("--filter-order",),
    )


# --- EDF/BDF headers ------------------------------------------------------------------------

_edf_case("edf-record-duration-zero", lambda b: patch_main(b, "record_s", "0"))
_edf_case("edf-record-duration-negative", lambda b: patch_main(b, "record_s", "-0.5"))
_edf_case("edf-record-duration-nan", lambda b: patch_main(b, "record_s", "nan"))
_edf_case("edf-record-duration-text", lambda b: patch_main(b, "record_s", "one"))
_edf_case("edf-record-duration-inf", lambda b: patch_main(b, "record_s", "inf"))
_edf_case("edf-samples-per-record-zero", lambda b: patch_signal(b, "samples_per_record", "0"))
_edf_case(
    "edf-samples-per-record-negative",
    lambda b: patch_signal(b, "samples_per_record", "-128", signal=5),
)
_edf_case("edf-records-zero", lambda b: patch_main(b, "n_records", "0"))
_edf_case("edf-records-negative", lambda b: patch_main(b, "n_records", "-7"))
_edf_case("edf-records-too-many", lambda b: patch_main(b, "n_records", "99999999"))
_edf_case("edf-records-too-few", lambda b: patch_main(b, "n_records", "3"))
_edf_case("edf-header-bytes-wrong", lambda b: patch_main(b, "header_bytes", "1024"))
_edf_case("edf-signals-zero", lambda b: patch_main(b, "n_signals", "0"))
_edf_case("edf-signals-text", lambda b: patch_main(b, "n_signals", "xx"))
_edf_case("edf-bad-version", lambda b: patch_main(b, "version", "9"))
_edf_case("edf-truncated-signal-headers", lambda b: b[:1000])
_edf_case("edf-truncated-data", lambda b: b[: len(b) - 5000])
_edf_case("edf-header-only-partial", lambda b: b[:200])
_edf_case("edf-empty", lambda b: b"")
_edf_case("edf-digital-range-inverted", lambda b: patch_signal(b, "digital_min", "32767"))
_edf_case("edf-digital-out-of-format", lambda b: patch_signal(b, "digital_max", "99999"))
_edf_case(
    "edf-physical-equal",
    lambda b: patch_signal(patch_signal(b, "physical_min", "100"), "physical_max", "100"),
)
_edf_case("edf-physical-nan", lambda b: patch_signal(b, "physical_max", "nan"))
_edf_case("edf-random-bytes", lambda b: random.Random(1).randbytes(len(b)))
_edf_case("edf-text-file", lambda b: b"Patient notes, not an EEG.\n" * 50)
_edf_case(
    "edf-too-short-two-records",
    lambda b: patch_main(b[: _header_bytes(b) + 1 * _record_bytes(b)], "n_records", "1"),
    notes="1 s of data",
)
_edf_case(
    "edf-records-minus-one-no-data",
    lambda b: patch_main(b[: _header_bytes(b) + 10], "n_records", "-1"),
)


def _header_bytes(b: bytes) -> int:
    return int(b[184:192].decode().strip())


def _record_bytes(b: bytes) -> int:
    ns = int(b[252:256].decode().strip())
    off, w = signal_field(b, "samples_per_record", 0)
    return 2 * sum(int(b[off + w * i : off + w * (i + 1)].decode().strip()) for i in range(ns))


@case("edf-ten-samples")
def _(d, base):
    _fast(d)
    prev_copy(base, d)
    raw = base.raw.copy().crop(0, 9 / base.raw.info["sfreq"])
    import mne

    mne.export.export_raw(d / "rec.edf", raw, fmt="edf", verbose="error")
    return Case("edf-ten-samples", analyze(), ("rec.edf",), notes="must say too short")


@case("bdf-record-duration-zero")
def _(d, base):
    _fast(d)
    prev_copy(base, d)
    b = bytearray(b"\xffBIOSEMI") + base.edf.read_bytes()[8:]
    (d / "rec.bdf").write_bytes(patch_main(bytes(b), "record_s", "0"))
    return Case("bdf-record-duration-zero", analyze("rec.bdf"), ("rec.bdf",))


# --- other formats --------------------------------------------------------------------------


def _brainvision(d: Path, base: Base, raw=None, name: str = "rec.vhdr") -> Path:
    import mne

    mne.export.export_raw(
        d / name, raw if raw is not None else base.raw, fmt="brainvision", verbose="error"
    )
    return d / name


def _vhdr_case(cid: str, old: str, new: str, names=("rec.vhdr",)):
    @case(cid)
    def _(d, base):
        _fast(d)
        prev_copy(base, d)
        v = _brainvision(d, base)
        text = v.read_text(encoding="latin-1")
        assert old in text, (cid, old)
        v.write_text(text.replace(old, new), encoding="latin-1")
        if cid == "vhdr-datafile-outside-folder":
            (d / "elsewhere").mkdir()
            os.replace(d / "rec.eeg", d / "elsewhere" / "rec.eeg")
        return Case(cid, analyze("rec.vhdr"), names)


_vhdr_case("vhdr-datafile-outside-folder", "DataFile=rec.eeg", "DataFile=elsewhere/rec.eeg")
_vhdr_case("vhdr-datafile-parent", "DataFile=rec.eeg", "DataFile=../rec.eeg")
_vhdr_case("vhdr-datafile-absolute", "DataFile=rec.eeg", "DataFile=/etc/hostname")
_vhdr_case("vhdr-markerfile-absolute", "MarkerFile=rec.vmrk", "MarkerFile=/etc/passwd")
_vhdr_case("vhdr-datafile-missing", "DataFile=rec.eeg", "DataFile=gone.eeg")
_vhdr_case("vhdr-no-datafile", "DataFile=rec.eeg", "")
_vhdr_case("vhdr-bad-sampling-interval", "SamplingInterval=", "SamplingInterval=0 ; was ")


@case("vhdr-ten-samples")
def _(d, base):
    _fast(d)
    prev_copy(base, d)
    _brainvision(d, base, raw=base.raw.copy().crop(0, 9 / base.raw.info["sfreq"]))
    return Case("vhdr-ten-samples", analyze("rec.vhdr"), ("rec.vhdr",))


@case("fif-ten-samples")
def _(d, base):
    _fast(d)
    prev_copy(base, d)
    base.raw.copy().crop(0, 9 / base.raw.info["sfreq"]).save(d / "rec_raw.fif", verbose="error")
    return Case("fif-ten-samples", analyze("rec_raw.fif"), ("rec_raw.fif",))


@case("set-fdt-outside-folder")
def _(d, base):
    _fast(d)
    prev_copy(base, d)
    write_eeglab_with_fdt(base.raw, d / "rec.set", "../rec.fdt")
    return Case("set-fdt-outside-folder", analyze("rec.set"), ("rec.set",))


def write_eeglab_with_fdt(raw, set_path: Path, data_name: str) -> Path:
    """An EEGLAB set whose data live in a separate ``.fdt`` named ``data_name`` (written beside
    the set under its plain name, as EEGLAB does: float32, samples outer)."""
    import mne
    import scipy.io as sio

    tmp = set_path.with_name("_embedded.set")
    mne.export.export_raw(tmp, raw, fmt="eeglab", verbose="error")
    d = {k: v for k, v in sio.loadmat(tmp).items() if not k.startswith("__")}
    tmp.unlink()
    x = np.asarray(d["data"], dtype=np.float32)
    fdt = set_path.parent / Path(data_name).name
    x.T.tofile(fdt)
    d["data"] = data_name
    sio.savemat(set_path, d, appendmat=False)
    return set_path


@case("unsupported-suffix")
def _(d, base):
    _fast(d)
    prev_copy(base, d)
    (d / "rec.txt").write_text("1 2 3\n")
    return Case("unsupported-suffix", analyze("rec.txt"), ("rec.txt",))


@case("recording-missing")
def _(d, base):
    _fast(d)
    prev_copy(base, d)
    return Case("recording-missing", analyze("nope.edf"), ("nope.edf",))


@case("recording-folder-without-eeg")
def _(d, base):
    _fast(d)
    prev_copy(base, d)
    (d / "sub-01").mkdir()
    (d / "sub-01" / "readme.txt").write_text("x")
    return Case("recording-folder-without-eeg", analyze("sub-01"), ("sub-01",))


@case("recording-is-fifo")
def _(d, base):
    _fast(d)
    prev_copy(base, d)
    os.mkfifo(d / "rec.edf")
    return Case("recording-is-fifo", analyze(), ("rec.edf",))


# --- target files ---------------------------------------------------------------------------


def _target_case(cid: str, mutate, names=("target.json",)):
    @case(cid)
    def _(d, base):
        rec_copy(base, d)
        shutil.copytree(base.replay_prev, d / "rp")
        text = base.target.read_text(encoding="utf-8")
        out = mutate(text)
        (d / "target.json").write_bytes(out if isinstance(out, bytes) else out.encode())
        return Case(
            cid, ["targets", "replay", "target.json", "rec.edf", "--out", "rp"], names, out="rp"
        )


def _tj(fn):
    """Mutate the parsed target and dump it again."""

    def m(text):
        d = json.loads(text)
        fn(d)
        return json.dumps(d)

    return m


_target_case("target-nested-deep", lambda t: "[" * 100_000 + "]" * 100_000)
_target_case(
    "target-nested-deep-inside",
    lambda t: t[:-2] + ', "x": ' + '{"a": ' * 50_000 + "1" + "}" * 50_000 + "}",
)
_target_case("target-norm-sd-text", _tj(lambda d: d["norm"].__setitem__("sd", "abc")))
_target_case("target-norm-sd-zero", _tj(lambda d: d["norm"].__setitem__("sd", 0)))
_target_case("target-norm-mean-missing", _tj(lambda d: d["norm"].pop("mean")))
_target_case(
    "target-norm-transform-unknown", _tj(lambda d: d["norm"].__setitem__("transform", "sqrt"))
)
_target_case("target-step-tiny", _tj(lambda d: d["power"].__setitem__("step_s", 1e-9)))
_target_case("target-step-negative", _tj(lambda d: d["power"].__setitem__("step_s", -0.25)))
_target_case("target-window-huge", _tj(lambda d: d["power"].__setitem__("window_s", 1e9)))
_target_case("target-window-bool", _tj(lambda d: d["power"].__setitem__("window_s", True)))
_target_case(
    "target-nan-literal", lambda t: t.replace('"reject_uv": 1000000000.0', '"reject_uv": NaN')
)
_target_case("target-sos-nan", lambda t: _sos_nan(t))
_target_case(
    "target-number-overflow", lambda t: t.replace('"reject_uv": 1000000000.0', '"reject_uv": 1e999')
)
_target_case("target-not-json", lambda t: t[: len(t) // 2])
_target_case("target-schema-wrong", _tj(lambda d: d.__setitem__("schema", "other/1")))
_target_case("target-channels-reordered", _tj(lambda d: d["channels"].reverse()))
_target_case(
    "target-matrix-wrong-shape",
    _tj(lambda d: d["spatial_filter"].__setitem__("matrix", [[1.0, 2.0]])),
)
_target_case("target-sfreq-zero", _tj(lambda d: d["filter"].__setitem__("sfreq", 0)))
_target_case(
    "target-filter-order-huge", _tj(lambda d: d["filter"].__setitem__("prototype_order", 10**6))
)
_target_case("target-not-utf8", lambda t: b"\xff\xfe" + t.encode("utf-16-le"))
_target_case("target-empty", lambda t: "")
_target_case("target-is-array", lambda t: "[1, 2, 3]")


def _sos_nan(text: str) -> str:
    d = json.loads(text)
    band = d["band"]["name"]
    d["filter"]["sos"][band][0][0] = float("nan")
    return json.dumps(d)  # Python writes a bare NaN: invalid JSON, as an editor might leave


@case("target-huge-file")
def _(d, base):
    rec_copy(base, d)
    shutil.copytree(base.replay_prev, d / "rp")
    with open(d / "target.json", "wb") as f:
        f.truncate(200 * 1024 * 1024)  # sparse: no disk used
    return Case(
        "target-huge-file",
        ["targets", "replay", "target.json", "rec.edf", "--out", "rp"],
        ("target.json",),
        out="rp",
    )


@case("target-is-folder")
def _(d, base):
    rec_copy(base, d)
    (d / "target.json").mkdir()
    return Case(
        "target-is-folder",
        ["targets", "replay", "target.json", "rec.edf", "--out", "rp"],
        ("target.json",),
        out=None,
    )


# --- norms files ----------------------------------------------------------------------------


@functools.lru_cache(maxsize=2)
def _legacy_text(norms_path: Path) -> str:
    """The base norms as format-2 text, made once per corpus (reading and formatting the demo
    norms takes ~1 s; every format-2 case mutates the same text)."""
    from sourcelab.norms.io import _format_legacy, read_norms

    return _format_legacy(read_norms(norms_path))


def _norms_case(cid: str, mutate, names=("norms.tsv",), v3: bool = False):
    # mutations of the format-2 text (commented header; still read) and, with v3, of the
    # format-3 table beside an intact sidecar
    @case(cid)
    def _(d, base):
        out = mutate(_legacy_text(base.norms))
        (d / "norms.tsv").write_bytes(out if isinstance(out, bytes) else out.encode())
        return Case(cid, ["norms", "check", "norms.tsv"], names, out=None)

    if v3:

        @case(cid + "-v3")
        def _(d, base):
            out = mutate(base.norms.read_text(encoding="utf-8"))
            (d / "norms.tsv").write_bytes(out if isinstance(out, bytes) else out.encode())
            shutil.copy(base.norms.with_suffix(".json"), d / "norms.json")
            return Case(cid + "-v3", ["norms", "check", "norms.tsv"], names, out=None)


def _sidecar_case(cid: str, mutate, names=("norms.tsv", "norms.json")):
    # the format-3 table intact, its JSON sidecar broken (mutate: text -> text, None: absent)
    @case(cid)
    def _(d, base):
        shutil.copy(base.norms, d / "norms.tsv")
        out = mutate(base.norms.with_suffix(".json").read_text(encoding="utf-8"))
        if out is not None:
            (d / "norms.json").write_text(out, encoding="utf-8")
        return Case(cid, ["norms", "check", "norms.tsv"], names, out=None)


_sidecar_case("norms-sidecar-missing", lambda t: None)
_sidecar_case("norms-sidecar-not-json", lambda t: t[: len(t) // 2])
_sidecar_case("norms-sidecar-nested-deep", lambda t: "[" * 100_000 + "]" * 100_000)
_sidecar_case("norms-sidecar-no-fingerprint", lambda t: t.replace('"fingerprint"', '"fp"'))
_sidecar_case(
    "norms-sidecar-version-9", lambda t: t.replace('"FormatVersion": 3', '"FormatVersion": 9')
)


def _header(text: str, key: str, new: str) -> str:
    lines = text.split("\n")
    i = next(k for k, line in enumerate(lines) if line.startswith(f"# {key}: "))
    lines[i] = f"# {key}: {new}"
    return "\n".join(lines)


def _cell(text: str, column: str, value: str, row: int = 0) -> str:
    lines = text.split("\n")
    h = next(k for k, line in enumerate(lines) if not line.startswith("#"))
    cols = lines[h].split("\t")
    cells = lines[h + 1 + row].split("\t")
    cells[cols.index(column)] = value
    lines[h + 1 + row] = "\t".join(cells)
    return "\n".join(lines)


_norms_case(
    "norms-fingerprint-nested-deep",
    lambda t: _header(t, "fingerprint", "[" * 100_000 + "]" * 100_000),
)
_norms_case(
    "norms-cohort-nested-deep",
    lambda t: _header(t, "cohort", '{"a": ' * 100_000 + "1" + "}" * 100_000),
)
_norms_case("norms-cohort-nan", lambda t: _header(t, "cohort", '{"n": NaN}'))
_norms_case("norms-sd-text", lambda t: _cell(t, "sd", "abc"), v3=True)
_norms_case("norms-sd-nan", lambda t: _cell(t, "sd", "nan"), v3=True)
_norms_case("norms-sd-negative", lambda t: _cell(t, "sd", "-0.1"), v3=True)
_norms_case("norms-b0-inf", lambda t: _cell(t, "b0", "inf"), v3=True)
_norms_case("norms-degree-fraction", lambda t: _cell(t, "degree", "1.5"), v3=True)
_norms_case("norms-empty", lambda t: "")
_norms_case("norms-binary", lambda t: bytes(range(256)) * 10)
_norms_case("norms-first-line-wrong", lambda t: "# other-format 1\n" + t)
_norms_case("norms-header-only", lambda t: "\n".join(x for x in t.split("\n") if x.startswith("#")))
_norms_case("norms-ragged-row", lambda t: _cell(t, "sd", "0.1\textra"), v3=True)


@case("norms-is-folder")
def _(d, base):
    (d / "norms.tsv").mkdir()
    return Case("norms-is-folder", ["norms", "check", "norms.tsv"], ("norms.tsv",), out=None)


@case("norms-huge-file")
def _(d, base):
    with open(d / "norms.tsv", "wb") as f:
        f.truncate(300 * 1024 * 1024)  # sparse
    return Case("norms-huge-file", ["norms", "check", "norms.tsv"], ("norms.tsv",), out=None)


@case("analyze-norms-sd-text")
def _(d, base):
    _fast(d)
    prev_copy(base, d)
    rec_copy(base, d)
    (d / "norms.tsv").write_text(_cell(base.norms.read_text(), "sd", "abc"))
    return Case(
        "analyze-norms-sd-text",
        analyze("rec.edf", "--norms", "norms.tsv", "--age", "40"),
        ("norms.tsv",),
    )


# --- seeded EDF header fuzzing --------------------------------------------------------------

_HOSTILE = (
    "0",
    "-1",
    "-0",
    "nan",
    "inf",
    "-inf",
    "1e308",
    "1e-9",
    "abc",
    "",
    "        ",
    "99999999",
    "-99999999",
    "0x10",
    "1,5",
    "\x00\x00\x00",
    "\xff\xfe",
    "+5",
    " 1 2",
    "3.5",
    "-32769",
    "32768",
    "1e5",
)
_FUZZ_MAIN = (
    "header_bytes",
    "n_records",
    "record_s",
    "n_signals",
    "version",
    "startdate",
    "starttime",
    "reserved",
)
_FUZZ_SIGNAL = (
    "samples_per_record",
    "physical_min",
    "physical_max",
    "digital_min",
    "digital_max",
    "label",
    "dimension",
)


def fuzz_mutations(n: int = N_FUZZ, seed: int = FUZZ_SEED) -> list[tuple[str, str, int, str]]:
    """``(id, field, signal, value)`` of the seeded mutants (signal -1: main header)."""
    rng = random.Random(seed)
    out = []
    for k in range(n):
        if rng.random() < 0.45:
            fld, sig = rng.choice(_FUZZ_MAIN), -1
        else:
            fld, sig = rng.choice(_FUZZ_SIGNAL), rng.randrange(20)
        value = rng.choice(_HOSTILE)
        out.append((f"fuzz-{k:02d}-{fld}", fld, sig, value))
    return out


for _cid, _fld, _sig, _val in fuzz_mutations():

    def _mk(cid=_cid, fld=_fld, sig=_sig, val=_val):
        def mutate(b):
            return patch_main(b, fld, val) if sig < 0 else patch_signal(b, fld, val, sig)

        @case(cid)
        def _(d, base):
            _fast(d)
            prev_copy(base, d)
            (d / "rec.edf").write_bytes(mutate(base.edf.read_bytes()))
            return Case(
                cid, analyze(), ("rec.edf",), outcome="either", notes=f"{fld}[{sig}] = {val!r}"
            )

    _mk()


def build(cid: str, folder: Path, base: Base) -> Case:
    """Build case ``cid`` in ``folder`` (created)."""
    folder.mkdir(parents=True, exist_ok=True)
    return BUILDERS[cid](folder, base)


def all_ids() -> list[str]:
    return list(BUILDERS)
