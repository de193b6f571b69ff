"""Pure array functions for normative models: polynomial fits in log age, robust exclusion,
analytic leave-one-out z-scores, evaluation at an age.

A model row predicts the transformed value ``y`` at age ``a`` (years) as
``mean(a) = sum_k b_k * log10(a)**k`` (``k = 0..degree``) with a constant residual SD.  Age-binned
norms are the degree-0 case fitted within each bin.

References
----------
John ER, Ahn H, Prichep L, et al. (1980).  Developmental equations for the electroencephalogram.
Science 210:1255-1258 (from memory) -- polynomial regression of transformed EEG measures on age.
Cook RD, Weisberg S (1982).  Residuals and Influence in Regression.  Chapman & Hall (from memory)
-- leave-one-out residuals ``e_i / (1 - h_ii)`` and deleted variance from the hat matrix.
Rousseeuw PJ, Croux C (1993).  J Am Stat Assoc 88:1273-1283 (from memory) -- the MAD scaled by
1.4826 estimates the SD of Gaussian data.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .._docs import fill_doc

#: MAD -> SD for Gaussian data (1 / Phi^-1(3/4)); common practice.
MAD_TO_SD = 1.482602218505602


@dataclass(frozen=True, eq=False)
class PolyFit:
    """One quantity's fit.

    Attributes
    ----------
    coef : ndarray, shape (degree + 1,)
        Coefficients ``b_0 .. b_degree`` of the polynomial in ``log10(age)``.
    sd : float
        Residual SD on the transformed scale, ``sqrt(RSS / (n - degree - 1))``.
    n : int
        Number of controls kept (finite and not excluded).
    kept : ndarray of bool, shape (n_controls,)
    resid : ndarray, shape (n_controls,)
        ``y - mean(age)`` for every control with a finite value (NaN otherwise).
    loo_z : ndarray, shape (n_controls,)
        Each control's z against the model refitted without it (kept controls: exact hat-matrix
        formula; excluded controls: against the final fit, which already excludes them).
    press : float
        Mean squared leave-one-out residual over kept controls.
    """

    coef: np.ndarray
    sd: float
    n: int
    kept: np.ndarray
    resid: np.ndarray
    loo_z: np.ndarray
    press: float


def design(age: np.ndarray, degree: int) -> np.ndarray:
    """Design matrix ``[1, x, x**2, ...]`` with ``x = log10(age)``, shape (n, degree + 1).

    Parameters
    ----------
    age : ndarray, shape (n,)
        Ages in years (> 0 when ``degree > 0``).
    degree : int
        Polynomial degree (0 gives a column of ones, ages unused).

    Returns
    -------
    ndarray, shape (n, degree + 1)
        Columns ``x**0 .. x**degree``.
    """
    x = np.log10(np.asarray(age, dtype=float)) if degree > 0 else np.zeros(np.shape(age))
    return np.vander(x, degree + 1, increasing=True)


def _mask_groups(mask: np.ndarray):
    """Columns of a boolean ``(n, m)`` mask grouped by identical pattern.

    Yields ``(rows, cols)``: the shared row mask, shape (n,), and the column indices.
    """
    if not mask.shape[1]:
        return
    _, inv = np.unique(np.packbits(mask, axis=0).T, axis=0, return_inverse=True)
    inv = np.ravel(inv)
    order = np.argsort(inv, kind="stable")
    for cols in np.split(order, np.flatnonzero(np.diff(inv[order])) + 1):
        yield mask[:, cols[0]], cols


def _ols_columns(X: np.ndarray, Y: np.ndarray, kept: np.ndarray, *, hat: bool = False):
    """Least squares of each column of ``Y`` on ``X`` over that column's kept rows.

    Columns with the same kept rows share one ``lstsq`` (and one QR for the hat diagonal).
    Returns ``coef`` of shape (p, m) and, with ``hat``, a list of ``(rows, cols, h)``.
    """
    coef = np.empty((X.shape[1], Y.shape[1]))
    groups = []
    for rows, cols in _mask_groups(kept):
        Xk = X[rows]
        coef[:, cols], *_ = np.linalg.lstsq(Xk, Y[np.ix_(rows, cols)], rcond=None)
        if hat:
            # hat diagonal h_ii = x_i (X'X)^-1 x_i' via a thin QR (stable)
            q, _ = np.linalg.qr(Xk)
            groups.append((rows, cols, np.einsum("ij,ij->i", q, q)))
    return coef, groups


#: The robust rule's exclusion threshold, in (robust) SDs (common practice), and its most
#: sigma-clipping passes; shared by the per-quantity and the per-source fits.
ROBUST_SD = 3.5
ROBUST_MAX_ITER = 10


@dataclass(frozen=True, eq=False)
class PolyFits:
    """Fits of many quantities against the same controls' ages (column ``j``: quantity ``j``).

    Attributes
    ----------
    ok : ndarray of bool, shape (q,)
        False where fewer than ``degree + 3`` finite values remain (:func:`fit_poly` gives
        None); the other attributes hold NaN there (no kept controls, ``n`` 0).
    coef : ndarray, shape (degree + 1, q)
        Coefficients ``b_0 .. b_degree`` of the polynomial in ``log10(age)``.
    sd : ndarray, shape (q,)
        Residual SD on the transformed scale.
    n : ndarray of int, shape (q,)
        Controls kept.
    kept : ndarray of bool, shape (n_controls, q)
    resid : ndarray, shape (n_controls, q)
    loo_z : ndarray, shape (n_controls, q)
    press : ndarray, shape (q,)
        As the fields of :class:`PolyFit`, one column per quantity.
    """

    ok: np.ndarray
    coef: np.ndarray
    sd: np.ndarray
    n: np.ndarray
    kept: np.ndarray
    resid: np.ndarray
    loo_z: np.ndarray
    press: np.ndarray

    def column(self, j: int) -> PolyFit | None:
        """Quantity ``j``'s fit.

        Parameters
        ----------
        j : int
            Column index, 0..q-1.

        Returns
        -------
        PolyFit | None
            None where ``ok[j]`` is False.
        """
        if not self.ok[j]:
            return None
        return PolyFit(
            coef=self.coef[:, j].copy(),
            sd=float(self.sd[j]),
            n=int(self.n[j]),
            kept=self.kept[:, j].copy(),
            resid=self.resid[:, j].copy(),
            loo_z=self.loo_z[:, j].copy(),
            press=float(self.press[j]),
        )


def _mad_screen(r: np.ndarray, finite: np.ndarray):
    """Median and 1.4826 x MAD of each column's finite residuals, shape (m,) each."""
    full = finite.all(axis=0)
    centre = np.empty(r.shape[1])
    s = np.empty(r.shape[1])
    centre[full] = np.median(r[:, full], axis=0)
    s[full] = MAD_TO_SD * np.median(np.abs(r[:, full] - centre[full]), axis=0)
    for c in np.flatnonzero(~full):  # columns with missing values, one by one
        rc = r[finite[:, c], c]
        centre[c] = np.median(rc)
        s[c] = MAD_TO_SD * np.median(np.abs(rc - centre[c]))
    return centre, s


