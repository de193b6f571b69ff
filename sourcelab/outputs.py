"""Write an analysis to a folder: tidy tables, provenance, figures, report — atomically."""

from __future__ import annotations

import json
import logging
import platform
import sys
from pathlib import Path

import numpy as np

from . import __version__
from .cautions import CAUTIONS
from .provenance import atomic_output_dir

log = logging.getLogger("sourcelab")


def software_versions() -> dict:
    import importlib.metadata as md

    out = {"sourcelab": __version__, "python": platform.python_version()}
    for name in ("mne", "numpy", "scipy", "nilearn", "nibabel", "matplotlib", "pandas"):
        try:
            out[name] = md.version(name)
        except md.PackageNotFoundError:
            out[name] = None
    return out


def provenance(result, *, command: list[str] | None = None) -> dict:
    """The provenance record written as ``provenance.json``."""
    rec = result.recording.to_dict()
    return {
        "sourcelab_provenance": 1,
        "command": command if command is not None else sys.argv,
        "inputs": {"recording": {"path": rec["path"], "sha256": rec["sha256"]},
                   "norms": None if result.norms is None else result.norms.to_dict()},
        "recording": rec,
        "parameters": result.config.to_dict(),
        "fingerprint": result.fingerprint.to_dict(),
        "quality": result.quality.to_dict(),
        "warnings": list(result.warnings),
        "versions": software_versions(),
        "cautions": list(CAUTIONS),
    }


def _finite(o):
    """Replace NaN/inf by None (JSON has no NaN) throughout nested dicts and lists."""
    if isinstance(o, dict):
        return {k: _finite(v) for k, v in o.items()}
    if isinstance(o, (list, tuple)):
        return [_finite(v) for v in o]
    if isinstance(o, (float, np.floating)) and not np.isfinite(o):
        return None
    return o


def _json_default(o):
    if isinstance(o, (np.floating, np.integer)):
        return o.item()
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, Path):
        return str(o)
    raise TypeError(f"not JSON serialisable: {type(o)}")


def write_tables(result, folder: Path, *, command=None) -> None:
    """``roi_table.tsv``, ``sensor_table.tsv``, ``provenance.json`` and (when the result keeps
    its per-epoch cross-spectra) ``epochs.npz`` into ``folder``."""
    result.roi_table.to_csv(folder / "roi_table.tsv", sep="\t", index=False, na_rep="",
                            float_format="%.6g")
    result.sensor_table.to_csv(folder / "sensor_table.tsv", sep="\t", index=False, na_rep="",
                               float_format="%.6g")
    with open(folder / "provenance.json", "w", encoding="utf-8") as f:
        json.dump(_finite(provenance(result, command=command)), f, indent=2,
                  default=_json_default, allow_nan=False)
    if result.epoch_csd is not None:
        from .epochfile import FILENAME, write_epochs

        cfg = result.config
        write_epochs(folder / FILENAME, result.epoch_csd, ch_names=result.ch_names,
                     band_names=cfg.bands.names, band_edges=cfg.bands.edges,
                     epoch_s=cfg.epoch_s, sfreq=float(result.recording.sfreq),
                     fingerprint=result.fingerprint, onsets_s=result.epoch_onsets_s)


def write_analysis(result, out: str | Path, *, figures: bool = True, report: bool = True,
                   exports: bool = True, command=None) -> Path:
    """Write everything for one analysis into ``out`` (replaced atomically).

    See :func:`write_analysis_into` for the files.
    """
    out = Path(out)
    with atomic_output_dir(out) as tmp:
        write_analysis_into(result, tmp, figures=figures, report=report, exports=exports,
                            command=command)
    return out


def write_analysis_into(result, folder: Path, *, figures: bool = True, report: bool = True,
                        exports: bool = True, command=None) -> dict:
    """Write the analysis into an existing (temporary) folder; nothing is computed here.

    Always: ``roi_table.tsv``, ``sensor_table.tsv``, ``provenance.json``, ``epochs.npz``
    (per-epoch band cross-spectra, see :mod:`sourcelab.epochfile`), ``leakage_brodmann.tsv``
    and, with norms, ``candidates.tsv`` and ``leakage_hints.tsv``.  Optional: ``figures/*.png``,
    ``report.html``, ``maps/`` (MNE SourceEstimate, GIfTI per hemisphere, NIfTI in MNI space).

    Returns
    -------
    dict
        The figures written (name -> PNG bytes).
    """
    write_tables(result, folder, command=command)
    if result.leakage is not None:
        result.leakage.to_tsv(folder / "leakage_brodmann.tsv")
    if result.candidates is not None:
        from .targets import write_candidates

        write_candidates(result.candidates, folder / "candidates.tsv")
    if result.leakage_hints is not None:
        result.leakage_hints.to_csv(folder / "leakage_hints.tsv", sep="\t", index=False,
                                    float_format="%.4g")
    pngs: dict = {}
    if figures:
        fig_dir = folder / "figures"
        fig_dir.mkdir()
        pngs = result.figures(as_png=True)  # each figure closed as soon as it is rendered
        for name, png in pngs.items():
            (fig_dir / (name.replace("/", "_") + ".png")).write_bytes(png)
    if report:
        from .report import write_report

        write_report(result, folder / "report.html", figures=pngs)
    if exports:
        from .exports import export_gifti, export_nifti, export_stc

        maps = folder / "maps"
        export_stc(result, maps)
        export_gifti(result, maps)
        export_nifti(result, maps)
    return pngs
