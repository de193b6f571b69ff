"""Z-scoring an analysis's tidy tables against norms, with p-values and FDR control.

``z = (T(value) - mean(age)) / sd(age)`` where ``T`` is the row's normalising transform.

References
----------
Benjamini Y, Hochberg Y (1995).  Controlling the false discovery rate: a practical and powerful
approach to multiple testing.  J R Stat Soc B 57:289-300.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
import pandas as pd

# scipy.stats' norm.sf(x), norm.isf(q) and t.sf(x, df) are these special functions (ndtr(-x),
# -ndtri(q), stdtr(df, -x): the same numbers); importing scipy.stats costs ~0.5 s
from scipy.special import ndtr, ndtri, stdtr

from ..checks import check_option
from ..constants import FDR_ALPHA, Z_THRESHOLD
from ..errors import InputError
from ..provenance import Fingerprint
from .io import COEF_COLUMNS, NA, V_COLUMNS, Norms, normalise_condition
from .models import evaluate
from .transforms import get_transform

log = logging.getLogger("sourcelab")

#: How the analysis table's columns map onto the norms quantity columns, per kind.
_KIND_COLUMNS = {
    "roi": {"atlas": "atlas", "name": "roi", "hemisphere": "hemisphere"},
    "sensor": {"name": "channel"},
    "pair": {"name": "pair"},  # coupling pair_table (sourcelab.coupling)
    "edge": {"atlas": "atlas", "name": "edge"},  # coupling coupling_table
}
#: Columns added by :func:`apply_norms`.
ADDED_COLUMNS = (
    "z_equivalent",
    "p",
    "fdr_q",
    "fdr",
    "norm_n",
    "no_norm",
    "extrapolated",
    "condition_mismatch",
)


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
    return list(
        zip(
            [kind] * len(table),
            *parts,
            table["band"].astype(str).tolist(),
            table["measure"].astype(str).tolist(),
        )
    )


@dataclass(frozen=True, eq=False)
class NormRows:
    """The norm of every row of an analysis table, at the participant's age.

    Attributes
    ----------
    mean, sd : ndarray, shape (m,)
        Norm mean and SD on the transformed scale (NaN where the row has no norm).
    transform : ndarray of str, shape (m,)
        Each row's normalising transform (``""`` where there is no norm).
    n : ndarray of int, shape (m,)
        Controls behind each row's norm (0 where none).
    has : ndarray of bool, shape (m,)
        The row has a norm.
    extrapolated : ndarray of bool, shape (m,)
        The age lies outside the row's age range (the nearest covered age was used).
    condition_mismatch : bool
        The analysis condition differs from the norms' (allowed explicitly).
    df : ndarray, shape (m,)
        Residual degrees of freedom of each row's model (``n - degree - 1``; NaN where none).
    leverage : ndarray, shape (m,)
        The participant's leverage ``h₀`` on each row's age model (NaN where none).
    """

    mean: np.ndarray
    sd: np.ndarray
    transform: np.ndarray
    n: np.ndarray
    has: np.ndarray
    extrapolated: np.ndarray
    condition_mismatch: bool = False
    df: np.ndarray | None = None
    leverage: np.ndarray | None = None

    def z(self, values) -> np.ndarray:
        """z-scores of values (one per row, the table's value unit), see :func:`zscore`.

        Parameters
        ----------
        values : array-like, shape (m,)
            One value per table row in its own unit (µV² for absolute power, a fraction for
            relative power, the coupling measure's unit).

        Returns
        -------
        ndarray, shape (m,)
            ``(T(value) - mean) / sd``; NaN where a row has no norm.
        """
        return zscore(values, self.mean, self.sd, self.transform)

    def predictive(self, z) -> dict:
        """Predictive (Student-t) statistics of plain z-scores, one per row.

        Parameters
        ----------
        z : array-like, shape (m,)
            Plain z-scores of the rows (e.g. from :meth:`z`).

        Returns
        -------
        dict
            ``t``, ``p`` (two-sided), ``z_equivalent`` (the normal deviate with the same p), each an
            ndarray of shape (m,); NaN where a row has no norm.  Without stored degrees of freedom
            (hand-made rows) the normal distribution is used.

        References
        ----------
        Crawford JR, Howell DC (1998).  Clin Neuropsychol 12:482-486 (from memory).
        Crawford JR, Garthwaite PH (2006).  Neuropsychology 20:259-271 (from memory).
        """
        z = np.asarray(z, dtype=float)
        if self.df is None or self.leverage is None:
            return {"t": z, "p": 2.0 * ndtr(-np.abs(z)), "z_equivalent": z}
        t = z / np.sqrt(1.0 + self.leverage)
        with np.errstate(invalid="ignore"):
            p = 2.0 * stdtr(self.df, -np.abs(t))
        z_eq = np.sign(t) * (0.0 - ndtri(p / 2.0))
        return {"t": t, "p": p, "z_equivalent": z_eq}


def zscore(values, mean, sd, transform) -> np.ndarray:
    """``z = (T(value) - mean) / sd`` elementwise, with a per-element transform.

    Parameters
    ----------
    values : array_like, shape (m,)
        Values in their own unit (absolute power > 0; relative power in (0, 1)).
    mean, sd : array_like, shape (m,)
        Norm mean and SD on the transformed scale; NaN gives NaN.
    transform : str or array of str, shape (m,)
        Transform names (:data:`~sourcelab.norms.transforms.TRANSFORMS`); ``""`` gives NaN.
        For a circular transform (phase angles) the difference is wrapped into one period.

    Returns
    -------
    ndarray, shape (m,)
        Dimensionless z; NaN without a norm (or for a NaN value).
    """
    values = np.asarray(values, dtype=float)
    trans = np.broadcast_to(np.asarray(transform, dtype=object), values.shape)
    mean = np.broadcast_to(np.asarray(mean, dtype=float), values.shape)
    diff = np.full(values.shape, np.nan)
    for name in set(trans.tolist()) - {""}:
        sel = trans == name
        tr = get_transform(name)
        diff[sel] = tr.difference(tr.forward(values[sel]), mean[sel])
    return diff / np.asarray(sd, dtype=float)


def match_norms(
    table: pd.DataFrame,
    norms: Norms,
    *,
    age: float,
    fingerprint: Fingerprint,
    condition: str | None = None,
    allow_extrapolation: bool = False,
    allow_condition_mismatch: bool = False,
    kind: str = "roi",
) -> NormRows:
    """Find the norm of every row of an analysis table (no z computed).

    Parameters
    ----------
    table : DataFrame
        An analysis ``roi_table`` (``kind="roi"``: atlas, roi, hemisphere, band, measure),
        ``sensor_table`` (``kind="sensor"``: channel, band, measure), ``pair_table``
        (``kind="pair"``: pair, band, measure) or ``coupling_table`` (``kind="edge"``: atlas,
        edge, band, measure).
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
        Match anyway when conditions differ; rows are flagged ``condition_mismatch``.
    kind : {"roi", "sensor", "pair", "edge"}

    Returns
    -------
    NormRows
        The norm of every table row at ``age`` (NaN / ``has`` False where none).

    Raises
    ------
    InputError
        Fingerprint mismatch (listing the differing fields), condition mismatch, age outside the
        norms' ranges, a band or measure absent from the norms, no norms rows of this kind.

    Notes
    -----
    A ROI or channel with no norms row gets ``has = False`` (logged as a warning); a *band or
    measure* with no norms at all is an error, because it means the analysis and the norms were
    made with different settings.
    """
    where = norms.path if norms.path is not None else "norms"
    check_option("kind", kind, _KIND_COLUMNS)
    if not isinstance(fingerprint, Fingerprint):
        raise InputError("fingerprint: need the analysis's sourcelab Fingerprint")
    try:
        age = float(age)
    except (TypeError, ValueError):
        raise InputError(f"age: need a number of years, got {age!r}") from None
    if not (np.isfinite(age) and age > 0):
        raise InputError(f"age: need a positive number of years to z-score, got {age!r}")
    need = set(_KIND_COLUMNS[kind].values()) | {"band", "measure"}
    missing = sorted(need - set(table.columns))
    if missing:
        raise InputError(f"{kind} table lacks columns {missing}")
    diffs = norms.fingerprint.differences(fingerprint)
    if diffs:
        raise InputError(
            "pipeline fingerprint of the norms differs from the analysis ("
            + "; ".join(diffs)
            + "); rebuild the norms with this pipeline",
            path=where,
        )
    mismatch = False
    if condition is None:
        log.warning(
            "analysis condition not stated; assuming it matches the norms (%s)", norms.condition
        )
    elif normalise_condition(condition) != normalise_condition(norms.condition):
        if not allow_condition_mismatch:
            raise InputError(
                f"condition {condition!r} differs from the norms' condition "
                f"{norms.condition!r}; allow the mismatch explicitly to z-score "
                "anyway (--allow-condition-mismatch; allow_condition_mismatch "
                "in Python; rows are flagged)",
                path=where,
            )
        mismatch = True
        log.warning("z-scoring %r against %r norms (flagged)", condition, norms.condition)

    nt = norms.table[norms.table["kind"] == kind]
    if nt.empty:
        raise InputError(f"norms have no {kind} rows", path=where)
    for col in ("band", "measure"):
        unknown = sorted(set(table[col].astype(str)) - set(nt[col]))
        if unknown:
            raise InputError(
                f"{col}s {unknown} of the analysis are not in the norms ({sorted(set(nt[col]))})",
                path=where,
            )

    by_q: dict[tuple, list[tuple[float, float, int]]] = {}
    qcols = ("kind", "atlas", "name", "hemisphere", "band", "measure")
    for idx, row in zip(nt.index, zip(*(nt[c].tolist() for c in qcols + ("age_min", "age_max")))):
        by_q.setdefault(tuple(row[:6]), []).append((row[6], row[7], idx))

    keys = _keys(table, kind)
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
        raise InputError(
            f"age {age:g} y is outside the norms' age ranges ({lo:g}-{hi:g} y) for "
            f"{len(outside)} rows; allow extrapolation explicitly to z-score anyway "
            "(--allow-extrapolation; allow_extrapolation in Python; rows are "
            "flagged)",
            path=where,
        )
    if extrap.any():
        log.warning(
            "age %g y outside the norms' range for %d rows: extrapolated (flagged)",
            age,
            int(extrap.sum()),
        )
    has = row_of >= 0
    mean = np.full(m, np.nan)
    sd = np.full(m, np.nan)
    trans = np.full(m, "", dtype=object)
    n = np.zeros(m, dtype=np.int64)
    df = np.full(m, np.nan)
    lev = np.full(m, np.nan)
    if has.any():
        from .predictive import leverage, unpack_v

        rows = nt.loc[row_of[has]]
        deg = rows["degree"].to_numpy()
        mean[has] = evaluate(rows[list(COEF_COLUMNS)].to_numpy(), deg, age_at[has])
        sd[has] = rows["sd"].to_numpy()
        trans[has] = rows["transform"].to_numpy()
        n[has] = rows["n"].to_numpy()
        df[has] = rows["df"].to_numpy(dtype=float)
        lev[has] = leverage(unpack_v(rows[list(V_COLUMNS)].to_numpy()), deg, age_at[has])
    n_no = int((~has).sum())
    if n_no:
        log.warning("%d of %d %s rows have no norms (z left NaN, flagged no_norm)", n_no, m, kind)
    return NormRows(
        mean=mean,
        sd=sd,
        transform=trans,
        n=n,
        has=has,
        extrapolated=extrap,
        condition_mismatch=mismatch,
        df=df,
        leverage=lev,
    )


def apply_norms(
    roi_table: pd.DataFrame,
    norms: Norms,
    *,
    age: float,
    kind: str = "roi",
    fdr_alpha: float = FDR_ALPHA,
    rows: NormRows | None = None,
    **match_options,
) -> pd.DataFrame:
    """Z-score an analysis table against norms.

    Parameters
    ----------
    roi_table : DataFrame
        An analysis ``roi_table`` or ``sensor_table`` (with a ``value`` column).
    norms : Norms
    age : float
        Participant's age in years (> 0).
    kind : {"roi", "sensor", "pair", "edge"}
        See :func:`match_norms`.
    fdr_alpha : float
        FDR level for the ``fdr`` flag.
    rows : NormRows, optional
        Already matched norms (from :func:`match_norms` with the same arguments).
    **match_options
        ``fingerprint`` (required unless ``rows`` is given), ``condition``,
        ``allow_extrapolation``, ``allow_condition_mismatch``: passed to :func:`match_norms`.

    Returns
    -------
    DataFrame
        A copy with ``z`` filled (``(T(value) - mean) / sd``) and columns ``z_equivalent`` and
        ``p`` (the predictive Student-t test, which accounts for the norms' sample size, model
        degrees of freedom and the participant's leverage on the age model; ``z_equivalent`` is
        the normal deviate with the same p), ``fdr_q`` (Benjamini-Hochberg over every p in this
        table), ``fdr`` (``fdr_q <= fdr_alpha``), ``norm_n``,
        ``no_norm`` (quantity absent from the norms: z NaN), ``extrapolated``,
        ``condition_mismatch``.  ``attrs["n_no_norm"]`` counts rows without norms.

    Raises
    ------
    InputError
        As :func:`match_norms`, and values outside a transform's domain.
    """
    if "value" not in roi_table.columns:
        raise InputError(f"{kind} table lacks columns ['value']")
    if rows is None:
        rows = match_norms(roi_table, norms, age=age, kind=kind, **match_options)
    values = pd.to_numeric(roi_table["value"], errors="coerce").to_numpy(dtype=float)
    z = rows.z(values)
    pred = rows.predictive(z)
    p = pred["p"]
    q = bh_adjust(p)
    out = roi_table.copy()
    out["z"] = z
    out["z_equivalent"] = pred["z_equivalent"]
    out["p"] = p
    out["fdr_q"] = q
    out["fdr"] = np.nan_to_num(q, nan=np.inf) <= fdr_alpha
    out["norm_n"] = rows.n
    out["no_norm"] = ~rows.has
    out["extrapolated"] = rows.extrapolated
    out["condition_mismatch"] = rows.condition_mismatch
    out.attrs = dict(
        roi_table.attrs,
        n_no_norm=int((~rows.has).sum()),
        norms_sha256=norms.sha256,
        age=float(age),
        fdr_alpha=fdr_alpha,
    )
    return out


def chance_summary(table: pd.DataFrame, *, alpha: float = FDR_ALPHA) -> dict:
    """How many z-scores look unusual compared with chance.

    Parameters
    ----------
    table : DataFrame
        Output of :func:`apply_norms` (needs ``z``; counts ``z_equivalent`` -- the predictive
        test's normal deviate -- when present, and uses ``fdr_q`` when present).
    alpha : float
        False-discovery-rate level for ``n_fdr``.

    Returns
    -------
    dict
        ``n_tested`` (finite z), ``expected_beyond_1.96`` (= 0.05 n), ``observed_beyond_1.96``,
        ``expected_beyond_2.58``, ``observed_beyond_2.58``, ``n_fdr`` (q <= alpha),
        ``n_no_norm``.  The expectation assumes independent tests; neighbouring ROIs and bands
        are correlated, so the observed count varies more than a binomial count would.
    """
    col = "z_equivalent" if "z_equivalent" in table else "z"
    z = pd.to_numeric(table[col], errors="coerce").to_numpy(dtype=float)
    ok = np.isfinite(z)
    n = int(ok.sum())
    q = (
        table["fdr_q"].to_numpy(dtype=float)
        if "fdr_q" in table
        else bh_adjust(2.0 * ndtr(-np.abs(z)))
    )
    return {
        "n_tested": n,
        "expected_beyond_1.96": float(n * 2.0 * ndtr(-Z_THRESHOLD)),
        "observed_beyond_1.96": int(np.sum(np.abs(z[ok]) > Z_THRESHOLD)),
        "expected_beyond_2.58": float(n * 2.0 * ndtr(-2.58)),
        "observed_beyond_2.58": int(np.sum(np.abs(z[ok]) > 2.58)),
        "n_fdr": int(np.sum(np.nan_to_num(q, nan=np.inf) <= alpha)),
        "fdr_alpha": float(alpha),
        "n_no_norm": int(table["no_norm"].sum()) if "no_norm" in table else int((~ok).sum()),
    }