@fill_doc
def fit_poly_columns(
    age: np.ndarray,
    Y: np.ndarray,
    degree: int,
    *,
    robust=True,
    threshold: float = ROBUST_SD,
    max_iter: int = ROBUST_MAX_ITER,
) -> PolyFits:
    """:func:`fit_poly` for every column of ``Y`` at once (same rule, same numbers).

    Columns that keep the same controls share one least-squares solve per pass.

    Parameters
    ----------
    age : ndarray, shape (n,)
        Ages in years (> 0 when ``degree > 0``).
    Y : ndarray, shape (n, q)
        Transformed values, one quantity per column; NaN marks a missing value.
    degree : int
        Polynomial degree, 0..3.
    robust : bool or ndarray of bool, shape (q,)
        :func:`fit_poly`'s exclusion rule, for all columns or per column.
    %(robust_clipping)s

    Returns
    -------
    PolyFits
        One fit per column (``ok`` False where :func:`fit_poly` would give None).
    """
    age = np.asarray(age, dtype=float)
    Y = np.asarray(Y, dtype=float)
    n, q = Y.shape
    p = degree + 1
    robust = np.broadcast_to(np.asarray(robust, dtype=bool), (q,))
    finite = np.isfinite(Y) & np.isfinite(age)[:, None]
    ok = finite.sum(axis=0) >= p + 2
    X = design(np.where(np.isfinite(age), age, 1.0), degree)
    kept = finite & ok
    active = np.flatnonzero(ok & robust)
    for it in range(max_iter):
        if not active.size:
            break
        k, y, fin = kept[:, active], Y[:, active], finite[:, active]
        coef, _ = _ols_columns(X, y, k)
        r = np.where(fin, y - X @ coef, np.nan)
        if it == 0:
            # first screen: scale from the MAD of all residuals (not moved by gross outliers)
            centre, s = _mad_screen(r, fin)
        else:
            # then sigma clipping against the SD of the retained controls; every control is
            # re-tested each pass, so one wrongly dropped by a low MAD comes back
            centre = 0.0
            s = np.sqrt(np.sum(np.where(k, r, 0.0) ** 2, axis=0) / (k.sum(axis=0) - p))
        go = s > 0
        with np.errstate(divide="ignore", invalid="ignore"):
            dev = np.abs(r - centre) / np.where(go, s, np.nan)
        out = fin & (dev > threshold)
        cap = fin.sum(axis=0) // 4
        for c in np.flatnonzero(out.sum(axis=0) > cap):
            # keep the fit anchored: exclude only the most extreme quarter
            order = np.argsort(np.where(out[:, c], -dev[:, c], np.inf))
            out[:, c] = False
            out[order[: cap[c]], c] = True
        new = fin & ~out
        stop = (new.sum(axis=0) < p + 2) | ((it > 0) & np.all(new == k, axis=0))
        move = go & ~stop
        kept[:, active[move]] = new[:, move]
        active = active[move]

    coef = np.full((p, q), np.nan)
    sd = np.full(q, np.nan)
    press = np.full(q, np.nan)
    resid = np.full((n, q), np.nan)
    loo_z = np.full((n, q), np.nan)
    cols_ok = np.flatnonzero(ok)
    c_ok, groups = _ols_columns(X, Y[:, cols_ok], kept[:, cols_ok], hat=True)
    coef[:, cols_ok] = c_ok
    resid[:, cols_ok] = np.where(finite[:, cols_ok], Y[:, cols_ok] - X @ c_ok, np.nan)
    n_kept = kept.sum(axis=0)
    for rows, cols, h in groups:
        cc = cols_ok[cols]
        m = int(rows.sum())
        e = resid[np.ix_(rows, cc)]
        rss = np.einsum("ij,ij->j", e, e)
        sd[cc] = np.sqrt(rss / (m - p))
        with np.errstate(divide="ignore", invalid="ignore"):
            e_loo = e / (1.0 - h)[:, None]
            s2_loo = (rss - e * e_loo) / (m - p - 1)  # deleted residual variance
            loo_z[np.ix_(rows, cc)] = e_loo / np.sqrt(s2_loo)
        press[cc] = np.mean(e_loo**2, axis=0)
    # excluded controls: against the final fit, which already excludes them
    excl = finite & ~kept & ok
    with np.errstate(divide="ignore", invalid="ignore"):
        loo_z[excl] = (resid / sd)[excl]
    return PolyFits(
        ok=ok, coef=coef, sd=sd, n=n_kept, kept=kept, resid=resid, loo_z=loo_z, press=press
    )


