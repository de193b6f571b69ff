"""The analysis: recording → clean epochs → band cross-spectra → sLORETA → areas, coupling → z →
answers.

Every stage is a pure function elsewhere in the package; :func:`analyze` wires them, records
provenance and returns an :class:`~sourcelab.result.AnalysisResult` that owns everything it
computed (tables, maps, candidates, leakage).  Writing files is :meth:`AnalysisResult.write`.
"""

from __future__ import annotations

import contextlib
import dataclasses
import functools
import logging
import sys
import time
from pathlib import Path

import numpy as np

from ._threads import limited_threads, parallel_stages, thread_limits
from .config import AnalysisConfig, check_sampling_rate
from .constants import UNITS
from .errors import InputError
from .provenance import Fingerprint
from .result import (
    ROI_COLUMNS,
    SENSOR_COLUMNS,
    AnalysisResult,
    NormsInfo,
    QualitySummary,
    RecordingInfo,
)

log = logging.getLogger("sourcelab")

#: Atlases reported by default.
DEFAULT_ATLASES = ("brodmann", "lobes", "networks", "yeo7")
#: Stages shown by the progress bar.
STAGES = (
    "reading",
    "cleaning",
    "cross-spectra",
    "sources",
    "areas",
    "coupling",
    "z-scores",
    "intervals",
    "candidates",
)


def fingerprint_for(config: AnalysisConfig, headmodel_sha256: str | None = None) -> Fingerprint:
    """The pipeline fingerprint of an analysis made with ``config`` on the shipped head model.

    Parameters
    ----------
    config : AnalysisConfig
    headmodel_sha256 : str, optional
        Default: the shipped head model's.

    Returns
    -------
    Fingerprint
    """
    if headmodel_sha256 is None:
        from .headmodel import load_head_model

        headmodel_sha256 = load_head_model().sha256
    return Fingerprint(
        headmodel_sha256=headmodel_sha256,
        method=config.method,
        orientation=config.orientation,
        lambda2=config.lambda2,
        bands=tuple(
            (n, float(lo), float(hi)) for n, (lo, hi) in zip(config.bands.names, config.bands.edges)
        ),
        reference="average",
        epoch_s=float(config.epoch_s),
    )


def _roi_table(atlases, src_abs: np.ndarray, src_rel: np.ndarray, band_names, resolvable):
    import pandas as pd

    from .rois import roi_reduce

    rows = []
    for atlas in atlases:
        for measure, src in (("absolute", src_abs), ("relative", src_rel)):
            vals = roi_reduce(src, atlas)
            for b, band in enumerate(band_names):
                for r, roi in enumerate(atlas.rois):
                    ok = resolvable.get(roi.name, True) if atlas.name == "brodmann" else True
                    rows.append(
                        (
                            atlas.name,
                            roi.name,
                            roi.hemisphere,
                            band,
                            measure,
                            float(vals[b, r]),
                            UNITS[measure],
                            int(len(roi.vertices)),
                            bool(roi.small),
                            bool(ok),
                            np.nan,
                        )
                    )
    return pd.DataFrame(rows, columns=list(ROI_COLUMNS))


def _sensor_table(ch_names, sens_abs: np.ndarray, sens_rel: np.ndarray, band_names):
    import pandas as pd

    rows = []
    for measure, vals in (("absolute", sens_abs), ("relative", sens_rel)):
        unit = UNITS["sensor_absolute"] if measure == "absolute" else UNITS["relative"]
        for b, band in enumerate(band_names):
            for c, ch in enumerate(ch_names):
                rows.append((ch, band, measure, float(vals[b, c]), unit, np.nan))
    return pd.DataFrame(rows, columns=list(SENSOR_COLUMNS))


