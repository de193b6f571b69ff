"""Bootstrap confidence intervals for ROI and sensor band power, and for their z-scores.

The resampling unit is the clean epoch: a bootstrap replicate draws ``n_epochs`` epochs with
replacement, which is a weight vector ``w = counts / n_epochs`` over the per-epoch cross-spectra
``C_e``.  Every measure is a function of the resampled mean cross-spectrum ``C(w) = Σ_e w_e C_e``:

* absolute ROI power ``tr(M_r C(w)) = w · [tr(M_r C_e)]_e`` is linear in ``w``: per-epoch ROI power
  (n_epochs, n_bands, n_rois) is computed once and all replicates are one matrix product with the
  (n_boot, n_epochs) weight matrix;
* relative ROI power is the ROI mean of per-*source* relative power ``p_ib / Σ_b' p_ib'``, which is
  not linear in ``C``.  It is bootstrapped exactly: each replicate's per-source power in every band
  is recomputed.  With ``B`` an orthonormal basis of the kernel's row space (rank 18 for an
  average-referenced 19-channel kernel) and ``vech`` the 171 unique entries of a symmetric 18 x 18
  matrix (off-diagonals doubled), ``p_i = q_i · vech(Bᵀ C B)``, so all replicates' source power is
  one (n_boot·n_bands, 171) x (171, n_src) product: 17.5 Gflop for 1,000 replicates x 5 bands x
  20,484 sources, done in float32 in chunks.  To keep float32 accurate despite the cancellation
  inside quadratic forms of correlated data, the product is applied only to the replicate's
  *deviation* from the full-data cross-spectrum, ``p(w) = p(C̄) + Q · vech(Bᵀ(C(w) - C̄)B)``,
  with ``p(C̄)`` in float64.  Sources are grouped by their ROI memberships (atlases nest:
  lobes and networks are unions of areas), so ROI means are group sums plus one small product.
  Measured: about 1.3 CPU-seconds (both cores) for 300 epochs, 1,000 replicates, the four
  default atlases.  (The alternative, per-epoch source power (n_epochs, n_bands, n_src) then the
  resampling product, costs 30.7 Gflop and 123 MB more for 300 epochs.)
* sensor power is the diagonal of the average-referenced resampled cross-spectrum; relative sensor
  power divides by its sum over bands, per replicate.

Intervals are percentile intervals (the ``(1-ci)/2`` and ``(1+ci)/2`` quantiles of the replicates,
linear interpolation).  Percentile intervals respect monotone transformations, and the z-score of a
row, ``z = (T(value) - mean(age)) / sd``, is increasing in the value (``T`` = log10 or logit,
``sd > 0``), so the z interval is the z of the value interval's ends, exactly.

References
----------
Efron B, Tibshirani RJ (1993).  An Introduction to the Bootstrap.  Chapman & Hall, New York,
ch. 13 (percentile interval) and its transformation-respecting property (from memory).
Pascual-Marqui RD (2002).  Methods Find Exp Clin Pharmacol 24 Suppl D:5-12 (sLORETA power).
Welch P (1967).  IEEE Trans Audio Electroacoust 15:70-73 (averaging epoch spectra).
"""

from __future__ import annotations

import logging
import weakref
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import sparse

from .._docs import fill_doc
from ..constants import Z_THRESHOLD
from ..errors import InputError
from ..spectra import average_reference

log = logging.getLogger("sourcelab")

#: Columns added by :func:`add_intervals` and :func:`add_sensor_intervals`, in order.
INTERVAL_COLUMNS = ("value_lo", "value_hi", "z_lo", "z_hi", "robust")
#: Below this many epochs the bootstrap distribution is too coarse to trust (logged).
MIN_EPOCHS_WARN = 20
#: Replicates x bands x sources held in memory at once in the relative-power path (float32).
_CHUNK_ELEMENTS = 3_000_000
#: Epochs per block when the cross-spectra are taken into the kernel's row space.
_EPOCH_BLOCK = 128
#: Sources per block when the quadratic-form coefficients are made and gathered (memory: the
#: bootstrap runs beside the coupling stage).
_SOURCE_BLOCK = 2048


# --------------------------------------------------------------------------------------------
# pure array functions