@fill_doc
def fit_poly(
    age: np.ndarray,
    y: np.ndarray,
    degree: int,
    *,
    robust: bool = True,
    threshold: float = ROBUST_SD,
    max_iter: int = ROBUST_MAX_ITER,
) -> PolyFit | None:
    """Fit ``y ~ poly(log10(age), degree)`` with optional robust exclusion of outlying controls.

    Parameters
    ----------
    age : ndarray, shape (n,)
        Ages in years (> 0 when ``degree > 0``).
    y : ndarray, shape (n,)
        Transformed values; NaN marks a missing value.
    degree : int
        Polynomial degree, 0..3.
    robust : bool
        Exclusion rule: fit, then drop controls whose residual is more than ``threshold`` robust
        SDs (1.4826 x MAD of all residuals) from their median; refit without them; then
        iterate: residuals of *all* controls against the current fit, exclude those beyond
        ``threshold`` x the residual SD of the retained controls, refit -- until the set is
        stable (at most ``max_iter`` passes).  Re-testing every control lets one wrongly
        dropped by an unluckily small MAD return.  At most a quarter of the controls is ever
        excluded (the most extreme first).
    %(robust_clipping)s

    Returns
    -------
    PolyFit | None
        None when fewer than ``degree + 3`` finite values remain.
    """
    y = np.asarray(y, dtype=float)
    fits = fit_poly_columns(
        age, y[:, None], degree, robust=robust, threshold=threshold, max_iter=max_iter
    )
    return fits.column(0)


