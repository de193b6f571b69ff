"""Human labels for the report: column and field names in words, values without Python reprs.

Every table and key-value list of the HTML and PDF reports passes through :func:`column_label`,
:func:`field_label` and :func:`value_text`, so that no raw key (``sfreq``), Python value
(``None``, ``[]``, ``True``) or pandas missing value (``<NA>``, ``nan``) reaches a reader.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from .._docs import fill_doc
from ..rois.names import area_name

#: What a missing value reads as.
NOT_GIVEN = "not given"
#: What an empty list reads as.
NONE_TEXT = "none"
#: What a missing number reads as in a table cell.
MISSING_NUMBER = "–"

#: Table column -> header.
COLUMN_LABELS = {
    "level": "level",
    "halves": "halves compared",
    "atlas": "atlas",
    "roi": "area",
    "area": "area",
    "name": "area name",
    "hemisphere": "side",
    "band": "band",
    "measure": "measure",
    "value": "value",
    "unit": "unit",
    "n_vertices": "sources",
    "small": "small area",
    "resolvable": "resolvable",
    "z": "z",
    "z_equivalent": "z (normal equivalent)",
    "p": "p",
    "fdr_q": "FDR q",
    "fdr": "FDR significant",
    "z_lo": "z low",
    "z_hi": "z high",
    "robust": "robust",
    "norm_n": "norm size",
    "no_norm": "no norm",
    "extrapolated": "age outside norms",
    "condition_mismatch": "condition differs",
    "rank": "rank",
    "role": "role",
    "direction": "direction",
    "lobe": "lobe",
    "peak_z": "peak z",
    "x_mni152": "MNI x",
    "y_mni152": "MNI y",
    "z_mni152": "MNI z",
    "mni": "MNI x, y, z (mm)",
    "border_mm": "to named area's border (mm; < 0 outside)",
    "fit": "fit to a focal source",
    "cluster_size": "sources above threshold",
    "cluster_areas": "areas the cluster spans",
    "own_share": "own share",
    "probability": "probability in area",
    "source": "source",
    "vertex": "vertex",
    "kind": "kind",
    "channel": "site",
    "pair": "pair",
    "channel_a": "site A",
    "channel_b": "site B",
    "edge": "edge",
    "roi_a": "area A",
    "roi_b": "area B",
    "hemisphere_a": "side A",
    "hemisphere_b": "side B",
    "distance_mm": "distance (mm)",
    "leakage_expected": "expected from blur",
    "leakage_explained": "explained by blur",
    "leaker": "leaking area",
    "leaker_hemisphere": "leaking side",
    "share": "share",
    "leaker_z": "leaking area z",
    "same_direction": "same direction",
    "neighbours_same": "neighbours same way",
    "n_neighbours": "neighbours",
    "neighbours": "neighbour areas",
    "members_deviating": "members deviating",
    "n_members": "members",
    "value_lo": "value low",
    "value_hi": "value high",
    "n_epochs": "epochs",
    "estimate": "estimate",
    "session_a": "session A",
    "session_b": "session B",
    "change_t": "change",
    "change_t_lo": "change low",
    "change_t_hi": "change high",
    "change_z": "change in z",
    "rci": "reliable-change index",
    "q": "FDR q",
    "verdict": "verdict",
}

#: Record field -> label (recording, quality, configuration, fingerprint).
FIELD_LABELS = {
    "path": "file",
    "sha256": "SHA-256",
    "sfreq": "sampling rate (Hz)",
    "duration_s": "duration (s)",
    "channel_map": "electrode labels in the file",
    "original_reference": "reference as recorded",
    "interpolated": "interpolated sites",
    "annotations": "annotations in the file",
    "age": "age (years)",
    "condition": "condition",
    "electrodes": "electrodes",
    "kept_s": "clean data analysed (s)",
    "rejected_s": "removed (s) by reason",
    "n_epochs": "clean epochs",
    "channel_kept_fraction": "share of epochs each site passed",
    "mains_hz": "mains frequency notched (Hz)",
    "excluded": "spans left out",
    "cleaning_seconds": "cleaning time (s) by stage",
    "epoch_s": "epoch length (s)",
    "reject_uv": "peak-to-peak limit (µV)",
    "l_freq": "high-pass edge (Hz)",
    "h_freq": "low-pass edge (Hz)",
    "lambda2": "λ² (1/SNR²)",
    "method": "inverse method",
    "orientation": "source orientation",
    "bands": "bands",
    "pipeline_version": "pipeline version",
    "notch": "notch (Hz)",
    "reliability_threshold": "reliability threshold",
    "rejection": "rejection mode",
    "reject_z": "rejection limit (robust z)",
    "flat_uv": "flat-line limit (µV)",
    "muscle_uv": "muscle limit (µV)",
    "muscle_band_hz": "muscle band (Hz)",
    "blink_uv": "blink limit (µV)",
    "blink_lowpass_hz": "blink low-pass (Hz)",
    "blink_front_back_ratio": "blink front/back ratio",
    "min_clean_s": "least clean data accepted (s)",
    "warn_clean_s": "warning below (s) of clean data",
    "n_boot": "bootstrap resamples",
    "boot_seed": "bootstrap seed",
    "ci": "interval level",
    "snr": "SNR (amplitude)",
    "coupling": "coupling computed",
    "coupling_atlases": "coupling atlases",
    "coupling_n_boot": "coupling bootstrap resamples",
    "ocular_correction": "eye-artefact correction",
    "exclude_procedures": "procedures left out",
    "z_mask": "z maps: uncoloured below |z|",
}


@fill_doc
def column_label(name) -> str:
    """Header of a table column (``"peak_z"`` -> ``"peak z"``), from :data:`COLUMN_LABELS`.

    %(label_lookup)s
    """
    return _label(COLUMN_LABELS, name)


@fill_doc
def field_label(name) -> str:
    """Label of a record field (``"sfreq"`` -> ``"sampling rate (Hz)"``), from :data:`FIELD_LABELS`.

    %(label_lookup)s
    """
    return _label(FIELD_LABELS, name)


def _label(labels: dict, name) -> str:
    return labels.get(str(name), str(name).replace("_", " "))


def _is_missing(v) -> bool:
    if v is None or v is pd.NA or v is pd.NaT:
        return True
    try:
        return bool(pd.isna(v)) if np.isscalar(v) else False
    except (TypeError, ValueError):
        return False


def number_text(v: float) -> str:
    """A number in at most about four significant figures, without a trailing ``.0``.

    Parameters
    ----------
    v : float
        Any real number.

    Returns
    -------
    str
        Whole numbers below 1e6 as integers; below 0.01 or from 1e4 in magnitude 3 significant
        figures; else 3, 2 or 1 decimals (below 10, 100, else); NaN/inf as a dash.
    """
    v = float(v)
    if not np.isfinite(v):
        return MISSING_NUMBER
    if v == int(v) and abs(v) < 1e6:
        return str(int(v))
    if abs(v) < 1e-2 or abs(v) >= 1e4:
        return f"{v:.3g}"
    return f"{v:.3f}" if abs(v) < 10 else f"{v:.2f}" if abs(v) < 100 else f"{v:.1f}"


def value_text(v, *, missing: str = NOT_GIVEN) -> str:
    """Plain text of a value for a reader (never a Python repr).

    ``None``/NaN/``<NA>`` -> ``missing`` ("not given"); booleans -> yes/no; empty lists ->
    "none"; lists -> comma-separated; dicts -> ``key: value; ...``; paths -> the file name.

    Parameters
    ----------
    v : object
        The value; numbers go through :func:`number_text`, dict keys through
        :func:`field_label`, containers element by element.
    missing : str
        Text for a missing value.

    Returns
    -------
    str
        The text.
    """
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if _is_missing(v):
        return missing
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if isinstance(v, (float, np.floating)):
        return number_text(v)
    if isinstance(v, Path):
        return v.name
    if isinstance(v, dict):
        if not v:
            return NONE_TEXT
        return "; ".join(
            f"{field_label(k)}: {value_text(x, missing=missing)}" for k, x in v.items()
        )
    if isinstance(v, (list, tuple, set, np.ndarray)):
        items = list(v)
        if not items:
            return NONE_TEXT
        return ", ".join(value_text(x, missing=missing) for x in items)
    return str(v)


def file_name(path) -> str:
    """The file name of a path (no folders: a site-packages path is not for readers).

    Parameters
    ----------
    path : str | Path | None
        A path.

    Returns
    -------
    str
        Its last component; "not given" for None or an empty string.
    """
    if path is None or path == "":
        return NOT_GIVEN
    return Path(str(path)).name


def human_table(df: pd.DataFrame, *, area_names: bool = True) -> pd.DataFrame:
    """A copy of ``df`` for reading: area names added beside Brodmann areas, headers in words.

    Values stay typed (numbers keep their type so cells align); missing values are left for the
    cell formatter.

    Parameters
    ----------
    df : DataFrame
        A tidy table (ROI, sensor, deviation ... table).
    area_names : bool
        Insert a ``name`` column after the first of ``roi``/``area`` when any of its values is
        a Brodmann area.

    Returns
    -------
    DataFrame
        The copy, with headers from :func:`column_label`.
    """
    out = df.copy()
    if area_names:
        for col in ("roi", "area"):
            if col in out.columns:
                names = [area_name(v) for v in out[col]]
                if any(names):
                    out.insert(list(out.columns).index(col) + 1, "name", names)
                break
    out.columns = [column_label(c) for c in out.columns]
    return out


#: How each split of the epochs reads in the reliability table.
RELIABILITY_SPLITS = (
    ("split_half", "odd vs even epochs"),
    ("test_retest", "first vs second half of the recording"),
)


def _interval_text(c: dict) -> str:
    v, lo, hi = (c.get(k) for k in ("icc", "low", "high"))
    if _is_missing(v):
        return MISSING_NUMBER
    if _is_missing(lo) or _is_missing(hi):
        return f"{v:.2f}"
    return f"{v:.2f} ({lo:.2f} to {hi:.2f})"


def reliability_table(rel: dict) -> pd.DataFrame:
    """Agreement between two halves of the clean epochs, one row per level and split.

    Each cell is ICC(2,1) of log10 band power across the level's items (sensors or areas) with
    its 95 % interval, "0.97 (0.93 to 0.99)"; results written before intraclass correlations
    were computed show the Pearson r of the halves instead ("r 0.97").

    Parameters
    ----------
    rel : dict
        ``result.quality.reliability``: level -> ReliabilitySummary or its ``to_dict()``.

    Returns
    -------
    DataFrame
        Columns ``level``, ``halves`` and one per band (text cells); empty when nothing was
        measured.
    """
    rows = []
    for level, r in (rel or {}).items():
        r = r if isinstance(r, dict) else r.to_dict()
        for key, words in RELIABILITY_SPLITS:
            iccs = r.get(f"{key}_icc") or {}
            if iccs:
                cells = {b: _interval_text(c) for b, c in iccs.items()}
            elif isinstance(r.get(key), dict):
                cells = {
                    b: MISSING_NUMBER if _is_missing(v) else f"r {v:.2f}" for b, v in r[key].items()
                }
            else:
                continue
            rows.append(
                {
                    "level": "sensors" if level == "sensors" else f"{level} areas",
                    "halves": words,
                    **cells,
                }
            )
    return pd.DataFrame(rows)


def lowest_agreement(rel: dict, level: str = "sensors") -> tuple[str, dict] | None:
    """The band with the lowest split-half ICC at one level: (band, {"icc", "low", "high"}).

    Parameters
    ----------
    rel : dict
        ``result.quality.reliability``: level -> ReliabilitySummary or its ``to_dict()``.
    level : str
        ``"sensors"`` or an atlas name.

    Returns
    -------
    tuple or None
        ``(band, {"icc", "low", "high"})``, ICC(2,1) with its 95 % interval; None when no
        intraclass correlation was stored for the level.
    """
    r = (rel or {}).get(level)
    if r is None:
        return None
    r = r if isinstance(r, dict) else r.to_dict()
    iccs = {
        b: c for b, c in (r.get("split_half_icc") or {}).items() if not _is_missing(c.get("icc"))
    }
    if not iccs:
        return None
    band = min(iccs, key=lambda b: iccs[b]["icc"])
    return band, iccs[band]