@limited_threads(user_api="blas")  # the coupling step's limit, set once for all its parts
def _coupling(clean, model, op, config: AnalysisConfig, *, spec=None):
    """Pair and network/lobe coupling of the clean epochs (see ``sourcelab/coupling/TABLES.md``).

    Cheap path: the epochs' Fourier coefficients at the analysed bins (single precision, Hann
    taper for the spectral measures, none for the envelopes), no per-bin 19 x 19 matrices; the
    volume-conduction covariance comes from the template leadfield (fixed orientation: the
    surface-normal gain; free: all three components).  ``spec``: the Hann coefficients
    (complex64, (n_epochs, n_ch, n_bins)) if already made (the band-power transform keeps them).

    Returns
    -------
    pair_table, coupling_table : DataFrame
    """
    from .coupling import (
        coupling_table,
        independent_source_covariance,
        network_coupling,
        pair_table,
        sensor_coupling,
    )
    from .rois import load_atlas
    from .spectra import analysed_bins, epoch_fourier

    bands = config.bands
    if spec is None:
        spec, freqs = epoch_fourier(clean.epochs, clean.sfreq, bands, dtype=np.complex64)
    else:  # kept from the band-power transform (epoch_cross_spectra's fourier_out)
        freqs = analysed_bins(clean.epochs.shape[-1], clean.sfreq, bands)[1]
    plain, _ = epoch_fourier(clean.epochs, clean.sfreq, bands, taper=False, dtype=np.complex64)
    gain = model.gain_fixed if op.n_comp == 1 else model.gain
    c0 = independent_source_covariance(gain)
    boot = dict(n_boot=config.coupling_n_boot, seed=config.boot_seed, ci=config.ci)
    sc = sensor_coupling(spec, freqs, bands, model.ch_names, model.ch_pos, null_cov=c0, **boot)
    atlases = [load_atlas(a) for a in config.coupling_atlases]
    ecs = network_coupling(
        spec, plain, freqs, bands, op, atlases, null_cov=c0, normals=model.src_nn, **boot
    )
    pt, ct = pair_table(sc), coupling_table(ecs)
    meta = {
        "method": "percentile",
        "unit": "clean epoch",
        "n_boot": int(config.coupling_n_boot),
        "seed": int(config.boot_seed),
        "ci": float(config.ci),
        "n_epochs": int(sc.n_epochs),
    }
    for t in (pt, ct):
        t.attrs["bootstrap"] = meta if config.coupling_n_boot else None
    return pt, ct


#: Relative difference in clean epochs from the norms cohort's median beyond which coupling
#: z-scores get a warning.  Magnitude measures (msc, lagcoh, lps, wpli) are biased upwards by
#: about 1/n_epochs; with the demo norms, twice the cohort's epochs moved the lagged measures'
#: mean z by about -1.1, so a 25 % difference moves it by about -0.3.
EPOCHS_TOLERANCE = 0.25


def _epochs_note(nm, n_epochs: int) -> str | None:
    """A warning when the recording's clean epochs differ much from the norms cohort's."""
    info = (nm.cohort or {}).get("clean_epochs") or {}
    try:
        med = float(info["median"])
    except (KeyError, TypeError, ValueError):
        return None
    if not med > 0 or abs(n_epochs / med - 1.0) <= EPOCHS_TOLERANCE:
        return None
    return (
        f"{n_epochs} clean epochs against a median of {med:.0f} in the norms' cohort: "
        "coherence-type coupling z-scores (msc, lagcoh, lps, wpli) shift with recording "
        "length; compare recordings of similar clean duration"
    )


def _in_domain(values: np.ndarray, transform) -> np.ndarray:
    """Which values a transform accepts (NaN counts as accepted: it gives a NaN z)."""
    try:
        transform.forward(values)
        return np.ones(values.shape, dtype=bool)
    except InputError:

        def one(v):
            try:
                transform.forward(np.array([v]))
                return True
            except InputError:
                return False

        return np.array([one(v) for v in values], dtype=bool)


def _coupling_z(table, nm, kind: str, opts: dict):
    """z-score a pair or coupling table against norms (with ``z_lo``, ``z_hi``, ``robust`` from
    the bootstrap interval); None when the norms hold no rows of this kind."""
    import pandas as pd

    from .norms import apply_norms, get_transform, match_norms
    from .trust import robust_flags

    if not (nm.table["kind"] == kind).any():
        return None
    rows = match_norms(table, nm, kind=kind, **opts)
    # a value on the edge of its measure's range (coherence 1 between bridged electrodes, a
    # phase spread of 0) has no transformed value: its z is left empty instead of failing
    value = table["value"].to_numpy(dtype=float)
    ok = np.ones(len(table), dtype=bool)
    for name in set(rows.transform.tolist()) - {""}:
        sel = np.flatnonzero(rows.transform == name)
        ok[sel] = _in_domain(value[sel], get_transform(name))
    if not ok.all():
        log.warning(
            "%d %s values lie on the edge of their measure's range: z left empty",
            int((~ok).sum()),
            kind,
        )
    out = apply_norms(
        table.assign(value=np.where(ok, value, np.nan)), nm, kind=kind, rows=rows, **opts
    )
    out["value"] = table["value"].to_numpy()
    z = out["z"].to_numpy(dtype=float)
    value = out["value"].to_numpy(dtype=float)
    lo, hi = (rows.z(out[c].to_numpy(dtype=float)) for c in ("value_lo", "value_hi"))
    # circular rows (phase): the interval's ends as angular distances from the estimate, so an
    # interval that crosses the wrap point keeps its width
    for name in set(rows.transform.tolist()) - {""}:
        tr = get_transform(name)
        if tr.period is not None:
            sel = rows.transform == name
            for arr, col in ((lo, "value_lo"), (hi, "value_hi")):
                arr[sel] = (
                    z[sel] + (out[col].to_numpy(dtype=float)[sel] - value[sel]) / rows.sd[sel]
                )
    out["z_lo"], out["z_hi"] = np.fmin(lo, hi), np.fmax(lo, hi)
    out["robust"] = pd.array(robust_flags(z, out["z_lo"], out["z_hi"]))
    return out


