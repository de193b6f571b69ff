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


def _ols(X: np.ndarray, y: np.ndarray):
    coef, *_ = np.linalg.lstsq(X, y, rcond=None)
    # hat diagonal h_ii = x_i (X'X)^-1 x_i' via a thin QR (stable)
    q, _ = np.linalg.qr(X)
    h = np.einsum("ij,ij->i", q, q)
    return coef, X @ coef, h


#: The robust rule's exclusion threshold, in (robust) SDs (common practice), and its most
#: sigma-clipping passes; shared by the per-quantity and the per-source fits.
ROBUST_SD = 3.5
ROBUST_MAX_ITER = 10


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
    threshold : float
        Exclusion threshold in (robust) SDs (:data:`ROBUST_SD`).
    max_iter : int
        Most sigma-clipping passes (:data:`ROBUST_MAX_ITER`).

    Returns
    -------
    PolyFit | None
        None when fewer than ``degree + 3`` finite values remain.
    """
    age = np.asarray(age, dtype=float)
    y = np.asarray(y, dtype=float)
    p = degree + 1
    finite = np.isfinite(y) & np.isfinite(age)
    if finite.sum() < p + 2:
        return None
    X = design(np.where(finite, age, 1.0), degree)
    kept = finite.copy()
    for it in range(max_iter if robust else 1):
        coef, _, _ = _ols(X[kept], y[kept])
        r = np.where(finite, y - X @ coef, np.nan)
        if not robust:
            break
        if it == 0:
            # first screen: scale from the MAD of all residuals (not moved by gross outliers)
            centre = np.median(r[finite])
            s = MAD_TO_SD * np.median(np.abs(r[finite] - centre))
        else:
            # then sigma clipping against the SD of the retained controls; every control is
            # re-tested each pass, so one wrongly dropped by a low MAD comes back
            centre = 0.0
            s = np.sqrt(np.sum(r[kept] ** 2) / (kept.sum() - p))
        if not s > 0:
            break
        dev = np.abs(r - centre) / s
        out = finite & (dev > threshold)
        cap = int(finite.sum()) // 4
        if out.sum() > cap:  # keep the fit anchored: exclude only the most extreme quarter
            order = np.argsort(np.where(out, -dev, np.inf))
            out = np.zeros_like(out)
            out[order[:cap]] = True
        new = finite & ~out
        if new.sum() < p + 2 or (it > 0 and np.array_equal(new, kept)):
            break
        kept = new
    coef, fitted, h = _ols(X[kept], y[kept])
    n = int(kept.sum())
    resid = np.where(finite, y - X @ coef, np.nan)
    e = resid[kept]
    rss = float(e @ e)
    sd = np.sqrt(rss / (n - p))
    loo_z = np.full(y.shape, np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        e_loo = e / (1.0 - h)
        s2_loo = (rss - e * e_loo) / (n - p - 1)  # deleted residual variance
        loo_z[kept] = e_loo / np.sqrt(s2_loo)
    loo_z[finite & ~kept] = resid[finite & ~kept] / sd
    press = float(np.mean(e_loo**2))
    return PolyFit(coef=coef, sd=float(sd), n=n, kept=kept, resid=resid, loo_z=loo_z, press=press)


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
        vals = []
        for j in range(Y.shape[1]):
            f = fit_poly(age, Y[:, j], d, robust=robust)
            vals.append(np.log(f.press) if f is not None and f.press > 0 else np.nan)
        logs[d] = np.asarray(vals)
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
