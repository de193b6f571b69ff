"""Norms from a folder of reference recordings: analyse each one, fit, write and calibrate.

This is the cohort step above the analysis: every recording listed in a BIDS ``participants.tsv``
is analysed with :func:`sourcelab.analysis.analyze` (serially, on worker processes or on Dask,
through :mod:`sourcelab.batch.engines`), the tables are fitted with
:func:`sourcelab.norms.fit_norms`, and the norms file, a calibration table and a calibration figure
are written.  ``sourcelab norms build`` is this function.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from .batch.inputs import read_participants
from .constants import RECORDING_SUFFIXES, recording_suffix
from .errors import InputError
from .norms import Norms, NormsFit, entry_values, fit_norms, normalise_condition, write_norms
from .norms.fit import clean_epochs_summary, slim_table
from .provenance import Fingerprint, atomic_write_text, safe_name, save_png

log = logging.getLogger("sourcelab")


def find_recording(cohort_dir: str | Path, participant_id: str) -> Path:
    """Find one participant's recording among the files that exist in ``cohort_dir``.

    Looks in ``<cohort_dir>/<id>/eeg/`` (BIDS; ``<id>/`` itself when it has no ``eeg`` folder,
    ``<id>`` with or without the ``sub-`` prefix) and in ``cohort_dir`` itself for files with a
    recording suffix (:data:`sourcelab.constants.RECORDING_SUFFIXES`) whose name is the sanitised
    ID or starts with it followed by ``_`` or ``.``.  The ID never becomes a path: it is only
    compared with names listed from the folder.

    Parameters
    ----------
    cohort_dir : str | Path
        The cohort folder (holding ``participants.tsv``).
    participant_id : str
        ID from ``participants.tsv``, e.g. ``"sub-01"`` or ``"01"``.

    Returns
    -------
    Path
        The one matching recording.

    Raises
    ------
    InputError
        No recording, or several.
    """
    root = Path(cohort_dir)
    sid = safe_name(participant_id)
    cands = [sid] if sid.startswith("sub-") else [sid, f"sub-{sid}"]
    folders = [root]
    for entry in root.iterdir():
        if entry.is_dir() and entry.name in cands:
            eeg = [e for e in entry.iterdir() if e.is_dir() and e.name == "eeg"]
            folders += eeg or [entry]
    found = []
    for folder in folders:
        for f in sorted(folder.iterdir()):
            suffix = recording_suffix(f.name)
            if not f.is_file() or suffix is None:
                continue
            if any(
                f.name.lower() == (c + suffix).lower() or f.name.startswith((c + "_", c + "."))
                for c in cands
            ):
                found.append(f)
    if not found:
        raise InputError(
            f"no recording found for participant {participant_id!r} "
            f"(looked for {cands[0]}* with suffix {list(RECORDING_SUFFIXES)})",
            path=root,
        )
    if len(found) > 1:
        raise InputError(
            f"several recordings for participant {participant_id!r}: {[f.name for f in found]}",
            path=root,
        )
    return found[0]


@dataclass(frozen=True, eq=False)
class CohortBuild:
    """Outcome of :func:`build_norms`.

    Attributes
    ----------
    norms : Norms
        As written (``path`` and ``sha256`` set).
    fit : NormsFit
    report : DataFrame
        Calibration, see :func:`~sourcelab.norms.calibration.calibration_report`.
    report_path, figure_path : Path
    failures : tuple of (participant_id, message)
    """

    norms: Norms
    fit: NormsFit
    report: object
    report_path: Path
    figure_path: Path
    failures: tuple[tuple[str, str], ...]


def _cohort_tables(task):
    """Worker function: analyse one reference recording; return its tables, fingerprint and
    per-source maps (float32)."""
    from .analysis import analyze

    path, config, age = task
    # norms need the values only: no bootstrap intervals (they do not change any value)
    res = analyze(path, config=config.replace(n_boot=0, coupling_n_boot=0), age=age)
    return (
        slim_table(res.roi_table, "roi"),
        slim_table(res.sensor_table, "sensor"),
        res.fingerprint,
        slim_table(res.pair_table, "pair"),
        slim_table(res.coupling_table, "edge"),
        res.quality.n_epochs,
        {"absolute": res.source_abs, "relative": res.source_rel},
    )


def fit_cohort(
    entries,
    source_maps,
    *,
    fingerprint: Fingerprint,
    condition: str,
    **fit_options,
):
    """Fit the table norms and the per-source norms of a cohort's analyses.

    Parameters
    ----------
    entries : sequence of (participant_id, age, roi_table, sensor_table, pair_table, coupling_table)
    source_maps : sequence of dict
        Per entry, ``{"absolute": (n_bands, n_src), "relative": (n_bands, n_src)}``.
    fingerprint : Fingerprint
    condition : str
    **fit_options
        ``model``, ``degree``, ``bins``, ``min_n_per_bin``, ``robust``, ``cohort_info``,
        ``notes``: passed to :func:`sourcelab.norms.fit_norms` (same defaults).

    Returns
    -------
    fit : NormsFit
        Norms and the leave-one-out material for calibration.
    source_norms : SourceNorms | None
        Per-source age models of the same degree (None for age-binned norms, whose bins the
        per-source file does not model).
    """
    import numpy as np

    from .headmodel import load_head_model
    from .norms.source_norms import fit_source_norms

    fit = fit_norms(entries, fingerprint=fingerprint, condition=condition, **fit_options)
    if fit.norms.cohort["model"] != "regression":
        log.warning(
            "norms: age-binned norms have no per-source norms; analyses against them "
            "rank areas by their mean instead of by z-map peaks"
        )
        return fit, None
    ages = np.array([e[1] for e in entries], dtype=float)
    maps = {
        m: np.stack([np.asarray(sm[m], dtype=np.float32) for sm in source_maps])
        for m in ("absolute", "relative")
    }
    sn = fit_source_norms(
        ages,
        maps,
        degree=int(fit.norms.cohort["degree"]),
        bands=[b[0] for b in fingerprint.bands],
        fingerprint=fingerprint.to_dict(),
        condition=condition,
        vertices=load_head_model().vertno,
        robust=fit.norms.cohort["robust"],
    )
    return fit, sn


def write_cohort_norms(fit, source_norms, out: str | Path):
    """Write norms, per-source norms and the calibration table and figure beside them.

    Parameters
    ----------
    fit : NormsFit
    source_norms : SourceNorms | None
    out : str | Path
        The norms TSV; ``<stem>_sources.npz``, ``<stem>_calibration.tsv`` and
        ``<stem>_calibration.png`` are written beside it.

    Returns
    -------
    norms : Norms
        As written (``path``, ``sha256``).
    report : DataFrame
        Per-row calibration (:func:`~sourcelab.norms.calibration.calibration_report`).
    report_path, figure_path : Path
        ``<stem>_calibration.tsv`` and ``<stem>_calibration.png``.
    """
    from .norms.calibration import calibration_report, plot_calibration
    from .norms.source_norms import source_norms_path, write_source_norms

    out = Path(out)
    norms = write_norms(fit.norms, out)
    if source_norms is not None:
        write_source_norms(source_norms, source_norms_path(out))
    report = calibration_report(fit)
    report_path = out.with_name(out.stem + "_calibration.tsv")
    figure_path = out.with_name(out.stem + "_calibration.png")
    atomic_write_text(report_path, report.to_csv(sep="\t", index=False, na_rep="n/a"))
    save_png(plot_calibration(fit, report=report), figure_path, dpi=120)
    return norms, report, report_path, figure_path


def build_norms(
    cohort_dir: str | Path,
    participants: str | Path,
    *,
    out: str | Path,
    config=None,
    condition: str | None = None,
    model: str = "regression",
    degree: int | str = "auto",
    bins: Sequence[float] | None = None,
    min_n_per_bin: int = 20,
    robust: bool = True,
    notes: Sequence[str] = (),
    engine=None,
    progress: bool | None = None,
) -> CohortBuild:
    """Analyse every reference recording in a folder and build, write and calibrate norms.

    Parameters
    ----------
    cohort_dir : str | Path
        Folder with one recording per participant (BIDS ``sub-XX/eeg/`` or files named by ID).
    participants : str | Path
        BIDS participants file: ``participant_id``, ``age`` (years), optional ``sex``,
        ``condition``.
    out : str | Path
        Norms file to write.  Beside it: ``<stem>_sources.npz`` (per-source norms, for z-map
        peaks), ``<stem>_calibration.tsv`` and ``<stem>_calibration.png``.
    config : AnalysisConfig, optional
        Passed to :func:`sourcelab.analysis.analyze` for every recording (default settings when
        omitted).
    condition : str | None
        Condition of the norms (``"EC"``/``"EO"`` mean eyes closed/open).  If the participants
        file has a ``condition`` column, only matching participants are used; if None, that
        column must hold one condition.  A plain BIDS file (participant_id, age, sex) needs it.
    model, degree, bins, min_n_per_bin, robust, notes
        See :func:`sourcelab.norms.fit_norms`.
    engine : Engine, optional
        From :func:`sourcelab.batch.make_engine`: run the analyses on worker processes or a Dask
        cluster (the machinery of ``sourcelab batch``); default serial in this process.
    progress : bool | None
        Progress bar over the analyses (None: only on a terminal).

    Returns
    -------
    CohortBuild
        The written norms, the fit, the calibration and the participants that failed.

    Notes
    -----
    A participant that fails (no recording, bad age, analysis error, different fingerprint) is
    logged on one line and skipped; the failures are returned.
    """
    from .batch.engines import SerialEngine, run_unordered
    from .config import AnalysisConfig

    config = config or AnalysisConfig()
    cohort_dir, out = Path(cohort_dir), Path(out)
    if not cohort_dir.is_dir():
        raise InputError("cohort folder not found", path=cohort_dir)
    parts = read_participants(participants)
    if "condition" in parts.columns:
        conds = parts["condition"].str.strip()
        if condition is None:
            uniq = sorted(set(conds) - {"", "n/a"})
            if len(uniq) != 1:
                raise InputError(
                    f"participants have conditions {uniq}; choose one with --condition",
                    path=participants,
                )
            condition = uniq[0]
        parts = parts[conds.map(normalise_condition) == normalise_condition(condition)]
        if parts.empty:
            raise InputError(
                f"no participant has condition {condition!r} (conditions: "
                f"{sorted(set(conds) - {'', 'n/a'})})",
                path=participants,
            )
    elif condition is None:
        raise InputError(
            "participants file has no 'condition' column; give the condition of "
            'the recordings with --condition (e.g. --condition "eyes closed" or '
            "EC / EO)",
            path=participants,
        )
    condition = normalise_condition(condition)
    failures: list[tuple[str, str]] = []
    tasks, pids = [], []
    for row in parts.itertuples(index=False):
        pid = str(row.participant_id)
        try:
            age = float(row.age)
            if not (math.isfinite(age) and age > 0):
                raise ValueError
        except ValueError:
            failures.append((pid, f"age {row.age!r} is not a positive number of years"))
            log.warning("norms: %s skipped: age %r is not a positive number", pid, row.age)
            continue
        try:
            rec = find_recording(cohort_dir, pid)
        except InputError as exc:
            failures.append((pid, str(exc)))
            log.warning("norms: %s skipped: %s", pid, exc)
            continue
        tasks.append((rec, config, age))
        pids.append((pid, age))
    # analyses run on the batch machinery (serial, processes or Dask); results are collected in
    # participant order, so the norms do not depend on which worker finished first
    from tqdm import tqdm

    done: dict[int, tuple] = {}
    bar = tqdm(
        total=len(tasks),
        desc="analysing reference recordings",
        unit="rec",
        disable=None if progress is None else not progress,
    )
    try:
        for i, res, err in run_unordered(engine or SerialEngine(), _cohort_tables, tasks):
            bar.update(1)
            pid = pids[i][0]
            if err is not None:
                msg = str(err).splitlines()[0] if str(err) else type(err).__name__
                failures.append((pid, msg))
                log.warning("norms: %s skipped: %s", pid, msg)
            else:
                done[i] = res
    finally:
        bar.close()
    entries, maps = [], []
    epochs: list[int] = []
    fp0: Fingerprint | None = None
    for i in sorted(done):
        pid, age = pids[i]
        roi_table, sensor_table, fp, pair_table, coupling_table, n_epochs, source_maps = done[i]
        if fp0 is None:
            fp0 = fp
        elif fp0.differences(fp):
            msg = "pipeline fingerprint differs from the first participant's: " + "; ".join(
                fp0.differences(fp)
            )
            failures.append((pid, msg))
            log.warning("norms: %s skipped: %s", pid, msg)
            continue
        try:
            entry_values(pid, age, roi_table, sensor_table, pair_table, coupling_table)
        except InputError as exc:
            failures.append((pid, str(exc)))
            log.warning("norms: %s skipped: %s", pid, exc)
            continue
        entries.append((pid, age, roi_table, sensor_table, pair_table, coupling_table))
        maps.append(source_maps)
        if n_epochs is not None:
            epochs.append(int(n_epochs))
    if fp0 is None:
        raise InputError(
            f"no participant could be analysed ({len(failures)} failures)", path=cohort_dir
        )
    info = {"source": cohort_dir.name, "n_listed": int(len(parts)), "n_failed": len(failures)}
    if epochs:  # coupling magnitudes depend on recording length (sourcelab/coupling/TABLES.md)
        info["clean_epochs"] = clean_epochs_summary(epochs)
    if "sex" in parts.columns:
        used = set(e[0] for e in entries)
        sex = parts[parts["participant_id"].isin(used)]["sex"].str.strip().value_counts()
        info["sex"] = {str(k): int(v) for k, v in sex.items()}
    fit, source_norms = fit_cohort(
        entries,
        maps,
        fingerprint=fp0,
        condition=condition,
        model=model,
        degree=degree,
        bins=bins,
        min_n_per_bin=min_n_per_bin,
        robust=robust,
        cohort_info=info,
        notes=notes,
    )
    norms, report, report_path, figure_path = write_cohort_norms(fit, source_norms, out)
    return CohortBuild(
        norms=norms,
        fit=fit,
        report=report,
        report_path=report_path,
        figure_path=figure_path,
        failures=tuple(failures),
    )
