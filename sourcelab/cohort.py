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
from .provenance import Fingerprint, atomic_write_text, safe_name

log = logging.getLogger("sourcelab")


def find_recording(cohort_dir: str | Path, participant_id: str) -> Path:
    """Find one participant's recording among the files that exist in ``cohort_dir``.

    Looks in ``<cohort_dir>/<id>/eeg/`` (BIDS) and in ``cohort_dir`` itself for files with a
    recording suffix (:data:`sourcelab.constants.RECORDING_SUFFIXES`) whose name is the sanitised ID or starts with
    it followed by ``_`` or ``.``.  The ID never becomes a path: it is only compared with names
    listed from the folder.

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
            if any(f.name.lower() == (c + suffix).lower() or f.name.startswith((c + "_", c + "."))
                   for c in cands):
                found.append(f)
    if not found:
        raise InputError(f"no recording found for participant {participant_id!r} "
                         f"(looked for {cands[0]}* with suffix {list(RECORDING_SUFFIXES)})",
                         path=root)
    if len(found) > 1:
        raise InputError(f"several recordings for participant {participant_id!r}: "
                         f"{[f.name for f in found]}", path=root)
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
    """Worker function: analyse one reference recording, return its tables and fingerprint."""
    from .analysis import analyze

    path, config, age = task
    # norms need the values only: no bootstrap intervals (they do not change any value)
    res = analyze(path, config=config.replace(n_boot=0, coupling_n_boot=0), age=age)
    return (slim_table(res.roi_table, "roi"), slim_table(res.sensor_table, "sensor"),
            res.fingerprint, slim_table(getattr(res, "pair_table", None), "pair"),
            slim_table(getattr(res, "coupling_table", None), "edge"),
            getattr(getattr(res, "quality", None), "n_epochs", None))


def build_norms(cohort_dir: str | Path, participants: str | Path, *, out: str | Path,
                config=None, condition: str | None = None, model: str = "regression",
                degree: int | str = "auto", bins: Sequence[float] | None = None,
                min_n_per_bin: int = 20, robust: bool = True, notes: Sequence[str] = (),
                engine=None, progress: bool | None = None) -> CohortBuild:
    """Analyse every reference recording in a folder and build, write and calibrate norms.

    Parameters
    ----------
    cohort_dir : str | Path
        Folder with one recording per participant (BIDS ``sub-XX/eeg/`` or files named by ID).
    participants : str | Path
        BIDS participants file: ``participant_id``, ``age`` (years), optional ``sex``,
        ``condition``.
    out : str | Path
        Norms file to write.  Beside it: ``<stem>_calibration.tsv`` and ``<stem>_calibration.png``.
    config : AnalysisConfig, optional
        Passed to :func:`sourcelab.analysis.analyze` for every recording (default settings when
        omitted).
    condition : str | None
        Condition of the norms.  If the participants file has a ``condition`` column, only
        matching participants are used; if None, that column must hold one condition.
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

    Notes
    -----
    A participant that fails (no recording, bad age, analysis error, different fingerprint) is
    logged on one line and skipped; the failures are returned.
    """
    from .batch.engines import SerialEngine, run_unordered
    from .config import AnalysisConfig
    from .norms.calibration import calibration_report, plot_calibration

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
                raise InputError(f"participants have conditions {uniq}; name the condition of "
                                 "the norms to choose one", path=participants)
            condition = uniq[0]
        parts = parts[conds.map(normalise_condition) == normalise_condition(condition)]
    elif condition is None:
        raise InputError("participants file has no 'condition' column; name the condition of "
                         "the norms (e.g. 'eyes closed')", path=participants)
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
    bar = tqdm(total=len(tasks), desc="analysing reference recordings", unit="rec",
               disable=None if progress is None else not progress)
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
    entries = []
    epochs: list[int] = []
    fp0: Fingerprint | None = None
    for i in sorted(done):
        pid, age = pids[i]
        roi_table, sensor_table, fp, pair_table, coupling_table, n_epochs = done[i]
        if fp0 is None:
            fp0 = fp
        elif fp0.differences(fp):
            msg = ("pipeline fingerprint differs from the first participant's: "
                   + "; ".join(fp0.differences(fp)))
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
        if n_epochs is not None:
            epochs.append(int(n_epochs))
    if fp0 is None:
        raise InputError(f"no participant could be analysed ({len(failures)} failures)",
                         path=cohort_dir)
    info = {"source": cohort_dir.name, "n_listed": int(len(parts)),
            "n_failed": len(failures)}
    if epochs:  # coupling magnitudes depend on recording length (sourcelab/coupling/TABLES.md)
        info["clean_epochs"] = clean_epochs_summary(epochs)
    if "sex" in parts.columns:
        used = set(e[0] for e in entries)
        sex = parts[parts["participant_id"].isin(used)]["sex"].str.strip().value_counts()
        info["sex"] = {str(k): int(v) for k, v in sex.items()}
    fit = fit_norms(entries, fingerprint=fp0, condition=condition, model=model, degree=degree,
                    bins=bins, min_n_per_bin=min_n_per_bin, robust=robust, cohort_info=info,
                    notes=notes)
    norms = write_norms(fit.norms, out)
    report = calibration_report(fit)
    report_path = out.with_name(out.stem + "_calibration.tsv")
    figure_path = out.with_name(out.stem + "_calibration.png")
    atomic_write_text(report_path, report.to_csv(sep="\t", index=False, na_rep="n/a"))
    fig = plot_calibration(fit)
    tmp = figure_path.with_name("." + figure_path.name + ".tmp.png")
    fig.savefig(tmp, dpi=120)
    tmp.replace(figure_path)
    return CohortBuild(norms=norms, fit=fit, report=report, report_path=report_path,
                       figure_path=figure_path, failures=tuple(failures))
