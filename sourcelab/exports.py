"""Open-format exports of an :class:`~sourcelab.result.AnalysisResult`.

* :func:`export_stc`: MNE SourceEstimate files (``.stc``, one pair of -lh/-rh files per band and
  measure; vertices: the cortical fsaverage5 vertices of each hemisphere, subject ``fsaverage``;
  the single time point is 0 s);
* :func:`export_gifti`: GIfTI functional files per hemisphere and measure on fsaverage5 (10,242
  vertices a hemisphere, NaN on the medial wall, which is not a source), one data array per band;
* :func:`export_nifti`: MNI152 volumes (2 or 3 mm) per band and measure, by nearest-source fill
  in grey matter (see :mod:`sourcelab.figures.geometry`);
* :func:`export_bids_derivatives`: all of the above plus the ROI and sensor tables in a BIDS
  derivatives folder ``<root>/derivatives/sourcelab/sub-<label>/eeg/``.

Every file is written under a temporary name in the destination folder and renamed into place.
"""

from __future__ import annotations

import contextlib
import json
import logging
import os
import re
import shutil
import tempfile
from pathlib import Path

import numpy as np

from ._docs import fill_doc
from .checks import check_option
from .errors import InputError
from .provenance import atomic_output_dir, atomic_write_text, safe_name

logger = logging.getLogger("sourcelab")

N_LEFT = 10242
MEASURES = ("absolute", "relative")
HEMI_BIDS = {"left": "L", "right": "R"}
#: BIDS template label of the volume exports (nilearn's packaged MNI152 2009a symmetric template).
VOLUME_SPACE = "MNI152NLin2009aSym"


#: Descriptions of the band-power table columns (``roi_table``, ``sensor_table``) for their JSON
#: column sidecars (BIDS tabular-file convention: ``{"column": {"Description", "Units",
#: "Levels"}}``).
POWER_COLUMN_NOTES = {
    "atlas": "atlas of the region (brodmann, lobes, networks: Brodmann-area networks, yeo7: Yeo "
    "2011 7 networks, or your own ROI set)",
    "roi": "region of interest",
    "hemisphere": "left, right or both",
    "channel": "10-20 electrode site",
    "band": "frequency band",
    "measure": "absolute or relative band power",
    "value": "band power of the region (mean over its sources) or electrode",
    "n_vertices": "cortical sources in the region",
    "small": "the region has fewer sources than sourcelab's minimum for a stable mean",
    "resolvable": "the template head model can tell this area from its neighbours "
    "(see the leakage table)",
    "z": "z-score against the norms (empty without norms)",
    "z_equivalent": "z of the norm's predictive distribution (empty without norms)",
    "p": "two-sided p-value of z",
    "fdr_q": "Benjamini-Hochberg adjusted p-value over every z of this table",
    "fdr": "fdr_q at or below the false-discovery level",
    "norm_n": "reference participants behind the norm",
    "no_norm": "the norms hold no row for this quantity (z left empty)",
    "extrapolated": "the age lies outside the norm's age range (nearest covered age used)",
    "condition_mismatch": "the norms' recording condition differs from this recording's",
    "value_lo": "lower end of the bootstrap interval of value",
    "value_hi": "upper end of the bootstrap interval of value",
    "z_lo": "z of value_lo (lower end of the z interval)",
    "z_hi": "z of value_hi (upper end of the z interval)",
    "robust": "z and both ends of its interval fall on the same side of the deviation threshold",
}
_Z_UNITS = "standard deviations of the norm"
#: Units of columns other than ``value`` (whose unit follows the measure).
_FIXED_UNITS = {
    "z": _Z_UNITS,
    "z_lo": _Z_UNITS,
    "z_hi": _Z_UNITS,
    "z_equivalent": _Z_UNITS,
    "distance_mm": "mm",
    "n_vertices": "sources",
}
#: Columns whose unit is the unit of ``value`` (the row's measure).
_VALUE_LIKE = ("value", "value_lo", "value_hi", "leakage_expected", "leakage_q95")
VALUE_UNITS_NOTE = "unit of the row's measure (see the Levels of the column 'measure')"


