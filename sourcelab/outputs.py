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
from .constants import FDR_ALPHA, Z_THRESHOLD
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


#: Descriptions of the columns that z-scoring and intervals add to the coupling tables.
_ADDED_COLUMN_NOTES = {
    "p": "two-sided p-value of z",
    "fdr_q": "Benjamini-Hochberg adjusted p-value over every z of this table",
    "fdr": f"fdr_q at or below the false-discovery level ({FDR_ALPHA:g})",
    "norm_n": "reference participants behind the norm",
    "no_norm": "the norms hold no row for this quantity (z left empty)",
    "extrapolated": "the age lies outside the norm's age range (nearest covered age used)",
    "condition_mismatch": "the norms' recording condition differs from this recording's",
    "z_lo": "z of value_lo (lower end of the z interval)",
    "z_hi": "z of value_hi (upper end of the z interval)",
    "robust": f"z and both ends of its interval fall on the same side of |z| = {Z_THRESHOLD:g}",
}
_COLUMN_UNITS = {"distance_mm": "mm", "z": "standard deviations of the norm",
                 "z_lo": "standard deviations of the norm",
                 "z_hi": "standard deviations of the norm"}


def table_sidecar(table, notes: dict, *, band_edges: dict | None = None) -> dict:
    """BIDS-style column descriptions of a tidy table (``Description``, ``Units``, ``Levels``).

    Parameters
    ----------
    table : DataFrame
    notes : dict of str -> str
        Column descriptions (the table's own notes).
    band_edges : dict of str -> (float, float), optional
        Band name -> edges in Hz, for the ``band`` column's levels.

    Returns
    -------
    dict
        One entry per column of ``table``, in order.  ``value`` holds rows of several units: its
        ``Units`` points to the ``unit`` column.
    """
    from .coupling import MEASURE_DESCRIPTIONS, MEASURE_UNITS

    out = {}
    for col in table.columns:
        d = {"Description": notes.get(col) or _ADDED_COLUMN_NOTES.get(col, col)}
        if col in _COLUMN_UNITS:
            d["Units"] = _COLUMN_UNITS[col]
        elif col in ("value", "value_lo", "value_hi", "leakage_expected", "leakage_q95"):
            d["Units"] = "given per row in the column 'unit'"
        if col == "measure":
            d["Levels"] = {m: f"{MEASURE_DESCRIPTIONS[m]} ({MEASURE_UNITS[m]})"
                           for m in dict.fromkeys(table["measure"]) if m in MEASURE_DESCRIPTIONS}
        elif col == "band" and band_edges:
            d["Levels"] = {b: f"{lo:g}-{hi:g} Hz (low edge included, high edge excluded)"
                           for b, (lo, hi) in band_edges.items()}
        out[col] = d
    return out


def _write_coupling_tables(result, folder: Path) -> None:
    """``pair_table.tsv`` and ``coupling_table.tsv`` with their JSON column sidecars."""
    from .coupling import EDGE_COLUMN_NOTES, PAIR_COLUMN_NOTES

    edges = dict(zip(result.bands.names, result.bands.edges))
    for name, table, notes in (("pair_table", result.pair_table, PAIR_COLUMN_NOTES),
                               ("coupling_table", result.coupling_table, EDGE_COLUMN_NOTES)):
        if table is None:
            continue
        table.to_csv(folder / f"{name}.tsv", sep="\t", index=False, na_rep="",
                     float_format="%.6g")
        with open(folder / f"{name}.json", "w", encoding="utf-8") as f:
            json.dump(table_sidecar(table, notes, band_edges=edges), f, indent=2,
                      ensure_ascii=False)


def write_tables(result, folder: Path, *, command=None) -> None:
    """``roi_table.tsv``, ``sensor_table.tsv``, ``provenance.json``, ``epochs.npz`` (when the
    result keeps its per-epoch cross-spectra) and, when coupling was computed, ``pair_table.tsv``
    / ``coupling_table.tsv`` with ``.json`` column sidecars, into ``folder``."""
    result.roi_table.to_csv(folder / "roi_table.tsv", sep="\t", index=False, na_rep="",
                            float_format="%.6g")
    result.sensor_table.to_csv(folder / "sensor_table.tsv", sep="\t", index=False, na_rep="",
                               float_format="%.6g")
    _write_coupling_tables(result, folder)
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
    (per-epoch band cross-spectra, see :mod:`sourcelab.epochfile`), ``leakage_brodmann.tsv``,
    ``pair_table.tsv`` + ``pair_table.json`` and ``coupling_table.tsv`` + ``coupling_table.json``
    (unless coupling is off) and, with norms, ``candidates.tsv`` and ``leakage_hints.tsv``.
    Optional: ``figures/*.png``, ``report.html`` + ``report.pdf``, ``maps/`` (MNE SourceEstimate,
    GIfTI per hemisphere, NIfTI in MNI space; power and, with per-source norms, z).

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
        from .figures.figure_set import figure_jobs

        # each figure closed as soon as it is rendered; drawn in parallel when cores allow
        pngs = result.figures(as_png=True, n_jobs=figure_jobs())
        for name, png in pngs.items():
            (fig_dir / (name.replace("/", "_") + ".png")).write_bytes(png)
    if report:
        from .report import write_pdf, write_report

        write_report(result, folder / "report.html", figures=pngs)
        write_pdf(result, folder / "report.pdf", figures=pngs)
    if exports:
        from .exports import export_gifti, export_nifti, export_stc, map_measures

        maps = folder / "maps"
        measures = map_measures(result)  # power, and per-source z with per-source norms
        export_stc(result, maps, measures=measures)
        export_gifti(result, maps, measures=measures)
        export_nifti(result, maps, measures=measures)
    return pngs
