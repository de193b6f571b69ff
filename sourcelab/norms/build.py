"""Building norms from a reference cohort's analysis tables (streamed), and checking a norms file.

Rules (documented in FORMAT.md):

* every quantity (ROI or channel x band x measure) is transformed (log10 absolute, logit
  relative) and modelled separately;
* ``model="regression"``: polynomial in log10(age) over the cohort's age range; the degree is
  chosen once for all quantities by leave-one-out cross-validation (``degree="auto"``, 0..3) or
  fixed by the caller;
* ``model="binned"``: mean and SD per age bin (bins given, or equal-count bins);
* ``robust=True``: controls more than 3.5 robust SDs (1.4826 x MAD) from the fit are excluded from
  that quantity, iteratively (see :func:`sourcelab.norms.models.fit_poly`).
"""

from __future__ import annotations

import csv
import logging
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Iterable, Sequence

import numpy as np
import pandas as pd

from ..errors import InputError
from ..provenance import Fingerprint, safe_name
from .io import (COLUMNS, MAX_DEGREE, NA, QUANTITY_COLUMNS, Norms, normalise_condition,
                 read_norms, write_norms)
from .models import fit_poly, select_degree
from .transforms import get_transform, transform_for_measure

log = logging.getLogger("sourcelab")

#: Recording file suffixes searched for in a cohort folder.
RECORDING_SUFFIXES = (".edf", ".bdf", ".vhdr", ".set", ".fif", ".h5", ".hdf5")
_ROI_NEED = ("atlas", "roi", "hemisphere", "band", "measure", "value")
_SENSOR_NEED = ("channel", "band", "measure", "value")


@dataclass(frozen=True, eq=False)
class NormsFit:
    """Norms together with what calibration needs.

    Attributes
    ----------
    norms : Norms
    participants : tuple of str
    ages : ndarray, shape (n,)
    quantities : DataFrame
        One row per modelled quantity (columns kind, atlas, name, hemisphere, band, measure,
        transform); column j of the matrices below.
    values : ndarray, shape (n, q)
        Transformed values (NaN where missing).
    resid : ndarray, shape (n, q)
        Residual from the norms row the control belongs to (NaN where missing/not covered).
    loo_z : ndarray, shape (n, q)
        Leave-one-out z of each control against norms built without it.
    excluded : ndarray of bool, shape (n, q)
        Controls dropped by the robust rule.
    row_quantity : ndarray of int, shape (n_rows,)
        Quantity index of each norms-table row.
    row_members : ndarray of bool, shape (n_rows, n)
        Controls falling in each norms-table row's age range.
    degree_scores : dict
        Cross-validation score per candidate degree (regression with ``degree="auto"``).
    """

    norms: Norms
    participants: tuple[str, ...]
    ages: np.ndarray
    quantities: pd.DataFrame
    values: np.ndarray
    resid: np.ndarray
    loo_z: np.ndarray
    excluded: np.ndarray
    row_quantity: np.ndarray
    row_members: np.ndarray
    degree_scores: dict


def _table_items(table: pd.DataFrame, kind: str, pid: str):
    need = _ROI_NEED if kind == "roi" else _SENSOR_NEED
    missing = [c for c in need if c not in table.columns]
    if missing:
        raise InputError(f"participant {pid!r}: {kind} table lacks columns {missing}")
    if kind == "roi":
        atlas, name, hemi = (table[c].astype(str).tolist() for c in ("atlas", "roi",
                                                                      "hemisphere"))
    else:
        name = table["channel"].astype(str).tolist()
        atlas = hemi = [NA] * len(table)
    bands = table["band"].astype(str).tolist()
    measures = table["measure"].astype(str).tolist()
    vals = pd.to_numeric(table["value"], errors="coerce").to_numpy(dtype=float)
    out = {}
    for key, v in zip(zip([kind] * len(table), atlas, name, hemi, bands, measures), vals):
        if key in out:
            raise InputError(f"participant {pid!r}: duplicate {kind} row {key[1:]}")
        out[key] = v
    return out


