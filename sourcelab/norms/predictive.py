"""Predictive (Student-t) p-values for one new participant against estimated norms.

A z-score ``(y - m̂(age)) / ŝ`` treats the norms' mean and SD as exact.  With ``n`` reference
participants they are estimates, and a new person's deviation from the *estimated* mean has
variance ``σ² (1 + h₀)``, where ``h₀ = x₀ᵀ (XᵀX)⁻¹ x₀`` is the new person's leverage on the age
model (``x₀`` their design row, ``X`` the design of the kept controls).  Dividing by the
estimated residual SD (``n - p`` degrees of freedom, ``p`` = degree + 1 coefficients) gives

    t = (y - m̂(age)) / (ŝ · sqrt(1 + h₀))  ~  Student t with n - p degrees of freedom

exactly, under the model, whatever ``n``.  For age bins (degree 0), ``h₀ = 1/n`` and this is
Crawford & Howell (1998)'s single-case test; for regression norms it is Crawford & Garthwaite
(2006)'s test of a case against a regression equation.  The two-sided p-value comes from the
t distribution; ``z_equivalent`` is the standard-normal deviate with the same p-value, so
``|z_equivalent| > 1.96`` happens with probability 5 % under the null at every sample size.

Norms files (format 2, ``FORMAT.md``) store each row's ``(XᵀX)⁻¹`` (columns ``v00`` ...
``v33``) and ``df``; :func:`approximate_leverage` (the mean leverage ``p / n``, exact on average
over the reference ages, too small at the age extremes) serves where no matrix is stored.

References
----------
Crawford JR, Howell DC (1998).  Comparing an individual's test score against norms derived from
small samples.  Clin Neuropsychol 12:482-486 (from memory).
Crawford JR, Garthwaite PH (2006).  Comparing patients' predicted test scores from a regression
equation with their obtained scores: a significance test and point estimate of abnormality with
accompanying confidence limits.  Neuropsychology 20:259-271 (from memory).
Cook RD, Weisberg S (1982).  Residuals and Influence in Regression.  Chapman & Hall (from memory):
prediction variance ``σ²(1 + h₀)``.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from .io import MAX_DEGREE, V_COLUMNS  # noqa: F401  (V_COLUMNS: the format-2 names)


def design_row(age, degree) -> np.ndarray:
    """``[1, x, x², x³]`` with ``x = log10(age)``, zero above each row's degree.

    Parameters
    ----------
    age : float or ndarray, shape (m,)
        Years (> 0).
    degree : int or ndarray of int, shape (m,)

    Returns
    -------
    ndarray, shape (m, MAX_DEGREE + 1)
        One row per age.
    """
    degree = np.atleast_1d(np.asarray(degree, dtype=np.int64))
    x = np.log10(np.broadcast_to(np.asarray(age, dtype=float), degree.shape))
    k = np.arange(MAX_DEGREE + 1)
    return np.where(k[None, :] <= degree[:, None], x[:, None] ** k[None, :], 0.0)


def xtx_inverse(age: np.ndarray, degree: int) -> np.ndarray:
    """``(XᵀX)⁻¹`` of the age design of the controls that were kept, padded to 4 x 4.

    Parameters
    ----------
    age : ndarray, shape (n,)
        Ages (years) of the kept controls.
    degree : int

    Returns
    -------
    ndarray, shape (MAX_DEGREE + 1, MAX_DEGREE + 1)
        Zero outside the leading ``(degree + 1)`` block.
    """
    age = np.asarray(age, dtype=float)
    p = int(degree) + 1
    if age.size < p:
        raise InputError(f"xtx_inverse: need at least {p} ages for degree {degree}")
    x = design_row(age, np.full(age.size, degree))[:, :p]
    out = np.zeros((MAX_DEGREE + 1, MAX_DEGREE + 1))
    inv = np.linalg.inv(x.T @ x)
    out[:p, :p] = (inv + inv.T) / 2.0  # exactly symmetric (packed as an upper triangle)
    return out


def pack_v(xtx_inv: np.ndarray) -> np.ndarray:
    """Upper triangle of ``(XᵀX)⁻¹`` matrices as :data:`V_COLUMNS`, shape (..., 10).

    Parameters
    ----------
    xtx_inv : ndarray, shape (..., 4, 4)
        Symmetric ``(XᵀX)⁻¹`` of the age design (zero-padded beyond the row's degree).

    Returns
    -------
    ndarray, shape (..., 10)
        Row-major upper triangle (``numpy.triu_indices(4)``), diagonal included.
    """
    iu = np.triu_indices(MAX_DEGREE + 1)
    return np.asarray(xtx_inv)[..., iu[0], iu[1]]


def unpack_v(v: np.ndarray) -> np.ndarray:
    """Inverse of :func:`pack_v`, shape (..., 4, 4), symmetric.

    Parameters
    ----------
    v : ndarray, shape (..., 10)
        Upper triangles as stored in the norms' :data:`V_COLUMNS`.

    Returns
    -------
    ndarray, shape (..., 4, 4)
        Full symmetric matrices.
    """
    v = np.asarray(v, dtype=float)
    out = np.zeros(v.shape[:-1] + (MAX_DEGREE + 1, MAX_DEGREE + 1))
    iu = np.triu_indices(MAX_DEGREE + 1)
    out[..., iu[0], iu[1]] = v
    out[..., iu[1], iu[0]] = v
    return out


def leverage(xtx_inv: np.ndarray, degree, age) -> np.ndarray:
    """``h₀ = x₀ᵀ (XᵀX)⁻¹ x₀`` of a new participant of ``age``.

    Parameters
    ----------
    xtx_inv : ndarray, shape (m, 4, 4) or (4, 4)
    degree : int or ndarray, shape (m,)
    age : float or ndarray, shape (m,)

    Returns
    -------
    ndarray, shape (m,)
        Dimensionless leverage ``h₀`` per row.
    """
    x0 = design_row(age, degree)
    c = np.asarray(xtx_inv, dtype=float)
    if c.ndim == 2:
        return np.einsum("mi,ij,mj->m", x0, c, x0)
    return np.einsum("mi,mij,mj->m", x0, c, x0)


def approximate_leverage(n, degree) -> np.ndarray:
    """Mean leverage ``(degree + 1) / n`` for norms that do not store ``(XᵀX)⁻¹`` (format 1).

    Parameters
    ----------
    n : int or ndarray of int, shape (m,)
        Controls behind each norms row.
    degree : int or ndarray of int, shape (m,)
        Age-polynomial degree of each row.

    Returns
    -------
    ndarray of float, shape (m,) (or () for scalars)
        Dimensionless leverage ``h₀``.
    """
    return (np.asarray(degree, dtype=float) + 1.0) / np.asarray(n, dtype=float)


def predictive_t(y, mean, sd, *, n, degree, h0) -> dict[str, np.ndarray]:
    """Predictive t-statistic, two-sided p-value and normal-equivalent z.

    Parameters
    ----------
    y : ndarray, shape (m,)
        Participant's transformed values (log10 or logit scale).
    mean, sd : ndarray, shape (m,)
        Norms' mean at the participant's age and residual SD (transformed scale).
    n : ndarray of int, shape (m,)
        Controls behind each row (after exclusions).
    degree : ndarray of int, shape (m,)
        Age-model degree (0 for bins).
    h0 : ndarray, shape (m,)
        Leverage of the participant (:func:`leverage` or :func:`approximate_leverage`).

    Returns
    -------
    dict
        ``t``, ``df`` (``n - degree - 1``), ``p`` (two-sided, Student t), ``z_equivalent``
        (``sign(t) · Φ⁻¹(1 - p/2)``), ``z_plain`` (``(y - mean) / sd``).

    References
    ----------
    Crawford JR, Howell DC (1998).  Clin Neuropsychol 12:482-486 (from memory).
    Crawford JR, Garthwaite PH (2006).  Neuropsychology 20:259-271 (from memory).
    """
    # scipy.stats' t.sf(x, df) and norm.isf(q) are stdtr(df, -x) and -ndtri(q) (the same
    # numbers), without importing scipy.stats (~0.5 s)
    from scipy.special import ndtri, stdtr

    y, mean, sd = (np.asarray(a, dtype=float) for a in (y, mean, sd))
    df = np.asarray(n, dtype=float) - np.asarray(degree, dtype=float) - 1.0
    if np.any(df[np.isfinite(df)] < 1):
        raise InputError("predictive_t: every row needs n > degree + 1 controls")
    z_plain = (y - mean) / sd
    t = z_plain / np.sqrt(1.0 + np.asarray(h0, dtype=float))
    p = 2.0 * stdtr(df, -np.abs(t))
    z_eq = np.sign(t) * (0.0 - ndtri(p / 2.0))
    return {"t": t, "df": df, "p": p, "z_equivalent": z_eq, "z_plain": z_plain}


def row_xtx_inverse(fit) -> np.ndarray:
    """Per norms-row ``(XᵀX)⁻¹`` over the controls each row kept (for the format-2 columns).

    Parameters
    ----------
    fit : NormsFit
        From :func:`sourcelab.norms.fit_norms`.

    Returns
    -------
    ndarray, shape (n_rows, 4, 4)
        Symmetric, zero beyond each row's degree; pack with :func:`pack_v`.
    """
    t = fit.norms.table
    out = np.zeros((len(t), MAX_DEGREE + 1, MAX_DEGREE + 1))
    deg = t["degree"].to_numpy()
    for r in range(len(t)):
        j = fit.row_quantity[r]
        kept = fit.row_members[r] & np.isfinite(fit.values[:, j]) & ~fit.excluded[:, j]
        out[r] = xtx_inverse(fit.ages[kept], int(deg[r]))
    return out
