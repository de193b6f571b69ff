"""Fitting norms to a reference cohort's analysis tables (streamed).

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

import logging
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Iterable, Sequence

import numpy as np
import pandas as pd

from ..errors import InputError
from ..provenance import Fingerprint
from .io import COLUMNS, MAX_DEGREE, NA, QUANTITY_COLUMNS, Norms
from .models import fit_poly, select_degree
from .predictive import pack_v, xtx_inverse
from .transforms import get_transform, transform_for_measure

log = logging.getLogger("sourcelab")

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
            v = pack_v(xtx_inverse(age[inb][f.kept], deg))  # the controls this row kept
            rows.append((*keys[j], lo, hi, model, deg, qt["transform"][j], *coef, f.sd, f.n,
                         f.n - deg - 1, *v))
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


def norms_from_tables(entries: Iterable, *, fingerprint: Fingerprint, condition: str,
                model: str = "regression", degree: int | str = "auto",
                bins: Sequence[float] | None = None, min_n_per_bin: int = 20,
                robust: bool = True, cohort_info: dict | None = None,
                notes: Sequence[str] = ()) -> Norms:
    """Norms from a reference cohort's tables; see :func:`fit_norms` for the parameters.

    Returns
    -------
    Norms
    """
    return fit_norms(entries, fingerprint=fingerprint, condition=condition, model=model,
                     degree=degree, bins=bins, min_n_per_bin=min_n_per_bin, robust=robust,
                     cohort_info=cohort_info, notes=notes).norms