def entry_values(pid, age, roi_table, sensor_table) -> dict:
    """Check one cohort entry and return ``{quantity key: transformed value}``.

    Raises InputError naming the participant for a bad ID, age, table or value.
    """
    if not isinstance(pid, str) or not pid.strip():
        raise InputError(f"participant id must be a non-empty text, got {pid!r}")
    try:
        a = float(age)
    except (TypeError, ValueError):
        raise InputError(f"participant {pid!r}: age must be a number of years, got {age!r}"
                         ) from None
    if not (math.isfinite(a) and a > 0):
        raise InputError(f"participant {pid!r}: age must be > 0 years, got {age!r}")
    items: dict = {}
    for kind, t in (("roi", roi_table), ("sensor", sensor_table)):
        if t is not None:
            items.update(_table_items(t, kind, pid))
    if not items:
        raise InputError(f"participant {pid!r}: no roi or sensor rows")
    out = {}
    for key, v in items.items():
        try:
            out[key] = float(get_transform(transform_for_measure(key[5])).forward(v))
        except InputError as exc:
            raise InputError(f"participant {pid!r}, {key[1:]}: {exc}") from None
    return out


def _default_bins(ages: np.ndarray, min_n: int) -> tuple[float, ...]:
    n_bins = max(1, int(len(ages) // (1.25 * min_n)))
    inner = np.quantile(ages, np.linspace(0, 1, n_bins + 1)[1:-1])
    return (float(ages.min()), *[float(np.round(e, 1)) for e in inner], float(ages.max()))


def fit_norms(entries: Iterable, *, fingerprint: Fingerprint, condition: str,
              model: str = "regression", degree: int | str = "auto",
              bins: Sequence[float] | None = None, min_n_per_bin: int = 20,
              robust: bool = True, cohort_info: dict | None = None,
              notes: Sequence[str] = ()) -> NormsFit:
    """Build norms and keep the leave-one-out material for calibration.

    Parameters
    ----------
    entries : iterable of (participant_id, age, roi_table, sensor_table)
        Streamed once; only the small tables' values are kept.  Either table may be None.
    fingerprint : Fingerprint
        The pipeline that produced the tables (stored in the norms).
    condition : str
        Recording condition, e.g. ``"eyes closed"``.
    model : {"regression", "binned"}
    degree : int or "auto"
        Regression degree 0..3, or "auto" for leave-one-out selection (one degree for all rows).
    bins : sequence of float | None
        Bin edges in years for ``model="binned"``; ranges are closed, a control on a shared edge
        goes to the upper bin.  None: equal-count bins of about 1.25 x ``min_n_per_bin``.
    min_n_per_bin : int
        Minimum kept controls per row (per bin for binned norms); rows with fewer are omitted.
    robust : bool
        Iterative exclusion beyond 3.5 robust SDs (see :func:`~sourcelab.norms.models.fit_poly`).
    cohort_info : dict | None
        Extra JSON-serialisable cohort description merged into the summary (sex counts, source).
    notes : sequence of str
        Provenance lines for the file header.

    Returns
    -------
    NormsFit
    """
    fitters = {"regression": None, "binned": None}
    if model not in fitters:
        raise InputError(f"model: {model!r} is not one of {sorted(fitters)}")
    if not (degree == "auto" or (isinstance(degree, (int, np.integer))
                                 and 0 <= degree <= MAX_DEGREE)):
        raise InputError(f"degree: need 'auto' or an integer 0..{MAX_DEGREE}, got {degree!r}")
    if not (isinstance(min_n_per_bin, (int, np.integer)) and min_n_per_bin >= 3):
        raise InputError(f"min_n_per_bin: need an integer >= 3, got {min_n_per_bin!r}")
    index: dict[tuple, int] = {}
    ids: list[str] = []
    ages: list[float] = []
    per: list[dict[int, float]] = []
    for entry in entries:
        try:
            pid, age, roi_t, sen_t = entry
        except (TypeError, ValueError):
            raise InputError("entries: each entry must be (participant_id, age, roi_table, "
                             "sensor_table)") from None
        vals = entry_values(pid, age, roi_t, sen_t)
        if pid in ids:
            raise InputError(f"participant {pid!r} appears twice")
        ids.append(pid)
        ages.append(float(age))
        per.append({index.setdefault(k, len(index)): v for k, v in vals.items()})
    n, q = len(ids), len(index)
    if n < min_n_per_bin:
        raise InputError(f"need at least {min_n_per_bin} analysed participants (the minimum per "
                         f"norms row), got {n}")
    age = np.asarray(ages)
    Y = np.full((n, q), np.nan)
    for i, d in enumerate(per):
        Y[i, list(d)] = list(d.values())
    keys = list(index)
    qt = pd.DataFrame(keys, columns=list(QUANTITY_COLUMNS))
    qt["transform"] = [transform_for_measure(m) for m in qt["measure"]]

    scores: dict = {}
    if model == "regression":
        if degree == "auto":
            degree, scores = select_degree(age, Y, robust=robust)
            log.info("norms: regression degree %d chosen by leave-one-out CV (%s)", degree,
                     {k: round(v, 4) for k, v in scores.items()})
        ranges = [(float(age.min()), float(age.max()), int(degree))]
    else:
        edges = tuple(float(e) for e in (bins if bins is not None
                                         else _default_bins(age, min_n_per_bin)))
        if len(edges) < 2 or any(b <= a for a, b in zip(edges, edges[1:])) or edges[0] < 0:
            raise InputError(f"bins: need increasing edges >= 0 in years, got {edges}")
        ranges = [(lo, hi, 0) for lo, hi in zip(edges, edges[1:])]

    rows, row_q, members = [], [], []
    resid = np.full((n, q), np.nan)
    loo = np.full((n, q), np.nan)
    excl = np.zeros((n, q), dtype=bool)
    skipped = 0
    for r_i, (lo, hi, deg) in enumerate(ranges):
        last = r_i == len(ranges) - 1
        inb = (age >= lo) & ((age <= hi) if last else (age < hi))
        if model == "binned" and inb.sum() < min_n_per_bin:
            log.warning("norms: bin %g-%g y has %d controls (< %d): omitted", lo, hi,
                        int(inb.sum()), min_n_per_bin)
            continue
        for j in range(q):
            f = fit_poly(age[inb], Y[inb, j], deg, robust=robust)
            if f is None or f.n < min_n_per_bin or not f.sd > 0:
                skipped += 1
                continue
            coef = np.zeros(MAX_DEGREE + 1)
            coef[:deg + 1] = f.coef
            rows.append((*keys[j], lo, hi, model, deg, qt["transform"][j], *coef, f.sd, f.n))
            row_q.append(j)
            members.append(inb)
            resid[inb, j] = f.resid
            loo[inb, j] = f.loo_z
            excl[inb, j] = np.isfinite(Y[inb, j]) & ~f.kept
    if skipped:
        log.warning("norms: %d rows omitted (fewer than %d usable controls)", skipped,
                    min_n_per_bin)
    if not rows:
        raise InputError("no norms rows could be built (too few controls per row)")
    table = pd.DataFrame(rows, columns=list(COLUMNS))
    cohort = {"n": n, "age_min": float(age.min()), "age_max": float(age.max()),
              "age_median": float(np.median(age)), "model": model,
              "robust": bool(robust), "n_excluded_values": int(excl.sum())}
    if model == "regression":
        cohort["degree"] = int(degree)
    cohort.update(cohort_info or {})
    norms = Norms(table=table, fingerprint=fingerprint, condition=condition, cohort=cohort,
                  notes=tuple(notes))
    return NormsFit(norms=norms, participants=tuple(ids), ages=age, quantities=qt, values=Y,
                    resid=resid, loo_z=loo, excluded=excl, row_quantity=np.asarray(row_q),
                    row_members=np.asarray(members, dtype=bool).reshape(len(members), n),
                    degree_scores=scores)


def build_norms(entries: Iterable, *, fingerprint: Fingerprint, condition: str,
                model: str = "regression", degree: int | str = "auto",
                bins: Sequence[float] | None = None, min_n_per_bin: int = 20,
                robust: bool = True, cohort_info: dict | None = None,
                notes: Sequence[str] = ()) -> Norms:
    """Build norms from a reference cohort's tables; see :func:`fit_norms` for parameters."""
    return fit_norms(entries, fingerprint=fingerprint, condition=condition, model=model,
                     degree=degree, bins=bins, min_n_per_bin=min_n_per_bin, robust=robust,
                     cohort_info=cohort_info, notes=notes).norms


# ----------------------------------------------------------------------------- cohort folders

def read_participants(participants_tsv: str | Path) -> pd.DataFrame:
    """Read a BIDS ``participants.tsv`` (participant_id, age, optional sex, condition).

    Returns a DataFrame of strings; ``n/a`` and empty cells stay as text for per-row handling.
    """
    path = Path(participants_tsv)
    try:
        with open(path, newline="", encoding="utf-8-sig") as f:
            rows = list(csv.reader(f, delimiter="\t"))
    except FileNotFoundError:
        raise InputError("participants file not found", path=path) from None
    except UnicodeDecodeError:
        raise InputError("participants file is not UTF-8 text", path=path) from None
    if not rows:
        raise InputError("participants file is empty", path=path)
    head = [h.strip() for h in rows[0]]
    for col in ("participant_id", "age"):
        if col not in head:
            raise InputError(f"participants file lacks column {col!r} (BIDS: participant_id, "
                             "age, optional sex, condition)", path=path)
    body = [r + [""] * (len(head) - len(r)) for r in rows[1:] if any(c.strip() for c in r)]
    df = pd.DataFrame([r[:len(head)] for r in body], columns=head, dtype=object)
    if df["participant_id"].duplicated().any():
        dup = df["participant_id"][df["participant_id"].duplicated()].iloc[0]
        raise InputError(f"participant {dup!r} listed twice", path=path)
    return df


def find_recording(cohort_dir: str | Path, participant_id: str) -> Path:
    """Find one participant's recording among the files that exist in ``cohort_dir``.

    Looks in ``<cohort_dir>/<id>/eeg/`` (BIDS) and in ``cohort_dir`` itself for files with a
    recording suffix (:data:`RECORDING_SUFFIXES`) whose name is the sanitised ID or starts with
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
            if not f.is_file() or f.suffix.lower() not in RECORDING_SUFFIXES:
                continue
            if any(f.name == c + f.suffix or f.name.startswith((c + "_", c + "."))
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
    """Outcome of :func:`build_norms_from_cohort`.

    Attributes
    ----------
    norms : Norms  (written; ``path`` and ``sha256`` set)
    fit : NormsFit
    report : DataFrame  (calibration, see :func:`~sourcelab.norms.calibration.calibration_report`)
    report_path, figure_path : Path
    failures : tuple of (participant_id, message)
    """

    norms: Norms
    fit: NormsFit
    report: pd.DataFrame
    report_path: Path
    figure_path: Path
    failures: tuple[tuple[str, str], ...]


def _cohort_tables(task):
    """Worker function: analyse one reference recording, return its tables and fingerprint."""
    from ..pipeline import analyze  # imported here: the pipeline imports the norms package

    path, config, age = task
    res = analyze(path, config=config, age=age)
    return res.roi_table, res.sensor_table, res.fingerprint


def build_norms_from_cohort(cohort_dir: str | Path, participants_tsv: str | Path, *, config,
                            out: str | Path, condition: str | None = None,
                            model: str = "regression", degree: int | str = "auto",
                            bins: Sequence[float] | None = None, min_n_per_bin: int = 20,
                            robust: bool = True, notes: Sequence[str] = (),
                            engine=None) -> CohortBuild:
    """Analyse every reference recording in a folder and build, write and calibrate norms.

    ``engine`` (from :func:`sourcelab.batch.make_engine`) runs the analyses on worker processes or
    a Dask cluster, the same machinery as ``sourcelab batch``; default: serial in this process.

    Parameters
    ----------
    cohort_dir : str | Path
        Folder with one recording per participant (BIDS ``sub-XX/eeg/`` or files named by ID).
    participants_tsv : str | Path
        BIDS participants file: ``participant_id``, ``age`` (years), optional ``sex``,
        ``condition``.
    config : AnalysisConfig
        Passed to :func:`sourcelab.pipeline.analyze` for every recording.
    out : str | Path
        Norms file to write.  Beside it: ``<stem>_calibration.tsv`` and ``<stem>_calibration.png``.
    condition : str | None
        Condition of the norms (``"EC"``/``"EO"`` mean eyes closed/open).  If the participants
        file has a ``condition`` column, only matching participants are used; if None, that
        column must hold one condition.  A plain BIDS file (participant_id, age, sex) needs it.
    model, degree, bins, min_n_per_bin, robust, notes
        See :func:`fit_norms`.

    Returns
    -------
    CohortBuild

    Notes
    -----
    A participant that fails (no recording, bad age, analysis error, different fingerprint) is
    logged on one line and skipped; the failures are returned.
    """
    from .calibration import calibration_report, plot_calibration

    cohort_dir, out = Path(cohort_dir), Path(out)
    if not cohort_dir.is_dir():
        raise InputError("cohort folder not found", path=cohort_dir)
    parts = read_participants(participants_tsv)
    if "condition" in parts.columns:
        conds = parts["condition"].str.strip()
        if condition is None:
            uniq = sorted(set(conds) - {"", "n/a"})
            if len(uniq) != 1:
                raise InputError(f"participants have conditions {uniq}; choose one with "
                                 "--condition", path=participants_tsv)
            condition = uniq[0]
        parts = parts[conds.map(normalise_condition) == normalise_condition(condition)]
        if parts.empty:
            raise InputError(f"no participant has condition {condition!r} (conditions: "
                             f"{sorted(set(conds) - {'', 'n/a'})})", path=participants_tsv)
    elif condition is None:
        raise InputError("participants file has no 'condition' column; give the condition of "
                         "the recordings with --condition (e.g. --condition \"eyes closed\" or "
                         "EC / EO)", path=participants_tsv)
    condition = normalise_condition(condition)
    failures: list[tuple[str, str]] = []
    entries = []
    fp0: Fingerprint | None = None
    try:
        from tqdm import tqdm
        it = tqdm(parts.itertuples(index=False), total=len(parts), desc="reference cohort",
                  disable=None)
    except ImportError:  # pragma: no cover - tqdm is a dependency
        it = parts.itertuples(index=False)
    tasks, pids = [], []
    for row in it:
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
    from ..batch.engines import SerialEngine, run_unordered

    done: dict[int, tuple] = {}
    for i, res, err in run_unordered(engine or SerialEngine(), _cohort_tables, tasks):
        pid = pids[i][0]
        if err is not None:
            msg = str(err).splitlines()[0] if str(err) else type(err).__name__
            failures.append((pid, msg))
            log.warning("norms: %s skipped: %s", pid, msg)
        else:
            done[i] = res
    for i in sorted(done):
        pid, age = pids[i]
        roi_table, sensor_table, fp = done[i]
        if fp0 is None:
            fp0 = fp
        elif fp0.differences(fp):
            msg = ("pipeline fingerprint differs from the first participant's: "
                   + "; ".join(fp0.differences(fp)))
            failures.append((pid, msg))
            log.warning("norms: %s skipped: %s", pid, msg)
            continue
        try:
            entry_values(pid, age, roi_table, sensor_table)
        except InputError as exc:
            failures.append((pid, str(exc)))
            log.warning("norms: %s skipped: %s", pid, exc)
            continue
        entries.append((pid, age, roi_table, sensor_table))
    if fp0 is None:
        raise InputError(f"no participant could be analysed ({len(failures)} failures)",
                         path=cohort_dir)
    info = {"source": cohort_dir.name, "n_listed": int(len(parts)),
            "n_failed": len(failures)}
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
    from ..provenance import atomic_write_text
    atomic_write_text(report_path, report.to_csv(sep="\t", index=False, na_rep="n/a"))
    fig = plot_calibration(fit)
    tmp = figure_path.with_name("." + figure_path.name + ".tmp.png")
    fig.savefig(tmp, dpi=120)
    tmp.replace(figure_path)
    import matplotlib.pyplot as plt
    plt.close(fig)
    return CohortBuild(norms=norms, fit=fit, report=report, report_path=report_path,
                       figure_path=figure_path, failures=tuple(failures))


# ----------------------------------------------------------------------------- checking

def check_norms(path: str | Path) -> str:
    """Validate a norms file and summarise it (for ``sourcelab norms check``).

    Returns
    -------
    str
        Multi-line summary: format, sha256, fingerprint, condition, cohort, rows by kind and
        model, SD range, atlases/ROIs/channels/bands/measures, age coverage and gaps, and
        quantities whose band set is incomplete.  Raises InputError if the file is invalid.
    """
    nm = read_norms(path)
    t = nm.table
    fp = nm.fingerprint
    lines = [f"{nm.path}: valid sourcelab-norms 1 file", f"sha256: {nm.sha256}",
             f"condition: {nm.condition}",
             "cohort: " + ", ".join(f"{k}={v}" for k, v in sorted(nm.cohort.items())),
             f"fingerprint: method={fp.method} orientation={fp.orientation} "
             f"lambda2={fp.lambda2:g} reference={fp.reference} epoch_s={fp.epoch_s:g} "
             f"pipeline_version={fp.pipeline_version} headmodel={fp.headmodel_sha256[:12]}",
             "fingerprint bands: " + ", ".join(f"{b[0]} {b[1]:g}-{b[2]:g} Hz" for b in fp.bands)]
    lines += [f"note: {n}" for n in nm.notes]
    lines.append(f"rows: {len(t)} ("
                 + ", ".join(f"{k} {m}: {c}" for (k, m), c in
                             t.groupby(["kind", "model"]).size().items()) + ")")
    lines.append(f"sd (transformed scale): {t['sd'].min():.4g} to {t['sd'].max():.4g}; "
                 f"n per row: {int(t['n'].min())} to {int(t['n'].max())}")
    fp_bands = [b[0] for b in fp.bands]
    problems = 0
    for kind, g in t.groupby("kind"):
        bands = sorted(set(g["band"]), key=lambda b: fp_bands.index(b) if b in fp_bands else 99)
        if kind == "roi":
            n_roi = g[["atlas", "name", "hemisphere"]].drop_duplicates().groupby("atlas").size()
            where = ", ".join(f"{a}: {c} ROIs" for a, c in n_roi.items())
        else:
            where = f"{g['name'].nunique()} channels"
        lines.append(f"{kind}: {where}; bands {bands}; measures {sorted(set(g['measure']))}; "
                     f"ages {g['age_min'].min():g}-{g['age_max'].max():g} y")
        missing_bands = sorted(set(fp_bands) - set(g["band"]))
        if missing_bands:
            problems += 1
            lines.append(f"  WARNING {kind}: fingerprint bands without norms: {missing_bands}")
        per_q = g.groupby(["atlas", "name", "hemisphere", "measure"])["band"].nunique()
        incomplete = int((per_q < len(set(g["band"]))).sum())
        if incomplete:
            problems += 1
            lines.append(f"  WARNING {kind}: {incomplete} ROI/channel x measure lack some bands")
        gaps = 0
        for _, h in g.groupby(list(QUANTITY_COLUMNS)):
            a = h.sort_values("age_min")
            gaps += int(np.sum(a["age_min"].to_numpy()[1:] > a["age_max"].to_numpy()[:-1]))
        if gaps:
            problems += 1
            lines.append(f"  WARNING {kind}: {gaps} gaps between age ranges")
        spans = g.groupby(list(QUANTITY_COLUMNS)).agg(lo=("age_min", "min"),
                                                      hi=("age_max", "max"))
        if spans["lo"].nunique() > 1 or spans["hi"].nunique() > 1:
            problems += 1
            lines.append(f"  WARNING {kind}: quantities cover different age spans")
    lines.append("coverage: complete" if not problems else f"coverage: {problems} warnings")
    return "\n".join(lines)
