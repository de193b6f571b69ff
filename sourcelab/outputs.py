"""Write an analysis to a folder: tidy tables, provenance, figures, report — atomically."""

from __future__ import annotations

import json
import logging
import platform
import sys
from pathlib import Path

import numpy as np

from . import __version__
from ._docs import fill_doc
from .cautions import CAUTIONS
from .constants import FDR_ALPHA, Z_THRESHOLD
from .provenance import atomic_output_dir

log = logging.getLogger("sourcelab")


def software_versions() -> dict:
    """Versions of sourcelab, Python and the libraries that shape the numbers and figures.

    Returns
    -------
    versions : dict of str to str or None
        ``sourcelab``, ``python``, ``mne``, ``numpy``, ``scipy``, ``nilearn``, ``nibabel``,
        ``matplotlib`` and ``pandas``; None for a library that is not installed.
    """
    import importlib.metadata as md

    out = {"sourcelab": __version__, "python": platform.python_version()}
    for name in ("mne", "numpy", "scipy", "nilearn", "nibabel", "matplotlib", "pandas"):
        try:
            out[name] = md.version(name)
        except md.PackageNotFoundError:
            out[name] = None
    return out


def provenance(result, *, command: list[str] | None = None) -> dict:
    """The provenance record written as ``provenance.json``.

    Parameters
    ----------
    result : sourcelab.result.AnalysisResult
        The analysis.
    command : list of str or None
        The command line to record; None: ``sys.argv``.

    Returns
    -------
    record : dict
        ``sourcelab_provenance`` (format version), ``command``, ``inputs`` (recording path and
        SHA-256, norms), ``recording``, ``parameters`` (the effective configuration),
        ``fingerprint``, ``quality``, ``warnings``, ``versions``
        (:func:`software_versions`) and ``cautions``.  May hold NaN; the writer replaces them
        by null.
    """
    rec = result.recording.to_dict()
    return {
        "sourcelab_provenance": 1,
        "command": command if command is not None else sys.argv,
        "inputs": {
            "recording": {"path": rec["path"], "sha256": rec["sha256"]},
            "norms": None if result.norms is None else result.norms.to_dict(),
        },
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


def table_sidecar(table, notes: dict, *, band_edges: dict | None = None) -> dict:
    """BIDS-style column descriptions of a coupling table as written (see
    :func:`sourcelab.exports.column_sidecar`): ``Description``, ``Units``, ``Levels``; the unit
    of ``value`` is given once per measure (``measure`` levels), not on every row.

    Parameters
    ----------
    table : pandas.DataFrame
        The pair or edge coupling table, one row per quantity.
    notes : dict of str to str
        Column name to description; added to (and overriding) the descriptions of the columns
        that z-scoring and intervals add.
    band_edges : dict of str to (float, float) or None
        Band name to its edges, Hz, for the ``band`` levels.

    Returns
    -------
    sidecar : dict
        Column name to its BIDS-style description entry.
    """
    from .coupling import MEASURE_DESCRIPTIONS
    from .exports import column_sidecar

    return column_sidecar(
        table,
        {**_ADDED_COLUMN_NOTES, **notes},
        band_edges=band_edges,
        measure_descriptions=MEASURE_DESCRIPTIONS,
    )


#: Measure -> words, for the ``measure`` levels of the band-power table sidecars.
_POWER_MEASURES = {"absolute": "absolute band power", "relative": "relative band power"}


def _write_coupling_tables(result, folder: Path) -> None:
    """``pair_table.tsv`` and ``coupling_table.tsv`` with their JSON column sidecars."""
    from .coupling import EDGE_COLUMN_NOTES, PAIR_COLUMN_NOTES
    from .exports import write_table

    edges = dict(zip(result.bands.names, result.bands.edges))
    for name, table, notes in (
        ("pair_table", result.pair_table, PAIR_COLUMN_NOTES),
        ("coupling_table", result.coupling_table, EDGE_COLUMN_NOTES),
    ):
        if table is None:
            continue
        write_table(table, folder / f"{name}.tsv", table_sidecar(table, notes, band_edges=edges))


def write_tables(result, folder: Path, *, command=None) -> None:
    """``roi_table.tsv``, ``sensor_table.tsv``, ``provenance.json``, ``epochs.npz`` (when the
    result keeps its per-epoch cross-spectra) and, when coupling was computed, ``pair_table.tsv``
    / ``coupling_table.tsv``, each with a ``.json`` column sidecar, into ``folder``.

    Parameters
    ----------
    result : sourcelab.result.AnalysisResult
        The analysis.
    folder : pathlib.Path
        Existing folder to write into.
    command : list of str or None
        The command line recorded in ``provenance.json``; None: ``sys.argv``.
    """
    from .exports import column_sidecar, write_table

    edges = dict(zip(result.bands.names, result.bands.edges))
    for name, table in (("roi_table", result.roi_table), ("sensor_table", result.sensor_table)):
        write_table(
            table,
            folder / f"{name}.tsv",
            column_sidecar(
                table, _ADDED_COLUMN_NOTES, band_edges=edges, measure_descriptions=_POWER_MEASURES
            ),
        )
    _write_coupling_tables(result, folder)
    with open(folder / "provenance.json", "w", encoding="utf-8") as f:
        json.dump(
            _finite(provenance(result, command=command)),
            f,
            indent=2,
            default=_json_default,
            allow_nan=False,
        )
    if result.epoch_csd is not None:
        from .epochfile import FILENAME, write_epochs

        cfg = result.config
        write_epochs(
            folder / FILENAME,
            result.epoch_csd,
            ch_names=result.ch_names,
            band_names=cfg.bands.names,
            band_edges=cfg.bands.edges,
            epoch_s=cfg.epoch_s,
            sfreq=float(result.recording.sfreq),
            fingerprint=result.fingerprint,
            onsets_s=result.epoch_onsets_s,
        )


@fill_doc
def write_analysis(result, out: str | Path, **options) -> Path:
    """Write everything for one analysis into ``out`` (replaced atomically).

    See :func:`write_analysis_into` for the files.

    Parameters
    ----------
    result : sourcelab.result.AnalysisResult
        The analysis.
    out : str or pathlib.Path
        Output folder; written in a temporary folder beside it and renamed into place.
    **options
        Keywords of :func:`write_analysis_into`:
    %(write_options)s

    Returns
    -------
    out : pathlib.Path
        The output folder.
    """
    out = Path(out)
    with atomic_output_dir(out) as tmp:
        write_analysis_into(result, tmp, **options)
    return out


@fill_doc
def write_analysis_into(
    result,
    folder: Path,
    *,
    figures: bool = True,
    report: bool = True,
    exports: bool = True,
    command=None,
    progress: bool | None = False,
) -> dict:
    """Write the analysis into an existing (temporary) folder; nothing is computed here.

    Always: ``roi_table.tsv``, ``sensor_table.tsv``, ``provenance.json``, ``epochs.npz``
    (per-epoch band cross-spectra, see :mod:`sourcelab.epochfile`), ``leakage_brodmann.tsv``,
    ``pair_table.tsv`` + ``pair_table.json`` and ``coupling_table.tsv`` + ``coupling_table.json``
    (unless coupling is off) and, with norms, ``candidates.tsv`` and ``leakage_hints.tsv``.
    Optional: ``figures/*.png``, ``report.html`` + ``report.pdf``, ``maps/`` (MNE SourceEstimate,
    GIfTI per hemisphere, NIfTI in MNI space; power and, with per-source norms, z).

    ``progress``: stage progress on standard error (None: only when it is a terminal).

    Parameters
    ----------
    result : sourcelab.result.AnalysisResult
        The analysis.
    folder : pathlib.Path
        Existing (temporary) folder to write into.
    %(write_options)s

    Returns
    -------
    dict
        The figures written (name -> PNG bytes).
    """
    from .progress import Stages

    from .figures.warm import active

    stages = ["tables"] + ["figures"] * figures + ["report"] * report + ["maps"] * exports
    if exports and figures and active() is not None:  # maps written while figures are drawn
        stages = ["tables", "maps"] + stages[1:-1]
    with Stages(stages, desc="writing", enabled=progress) as st:
        st.step("tables")
        return _write_into(
            result,
            folder,
            figures=figures,
            report=report,
            exports=exports,
            command=command,
            step=st.step,
        )


def _write_into(result, folder: Path, *, figures, report, exports, command, step) -> dict:
    from .figures.warm import active, figure_jobs

    n_jobs = figure_jobs() if figures else 1
    renderer = active() if n_jobs > 1 else None
    pdf = folder / "report.pdf"
    # inside a warm_renderer block the figures are drawn there while the tables and maps are
    # written here, and the PDF report there as soon as the figures it shows are drawn
    drawing = None
    if renderer is not None:
        side = (_pdf_figure_names, _pdf_of_figures, (pdf,)) if report else None
        drawing = renderer.start_figures(result, n_jobs=n_jobs, side=side)
    write_tables(result, folder, command=command)
    if result.leakage is not None:
        result.leakage.to_tsv(folder / "leakage_brodmann.tsv")
    if result.candidates is not None:
        from .targets import write_candidates

        write_candidates(result.candidates, folder / "candidates.tsv")
    if result.leakage_hints is not None:
        from .tsv import table_text

        text = table_text(result.leakage_hints, float_format="%.4g")
        with open(folder / "leakage_hints.tsv", "w", encoding="utf-8", newline="") as f:
            f.write(text)
    maps_done = False
    if exports and drawing is not None and renderer.volume_maps():
        step("maps")  # while the renderer draws (its volume lookups copied here)
        _write_maps(result, folder)
        maps_done = True
    pngs: dict = {}
    pdf_done = False
    if figures:
        step("figures")
        fig_dir = folder / "figures"
        fig_dir.mkdir()
        pngs = renderer.finish_figures(drawing) if drawing is not None else None
        pdf_done = pngs is not None and renderer.side_ran
        if pngs is None:  # no warmed renderer (or it was lost): drawn from here
            # each figure closed as soon as it is rendered; drawn in parallel when cores allow
            pngs = result.figures(as_png=True, n_jobs=n_jobs)
        for name, png in pngs.items():
            (fig_dir / (name.replace("/", "_") + ".png")).write_bytes(png)
    pdf_job = side = None
    if report:
        step("report")
        from .report import write_pdf, write_report

        if pdf_done:
            pass
        elif drawing is not None and renderer.usable:  # the PDF where the figures were drawn
            pdf_job = renderer.submit(_pdf_in_renderer, pdf)
        elif n_jobs > 1:  # the PDF (the longest) in a forked process, the HTML and maps here
            import multiprocessing as mp
            from concurrent.futures import ProcessPoolExecutor

            side = ProcessPoolExecutor(max_workers=1, mp_context=mp.get_context("fork"))
            pdf_job = side.submit(write_pdf, result, pdf, figures=pngs)
        try:
            write_report(result, folder / "report.html", figures=pngs)
            if pdf_job is None and not pdf_done:
                write_pdf(result, pdf, figures=pngs)
            if exports and not maps_done:
                step("maps")
                _write_maps(result, folder)
            if pdf_job is not None:
                try:
                    pdf_job.result()
                except (EOFError, BrokenPipeError):  # the warmed renderer died: written here
                    write_pdf(result, pdf, figures=pngs)
        finally:
            if side is not None:
                side.shutdown(wait=True, cancel_futures=True)
    elif exports and not maps_done:
        step("maps")
        _write_maps(result, folder)
    return pngs


def _pdf_figure_names(result, names) -> list:
    """In the warmed renderer: the figures the PDF report shows (drawn first)."""
    from .report.pdf import figure_names

    return figure_names(result, names)


def _pdf_of_figures(result, pngs: dict, path) -> None:
    """In the warmed renderer: the PDF report, once the figures it shows are drawn."""
    from .report import write_pdf

    write_pdf(result, path, figures=pngs)


def _pdf_in_renderer(path) -> None:
    """In the warmed figure renderer: the PDF report of the figure set it drew last."""
    from .figures.warm import last_drawn
    from .report import write_pdf

    result, pngs = last_drawn()
    write_pdf(result, path, figures=pngs)


def _write_maps(result, folder: Path) -> None:
    """``maps/``: power (and per-source z with per-source norms) as STC, GIfTI and NIfTI."""
    from .exports import export_gifti, export_nifti, export_stc, map_measures

    maps = folder / "maps"
    measures = map_measures(result)  # power, and per-source z with per-source norms
    export_stc(result, maps, measures=measures)
    export_gifti(result, maps, measures=measures)
    export_nifti(result, maps, measures=measures)
