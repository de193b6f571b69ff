"""The analysis pipeline: recording → clean epochs → band cross-spectra → sLORETA → ROIs → z.

Every stage below is a pure function elsewhere in the package; this module only wires them and
records provenance.
"""

from __future__ import annotations

import functools
import logging
import time
from pathlib import Path

import numpy as np
import pandas as pd

from .config import AnalysisConfig
from .errors import InputError
from .provenance import Fingerprint
from .result import ROI_COLUMNS, SENSOR_COLUMNS, UNITS, AnalysisResult
from .spectra import average_reference, epoch_cross_spectra, relative_power, sensor_band_power

log = logging.getLogger("sourcelab")

#: Atlases reported by default.
DEFAULT_ATLASES = ("brodmann", "lobes", "networks", "yeo7")


def fingerprint_for(config: AnalysisConfig, headmodel_sha256: str | None = None) -> Fingerprint:
    """The pipeline fingerprint of an analysis made with ``config`` on the shipped head model."""
    if headmodel_sha256 is None:
        from .headmodel import load_head_model

        headmodel_sha256 = load_head_model().sha256
    return Fingerprint(
        headmodel_sha256=headmodel_sha256,
        method=config.method,
        orientation=config.orientation,
        lambda2=config.lambda2,
        bands=tuple((n, float(lo), float(hi)) for n, (lo, hi) in
                    zip(config.bands.names, config.bands.edges)),
        reference="average",
        epoch_s=float(config.epoch_s),
    )


@functools.lru_cache(maxsize=8)
def inverse_operator(method: str, orientation: str, lambda2: float):
    """The standardised source operator for the shipped head model (cached).

    Returns a :class:`~sourcelab.inverse.SourceOperator` with ``kernel`` (n_rows, n_ch),
    ``n_src`` and ``n_comp``; source power is ``Σ_rows diag(K C Kᵀ)``.
    """
    from .headmodel import load_head_model
    from .inverse import methods

    return methods.make_operator(load_head_model(), method=method, orientation=orientation,
                                 lambda2=lambda2)


def roi_operators(op, atlas) -> np.ndarray:
    """Per-ROI sensor-space matrices ``M_r`` so that ROI mean power is ``tr(M_r C)``.

    ``M_r = (1/|r|) Σ_{i∈r} K_iᵀ K_i`` (summing the component rows of each source), shape
    (n_rois, n_ch, n_ch).  ROI mean source power is linear in the cross-spectrum, so per-epoch or
    resampled ROI power costs one 19 x 19 contraction per ROI.
    """
    k = op.kernel.reshape(op.n_src, op.n_comp, -1)
    out = np.empty((len(atlas.rois), k.shape[-1], k.shape[-1]))
    for r, roi in enumerate(atlas.rois):
        kr = k[roi.vertices].reshape(-1, k.shape[-1])
        out[r] = kr.T @ kr / len(roi.vertices)
    return out


def _roi_rows(atlas, values_abs: np.ndarray, values_rel: np.ndarray, band_names) -> list[dict]:
    rows = []
    for measure, vals in (("absolute", values_abs), ("relative", values_rel)):
        for b, band in enumerate(band_names):
            for r, roi in enumerate(atlas.rois):
                rows.append(dict(atlas=atlas.name, roi=roi.name, hemisphere=roi.hemisphere,
                                 band=band, measure=measure, value=float(vals[b, r]),
                                 unit=UNITS[measure], n_vertices=int(len(roi.vertices)),
                                 small=bool(roi.small), z=np.nan))
    return rows


