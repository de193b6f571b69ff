"""Fitting norms to a reference cohort's analysis tables (streamed).

Rules (documented in FORMAT.md):

* every quantity (ROI, channel, electrode pair or network edge x band x measure) is transformed
  (log10 absolute, logit relative; coupling measures: :data:`~sourcelab.norms.coupling.
  TRANSFORM_FOR_COUPLING`) and modelled separately; circular quantities (phase angles) are
  modelled as deviations from the cohort's circular mean direction, which is added back to
  ``b0``;
* ``model="regression"``: polynomial in log10(age) over the cohort's age range; the degree is
  chosen once for all quantities by leave-one-out cross-validation (``degree="auto"``, 0..3) or
  fixed by the caller;
* ``model="binned"``: mean and SD per age bin (bins given, or equal-count bins);
* ``robust=True``: except for the phase, lag and envelope correlation of pairs and edges
  (:data:`~sourcelab.norms.coupling.UNTRIMMED_MEASURES`), controls more than 3.5 robust SDs
  (1.4826 x MAD) from the fit are excluded from
  that quantity, iteratively (see :func:`sourcelab.norms.models.fit_poly`).
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass
from typing import Iterable, Sequence

import numpy as np
import pandas as pd

from ..checks import check_option
from ..errors import InputError
from ..provenance import Fingerprint
from .coupling import COUPLING_KINDS, UNTRIMMED_MEASURES, coupling_transform_name
from .io import COLUMNS, MAX_DEGREE, NA, QUANTITY_COLUMNS, Norms
from .models import fit_poly_columns, select_degree
from .predictive import pack_v, xtx_inverse
from .transforms import get_transform, transform_for_measure

log = logging.getLogger("sourcelab")

#: Columns each kind's analysis table needs, and the columns naming its (atlas, name,
#: hemisphere); None: "n/a".
_NEED = {
    "roi": (("atlas", "roi", "hemisphere"), ("atlas", "roi", "hemisphere")),
    "sensor": (("channel",), (None, "channel", None)),
    "pair": (("pair",), (None, "pair", None)),
    "edge": (("atlas", "edge"), ("atlas", "edge", None)),
}
#: Order of the tables in a cohort entry after (participant_id, age).
ENTRY_KINDS = ("roi", "sensor", "pair", "edge")


def transform_for(kind: str, measure: str) -> str:
    """The transform norms use for ``measure`` of a ``kind``.

    Parameters
    ----------
    kind : {"roi", "sensor", "pair", "edge"}
        ``roi``/``sensor``: band power; ``pair``/``edge``: coupling measures.
    measure : str
        ``"absolute"``/``"relative"`` for band power; a coupling measure name otherwise.

    Returns
    -------
    str
        Transform name (see :mod:`sourcelab.norms.transforms`).
    """
    if kind in ("pair", "edge"):
        return coupling_transform_name(measure)
    return transform_for_measure(measure)


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
        Transformed values (NaN where missing); for circular quantities the wrapped deviation
        from the cohort's circular mean direction.
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


def clean_epochs_summary(counts) -> dict:
    """Summary of the cohort's clean epochs per participant.

    Recorded in the norms' cohort header: coupling magnitudes depend on the number of epochs.

    Parameters
    ----------
    counts : iterable of int
        Number of clean epochs of each participant (non-empty).

    Returns
    -------
    dict
        ``{"median": float, "min": int, "max": int}``.
    """
    c = np.asarray(list(counts), dtype=float)
    return {"median": float(np.median(c)), "min": int(c.min()), "max": int(c.max())}


def slim_table(table: pd.DataFrame | None, kind: str) -> pd.DataFrame | None:
    """Only the columns norm fitting reads, text as categories (a cohort's coupling tables hold
    thousands of rows per participant; this keeps them ~10 times smaller in memory).

    Parameters
    ----------
    table : DataFrame or None
        An analysis table of ``kind`` (``roi``, ``sensor``, ``pair`` or ``edge``).
    kind : str

    Returns
    -------
    DataFrame or None
        The needed columns (key columns as categories, ``value``); None for None.
    """
    if table is None:
        return None
    need, _ = _NEED[kind]
    cols = [c for c in need + ("band", "measure", "value") if c in table.columns]
    out = table.loc[:, cols].copy()
    for c in cols[:-1]:
        out[c] = out[c].astype("category")
    return out


def _table_items(table: pd.DataFrame, kind: str, pid: str):
    need, cols = _NEED[kind]
    missing = [c for c in need + ("band", "measure", "value") if c not in table.columns]
    if missing:
        raise InputError(f"participant {pid!r}: {kind} table lacks columns {missing}")
    atlas, name, hemi = (table[c].astype(str).tolist() if c else [NA] * len(table) for c in cols)
    bands = table["band"].astype(str).tolist()
    measures = table["measure"].astype(str).tolist()
    vals = pd.to_numeric(table["value"], errors="coerce").to_numpy(dtype=float)
    out = {}
    for key, v in zip(zip([kind] * len(table), atlas, name, hemi, bands, measures), vals):
        if key in out:
            raise InputError(f"participant {pid!r}: duplicate {kind} row {key[1:]}")
        out[key] = v
    return out


def entry_values(pid, age, roi_table, sensor_table, pair_table=None, coupling_table=None) -> dict:
    """Check one cohort entry and return ``{quantity key: transformed value}``.

    Parameters
    ----------
    pid : str
        Participant ID (non-empty).
    age : float
        Years, > 0.
    roi_table, sensor_table, pair_table, coupling_table : DataFrame or None
        An analysis's tables (kinds ``roi``, ``sensor``, ``pair``, ``edge``); None skips one.

    Returns
    -------
    dict
        Key ``(kind, atlas, name, hemisphere, band, measure)`` (``"n/a"`` where a kind has no
        atlas or hemisphere) to the value on its normalising scale (e.g. log10 µV² for absolute
        power); coupling values on the edge of their range become NaN (logged).

    Raises
    ------
    InputError
        Naming the participant, for a bad ID, age, table or value.
    """
    if not isinstance(pid, str) or not pid.strip():
        raise InputError(f"participant id must be a non-empty text, got {pid!r}")
    try:
        a = float(age)
    except (TypeError, ValueError):
        raise InputError(
            f"participant {pid!r}: age must be a number of years, got {age!r}"
        ) from None
    if not (math.isfinite(a) and a > 0):
        raise InputError(f"participant {pid!r}: age must be > 0 years, got {age!r}")
    items: dict = {}
    tables = (roi_table, sensor_table, pair_table, coupling_table)
    for kind, t in zip(ENTRY_KINDS, tables):
        if t is not None:
            items.update(_table_items(t, kind, pid))
    if not items:
        raise InputError(f"participant {pid!r}: no roi, sensor, pair or edge rows")
    # transform per (kind, measure), vectorised: coupling tables hold thousands of rows
    groups: dict = {}
    for i, key in enumerate(items):
        groups.setdefault((key[0], key[5]), []).append(i)
    keys = list(items)
    vals = np.fromiter(items.values(), dtype=float, count=len(items))
    tv = np.empty(len(items))
    for (kind, measure), idx in groups.items():
        tr = get_transform(transform_for(kind, measure))
        try:
            tv[idx] = tr.forward(vals[idx])
        except InputError as exc:
            if kind not in COUPLING_KINDS:
                raise InputError(f"participant {pid!r}, {kind} {measure}: {exc}") from None
            # a coupling value on the edge of its range (coherence 1 between bridged
            # electrodes) is left out of the norms as missing, not fatal for the participant
            tv[idx] = [_forward_or_nan(tr, v) for v in vals[idx]]
            log.warning(
                "participant %s: %d %s %s values on the edge of their range left out",
                pid,
                int(np.isnan(tv[idx]).sum() - np.isnan(vals[idx]).sum()),
                kind,
                measure,
            )
    return dict(zip(keys, tv.tolist()))


def _forward_or_nan(transform, v: float) -> float:
    try:
        return float(transform.forward(np.array([v]))[0])
    except InputError:
        return float("nan")


def _default_bins(ages: np.ndarray, min_n: int) -> tuple[float, ...]:
    n_bins = max(1, int(len(ages) // (1.25 * min_n)))
    inner = np.quantile(ages, np.linspace(0, 1, n_bins + 1)[1:-1])
    return (float(ages.min()), *[float(np.round(e, 1)) for e in inner], float(ages.max()))


def fit_norms(
    entries: Iterable,
    *,
    fingerprint: Fingerprint,
    condition: str,
    model: str = "regression",
    degree: int | str = "auto",
    bins: Sequence[float] | None = None,
    min_n_per_bin: int = 20,
    robust: bool = True,
    cohort_info: dict | None = None,
    notes: Sequence[str] = (),
) -> NormsFit:
    """Build norms and keep the leave-one-out material for calibration.

    Parameters
    ----------
    entries : iterable of (participant_id, age, roi_table, sensor_table[, pair_table,
        coupling_table])
        Streamed once; only the tables' values are kept.  Any table may be None.
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
        Iterative exclusion beyond 3.5 robust SDs (see :func:`~sourcelab.norms.models.fit_poly`),
        for every quantity but the phase, lag and envelope correlation of pairs and edges
        (:data:`~sourcelab.norms.coupling.UNTRIMMED_MEASURES`).
    cohort_info : dict | None
        Extra JSON-serialisable cohort description merged into the summary (sex counts, source).
    notes : sequence of str
        Provenance lines for the file header.

    Returns
    -------
    NormsFit
        The norms (``.norms``) and the leave-one-out material for calibration.
    """
    check_option("model", model, ("binned", "regression"))
    if not (
        degree == "auto" or (isinstance(degree, (int, np.integer)) and 0 <= degree <= MAX_DEGREE)
    ):
        raise InputError(f"degree: need 'auto' or an integer 0..{MAX_DEGREE}, got {degree!r}")
    if not (isinstance(min_n_per_bin, (int, np.integer)) and min_n_per_bin >= 3):
        raise InputError(f"min_n_per_bin: need an integer >= 3, got {min_n_per_bin!r}")
    index: dict[tuple, int] = {}
    ids: list[str] = []
    ages: list[float] = []
    per: list[tuple[np.ndarray, np.ndarray]] = []  # (quantity indices, values) per person
    for entry in entries:
        try:
            pid, age, *tables = entry
            if not 2 <= len(tables) <= len(ENTRY_KINDS):
                raise ValueError
        except (TypeError, ValueError):
            raise InputError(
                "entries: each entry must be (participant_id, age, roi_table, "
                "sensor_table[, pair_table, coupling_table])"
            ) from None
        vals = entry_values(pid, age, *tables)
        if pid in ids:
            raise InputError(f"participant {pid!r} appears twice")
        ids.append(pid)
        ages.append(float(age))
        per.append(
            (
                np.fromiter(
                    (index.setdefault(k, len(index)) for k in vals), dtype=np.int64, count=len(vals)
                ),
                np.fromiter(vals.values(), dtype=float, count=len(vals)),
            )
        )
    n, q = len(ids), len(index)
    if n < min_n_per_bin:
        raise InputError(
            f"need at least {min_n_per_bin} analysed participants (the minimum per "
            f"norms row), got {n}"
        )
    age = np.asarray(ages)
    Y = np.full((n, q), np.nan)
    for i, (cols, v) in enumerate(per):
        Y[i, cols] = v
    keys = list(index)
    qt = pd.DataFrame(keys, columns=list(QUANTITY_COLUMNS))
    transforms = [transform_for(k, m) for k, m in zip(qt["kind"], qt["measure"])]
    qt["transform"] = transforms
    untrimmed = np.array(
        [
            k in COUPLING_KINDS and m in UNTRIMMED_MEASURES
            for k, m in zip(qt["kind"], qt["measure"])
        ],
        dtype=bool,
    )
    # circular quantities: model the deviation from the cohort's circular mean direction
    # (wrapped into one period); the direction is added back to b0 below
    offset = np.zeros(q)
    for j, name in enumerate(transforms):
        tr = get_transform(name)
        if tr.period is not None:
            col = Y[:, j]
            ang = 2.0 * np.pi * col[np.isfinite(col)] / tr.period
            if ang.size:
                offset[j] = tr.period * np.angle(np.mean(np.exp(1j * ang))) / (2.0 * np.pi)
            Y[:, j] = tr.difference(col, offset[j])

    scores: dict = {}
    if model == "regression":
        if degree == "auto":
            degree, scores = select_degree(age, Y, robust=robust)
            log.info(
                "norms: regression degree %d chosen by leave-one-out CV (%s)",
                degree,
                {k: round(v, 4) for k, v in scores.items()},
            )
        ranges = [(float(age.min()), float(age.max()), int(degree))]
    else:
        edges = tuple(
            float(e) for e in (bins if bins is not None else _default_bins(age, min_n_per_bin))
        )
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
            log.warning(
                "norms: bin %g-%g y has %d controls (< %d): omitted",
                lo,
                hi,
                int(inb.sum()),
                min_n_per_bin,
            )
            continue
        fits = fit_poly_columns(age[inb], Y[inb], deg, robust=robust & ~untrimmed)
        good = fits.ok & (fits.n >= min_n_per_bin) & (fits.sd > 0)
        skipped += int(q - good.sum())
        cols = np.flatnonzero(good)
        v_of_kept: dict[bytes, np.ndarray] = {}  # (X'X)^-1 per set of kept controls
        for j in cols:
            kept = fits.kept[:, j]
            v = v_of_kept.get(kept.tobytes())
            if v is None:  # the controls this row kept
                v = v_of_kept[kept.tobytes()] = pack_v(xtx_inverse(age[inb][kept], deg))
            coef = np.zeros(MAX_DEGREE + 1)
            coef[: deg + 1] = fits.coef[:, j]
            if offset[j]:
                coef[0] = get_transform(transforms[j]).difference(coef[0] + offset[j], 0.0)
            rows.append(
                (
                    *keys[j],
                    lo,
                    hi,
                    model,
                    deg,
                    transforms[j],
                    *coef,
                    float(fits.sd[j]),
                    int(fits.n[j]),
                    int(fits.n[j]) - deg - 1,
                    *v,
                )
            )
        row_q.extend(cols.tolist())
        members.extend([inb] * cols.size)
        block = np.ix_(inb, cols)
        resid[block] = fits.resid[:, cols]
        loo[block] = fits.loo_z[:, cols]
        excl[block] = np.isfinite(Y[block]) & ~fits.kept[:, cols]
    if skipped:
        log.warning(
            "norms: %d rows omitted (fewer than %d usable controls)", skipped, min_n_per_bin
        )
    if not rows:
        raise InputError("no norms rows could be built (too few controls per row)")
    table = pd.DataFrame(rows, columns=list(COLUMNS))
    cohort = {
        "n": n,
        "age_min": float(age.min()),
        "age_max": float(age.max()),
        "age_median": float(np.median(age)),
        "model": model,
        "robust": bool(robust),
        "n_excluded_values": int(excl.sum()),
    }
    if model == "regression":
        cohort["degree"] = int(degree)
    cohort.update(cohort_info or {})
    norms = Norms(
        table=table, fingerprint=fingerprint, condition=condition, cohort=cohort, notes=tuple(notes)
    )
    return NormsFit(
        norms=norms,
        participants=tuple(ids),
        ages=age,
        quantities=qt,
        values=Y,
        resid=resid,
        loo_z=loo,
        excluded=excl,
        row_quantity=np.asarray(row_q),
        row_members=np.asarray(members, dtype=bool).reshape(len(members), n),
        degree_scores=scores,
    )


def norms_from_tables(
    entries: Iterable, *, fingerprint: Fingerprint, condition: str, **fit_options
) -> Norms:
    """Norms from a reference cohort's tables; see :func:`fit_norms` for the parameters.

    Parameters
    ----------
    entries : iterable of (participant_id, age, roi_table, sensor_table[, pair_table,
        coupling_table])
        As for :func:`fit_norms`.
    fingerprint : Fingerprint
        The pipeline that produced the tables.
    condition : str
        Recording condition, e.g. ``"eyes closed"``.
    **fit_options
        ``model``, ``degree``, ``bins`` (years), ``min_n_per_bin``, ``robust``, ``cohort_info``,
        ``notes``: passed to :func:`fit_norms` (same defaults).

    Returns
    -------
    Norms
        ``fit_norms(...).norms``.
    """
    return fit_norms(entries, fingerprint=fingerprint, condition=condition, **fit_options).norms