def _early_maps(config, ch_names, src_abs, src_rel, sens_abs, sens_rel) -> None:
    """The power maps handed to a warmed figure renderer, when one is waiting for them
    (:func:`sourcelab.figures.warm.early_maps`: their figures are drawn while the analysis goes
    on), as the result will hold them."""
    warm = _warm_renderer()
    if warm is not None:
        warm.early_maps(
            config,
            ch_names,
            src_abs.astype(np.float32),
            src_rel.astype(np.float32),
            sens_abs,
            sens_rel,
        )


def analyze(
    recording,
    *,
    config: AnalysisConfig | None = None,
    age: float | None = None,
    norms=None,
    condition: str | None = None,
    atlases: tuple[str, ...] | None = None,
    custom_rois=None,
    select=None,
    allow_extrapolation: bool = False,
    allow_condition_mismatch: bool = False,
    progress: bool | None = False,
) -> AnalysisResult:
    """Analyse one recording end to end.

    Parameters
    ----------
    recording : str | Path | mne.io.BaseRaw | sourcelab.intake.Recording
        A file (EDF, BDF, BrainVision, EEGLAB, FIF, BIDS path) or an in-memory recording whose
        channel names name the 19 10-20 sites (decorations such as ``"EEG T3-REF"`` are
        recognised).
    config : AnalysisConfig, optional
        Default settings when omitted.
    age : float, optional
        Participant age in years; needed with ``norms``.
    norms : str | Path | sourcelab.norms.Norms, optional
        Norms to z-score against; their fingerprint must equal this analysis'.
    condition : str, optional
        Recording condition (e.g. ``"eyes closed"``), compared with the norms'.
    atlases : tuple of str, optional
        Atlas names (default :data:`DEFAULT_ATLASES`).
    custom_rois : Atlas, optional
        User-defined ROIs (:func:`sourcelab.rois.load_custom_rois`), reported as their own atlas.
    select : optional
        Segments to analyse: annotation descriptions and/or (start, stop) ranges in seconds
        (see :func:`sourcelab.intake.clean.selection_mask`).
    allow_extrapolation : bool
        z-score outside the norms' age range (rows flagged).
    allow_condition_mismatch : bool
        z-score against norms of another condition (rows flagged).
    progress : bool | None
        Stage progress bar (None: only when standard error is a terminal).

    Returns
    -------
    AnalysisResult

    Raises
    ------
    InputError
        Unreadable recording, too little clean data, norms that do not fit (fingerprint,
        condition, age range, bands: checked before the recording is read), ...
    """
    from .headmodel import load_head_model
    from .intake import Recording, clean_recording, read_recording
    from .inverse import inverse_operator
    from .progress import Stages
    from .rois import load_atlas
    from .spectra import (
        analysed_bins,
        average_reference,
        broadband_cross_spectra,
        check_bands_within,
        epoch_cross_spectra,
        relative_power,
        sensor_band_power,
    )
    from .trust.resolvability import resolvable_areas

    t0 = time.perf_counter()
    config = config or AnalysisConfig()
    names = config.bands.names
    nm = opts = roi_rows = sensor_rows = source_norms = None
    model = load_head_model()
    fp = fingerprint_for(config, model.sha256)
    atlas_objs = tuple(load_atlas(a) for a in (atlases or DEFAULT_ATLASES))
    if custom_rois is not None:
        atlas_objs += (custom_rois,)
    if norms is not None:  # cheap checks first: norms that do not fit fail before the pipeline
        from .norms import match_norms, read_norms

        nm = norms if not isinstance(norms, (str, Path)) else read_norms(norms)
        if age is None:
            raise InputError("the participant's age is needed with norms (z-scores depend on age)")
        opts = dict(
            age=age,
            fingerprint=fp,
            condition=condition,
            allow_extrapolation=allow_extrapolation,
            allow_condition_mismatch=allow_condition_mismatch,
        )
        # the rows of the ROI and sensor tables do not depend on the recording: their norms
        # (fingerprint, condition, age range, bands and measures) are matched on tables of the
        # same rows with placeholder values, built by the same functions as the real tables
        blank = np.zeros((len(names), model.src_pos.shape[0]))
        roi_rows = match_norms(
            _roi_table(atlas_objs, blank, blank, names, {}), nm, kind="roi", **opts
        )
        blank = np.zeros((len(names), len(model.ch_names)))
        sensor_rows = match_norms(
            _sensor_table(model.ch_names, blank, blank, names), nm, kind="sensor", **opts
        )
        source_norms = _source_norms(
            nm, fp, age=float(age), allow_extrapolation=allow_extrapolation
        )
    with (
        thread_limits(),  # every pool, BLAS and OpenMP (see constants.BLAS_THREADS)
        Stages(STAGES, desc="analysis", enabled=progress) as stages,
        _beside(bool(config.n_boot) and _second_core_free()) as beside,
    ):
        stages.step("reading")
        rec = recording if isinstance(recording, Recording) else read_recording(recording)
        check_sampling_rate(config, rec.sfreq, where=rec.path)
        stages.step("cleaning")
        # a recording read here is cleaned inside its own buffer (memory: one copy of the
        # continuous data, not three); only its metadata is needed from now on
        own = rec is not recording
        clean = clean_recording(rec, config, select=select, age=age, overwrite=own)
        if own:
            rec = dataclasses.replace(rec, raw=None, eog_uv=None)
        if tuple(clean.ch_names) != tuple(model.ch_names):
            raise InputError(
                f"channels {clean.ch_names} do not match the head model's {model.ch_names}"
            )
        stages.step("cross-spectra")
        check_bands_within(config.bands)
        # coupling reads the same Hann coefficients in single precision: kept from this transform
        spec = None
        if config.coupling:
            n_bins = analysed_bins(clean.epochs.shape[-1], clean.sfreq, config.bands)[0].size
            spec = np.empty(clean.epochs.shape[:2] + (n_bins,), dtype=np.complex64)
        csd_epochs = epoch_cross_spectra(clean.epochs, clean.sfreq, config.bands, fourier_out=spec)
        csd = csd_epochs.mean(axis=0)
        # relative power: band power / power over the fixed 1-45 Hz range (config.BROADBAND_HZ)
        total_epochs = broadband_cross_spectra(clean.epochs, clean.sfreq)
        total = total_epochs.mean(axis=0)
        sens_abs, sens_rel = sensor_band_power(average_reference(csd), average_reference(total))
        stages.step("sources")
        op = inverse_operator(config.method, config.orientation, config.lambda2)
        src_abs = op.power(csd)
        src_rel = relative_power(src_abs, op.power(total))
        # the ROI bootstrap replicates (the largest single cost) need nothing computed after
        # this point: drawn on a second core while the areas, quality and coupling stages run
        ahead = None
        if beside is not None:
            from .trust import roi_replicates

            ahead = beside.submit(
                roi_replicates,
                csd_epochs,
                op,
                atlas_objs,
                n_boot=config.n_boot,
                seed=config.boot_seed,
                epoch_total=total_epochs,
            )
        _early_maps(config, clean.ch_names, src_abs, src_rel, sens_abs, sens_rel)
        stages.step("areas")
        roi_table = _roi_table(
            atlas_objs, src_abs, src_rel, names, resolvable_areas(config.lambda2)
        )
        sensor_table = _sensor_table(clean.ch_names, sens_abs, sens_rel, names)
        slow = _slow_maximum(src_abs, names, model)
        quality = _quality(clean, csd_epochs, op, atlas_objs[0], config, slow)
        stages.step("coupling")
        pair_table = coupling_table = None
        if config.coupling:
            pair_table, coupling_table = _coupling(clean, model, op, config, spec=spec)
        del spec

        stages.step("z-scores")
        norms_info = None
        notes: list[str] = []
        if nm is not None:
            from .norms import apply_norms

            roi_table = apply_norms(roi_table, nm, kind="roi", rows=roi_rows, **opts)
            sensor_table = apply_norms(sensor_table, nm, kind="sensor", rows=sensor_rows, **opts)
            scored_any = False
            for kind, what in (("pair", "electrode-pair"), ("edge", "network coupling")):
                table = pair_table if kind == "pair" else coupling_table
                if table is None:
                    continue
                scored = _coupling_z(table, nm, kind, opts)
                if scored is None:
                    notes.append(
                        f"the norms hold no {kind} rows: {what} z-scores are left "
                        "empty (norms built by this sourcelab version include them)"
                    )
                    log.warning("%s", notes[-1])
                else:
                    scored_any = True
                    if kind == "pair":
                        pair_table = scored
                    else:
                        coupling_table = scored
            note = _epochs_note(nm, int(csd_epochs.shape[0])) if scored_any else None
            if note:
                notes.append(note)
                log.warning("%s", note)
            norms_info = NormsInfo(
                path=None if nm.path is None else str(nm.path),
                sha256=nm.sha256,
                condition=nm.condition,
                cohort=dict(nm.cohort),
                n_rows=int(len(nm.table)),
                fingerprint=nm.fingerprint,
            )
        stages.step("intervals")
        if config.n_boot:
            from .trust import add_intervals, add_sensor_intervals

            kw = dict(
                n_boot=config.n_boot,
                seed=config.boot_seed,
                ci=config.ci,
                band_names=names,
                epoch_total=total_epochs,
            )
            roi_table = add_intervals(
                roi_table,
                csd_epochs,
                op,
                atlas_objs,
                replicates=None if ahead is None else ahead.result(),
                norm_rows=roi_rows,
                **kw,
            )
            sensor_table = add_sensor_intervals(
                sensor_table, csd_epochs, ch_names=clean.ch_names, norm_rows=sensor_rows, **kw
            )
        stages.step("candidates")
        from .trust import leakage_for, leakage_hints

        leak = leakage_for(
            "brodmann", method=config.method, orientation=config.orientation, lambda2=config.lambda2
        )
        candidates = hints = source_z = None
        if nm is not None:
            if source_norms is not None:
                source_z = _source_z_maps(*source_norms, src_abs, src_rel)
                from .targets.peaks import peak_candidates_for

                zmaps = {(m, b): source_z[m][i] for m in source_z for i, b in enumerate(names)}
                candidates = peak_candidates_for(zmaps, lambda2=config.lambda2)
            else:
                from .targets import candidates_for_table

                log.warning(
                    "%s has no per-source norms beside it: candidates are areas ranked "
                    "by their mean, not by the peaks of a z-map",
                    nm.path or "norms",
                )
                candidates = candidates_for_table(roi_table)
            hints = leakage_hints(roi_table[roi_table["atlas"] == "brodmann"], leak)
    recording_info = RecordingInfo(
        path=str(rec.path) if rec.path else None,
        sha256=rec.sha256,
        sfreq=float(rec.sfreq),
        duration_s=float(rec.duration_s),
        channel_map=dict(rec.channel_map),
        original_reference=rec.original_reference,
        interpolated=tuple(rec.interpolated),
        annotations=tuple(rec.annotations),
        age=None if age is None else float(age),
        condition=condition,
    )
    # clean.warnings already holds the recording's warnings: keep each warning once
    slow_warning = (slow["warning"],) if slow is not None and slow["warning"] else ()
    warnings = tuple(
        dict.fromkeys(tuple(rec.warnings) + tuple(clean.warnings) + slow_warning + tuple(notes))
    )
    log.info("analysis done in %.2f s", time.perf_counter() - t0)
    return AnalysisResult(
        config=config,
        fingerprint=fp,
        ch_names=tuple(clean.ch_names),
        source_abs=src_abs.astype(np.float32),
        source_rel=src_rel.astype(np.float32),
        sensor_abs=sens_abs,
        sensor_rel=sens_rel,
        roi_table=roi_table,
        sensor_table=sensor_table,
        quality=quality,
        recording=recording_info,
        norms=norms_info,
        warnings=warnings,
        atlases=atlas_objs,
        leakage=leak,
        candidates=candidates,
        leakage_hints=hints,
        epoch_csd=csd_epochs,
        epoch_onsets_s=np.asarray(clean.epoch_onsets_s, dtype=float),
        epoch_total=total_epochs,
        source_z=source_z,
        pair_table=pair_table,
        coupling_table=coupling_table,
    )