def bootstrap_weights(n_epochs: int, *, n_boot: int = 1000, seed: int = 0) -> np.ndarray:
    """Epoch weights of ``n_boot`` bootstrap replicates (resampling epochs with replacement).

    Parameters
    ----------
    n_epochs : int
    n_boot : int
    seed : int
        Seed of ``numpy.random.default_rng``; the same seed gives the same replicates.

    Returns
    -------
    weights : ndarray, shape (n_boot, n_epochs), float64
        Multinomial counts divided by ``n_epochs``; each row sums to 1.
    """
    if int(n_epochs) < 2:
        raise InputError(f"bootstrap: need at least 2 clean epochs, got {n_epochs}")
    if int(n_boot) < 10:
        raise InputError(f"n_boot: need at least 10 bootstrap replicates, got {n_boot}")
    rng = np.random.default_rng(seed)
    counts = rng.multinomial(
        int(n_epochs), np.full(int(n_epochs), 1.0 / n_epochs), size=int(n_boot)
    )
    return counts / float(n_epochs)


def percentile_interval(samples: np.ndarray, *, ci: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
    """Percentile interval over the first axis.

    Parameters
    ----------
    samples : ndarray, shape (n_boot, ...)
    ci : float
        Coverage, in (0, 1).

    Returns
    -------
    lo, hi : ndarray, shape (...)
        The ``(1-ci)/2`` and ``(1+ci)/2`` quantiles (linear interpolation); NaN replicates
        propagate.

    References
    ----------
    Efron B, Tibshirani RJ (1993).  An Introduction to the Bootstrap, ch. 13 (from memory).
    """
    _check_ci(ci)
    q = np.quantile(samples, [(1.0 - ci) / 2.0, (1.0 + ci) / 2.0], axis=0)
    return q[0], q[1]


def vech(csd: np.ndarray) -> np.ndarray:
    """Unique entries of symmetric matrices, off-diagonals doubled, so ``vech(C)·q(k) = kᵀCk``.

    Parameters
    ----------
    csd : ndarray, shape (..., n, n)

    Returns
    -------
    ndarray, shape (..., n (n + 1) / 2)
    """
    n = csd.shape[-1]
    iu, ju = np.triu_indices(n)
    return csd[..., iu, ju] * np.where(iu == ju, 1.0, 2.0)


def source_quadratic_forms(op) -> tuple[np.ndarray, np.ndarray]:
    """Per-source quadratic-form coefficients in the kernel's row space.

    With ``B`` an orthonormal basis of the kernel's row space (rank 18 for an average-referenced
    19-channel kernel), ``K = K B Bᵀ`` and the power of source ``i`` for a cross-spectrum ``C`` is
    ``q_i · vech(Bᵀ C B)`` with ``q_i = upper(Σ_rows(i) (kB)ᵀ(kB))`` - exactly
    :func:`sourcelab.inverse.sloreta.source_power`.

    Parameters
    ----------
    op : SourceOperator
        ``kernel`` (n_src * n_comp, n_ch).

    Returns
    -------
    basis : ndarray, shape (n_ch, rank)
    q : ndarray, shape (n_src, rank (rank + 1) / 2), float64, read-only (cached per operator)
    """
    try:
        return _Q_CACHE[op]
    except (KeyError, TypeError):
        pass
    k = np.asarray(op.kernel, dtype=float)
    _, sv, vt = np.linalg.svd(k, full_matrices=False)
    basis = vt[sv > 1e-10 * sv[0]].T
    kr = (k @ basis).reshape(op.n_src, op.n_comp, -1)
    iu, ju = np.triu_indices(basis.shape[1])
    q = np.zeros((op.n_src, iu.size))
    for s in range(0, op.n_src, _SOURCE_BLOCK):  # in blocks: no full-size temporaries
        blk = kr[s : s + _SOURCE_BLOCK]
        for c in range(op.n_comp):
            q[s : s + blk.shape[0]] += blk[:, c, iu] * blk[:, c, ju]
    q.setflags(write=False)
    basis.setflags(write=False)
    try:
        _Q_CACHE[op] = (basis, q)
    except TypeError:  # an operator object that cannot be weakly referenced: no caching
        pass
    return basis, q


#: Per-operator cache of :func:`source_quadratic_forms` (operators are immutable).
_Q_CACHE: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()


def roi_average_matrix(roi_vertices: Sequence[np.ndarray], n_src: int):
    """Sparse matrix averaging source values over ROIs.

    Parameters
    ----------
    roi_vertices : sequence of array-like of int
        Source indices of each ROI (ROIs may overlap; none may be empty).
    n_src : int
        Number of sources; indices must lie in ``0 .. n_src - 1``.

    Returns
    -------
    used : ndarray of int, shape (n_used,)
        Sources that belong to at least one ROI (sorted).
    avg : scipy.sparse.csr_matrix, shape (n_rois, n_used)
        ``avg[r, u] = 1/|r|`` when ``used[u]`` is in ROI ``r``.
    """
    if not len(roi_vertices):
        raise InputError("atlases: no ROIs given")
    allv = [np.asarray(v, dtype=np.int64) for v in roi_vertices]
    for r, v in enumerate(allv):
        if v.size == 0:
            raise InputError(f"ROI {r} has no sources")
        if v.min() < 0 or v.max() >= n_src:
            raise InputError(f"ROI {r}: vertex indices outside 0..{n_src - 1}")
    used = np.unique(np.concatenate(allv))
    rows = np.concatenate([np.full(v.size, r) for r, v in enumerate(allv)])
    cols = np.searchsorted(used, np.concatenate(allv))
    vals = np.concatenate([np.full(v.size, 1.0 / v.size) for v in allv])
    avg = sparse.csr_matrix((vals, (rows, cols)), shape=(len(allv), used.size))
    return used, avg


def _atoms(avg) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Group sources with identical ROI membership (atlases nest and overlap).

    Returns ``order`` (sources sorted by group), ``starts`` (first position of each group in
    ``order``) and ``weights`` (n_rois, n_groups) so that ROI means are
    ``weights @ (group sums)``.
    """
    col = avg.T.tocsr()
    col.sort_indices()
    sig: dict[bytes, int] = {}
    gid = np.empty(col.shape[0], dtype=np.int64)
    for u in range(col.shape[0]):
        key = col.indices[col.indptr[u] : col.indptr[u + 1]].tobytes()
        gid[u] = sig.setdefault(key, len(sig))
    order = np.argsort(gid, kind="stable")
    starts = np.flatnonzero(np.r_[True, np.diff(gid[order]) != 0])
    first = order[starts]
    weights = col[first].T.toarray()  # (n_rois, n_groups): 1/|r| or 0
    return order, starts, weights


def _row_space_vech(c: np.ndarray, total: np.ndarray | None, basis: np.ndarray) -> np.ndarray:
    """``vech(Bᵀ C B)`` of each epoch's band cross-spectra and (if given) broadband one, as the
    last band: (n_epochs, n_bands (+ 1), n_vech), made in blocks of epochs (memory; each
    epoch's product is the same).

    Laid out in memory as :func:`vech` of the whole array lays it out (its fancy indexing puts
    the vech axis first in memory): the matrix products made from it round by layout, and this
    keeps them as they were (tested to the last bit).
    """
    n_ep, n_bands = c.shape[:2]
    r = basis.shape[1]
    n_all = n_bands + (total is not None)
    out = np.empty((r * (r + 1) // 2, n_ep, n_all)).transpose(1, 2, 0)
    for s in range(0, n_ep, _EPOCH_BLOCK):
        e = min(s + _EPOCH_BLOCK, n_ep)
        out[s:e, :n_bands] = vech(basis.T @ c[s:e] @ basis)
        if total is not None:
            out[s:e, n_bands] = vech(basis.T @ total[s:e] @ basis)
    return out


def roi_bootstrap(
    epoch_csd: np.ndarray,
    op,
    roi_vertices: Sequence[np.ndarray],
    weights: np.ndarray,
    *,
    relative: bool = True,
    epoch_total: np.ndarray | None = None,
) -> dict[str, np.ndarray]:
    """Bootstrap replicates of ROI mean absolute and relative source band power.

    Parameters
    ----------
    epoch_csd : ndarray, shape (n_epochs, n_bands, n_ch, n_ch)
        Per-epoch real band cross-spectra (any reference; the kernel's average reference applies).
    op : SourceOperator
    roi_vertices : sequence of int arrays
        Source indices of each ROI (ROIs may overlap).
    weights : ndarray, shape (n_boot, n_epochs)
        From :func:`bootstrap_weights` (rows sum to 1).  A row of ``1/n_epochs`` reproduces the
        pipeline's values.
    relative : bool
        Also bootstrap relative power (the expensive part).
    epoch_total : ndarray, shape (n_epochs, n_ch, n_ch), optional
        Per-epoch broadband (1-45 Hz) cross-spectra: relative power divides by their source
        power (as the pipeline).  Without it, by the sum over the bands.

    Returns
    -------
    dict
        ``"absolute"`` and (if asked) ``"relative"``: ndarray, shape (n_boot, n_bands, n_rois);
        absolute in sLORETA standardised power (float64), relative a fraction (float32 accuracy).
    """
    c = np.asarray(epoch_csd, dtype=float)
    w = np.asarray(weights, dtype=float)
    if c.ndim != 4 or c.shape[-1] != c.shape[-2]:
        raise InputError(f"epoch_csd: need shape (n_epochs, n_bands, n_ch, n_ch), got {c.shape}")
    if w.ndim != 2 or w.shape[1] != c.shape[0]:
        raise InputError(f"weights: need shape (n_boot, {c.shape[0]}), got {w.shape}")
    if op.kernel.shape[1] != c.shape[-1]:
        raise InputError(f"epoch_csd: {c.shape[-1]} channels, operator has {op.kernel.shape[1]}")
    n_bands = c.shape[1]
    t = None
    if relative and epoch_total is not None:
        t = np.asarray(epoch_total, dtype=float)
        if t.shape != (c.shape[0],) + c.shape[2:]:
            raise InputError(
                f"epoch_total: need shape {(c.shape[0],) + c.shape[2:]}, got {t.shape}"
            )
    n_ep, n_all = c.shape[0], n_bands + (t is not None)  # broadband as a last "band"
    n_boot = w.shape[0]
    used, avg = roi_average_matrix(roi_vertices, op.n_src)
    basis, q_all = source_quadratic_forms(op)
    cv = _row_space_vech(c, t, basis)  # (n_ep, n_all, n_vech)
    # (n_rois, n_vech): vech of B'M_rB; the averaging matrix re-indexed to every source
    # rather than a copy of the used sources' coefficients (the same products, in order)
    on_all = sparse.csr_matrix(
        (avg.data, used[avg.indices], avg.indptr), shape=(avg.shape[0], op.n_src)
    )
    q_roi = on_all @ q_all
    per_epoch = cv @ q_roi.T  # (n_ep, n_bands, n_rois)
    out = {"absolute": (w @ per_epoch.reshape(n_ep, -1)).reshape(n_boot, n_all, -1)[:, :n_bands]}
    del per_epoch
    if not relative:
        return out
    order, starts, group_w = _atoms(avg)
    src = used[order]  # sources grouped by ROI membership
    n_used, n_vech = src.size, q_all.shape[1]
    c_mean = cv.mean(axis=0)  # (n_bands, n_vech)
    # the grouped coefficients in blocks of sources (memory: no float64 copy of all of them;
    # each entry of a product is the same dot product, so the same numbers)
    p_mean = np.empty((n_all, 1, n_used), dtype=np.float32)  # p(C̄), (n_all, 1, n_used)
    q32 = np.empty((n_used, n_vech), dtype=np.float32)
    for s in range(0, n_used, _SOURCE_BLOCK):
        q = q_all[src[s : s + _SOURCE_BLOCK]]
        p_mean[:, 0, s : s + q.shape[0]] = c_mean @ q.T
        q32[s : s + q.shape[0]] = q
    # the deviations made in C order (the same values; no second copy for the reshape)
    dev = np.subtract(cv, c_mean, order="C").reshape(n_ep, -1)
    del cv
    dev = (w @ dev).reshape(n_boot, n_all, n_vech).astype(np.float32)
    rel = np.empty((n_boot, n_bands, avg.shape[0]))
    chunk = max(1, _CHUNK_ELEMENTS // (n_all * n_used))
    for s in range(0, n_boot, chunk):
        e = min(s + chunk, n_boot)
        d = np.ascontiguousarray(dev[s:e].transpose(1, 0, 2)).reshape(-1, n_vech)
        # band-major, sources-last layout: each source group is a contiguous run of a row, so
        # the group sums read memory in order (summed across rows, np.add.reduceat strided over
        # the whole array and took most of this loop's time)
        p = (d @ q32.T).reshape(n_all, e - s, n_used)
        p += p_mean
        if n_all > n_bands:  # broadband total given
            total = p[n_bands:]
            p = p[:n_bands]
        else:
            total = p.sum(axis=0, keepdims=True)
        with np.errstate(invalid="ignore", divide="ignore"):
            p /= total  # 0/0 -> NaN, as relative_power
        g = np.add.reduceat(p.reshape(-1, n_used), starts, axis=1)  # (n_bands * chunk, n_groups)
        r = (g @ group_w.T).reshape(n_bands, e - s, -1)  # (n_bands, chunk, n_rois)
        rel[s:e] = r.transpose(1, 0, 2)
    out["relative"] = rel
    return out


def sensor_bootstrap(
    epoch_csd: np.ndarray, weights: np.ndarray, *, epoch_total: np.ndarray | None = None
) -> dict[str, np.ndarray]:
    """Bootstrap replicates of average-reference sensor band power.

    Parameters
    ----------
    epoch_csd : ndarray, shape (n_epochs, n_bands, n_ch, n_ch)
    weights : ndarray, shape (n_boot, n_epochs)
    epoch_total : ndarray, shape (n_epochs, n_ch, n_ch), optional
        Per-epoch broadband cross-spectra (the relative-power denominator; default: band sum).

    Returns
    -------
    dict
        ``"absolute"`` (squared data unit, e.g. µV²) and ``"relative"`` (fraction of broadband
        power, or of the band sum), each ndarray, shape (n_boot, n_bands, n_ch).
    """
    c = np.asarray(epoch_csd, dtype=float)
    w = np.asarray(weights, dtype=float)
    if c.ndim != 4:
        raise InputError(f"epoch_csd: need shape (n_epochs, n_bands, n_ch, n_ch), got {c.shape}")
    if w.ndim != 2 or w.shape[1] != c.shape[0]:
        raise InputError(f"weights: need shape (n_boot, {c.shape[0]}), got {w.shape}")
    diag = np.einsum("ebcc->ebc", average_reference(c))
    ab = (w @ diag.reshape(c.shape[0], -1)).reshape(w.shape[0], c.shape[1], -1)
    if epoch_total is None:
        total = ab.sum(axis=1, keepdims=True)
    else:
        td = np.einsum("ecc->ec", average_reference(np.asarray(epoch_total, dtype=float)))
        total = (w @ td)[:, None, :]
    with np.errstate(invalid="ignore", divide="ignore"):
        rel = np.where(total > 0, ab / total, np.nan)
    return {"absolute": ab, "relative": rel}


def z_interval(lo, hi, transform: str, mean, sd) -> tuple[np.ndarray, np.ndarray]:
    """z-scores of an interval's ends: ``((T(lo) - mean)/sd, (T(hi) - mean)/sd)``.

    Parameters
    ----------
    lo, hi : array-like
        Interval ends of the value (absolute power > 0; relative power in (0, 1)).
    transform : {"log10", "logit"}
        The norms row's normalising transform.
    mean, sd : array-like
        Norm mean (transformed scale, at the participant's age) and SD (> 0).

    Returns
    -------
    z_lo, z_hi : ndarray
        Ordered (``z_lo <= z_hi``) because z increases with the value.
    """
    from ..norms import zscore

    sd = np.asarray(sd, dtype=float)
    if np.any(~(sd > 0) & np.isfinite(sd)):
        raise InputError("sd: norm standard deviations must be > 0")
    lo, hi = np.asarray(lo, dtype=float), np.asarray(hi, dtype=float)
    return zscore(lo, mean, sd, transform), zscore(hi, mean, sd, transform)


def robust_flags(z, z_lo, z_hi, *, threshold: float = Z_THRESHOLD) -> pd.array:
    """For deviating rows: does the whole z interval lie beyond the same threshold?

    Defined only for deviating rows (``|z| > threshold``): True when ``z_lo`` and ``z_hi`` lie
    beyond the same ``±threshold`` as ``z``, False when the interval crosses it.  NA (empty) for
    rows that do not deviate and where any value is NaN: "robust" answers "would another sample
    of this person's epochs also deviate?", a question only a deviation raises.

    Parameters
    ----------
    z, z_lo, z_hi : array_like, shape (n,)
        The row's z and the ends of its interval (on the scale ``threshold`` applies to).
    threshold : float

    Returns
    -------
    pandas BooleanArray, shape (n,)
    """
    z, z_lo, z_hi = (np.asarray(a, dtype=float) for a in (z, z_lo, z_hi))
    sign = np.sign(z)
    beyond = (sign * z_lo > threshold) & (sign * z_hi > threshold)
    na = ~(np.isfinite(z) & np.isfinite(z_lo) & np.isfinite(z_hi)) | ~(np.abs(z) > threshold)
    return pd.array(np.where(na, None, beyond), dtype="boolean")


# --------------------------------------------------------------------------------------------
# tables


def _band_order(table: pd.DataFrame, band_names, n_bands: int) -> list[str]:
    names = (
        list(dict.fromkeys(table["band"].astype(str)))
        if band_names is None
        else [str(b) for b in band_names]
    )
    if len(names) != n_bands:
        raise InputError(
            f"band_names: {len(names)} bands {names} but epoch_csd has {n_bands}; "
            "pass band_names in the cross-spectra's order"
        )
    return names


def _finish(
    table: pd.DataFrame, lo: np.ndarray, hi: np.ndarray, norm_rows, z_threshold: float, meta: dict
) -> pd.DataFrame:
    out = table.copy()
    out["value_lo"] = lo
    out["value_hi"] = hi
    z_lo = np.full(len(out), np.nan)
    z_hi = np.full(len(out), np.nan)
    z = pd.to_numeric(out["z"], errors="coerce").to_numpy(float) if "z" in out else z_lo.copy()
    zq, zq_lo, zq_hi = z, z_lo, z_hi
    if norm_rows is not None:
        if len(norm_rows.mean) != len(out):
            raise InputError(f"norm_rows: {len(norm_rows.mean)} rows for a table of {len(out)}")
        z_lo, z_hi = norm_rows.z(lo), norm_rows.z(hi)
        # deviating and robust are judged on the predictive test's normal deviate, which is
        # monotone in z, so the interval's ends map to the ends
        zq, zq_lo, zq_hi = (norm_rows.predictive(v)["z_equivalent"] for v in (z, z_lo, z_hi))
    out["z_lo"] = np.fmin(z_lo, z_hi)
    out["z_hi"] = np.fmax(z_lo, z_hi)
    out["robust"] = robust_flags(
        zq, np.fmin(zq_lo, zq_hi), np.fmax(zq_lo, zq_hi), threshold=z_threshold
    )
    out.attrs = dict(table.attrs, bootstrap=meta)
    return out


def _meta(weights, seed, ci, n_ep) -> dict:
    return {
        "method": "percentile",
        "unit": "clean epoch",
        "n_boot": int(weights.shape[0]),
        "seed": int(seed),
        "ci": float(ci),
        "n_epochs": int(n_ep),
    }


def _check_ci(ci: float) -> None:
    if not (isinstance(ci, (int, float)) and 0.0 < ci < 1.0):
        raise InputError(f"ci: need a coverage in (0, 1), e.g. 0.95, got {ci!r}")


def _epoch_csd(epoch_csd) -> np.ndarray:
    c = np.asarray(epoch_csd)
    if c.ndim != 4:
        raise InputError(f"epoch_csd: need shape (n_epochs, n_bands, n_ch, n_ch), got {c.shape}")
    return c


def _interval_columns(
    table: pd.DataFrame,
    c: np.ndarray,
    columns: np.ndarray,
    draw,
    *,
    n_boot: int = 1000,
    seed: int = 0,
    ci: float = 0.95,
    norm_rows=None,
    band_names: Sequence[str] | None = None,
    z_threshold: float = Z_THRESHOLD,
    epoch_total: np.ndarray | None = None,
) -> pd.DataFrame:
    """The part :func:`add_intervals` and :func:`add_sensor_intervals` share.

    ``columns`` (n_rows,) is each row's column in the replicates; ``draw(c, weights,
    epoch_total)`` returns ``{measure: replicates (n_boot, n_bands, n_columns)}``.  The
    keywords are documented once, in ``docdict["bootstrap_interval_options"]`` (``_docs.py``).
    """
    _check_ci(ci)
    bands = _band_order(table, band_names, c.shape[1])
    band_idx = {b: i for i, b in enumerate(bands)}
    try:
        bi = np.array([band_idx[b] for b in table["band"].astype(str)])
    except KeyError as exc:
        raise InputError(f"band {exc.args[0]!r} is not in band_names {bands}") from None
    w = bootstrap_weights(c.shape[0], n_boot=n_boot, seed=seed)
    meas = table["measure"].astype(str).to_numpy()
    v_lo = np.full(len(table), np.nan)
    v_hi = np.full(len(table), np.nan)
    for m, s in draw(c, w, epoch_total).items():
        a, b = percentile_interval(s, ci=ci)
        sel = meas == m
        v_lo[sel] = a[bi[sel], columns[sel]]
        v_hi[sel] = b[bi[sel], columns[sel]]
    return _finish(table, v_lo, v_hi, norm_rows, z_threshold, _meta(w, seed, ci, c.shape[0]))


@fill_doc
def add_intervals(
    roi_table: pd.DataFrame,
    epoch_csd: np.ndarray,
    op,
    atlases,
    *,
    replicates: RoiReplicates | None = None,
    **options,
) -> pd.DataFrame:
    """Add bootstrap confidence intervals of the value and of z to an ROI table.

    Parameters
    ----------
    roi_table : DataFrame
        The analysis's ``roi_table`` (atlas, roi, hemisphere, band, measure, value, z, ...).
    epoch_csd : ndarray, shape (n_epochs, n_bands, n_ch, n_ch)
        Per-epoch band cross-spectra of the clean epochs (``AnalysisResult.epoch_csd``).
    op : SourceOperator
        The operator the table was made with.
    atlases : sequence of Atlas or str
        Every atlas named in the table (names are loaded with :func:`sourcelab.rois.load_atlas`;
        custom ROIs are passed as their Atlas).
    replicates : RoiReplicates, optional
        The replicates, drawn ahead by :func:`roi_replicates` with the same epochs, atlases,
        ``n_boot`` and ``seed`` (checked); drawn here when omitted.
    %(bootstrap_interval_options)s

    Returns
    -------
    DataFrame
        A copy, rows in the same order, with columns ``value_lo``, ``value_hi`` (percentile
        interval, the value's unit), ``z_lo``, ``z_hi`` and ``robust`` (see
        :func:`robust_flags`).  ``attrs["bootstrap"]`` records n_boot, seed, ci and n_epochs.

    References
    ----------
    Efron B, Tibshirani RJ (1993).  An Introduction to the Bootstrap, ch. 13 (from memory).
    """
    c = _epoch_csd(epoch_csd)
    need = {"atlas", "roi", "hemisphere", "band", "measure", "value"} - set(roi_table.columns)
    if need:
        raise InputError(f"roi_table lacks columns {sorted(need)}")
    if c.shape[0] < MIN_EPOCHS_WARN:
        log.warning("only %d clean epochs: bootstrap intervals are coarse", c.shape[0])
    col_of, verts = _roi_columns(atlases)
    keys = list(
        zip(
            roi_table["atlas"].astype(str),
            roi_table["roi"].astype(str),
            roi_table["hemisphere"].astype(str),
        )
    )
    missing = sorted({k for k in keys if k not in col_of})
    if missing:
        raise InputError(
            f"roi_table has ROIs not in the given atlases, e.g. {missing[:3]}; "
            f"pass every atlas named in the table ({sorted({k[0] for k in keys})})"
        )
    measures = set(roi_table["measure"].astype(str))
    unknown = sorted(measures - {"absolute", "relative"})
    if unknown:
        raise InputError(f"measure: {unknown} not one of ['absolute', 'relative']")

    def draw(c, w, epoch_total):
        relative = "relative" in measures
        if replicates is not None:
            replicates.check(c.shape[0], w.shape[0], options.get("seed", 0), col_of, relative)
            return replicates.values
        return roi_bootstrap(c, op, verts, w, relative=relative, epoch_total=epoch_total)

    columns = np.array([col_of[k] for k in keys])
    return _interval_columns(roi_table, c, columns, draw, **options)


def _roi_columns(atlases) -> tuple[dict[tuple[str, str, str], int], list]:
    """Each ROI's column in the replicates, ``(atlas, roi, hemisphere) -> column``, and the
    ROIs' source indices in column order."""
    from ..rois import load_atlas

    objs = [load_atlas(a) if isinstance(a, str) else a for a in atlases]
    col_of: dict[tuple[str, str, str], int] = {}
    verts = []
    for at in objs:
        for roi in at.rois:
            col_of[(at.name, roi.name, roi.hemisphere)] = len(verts)
            verts.append(roi.vertices)
    return col_of, verts


@dataclass(frozen=True)
class RoiReplicates:
    """ROI bootstrap replicates drawn ahead of :func:`add_intervals` (:func:`roi_replicates`).

    Attributes
    ----------
    values : dict
        ``{"absolute": ..., "relative": ...}``, each (n_boot, n_bands, n_rois), as
        :func:`roi_bootstrap` returns them.
    n_epochs, n_boot, seed : int
        The draw they come from.
    columns : tuple of (atlas, roi, hemisphere)
        The ROIs in column order.
    """

    values: dict
    n_epochs: int
    n_boot: int
    seed: int
    columns: tuple

    def check(self, n_epochs: int, n_boot: int, seed: int, col_of: dict, relative: bool):
        """Raise InputError unless these replicates are the draw :func:`add_intervals` makes."""
        mine = (self.n_epochs, self.n_boot, self.seed, self.columns)
        wanted = (int(n_epochs), int(n_boot), int(seed), tuple(col_of))
        if mine != wanted or (relative and "relative" not in self.values):
            raise InputError(
                "replicates: drawn for other epochs, replicates, seed, ROIs or measures than "
                "the intervals asked for"
            )


def roi_replicates(
    epoch_csd: np.ndarray,
    op,
    atlases,
    *,
    n_boot: int = 1000,
    seed: int = 0,
    relative: bool = True,
    epoch_total: np.ndarray | None = None,
) -> RoiReplicates:
    """The ROI replicates :func:`add_intervals` draws, ahead of the table (the same numbers).

    The analysis draws them while other stages run; ``add_intervals(..., replicates=r)`` then
    reads them instead of drawing again.

    Parameters
    ----------
    epoch_csd : ndarray, shape (n_epochs, n_bands, n_ch, n_ch)
    op : SourceOperator
    atlases : sequence of Atlas or str
        As for :func:`add_intervals`.
    n_boot, seed : int
        As for :func:`add_intervals`.
    relative : bool
        Also relative power.
    epoch_total : ndarray, shape (n_epochs, n_ch, n_ch), optional
        Per-epoch broadband cross-spectra (the relative-power denominator).

    Returns
    -------
    RoiReplicates
    """
    c = _epoch_csd(epoch_csd)
    col_of, verts = _roi_columns(atlases)
    w = bootstrap_weights(c.shape[0], n_boot=n_boot, seed=seed)
    values = roi_bootstrap(c, op, verts, w, relative=relative, epoch_total=epoch_total)
    return RoiReplicates(values, int(c.shape[0]), int(w.shape[0]), int(seed), tuple(col_of))


@fill_doc
def add_sensor_intervals(
    sensor_table: pd.DataFrame,
    epoch_csd: np.ndarray,
    *,
    ch_names: Sequence[str] | None = None,
    **options,
) -> pd.DataFrame:
    """Add bootstrap confidence intervals to a sensor table (see :func:`add_intervals`).

    Parameters
    ----------
    sensor_table : DataFrame
        channel, band, measure, value, z, ...
    epoch_csd : ndarray, shape (n_epochs, n_bands, n_ch, n_ch)
    ch_names : sequence of str, optional
        Channel order of ``epoch_csd`` (default :data:`sourcelab.config.SITES_1020`).
    %(bootstrap_interval_options)s

    Returns
    -------
    DataFrame
    """
    from ..constants import SITES_1020

    c = _epoch_csd(epoch_csd)
    names = list(SITES_1020 if ch_names is None else ch_names)
    if len(names) != c.shape[-1]:
        raise InputError(f"ch_names: {len(names)} names for {c.shape[-1]} channels")
    ch_idx = {n: i for i, n in enumerate(names)}
    try:
        columns = np.array([ch_idx[n] for n in sensor_table["channel"].astype(str)])
    except KeyError as exc:
        raise InputError(f"sensor_table: channel {exc.args[0]!r} is not in {names}") from None

    def draw(c, w, epoch_total):
        return sensor_bootstrap(c, w, epoch_total=epoch_total)

    return _interval_columns(sensor_table, c, columns, draw, **options)