def units_by_measure(table) -> dict | None:
    """Measure -> unit when the table's ``unit`` column follows from ``measure``, else None.

    Parameters
    ----------
    table : DataFrame
        Tidy table, possibly with ``measure`` and ``unit`` columns.

    Returns
    -------
    dict of str -> str or None
        Measure -> unit (e.g. ``"µV²"``); ``None`` when either column is missing or a measure
        has more than one unit.
    """
    if "unit" not in table.columns or "measure" not in table.columns:
        return None
    pairs = table[["measure", "unit"]].drop_duplicates()
    if pairs["measure"].duplicated().any():
        return None
    return {str(m): str(u) for m, u in zip(pairs["measure"], pairs["unit"])}


def file_table(table):
    """The table as written to a TSV.

    Without the ``unit`` column when the unit follows from the measure (it is given once, in the
    column sidecar, instead of on every row).

    Parameters
    ----------
    table : DataFrame
        The in-memory tidy table.

    Returns
    -------
    DataFrame
        ``table`` itself, or a copy without ``unit``.
    """
    return table.drop(columns="unit") if units_by_measure(table) is not None else table


def column_sidecar(
    table,
    notes: dict | None = None,
    *,
    band_edges: dict | None = None,
    measure_descriptions: dict | None = None,
) -> dict:
    """BIDS-style column descriptions of a tidy table as written by :func:`file_table`.

    Parameters
    ----------
    table : DataFrame
        The in-memory table (with its ``unit`` column, if any).
    notes : dict of str -> str, optional
        Column descriptions (the table's own notes; :data:`POWER_COLUMN_NOTES` fill the rest).
    band_edges : dict of str -> (float, float), optional
        Band name -> edges in Hz, for the ``band`` column's levels.
    measure_descriptions : dict of str -> str, optional
        Measure -> words, for the ``measure`` column's levels.

    Returns
    -------
    dict
        One entry per column of the written table, in order: ``Description``, and ``Units`` /
        ``Levels`` where they apply.
    """
    notes = dict(notes or {})
    units = units_by_measure(table)
    written = file_table(table)
    out = {}
    for col in written.columns:
        d = {"Description": notes.get(col) or POWER_COLUMN_NOTES.get(col) or col.replace("_", " ")}
        if col in _FIXED_UNITS:
            d["Units"] = _FIXED_UNITS[col]
        elif col in _VALUE_LIKE:
            d["Units"] = (
                VALUE_UNITS_NOTE if units is not None else "given per row in the column 'unit'"
            )
        if col == "measure":
            levels = {}
            for m in dict.fromkeys(table["measure"]):
                words = (measure_descriptions or {}).get(m, f"{m} band power")
                levels[str(m)] = f"{words} ({units[m]})" if units else words
            d["Levels"] = levels
        elif col == "band" and band_edges:
            d["Levels"] = {
                b: f"{lo:g}-{hi:g} Hz (low edge included, high edge excluded)"
                for b, (lo, hi) in band_edges.items()
            }
        out[col] = d
    return out


@fill_doc
def write_table(
    table, path, sidecar: dict, *, na_rep: str = "", float_format: str | None = "%.6g"
) -> Path:
    """Write ``table`` as a plain TSV and its column sidecar as ``<stem>.json`` beside it.

    The header row comes first: the file reads with ``pandas.read_csv(path, sep="\t")``.

    Parameters
    ----------
    table : DataFrame
        The in-memory table; written through :func:`file_table`.
    path : str | Path
        The ``.tsv`` file to write (overwritten).
    sidecar : dict
        Column descriptions (see :func:`column_sidecar`), written as UTF-8 JSON.
    na_rep : str
        Text for missing values.
    float_format : str, optional
        ``printf``-style format of floats; ``None`` writes full precision.

    %(returns_path)s
    """
    from .tsv import table_text

    path = Path(path)
    text = table_text(file_table(table), na_rep=na_rep, float_format=float_format)
    with open(path, "w", encoding="utf-8", newline="") as f:
        f.write(text)
    path.with_suffix(".json").write_text(
        json.dumps(sidecar, indent=2, ensure_ascii=False) + "\n", encoding="utf-8"
    )
    return path