def analyze(recording, *, config: AnalysisConfig | None = None, age: float | None = None,
            norms=None, atlases: tuple[str, ...] | None = None, custom_rois=None,
            select=None, condition: str | None = None,
            allow_extrapolation: bool = False, allow_condition_mismatch: bool = False
            ) -> AnalysisResult:
    """Analyse one recording end to end.

    Parameters
    ----------
    recording : str | Path | mne.io.BaseRaw | sourcelab.intake.Recording
        A file (EDF, BDF, BrainVision, EEGLAB, FIF, BIDS path) or an in-memory recording.
    config : AnalysisConfig, optional
    age : float, optional
        Participant age in years; needed with ``norms``.
    norms : str | Path | sourcelab.norms.Norms, optional
        Norms to z-score against; their fingerprint must equal this analysis'.
    atlases : tuple of str, optional
        Atlas names (default :data:`DEFAULT_ATLASES`).
    custom_rois : Atlas, optional
        User-defined ROIs, reported with ``atlas`` = their atlas name.
    select : optional
        Segment selection passed to :func:`sourcelab.intake.clean_recording`.

    Returns
    -------
    AnalysisResult
    """
    from .headmodel import load_head_model
    from .intake import Recording, clean_recording, read_recording
    from .rois import load_atlas, roi_reduce

    t0 = time.perf_counter()
    config = config or AnalysisConfig()
    rec = recording if isinstance(recording, Recording) else read_recording(recording)
    clean = clean_recording(rec, config, select=select, age=age)
    model = load_head_model()
    if tuple(clean.ch_names) != tuple(model.ch_names):
        raise InputError(f"channels {clean.ch_names} do not match the head model's "
                         f"{model.ch_names}")
    csd_epochs = epoch_cross_spectra(clean.epochs, clean.sfreq, config.bands)
    csd = csd_epochs.mean(axis=0)
    sens_abs, sens_rel = sensor_band_power(average_reference(csd))
    op = inverse_operator(config.method, config.orientation, config.lambda2)
    src_abs = op.power(csd)
    src_rel = relative_power(src_abs)
    names = config.bands.names

    rows: list[dict] = []
    atlas_objs = [load_atlas(a) for a in (atlases or DEFAULT_ATLASES)]
    if custom_rois is not None:
        atlas_objs.append(custom_rois)
    for atlas in atlas_objs:
        rows += _roi_rows(atlas, roi_reduce(src_abs, atlas), roi_reduce(src_rel, atlas), names)
    roi_table = pd.DataFrame(rows, columns=list(ROI_COLUMNS))

    srows = []
    for measure, vals in (("absolute", sens_abs), ("relative", sens_rel)):
        unit = UNITS["sensor_absolute"] if measure == "absolute" else UNITS["relative"]
        for b, band in enumerate(names):
            for c, ch in enumerate(clean.ch_names):
                srows.append(dict(channel=ch, band=band, measure=measure,
                                  value=float(vals[b, c]), unit=unit, z=np.nan))
    sensor_table = pd.DataFrame(srows, columns=list(SENSOR_COLUMNS))

    fp = fingerprint_for(config, model.sha256)
    quality = _quality(clean, csd_epochs, op, atlas_objs[0], config)
    slow = _slow_maximum(src_abs, names, model)
    if slow is not None:
        quality["ocular"]["slow_maximum"] = slow
    norms_summary = None
    nm = opts = None
    if norms is not None:
        from .norms import apply_norms, read_norms

        nm = norms if not isinstance(norms, (str, Path)) else read_norms(norms)
        if age is None:
            raise InputError("--age is required when norms are given (z-scores depend on age)")
        opts = dict(age=age, fingerprint=fp, condition=condition,
                    allow_extrapolation=allow_extrapolation,
                    allow_condition_mismatch=allow_condition_mismatch)
        roi_table = apply_norms(roi_table, nm, kind="roi", **opts)
        sensor_table = apply_norms(sensor_table, nm, kind="sensor", **opts)
        norms_summary = nm.summary()
    if config.n_boot:
        from .trust import add_intervals, add_sensor_intervals, norms_z_function

        kw = dict(n_boot=config.n_boot, seed=config.boot_seed, ci=config.ci, band_names=names)
        roi_table = add_intervals(
            roi_table, csd_epochs, op, atlas_objs,
            norms_fn=norms_z_function(nm, kind="roi", **opts) if nm is not None else None, **kw)
        sensor_table = add_sensor_intervals(
            sensor_table, csd_epochs, ch_names=clean.ch_names,
            norms_fn=norms_z_function(nm, kind="sensor", **opts) if nm is not None else None,
            **kw)
    recording_info = {
        "path": str(rec.path) if rec.path else None, "sha256": rec.sha256,
        "sfreq": float(rec.sfreq), "duration_s": float(rec.duration_s),
        "channel_map": dict(rec.channel_map), "original_reference": rec.original_reference,
        "interpolated": list(rec.interpolated), "age": age, "condition": condition,
        "warnings": list(rec.warnings) + list(clean.warnings)
        + ([slow["warning"]] if slow is not None and slow["warning"] else []),
    }
    log.info("analysis done in %.2f s", time.perf_counter() - t0)
    return AnalysisResult(config=config, fingerprint=fp, ch_names=tuple(clean.ch_names),
                          source_abs=src_abs.astype(np.float32),
                          source_rel=src_rel.astype(np.float32),
                          sensor_abs=sens_abs, sensor_rel=sens_rel, roi_table=roi_table,
                          sensor_table=sensor_table, quality=quality, recording=recording_info,
                          norms=norms_summary, epoch_csd=csd_epochs)


@functools.lru_cache(maxsize=2)
def _confusable(model) -> dict:
    from .intake.clean import DEFAULT_NASION
    from .rois import load_atlas
    from .trust.ocular import confusable_rois, source_ocular_cosine

    cos = source_ocular_cosine(model.gain_fixed, model.ch_pos, DEFAULT_NASION)
    return confusable_rois(cos, load_atlas("brodmann").rois)


def _slow_maximum(src_abs: np.ndarray, band_names, model) -> dict | None:
    """Delta maximum among Brodmann areas, flagged when its area can pass for eye activity."""
    if "delta" not in band_names:
        return None
    from .rois import load_atlas, roi_reduce
    from .trust.ocular import slow_maximum_check

    atlas = load_atlas("brodmann")
    values = roi_reduce(src_abs[list(band_names).index("delta")], atlas)
    return slow_maximum_check(values, atlas.rois, _confusable(model), band="delta")


def _quality(clean, csd_epochs: np.ndarray, op, atlas, config: AnalysisConfig) -> dict:
    """Seconds kept/rejected and split-half / test-retest reliability (sensors and ROIs)."""
    from .intake import reliability_summary

    n = csd_epochs.shape[0]
    sens = np.einsum("ebcc->ebc", average_reference(csd_epochs))  # (n_ep, n_bands, n_ch)
    m = roi_operators(op, atlas)
    roi = np.einsum("rcd,ebdc->ebr", m, csd_epochs)  # per-epoch ROI mean power
    q = {
        "kept_s": float(clean.kept_s),
        "rejected_s": {k: float(v) for k, v in clean.rejected_s.items()},
        "n_epochs": int(n),
        "channel_kept_fraction": {k: float(v) for k, v in clean.channel_kept_fraction.items()},
        "mains_hz": clean.mains_hz,
        "thresholds": dict(clean.thresholds),
        "excluded": [dict(e) for e in clean.excluded],
        "ocular": dict(clean.ocular),
        "cleaning_seconds": dict(clean.timings_s),
        "reliability": {
            "sensor": reliability_summary(sens, config.bands.names,
                                          threshold=config.reliability_threshold),
            "roi_" + atlas.name: reliability_summary(roi, config.bands.names,
                                                     threshold=config.reliability_threshold),
        },
    }
    return q
