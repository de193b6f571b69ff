"""Z-scoring an analysis's tidy tables against norms, with p-values and FDR control.

``z = (T(value) - mean(age)) / sd(age)`` where ``T`` is the row's normalising transform.

References
----------
Benjamini Y, Hochberg Y (1995).  Controlling the false discovery rate: a practical and powerful
approach to multiple testing.  J R Stat Soc B 57:289-300.
"""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd
from scipy import stats

from ..errors import InputError
from ..provenance import Fingerprint
from .io import COEF_COLUMNS, NA, Norms, normalise_condition
from .models import evaluate
from .transforms import get_transform

log = logging.getLogger("sourcelab")

#: How the analysis table's columns map onto the norms quantity columns, per kind.
_KIND_COLUMNS = {
    "roi": {"atlas": "atlas", "name": "roi", "hemisphere": "hemisphere"},
    "sensor": {"name": "channel"},
}
#: Columns added by :func:`apply_norms`.
ADDED_COLUMNS = ("p", "fdr_q", "fdr", "norm_n", "no_norm", "extrapolated", "condition_mismatch")


def bh_adjust(p: np.ndarray) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values (q-values); NaN entries are ignored and stay NaN.

    Parameters
    ----------
    p : ndarray, shape (n,)

    Returns
    -------
    ndarray, shape (n,)
        ``q_(i) = min_{j >= i} min(1, m p_(j) / j)`` over the m finite p-values.

    References
    ----------
    Benjamini Y, Hochberg Y (1995).  J R Stat Soc B 57:289-300.
    """
    p = np.asarray(p, dtype=float)
    q = np.full(p.shape, np.nan)
    ok = np.isfinite(p)
    m = int(ok.sum())
    if m == 0:
        return q
    pv = p[ok]
    order = np.argsort(pv, kind="stable")
    scaled = pv[order] * m / np.arange(1, m + 1)
    adj = np.minimum.accumulate(scaled[::-1])[::-1]
    out = np.empty(m)
    out[order] = np.clip(adj, 0.0, 1.0)
    q[ok] = out
    return q


def _keys(table: pd.DataFrame, kind: str) -> list[tuple]:
    cols = _KIND_COLUMNS[kind]
    parts = []
    for c in ("atlas", "name", "hemisphere"):
        parts.append(table[cols[c]].astype(str).tolist() if c in cols else [NA] * len(table))
    return list(zip([kind] * len(table), *parts, table["band"].astype(str).tolist(),
                    table["measure"].astype(str).tolist()))


def apply_norms(roi_table: pd.DataFrame, norms: Norms, *, age: float, fingerprint: Fingerprint,
                condition: str | None = None, allow_extrapolation: bool = False,
                allow_condition_mismatch: bool = False, kind: str = "roi",
                fdr_alpha: float = 0.05) -> pd.DataFrame:
    """Z-score an analysis table against norms.

    Parameters
    ----------
    roi_table : DataFrame
        An analysis ``roi_table`` (``kind="roi"``: atlas, roi, hemisphere, band, measure, value)
        or ``sensor_table`` (``kind="sensor"``: channel, band, measure, value).
    norms : Norms
    age : float
        Participant's age in years (> 0).
    fingerprint : Fingerprint
        The analysis's pipeline fingerprint; it must equal the norms' (compared fields).
    condition : str | None
        Recording condition of the analysis (e.g. ``"eyes closed"``); compared with the norms'
        case/hyphen-insensitively.  None means "not stated": no check, logged as a warning.
    allow_extrapolation : bool
        If the age lies outside a row's age range, use the model at the nearest covered age and
        flag the row ``extrapolated`` instead of raising.
    allow_condition_mismatch : bool
        Z-score anyway when conditions differ; every row is flagged ``condition_mismatch``.
    kind : {"roi", "sensor"}
    fdr_alpha : float
        FDR level for the ``fdr`` flag.

    Returns
    -------
    DataFrame
        A copy with ``z`` filled and columns ``p`` (two-sided normal), ``fdr_q`` (Benjamini-
        Hochberg over every z in this table), ``fdr`` (``fdr_q <= fdr_alpha``), ``norm_n``,
        ``no_norm`` (quantity absent from the norms: z NaN), ``extrapolated``,
        ``condition_mismatch``.  ``attrs["n_no_norm"]`` counts rows without norms.

    Raises
    ------
    InputError
        Fingerprint mismatch (listing the differing fields), condition mismatch, age outside the
        norms' ranges, a band or measure absent from the norms, no norms rows of this kind, values
        outside a transform's domain.

    Notes
    -----
    A ROI or channel in the analysis with no norms row gets z = NaN, ``no_norm = True`` and is
    counted (logged as a warning); a *band or measure* with no norms at all is an error, because
    it means the analysis and the norms were made with different settings.
    """
    where = norms.path if norms.path is not None else "norms"
    if kind not in _KIND_COLUMNS:
        raise InputError(f"kind: {kind!r} is not one of {sorted(_KIND_COLUMNS)}")
    if not isinstance(fingerprint, Fingerprint):
        raise InputError("fingerprint: need the analysis's sourcelab Fingerprint")
    try:
        age = float(age)
    except (TypeError, ValueError):
        raise InputError(f"age: need a number of years, got {age!r}") from None
    if not (np.isfinite(age) and age > 0):
        raise InputError(f"age: need a positive number of years to z-score, got {age!r}")
    need = set(_KIND_COLUMNS[kind].values()) | {"band", "measure", "value"}
    missing = sorted(need - set(roi_table.columns))
    if missing:
        raise InputError(f"{kind} table lacks columns {missing}")
    diffs = norms.fingerprint.differences(fingerprint)
    if diffs:
        raise InputError("pipeline fingerprint of the norms differs from the analysis ("
                         + "; ".join(diffs) + "); rebuild the norms with this pipeline",
                         path=where)
    mismatch = False
    if condition is None:
        log.warning("analysis condition not stated; assuming it matches the norms (%s)",
                    norms.condition)
    elif normalise_condition(condition) != normalise_condition(norms.condition):
        if not allow_condition_mismatch:
            raise InputError(f"condition {condition!r} differs from the norms' condition "
                             f"{norms.condition!r}; pass --allow-condition-mismatch to "
                             "z-score anyway (rows are flagged)", path=where)
        mismatch = True
        log.warning("z-scoring %r against %r norms (flagged)", condition, norms.condition)

    nt = norms.table[norms.table["kind"] == kind]
    if nt.empty:
        raise InputError(f"norms have no {kind} rows", path=where)
    for col in ("band", "measure"):
        unknown = sorted(set(roi_table[col].astype(str)) - set(nt[col]))
        if unknown:
            raise InputError(f"{col}s {unknown} of the analysis are not in the norms "
                             f"({sorted(set(nt[col]))})", path=where)

    by_q: dict[tuple, list[tuple[float, float, int]]] = {}
    qcols = ("kind", "atlas", "name", "hemisphere", "band", "measure")
    for idx, row in zip(nt.index, zip(*(nt[c].tolist() for c in qcols + ("age_min",
                                                                          "age_max")))):
        by_q.setdefault(tuple(row[:6]), []).append((row[6], row[7], idx))

    keys = _keys(roi_table, kind)
    m = len(keys)
    row_of = np.full(m, -1, dtype=np.int64)
    age_at = np.full(m, age)
    extrap = np.zeros(m, dtype=bool)
    outside = []
    for i, key in enumerate(keys):
        ranges = by_q.get(key)
        if ranges is None:
            continue
        inside = [r for r in ranges if r[0] <= age <= r[1]]
        if inside:
            row_of[i] = max(inside)[2]  # on a shared edge the upper range wins
            continue
        near = min(ranges, key=lambda r: min(abs(age - r[0]), abs(age - r[1])))
        row_of[i] = near[2]
        age_at[i] = min(max(age, near[0]), near[1])
        extrap[i] = True
        outside.append(near)
    if outside and not allow_extrapolation:
        lo = min(r[0] for r in outside)
        hi = max(r[1] for r in outside)
        raise InputError(f"age {age:g} y is outside the norms' age ranges ({lo:g}-{hi:g} y) for "
                         f"{len(outside)} rows; pass --allow-extrapolation to z-score anyway "
                         "(rows are flagged)", path=where)
    if extrap.any():
        log.warning("age %g y outside the norms' range for %d rows: extrapolated (flagged)",
                    age, int(extrap.sum()))

    has = row_of >= 0
    out = roi_table.copy()
    z = np.full(m, np.nan)
    norm_n = np.zeros(m, dtype=np.int64)
    values = pd.to_numeric(roi_table["value"], errors="coerce").to_numpy(dtype=float)
    if has.any():
        rows = nt.loc[row_of[has]]
        mean = evaluate(rows[list(COEF_COLUMNS)].to_numpy(), rows["degree"].to_numpy(),
                        age_at[has])
        tv = np.full(has.sum(), np.nan)
        trans = rows["transform"].to_numpy()
        for name in np.unique(trans):
            sel = trans == name
            tv[sel] = get_transform(name).forward(values[has][sel])
        z[has] = (tv - mean) / rows["sd"].to_numpy()
        norm_n[has] = rows["n"].to_numpy()
    n_no = int((~has).sum())
    if n_no:
        log.warning("%d of %d %s rows have no norms (z left NaN, flagged no_norm)", n_no, m, kind)
    p = 2.0 * stats.norm.sf(np.abs(z))
    q = bh_adjust(p)
    out["z"] = z
    out["p"] = p
    out["fdr_q"] = q
    out["fdr"] = np.nan_to_num(q, nan=np.inf) <= fdr_alpha
    out["norm_n"] = norm_n
    out["no_norm"] = ~has
    out["extrapolated"] = extrap
    out["condition_mismatch"] = mismatch
    out.attrs = dict(roi_table.attrs, n_no_norm=n_no, norms_sha256=norms.sha256, age=age,
                     fdr_alpha=fdr_alpha)
    return out


def chance_summary(table: pd.DataFrame, *, alpha: float = 0.05) -> dict:
    """How many z-scores look unusual compared with chance.

    Parameters
    ----------
    table : DataFrame
        Output of :func:`apply_norms` (needs ``z``; uses ``fdr_q`` when present).

    Returns
    -------
    dict
        ``n_tested`` (finite z), ``expected_beyond_1.96`` (= 0.05 n), ``observed_beyond_1.96``,
        ``expected_beyond_2.58``, ``observed_beyond_2.58``, ``n_fdr`` (q <= alpha),
        ``n_no_norm``.  The expectation assumes independent tests; neighbouring ROIs and bands
        are correlated, so the observed count varies more than a binomial count would.
    """
    z = pd.to_numeric(table["z"], errors="coerce").to_numpy(dtype=float)
    ok = np.isfinite(z)
    n = int(ok.sum())
    q = (table["fdr_q"].to_numpy(dtype=float) if "fdr_q" in table
         else bh_adjust(2.0 * stats.norm.sf(np.abs(z))))
    return {
        "n_tested": n,
        "expected_beyond_1.96": float(n * 2.0 * stats.norm.sf(1.96)),
        "observed_beyond_1.96": int(np.sum(np.abs(z[ok]) > 1.96)),
        "expected_beyond_2.58": float(n * 2.0 * stats.norm.sf(2.58)),
        "observed_beyond_2.58": int(np.sum(np.abs(z[ok]) > 2.58)),
        "n_fdr": int(np.sum(np.nan_to_num(q, nan=np.inf) <= alpha)),
        "fdr_alpha": float(alpha),
        "n_no_norm": int(table["no_norm"].sum()) if "no_norm" in table else int((~ok).sum()),
    }