def _second_core_free() -> bool:
    """May a stage run beside the others: a second core, no one-thread pin (batch workers), and
    no warmed figure renderer (``sourcelab.figures.warm``), which uses the second core
    meanwhile?"""
    return parallel_stages() and _warm_renderer() is None


def _warm_renderer():
    """The module :mod:`sourcelab.figures.warm` when a warmed renderer is active, else None.

    Looked up, not imported: a renderer exists only if its module was loaded, so the tables-only
    path never imports it.
    """
    warm = sys.modules.get("sourcelab.figures.warm")
    return warm if warm is not None and warm.active() is not None else None


@contextlib.contextmanager
def _beside(enabled: bool):
    """A one-thread pool for work that runs beside the next stages (None when not enabled).

    On leaving (also on an error) work not yet started is cancelled and the pool is not
    waited for.
    """
    if not enabled:
        yield None
        return
    from concurrent.futures import ThreadPoolExecutor

    pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="sourcelab-beside")
    try:
        yield pool
    finally:
        pool.shutdown(wait=False, cancel_futures=True)


def _source_norms(norms, fp: Fingerprint, *, age: float, allow_extrapolation: bool):
    """The per-source norms beside ``norms`` and the age to evaluate them at (clamped into their
    range when extrapolation is allowed), or None when there are none."""
    from .norms.source_norms import read_source_norms, source_norms_path

    if norms.path is None:
        return None
    path = source_norms_path(norms.path)
    if not path.is_file():
        return None
    sn = read_source_norms(path, fingerprint=fp.to_dict())
    lo, hi = sn.age_range
    if not lo <= age <= hi:
        if not allow_extrapolation:
            raise InputError(
                f"age {age:g} y is outside the per-source norms' age range "
                f"({lo:g}-{hi:g} y); allow extrapolation explicitly to z-score "
                "anyway",
                path=path,
            )
        age = min(max(age, lo), hi)
    return sn, age