def select_degree(
    age: np.ndarray, Y: np.ndarray, *, degrees=(0, 1, 2, 3), robust: bool = True
) -> tuple[int, dict[int, float]]:
    """Choose one polynomial degree for all quantities by leave-one-out cross-validation.

    The score of a degree is the mean over quantities of ``log(PRESS / PRESS_min)``, where
    PRESS is the mean squared leave-one-out residual (scale-free, so every quantity counts equally).

    Parameters
    ----------
    age : ndarray, shape (n,)
        Ages in years.
    Y : ndarray, shape (n, n_quantities)
        Transformed values.
    degrees : sequence of int
        Candidate degrees (each 0..3).
    robust : bool
        Use :func:`fit_poly`'s robust exclusion in every fit.

    Returns
    -------
    degree : int
        The degree with the lowest score (the smallest candidate when no score is finite).
    scores : dict
        Mean log PRESS per degree (lower is better).
    """
    logs = {}
    for d in degrees:
        f = fit_poly_columns(age, Y, d, robust=robust)
        good = f.ok & (f.press > 0)
        logs[d] = np.where(good, np.log(np.where(good, f.press, 1.0)), np.nan)
    stack = np.vstack([logs[d] for d in degrees])
    ok = np.all(np.isfinite(stack), axis=0)
    if not ok.any():
        return min(degrees), {d: np.nan for d in degrees}
    scores = {d: float(np.mean(logs[d][ok])) for d in degrees}
    return min(scores, key=scores.get), scores


def evaluate(coef: np.ndarray, degree: np.ndarray, age: np.ndarray) -> np.ndarray:
    """Model means at given ages.

    Parameters
    ----------
    coef : ndarray, shape (m, MAX_DEGREE + 1)
        Coefficients ``b0..b3`` per row (zeros above each row's degree).
    degree : ndarray of int, shape (m,)
    age : ndarray, shape (m,) or scalar
        Years, > 0.

    Returns
    -------
    ndarray, shape (m,)
        Predicted mean on the transformed scale.
    """
    coef = np.atleast_2d(np.asarray(coef, dtype=float))
    degree = np.asarray(degree)
    x = np.log10(np.broadcast_to(np.asarray(age, dtype=float), degree.shape))
    k = np.arange(coef.shape[1])
    powers = np.where(k[None, :] <= degree[:, None], x[:, None] ** k[None, :], 0.0)
    return np.sum(coef * powers, axis=1)