@contextlib.contextmanager
def _staged(out_dir: Path):
    """Yield a temporary folder inside ``out_dir``; on success its files are renamed into place."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=".sourcelab-export-", dir=out_dir))
    try:
        yield tmp
        for f in sorted(tmp.iterdir()):
            os.replace(f, out_dir / f.name)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


#: Per-source z maps exported like power, under these measure names (need ``result.source_z``).
Z_MEASURES = ("z_absolute", "z_relative")


def map_measures(result) -> tuple[str, ...]:
    """The measures a result can export: power always, per-source z when it has them.

    Parameters
    ----------
    result : AnalysisResult
        An analysed recording.

    Returns
    -------
    tuple of str
        ``("absolute", "relative")`` followed by ``"z_absolute"``/``"z_relative"`` for each
        measure in ``result.source_z``.
    """
    z = getattr(result, "source_z", None) or {}
    return MEASURES + tuple(f"z_{m}" for m in MEASURES if m in z)


def _maps(result, measure: str) -> np.ndarray:
    check_option("measure", measure, MEASURES + Z_MEASURES)
    from .headmodel import load_head_model

    if measure in Z_MEASURES:
        z = getattr(result, "source_z", None) or {}
        if measure[2:] not in z:
            raise InputError(
                f"measure: {measure!r} needs per-source norms (result.source_z)", field="measure"
            )
        arr = np.asarray(z[measure[2:]])
    else:
        arr = np.asarray(result.source_abs if measure == "absolute" else result.source_rel)
    n_src = load_head_model().n_src
    if arr.ndim != 2 or arr.shape[1] != n_src:
        raise ValueError(f"result: source maps need shape (n_bands, {n_src}), got {arr.shape}")
    return arr


def _band_maps(result, measures):
    """``(measure, band, values)`` for every measure, then band: values of shape (n_src,)."""
    for measure in measures:
        maps = _maps(result, measure)
        for b, band in enumerate(result.bands.names):
            yield measure, band, maps[b]


@fill_doc
def export_stc(result, out_dir, *, measures=MEASURES) -> list[Path]:
    """Write one MNE SourceEstimate per band and measure.

    Parameters
    ----------
    result : AnalysisResult
    out_dir : str | Path
    %(source_map_measures)s

    Returns
    -------
    paths : list of Path
        The stem of each estimate (``<measure>_<band>``); MNE writes ``<stem>-lh.stc`` and
        ``<stem>-rh.stc`` and reads either back with :func:`mne.read_source_estimate`.
        Values are float32 (the ``.stc`` format), shape (n_src, 1).
    """
    import mne

    from .headmodel import load_head_model

    model = load_head_model()
    vertices = [model.vertno[: model.n_left], model.vertno[model.n_left :] - N_LEFT]
    out_dir = Path(out_dir)
    stems = []
    with _staged(out_dir) as tmp:
        for measure, band, values in _band_maps(result, measures):
            stem = f"{measure}_{safe_name(band)}"
            stc = mne.SourceEstimate(
                values[:, None].astype(np.float64),
                vertices,
                tmin=0.0,
                tstep=1.0,
                subject="fsaverage",
            )
            stc.save(tmp / stem, ftype="stc", overwrite=True, verbose="error")
            stems.append(out_dir / stem)
    return stems


def _gifti(values: np.ndarray, band_names) -> object:
    import nibabel as nib

    img = nib.gifti.GiftiImage()
    for v, band in zip(values, band_names):
        img.add_gifti_data_array(
            nib.gifti.GiftiDataArray(
                np.asarray(v, np.float32),
                intent="NIFTI_INTENT_ESTIMATE",
                datatype="NIFTI_TYPE_FLOAT32",
                meta={"Name": str(band)},
            )
        )
    return img


@fill_doc
def export_gifti(result, out_dir, *, measures=MEASURES, prefix: str = "") -> list[Path]:
    """Write GIfTI functional files, one per hemisphere and measure, one data array per band.

    Files ``<prefix><measure>.<L|R>.func.gii`` on fsaverage5 (10,242 vertices a hemisphere); each
    data array carries its band name in its ``Name`` metadata.

    Parameters
    ----------
    result : AnalysisResult
        An analysed recording; maps of shape (n_bands, n_src) are put on the surface.
    out_dir : str | Path
        Output folder (created; files are written to a temporary folder inside it and renamed
        into place).
    %(source_map_measures)s
    %(file_prefix)s

    Returns
    -------
    paths : list of Path
        Two files (left, right) per measure, in measure order; float32 values.
    """
    import nibabel as nib

    from .headmodel import load_head_model

    out_dir = Path(out_dir)
    paths = []
    with _staged(out_dir) as tmp:
        for measure in measures:
            maps = load_head_model().to_surface(_maps(result, measure))
            for h, (hemi, abbr) in enumerate(HEMI_BIDS.items()):
                name = f"{prefix}{measure}.{abbr}.func.gii"
                img = _gifti(maps[:, h * N_LEFT : (h + 1) * N_LEFT], result.bands.names)
                nib.save(img, tmp / name)
                paths.append(out_dir / name)
    return paths


@fill_doc
def export_nifti(
    result, out_dir, *, measures=MEASURES, resolution: int = 2, prefix: str = ""
) -> list[Path]:
    """Write MNI152 volumes, one per band and measure (``<prefix><measure>_<band>.nii.gz``).

    Each grey-matter voxel within 5 mm of the cortical sheet takes the value of the nearest
    source (see :func:`sourcelab.figures.sources_to_volume`); other voxels are 0.

    Parameters
    ----------
    result : AnalysisResult
        An analysed recording; maps of shape (n_bands, n_src).
    out_dir : str | Path
        Output folder (created; files are staged in a temporary folder inside it, then renamed).
    %(source_map_measures)s
    resolution : {2, 3}
        Voxel size, mm.
    %(file_prefix)s

    Returns
    -------
    paths : list of Path
        One float32 MNI152 volume per measure and band, in that order.
    """
    import nibabel as nib

    from .figures.geometry import sources_to_volume

    out_dir = Path(out_dir)
    paths = []
    with _staged(out_dir) as tmp:
        for measure, band, values in _band_maps(result, measures):
            name = f"{prefix}{measure}_{safe_name(band)}.nii.gz"
            nib.save(sources_to_volume(values, resolution=resolution), tmp / name)
            paths.append(out_dir / name)
    return paths


def bids_label(participant_id: str) -> str:
    """A BIDS participant label (alphanumeric) from an identifier read from a file.

    Parameters
    ----------
    participant_id : str
        Identifier, with or without a ``sub-`` prefix.

    Returns
    -------
    str
        Its letters and digits only, without ``sub-``.

    Raises
    ------
    InputError
        No letters or digits are left.
    """
    s = safe_name(participant_id)
    s = re.sub(r"^sub-", "", s)
    s = re.sub(r"[^A-Za-z0-9]", "", s)
    if not s:
        raise InputError(
            f"participant_id {participant_id!r}: no letters or digits for a BIDS label"
        )
    return s


def _bids_band(band: str) -> str:
    return re.sub(r"[^A-Za-z0-9]", "", band) or "band"


def export_bids_derivatives(result, root, participant_id: str, *, resolution: int = 2) -> Path:
    """Write a BIDS derivatives folder for one participant.

    Layout::

        <root>/derivatives/sourcelab/dataset_description.json
        <root>/derivatives/sourcelab/sub-<label>/eeg/
            sub-<label>_hemi-<L|R>_space-fsaverage_den-10k_desc-<measure>_power.func.gii (+ .json)
            sub-<label>_space-MNI152NLin2009aSym_res-<r>_desc-<measure><band>_power.nii.gz (+ .json)
            sub-<label>_desc-roi_power.tsv (+ .json), sub-<label>_desc-sensor_power.tsv (+ .json)
            sub-<label>_desc-sourcelab_provenance.json

    Names follow the BIDS derivatives conventions: fsaverage5 is the ``fsaverage`` space at the
    ``den-10k`` density (10,242 vertices a hemisphere); ``res-<r>`` is a label whose meaning
    (``<r>`` mm voxels) the image sidecar states; every table has a sidecar describing its
    columns and units.

    Parameters
    ----------
    result : AnalysisResult
    root : str | Path
        BIDS dataset root (or any folder).
    participant_id : str
        Made safe with :func:`sourcelab.provenance.safe_name` and reduced to letters and digits.
    resolution : {2, 3}
        Voxel size of the NIfTI volumes, mm.

    Returns
    -------
    path : Path
        The participant folder ``.../sub-<label>``.
    """
    from . import __version__

    label = bids_label(participant_id)
    deriv = Path(root) / "derivatives" / "sourcelab"
    deriv.mkdir(parents=True, exist_ok=True)
    desc = {
        "Name": "sourcelab source-level band power",
        "BIDSVersion": "1.9.0",
        "DatasetType": "derivative",
        "GeneratedBy": [
            {
                "Name": "sourcelab",
                "Version": __version__,
                "Description": "sLORETA band power on the fsaverage5 template",
            }
        ],
    }
    atomic_write_text(deriv / "dataset_description.json", json.dumps(desc, indent=2) + "\n")
    sub = deriv / f"sub-{label}"
    bands = list(result.bands.names)
    with atomic_output_dir(sub, kind="bids") as tmp:
        eeg = tmp / "eeg"
        eeg.mkdir()
        base = f"sub-{label}"
        import nibabel as nib

        from .figures.geometry import sources_to_volume
        from .headmodel import load_head_model

        for measure in MEASURES:
            maps = _maps(result, measure)
            surf = load_head_model().to_surface(maps)
            for h, (hemi, abbr) in enumerate(HEMI_BIDS.items()):
                stem = f"{base}_hemi-{abbr}_space-fsaverage_den-10k_desc-{measure}_power"
                nib.save(
                    _gifti(surf[:, h * N_LEFT : (h + 1) * N_LEFT], bands), eeg / f"{stem}.func.gii"
                )
                (eeg / f"{stem}.json").write_text(
                    json.dumps(
                        {
                            "Bands": result.bands.as_list(),
                            "Measure": measure,
                            "Units": _unit(measure),
                            "Density": "10k: 10,242 vertices a hemisphere (fsaverage5)",
                        },
                        indent=2,
                    )
                    + "\n",
                    encoding="utf-8",
                )
            for b, band in enumerate(bands):
                stem = (
                    f"{base}_space-{VOLUME_SPACE}_res-{resolution}_desc-{measure}"
                    f"{_bids_band(band)}_power"
                )
                nib.save(sources_to_volume(maps[b], resolution=resolution), eeg / f"{stem}.nii.gz")
                lo, hi = result.bands.edges[b]
                (eeg / f"{stem}.json").write_text(
                    json.dumps(
                        {
                            "Band": [band, lo, hi],
                            "Measure": measure,
                            "Units": _unit(measure),
                            "Resolution": f"{resolution} mm isotropic voxels",
                        },
                        indent=2,
                    )
                    + "\n",
                    encoding="utf-8",
                )
        edges = dict(zip(result.bands.names, result.bands.edges))
        for kind, table in (("roi", result.roi_table), ("sensor", result.sensor_table)):
            write_table(
                table,
                eeg / f"{base}_desc-{kind}_power.tsv",
                column_sidecar(table, band_edges=edges),
                na_rep="n/a",
                float_format=None,
            )
        prov = {
            "fingerprint": result.fingerprint.to_dict(),
            "config": result.config.to_dict(),
            "recording": {
                k: v
                for k, v in result.recording.to_dict().items()
                if isinstance(v, (str, int, float, bool))
            },
            "norms": None if result.norms is None else result.norms.to_dict(),
        }
        (eeg / f"{base}_desc-sourcelab_provenance.json").write_text(
            json.dumps(prov, indent=2, default=str) + "\n", encoding="utf-8"
        )
    return sub


def _unit(measure: str) -> str:
    from .constants import UNITS

    return UNITS[measure]