def _source_z_maps(sn, age: float, src_abs: np.ndarray, src_rel: np.ndarray) -> dict:
    """Per-source predictive z-maps against per-source norms ``sn`` at ``age`` (years):
    ``{"absolute": (n_bands, n_src), "relative": (n_bands, n_src)}`` (the measures ``sn`` holds).
    """
    from .norms.source_norms import source_z

    return {
        m: source_z(sn, v, age=age, measure=m).astype(np.float32)
        for m, v in (("absolute", src_abs), ("relative", src_rel))
        if m in sn.measures
    }


@functools.lru_cache(maxsize=2)
def _confusable(model) -> dict:
    """Brodmann areas whose scalp maps can pass for eye activity (cached per head model)."""
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


def _quality(
    clean, csd_epochs: np.ndarray, op, atlas, config: AnalysisConfig, slow: dict | None = None
) -> QualitySummary:
    """Seconds kept/rejected and split-half / test-retest reliability (sensors and areas)."""
    from .intake import reliability_summary
    from .inverse import roi_power_matrices
    from .spectra import average_reference

    sens = np.einsum("ebcc->ebc", average_reference(csd_epochs))  # (n_ep, n_bands, n_ch)
    m = roi_power_matrices(op, atlas.vertex_sets())
    roi = np.einsum("rcd,ebdc->ebr", m, csd_epochs)  # per-epoch ROI mean power
    names, thr = config.bands.names, config.reliability_threshold
    return QualitySummary(
        kept_s=float(clean.kept_s),
        rejected_s={k: float(v) for k, v in clean.rejected_s.items()},
        n_epochs=int(csd_epochs.shape[0]),
        channel_kept_fraction={k: float(v) for k, v in clean.channel_kept_fraction.items()},
        mains_hz=clean.mains_hz,
        thresholds=dict(clean.thresholds),
        excluded=tuple(dict(e) for e in clean.excluded),
        ocular=dict(clean.ocular, **({"slow_maximum": slow} if slow is not None else {})),
        cleaning_seconds=dict(clean.timings_s),
        reliability={
            "sensors": reliability_summary(sens, names, threshold=thr),
            atlas.name: reliability_summary(roi, names, threshold=thr),
        },
    )
