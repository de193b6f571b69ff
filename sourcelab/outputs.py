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
from .result import AnalysisResult

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


def provenance(result: AnalysisResult, *, command: list[str] | None = None) -> dict:
    """The provenance record written as ``provenance.json``."""
    return {
        "sourcelab_provenance": 1,
        "command": command if command is not None else sys.argv,
        "inputs": {"recording": {"path": result.recording.get("path"),
                                 "sha256": result.recording.get("sha256")},
                   "norms": result.norms},
        "recording": result.recording,
        "parameters": result.config.to_dict(),
        "fingerprint": result.fingerprint.to_dict(),
        "quality": result.quality,
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


def write_tables(result: AnalysisResult, folder: Path, *, command=None) -> None:
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
                     epoch_s=cfg.epoch_s, sfreq=float(result.recording.get("sfreq") or np.nan),
                     fingerprint=result.fingerprint, onsets_s=result.epoch_onsets_s)


def write_analysis(result: AnalysisResult, out: str | Path, *, figures: bool = True,
                   report: bool = True, exports: bool = True, command=None) -> Path:
    """Write everything for one analysis into ``out`` (replaced atomically)."""
    out = Path(out)
    with atomic_output_dir(out) as tmp:
        write_analysis_into(result, tmp, figures=figures, report=report, exports=exports,
                            command=command)
    return out


def write_analysis_into(result: AnalysisResult, folder: Path, *, figures: bool = True,
                        report: bool = True, exports: bool = True, command=None) -> dict:
    """Write the analysis into an existing (temporary) folder.

    Always: ``roi_table.tsv``, ``sensor_table.tsv``, ``provenance.json``, ``epochs.npz``
    (per-epoch band cross-spectra, see :mod:`sourcelab.epochfile`), ``leakage_brodmann.tsv``
    and, with norms, ``candidates.tsv`` and ``leakage_hints.tsv``.  Optional: ``figures/*.png``,
    ``report.html``, ``maps/`` (MNE SourceEstimate, GIfTI per hemisphere, NIfTI in MNI space).
    Returns the figures (name → PNG bytes).
    """
    from .trust import leakage_for, leakage_hints

    write_tables(result, folder, command=command)
    cfg = result.config
    leak = leakage_for("brodmann", method=cfg.method, orientation=cfg.orientation,
                       lambda2=cfg.lambda2)
    leak.to_tsv(folder / "leakage_brodmann.tsv")
    extra = []
    if figures:
        from .figures import figure_png
        from .trust import plot_leakage

        png = figure_png(plot_leakage(leak))  # closes the figure
        (folder / "leakage_brodmann.png").write_bytes(png)
        extra.append(("Leakage between areas", png,
                      "Share of each row area's expected sLORETA power that comes from equal, "
                      "uncorrelated activity in each column area (from the resolution matrix; "
                      "log colour scale). Large off-diagonal shares mean the two areas cannot "
                      "be told apart well with a template head and 19 electrodes."))
    has_z = bool(result.roi_table["z"].notna().any())
    if has_z:
        from .targets import candidates_for_table, write_candidates

        cand = candidates_for_table(result.roi_table)
        write_candidates(cand, folder / "candidates.tsv")
        hints = leakage_hints(result.roi_table[result.roi_table.atlas == "brodmann"], leak)
        hints.to_csv(folder / "leakage_hints.tsv", sep="\t", index=False, float_format="%.4g")
        extra.append(("Candidate regions and networks", cand.head(40),
                      "Statistical deviations only, FDR-significant first, then by |z|. The "
                      "choice of any training target rests with a licensed practitioner who "
                      "weighs symptoms and history. Full list: candidates.tsv."))
        extra.append(("Neighbour blur check", hints.head(60),
                      "For each deviating Brodmann area, the areas that leak most power into "
                      "it and whether they deviate the same way: if they do, the deviation may "
                      "be a neighbour's activity blurred by the inverse."))
    figs: dict = {}
    if figures:
        from .figures import result_figures
        from .rois import load_atlas

        figs = result_figures(result, outline=load_atlas("lobes"))
        fig_dir = folder / "figures"
        fig_dir.mkdir()
        for name, png in figs.items():
            (fig_dir / (name.replace("/", "_") + ".png")).write_bytes(png)
    if report:
        from .report import write_report

        write_report(result, folder / "report.html", figures=figs, extra_sections=extra)
    if exports:
        from .exports import export_gifti, export_nifti, export_stc

        maps = folder / "maps"
        export_stc(result, maps)
        export_gifti(result, maps)
        export_nifti(result, maps)
    return figs
