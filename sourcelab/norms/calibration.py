"""Calibration of norms: are the transformed values Gaussian, and do leave-one-out z-scores of
the reference controls exceed 1.96 and 2.58 as often as they should (5 % and 1 %)?

References
----------
Shapiro SS, Wilk MB (1965).  An analysis of variance test for normality.  Biometrika 52:591-611.
Gasser T, Bächer P, Möcks J (1982).  Electroencephalogr Clin Neurophysiol 53:119-124 (from memory).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from scipy.special import ndtr

from .io import KEY_COLUMNS

#: Two-sided tail probabilities of the standard normal at the report's thresholds
#: (``2 * scipy.stats.norm.sf(t)`` is ``2 * ndtr(-t)``; scipy.stats is imported where needed).
THRESHOLDS = {1.96: 2 * ndtr(-1.96), 2.58: 2 * ndtr(-2.58)}


def _moments(values: np.ndarray, kept: np.ndarray):
    """Skewness, excess kurtosis and Shapiro-Wilk p of each row's kept values.

    ``values`` and ``kept`` have shape (rows, n); rows with fewer than 8 kept values, or all
    equal, give NaN.  Rows with the same number of kept values are computed together.
    """
    from scipy import stats

    out = np.full((3, len(values)), np.nan)
    counts = kept.sum(axis=1)
    for c in np.unique(counts[counts >= 8]):
        rows = np.flatnonzero(counts == c)
        r = values[rows][kept[rows]].reshape(rows.size, c)  # kept values in control order
        varies = np.ptp(r, axis=1) != 0
        rows, r = rows[varies], r[varies]
        if not rows.size:
            continue
        with warnings.catch_warnings():
            # scipy warns when n > 5000 (p less accurate); irrelevant at cohort sizes
            warnings.simplefilter("ignore", UserWarning)
            p = stats.shapiro(r, axis=1).pvalue
        out[0, rows] = stats.skew(r, axis=1, bias=False)
        out[1, rows] = stats.kurtosis(r, axis=1, fisher=True, bias=False)
        out[2, rows] = p
    return out


def _pooled_z(fit) -> np.ndarray:
    """Finite leave-one-out z of every norms row's controls, row after row, shape (k,)."""
    z, has_z = _row_z(fit)
    return z[has_z]


def _row_z(fit) -> tuple[np.ndarray, np.ndarray]:
    """Leave-one-out z of each norms row's controls, shape (rows, n), and where it is finite."""
    z = fit.loo_z[:, fit.row_quantity].T
    return z, fit.row_members & np.isfinite(z)


def calibration_report(fit) -> pd.DataFrame:
    """Per-row calibration of norms built by :func:`~sourcelab.norms.fit.fit_norms`.

    Parameters
    ----------
    fit : NormsFit

    Returns
    -------
    DataFrame
        One row per norms row: the key columns, ``n`` (kept controls), ``n_excluded`` (robust
        rule), ``skewness``, ``excess_kurtosis`` and ``shapiro_p`` of the residuals after the
        transform and the age model (kept controls), ``loo_frac_1.96`` and ``loo_frac_2.58``
        (fraction of leave-one-out |z| above the threshold, all controls in the range; expected
        0.05 and 0.01).  ``attrs["overall"]`` holds :func:`calibration_summary`.
    """
    t = fit.norms.table
    j, mem = fit.row_quantity, fit.row_members
    resid = fit.resid[:, j].T  # (rows, n)
    excluded = fit.excluded[:, j].T & mem
    kept = mem & np.isfinite(resid) & ~excluded
    sk, ku, p = _moments(resid, kept)
    z, has_z = _row_z(fit)
    loo_n = has_z.sum(axis=1)
    cols = {
        "n": kept.sum(axis=1),
        "n_excluded": excluded.sum(axis=1),
        "skewness": sk,
        "excess_kurtosis": ku,
        "shapiro_p": p,
        "loo_n": loo_n,
    }
    with np.errstate(invalid="ignore"):  # rows without a z: NaN
        for thr in (1.96, 2.58):
            above = (has_z & (np.abs(np.where(has_z, z, 0.0)) > thr)).sum(axis=1)
            cols[f"loo_frac_{thr}"] = np.where(loo_n > 0, above / loo_n, np.nan)
    recs = pd.DataFrame(cols)
    rep = pd.concat([t[list(KEY_COLUMNS)].reset_index(drop=True), recs], axis=1)
    rep.attrs["overall"] = calibration_summary(fit, rep)
    return rep


def calibration_summary(fit, report: pd.DataFrame | None = None) -> dict:
    """Overall calibration figures.

    Parameters
    ----------
    fit : NormsFit
        Result of :func:`~sourcelab.norms.fit.fit_norms`.
    report : DataFrame, optional
        :func:`calibration_report` of the same fit; adds the residual-shape figures.

    Returns
    -------
    dict
        ``n_controls``, ``n_rows``, ``loo_n`` (z values), ``loo_frac_1.96`` / ``loo_frac_2.58``
        (pooled; expected 0.05 / 0.01, also given as ``expected_frac_1.96`` /
        ``expected_frac_2.58``), ``loo_sd`` (SD of pooled LOO z; expected ~1),
        ``n_excluded_values``; with ``report`` also ``median_abs_skewness``,
        ``median_excess_kurtosis`` and ``frac_rows_shapiro_p<0.05`` (expected ~0.05 if Gaussian).
    """
    zs = _pooled_z(fit)
    out = {
        "n_controls": len(fit.participants),
        "n_rows": int(len(fit.norms.table)),
        "loo_n": int(zs.size),
        "loo_frac_1.96": float(np.mean(np.abs(zs) > 1.96)) if zs.size else np.nan,
        "loo_frac_2.58": float(np.mean(np.abs(zs) > 2.58)) if zs.size else np.nan,
        "expected_frac_1.96": float(THRESHOLDS[1.96]),
        "expected_frac_2.58": float(THRESHOLDS[2.58]),
        "loo_sd": float(np.std(zs, ddof=1)) if zs.size > 1 else np.nan,
        "n_excluded_values": int(fit.excluded.sum()),
    }
    if report is not None and len(report):
        out["median_abs_skewness"] = float(np.nanmedian(np.abs(report["skewness"])))
        out["median_excess_kurtosis"] = float(np.nanmedian(report["excess_kurtosis"]))
        p = report["shapiro_p"].to_numpy(dtype=float)
        out["frac_rows_shapiro_p<0.05"] = (
            float(np.mean(p[np.isfinite(p)] < 0.05)) if np.isfinite(p).any() else np.nan
        )
    return out


def plot_calibration(fit, *, figure=None, report: pd.DataFrame | None = None):
    """Four panels: pooled leave-one-out z histogram vs N(0,1), normal Q-Q plot, per-row
    fraction |z| > 1.96, per-row skewness vs excess kurtosis.

    Parameters
    ----------
    fit : NormsFit
    figure : matplotlib Figure | None
        Drawn into (cleared) if given; otherwise a new figure is made (no pyplot state kept).
    report : DataFrame, optional
        :func:`calibration_report` of the same fit, when already computed (computed otherwise).

    Returns
    -------
    matplotlib.figure.Figure
        The drawn figure (``figure`` when given).
    """
    from matplotlib.figure import Figure
    from scipy import stats

    rep = calibration_report(fit) if report is None else report
    ov = rep.attrs["overall"]
    fig = figure if figure is not None else Figure(figsize=(10, 8))
    fig.clear()
    ax = fig.subplots(2, 2)
    zs = _pooled_z(fit)
    grid = np.linspace(-4.5, 4.5, 301)
    ax[0, 0].hist(
        np.clip(zs, -4.5, 4.5),
        bins=60,
        density=True,
        color="0.6",
        label=f"controls, leave-one-out (n={zs.size})",
    )
    ax[0, 0].plot(grid, stats.norm.pdf(grid), color="k", lw=1.5, label="N(0, 1)")
    for s in (-1.96, 1.96):
        ax[0, 0].axvline(s, color="k", ls=":", lw=1)
    ax[0, 0].set(
        xlabel="z",
        ylabel="density",
        title=f"|z|>1.96: {100 * ov['loo_frac_1.96']:.1f} % (expected 5.0 %), "
        f"|z|>2.58: {100 * ov['loo_frac_2.58']:.1f} % (1.0 %)",
    )
    ax[0, 0].title.set_fontsize(9)
    ax[0, 0].legend(fontsize=8, loc="upper left")
    srt = np.sort(zs)
    theo = stats.norm.ppf((np.arange(1, srt.size + 1) - 0.5) / max(srt.size, 1))
    ax[0, 1].plot(theo, srt, ".", ms=2, color="0.3")
    lim = [min(-4, theo.min(initial=0)), max(4, theo.max(initial=0))]
    ax[0, 1].plot(lim, lim, color="k", lw=1)
    ax[0, 1].set(
        xlabel="standard normal quantile",
        ylabel="leave-one-out z quantile",
        title="normal Q-Q plot",
    )
    f196 = rep["loo_frac_1.96"].to_numpy(dtype=float)
    ax[1, 0].hist(100 * f196[np.isfinite(f196)], bins=20, color="0.6")
    ax[1, 0].axvline(5.0, color="k", lw=1.5, label="expected 5 %")
    ax[1, 0].set(
        xlabel="controls with leave-one-out |z| > 1.96 (%)",
        ylabel="norms rows",
        title="per-row false-positive rate",
    )
    ax[1, 0].legend(fontsize=8)
    ax[1, 1].scatter(rep["skewness"], rep["excess_kurtosis"], s=8, color="0.3")
    ax[1, 1].axhline(0, color="k", lw=1)
    ax[1, 1].axvline(0, color="k", lw=1)
    ax[1, 1].set(
        xlabel="skewness (transformed, age-adjusted)",
        ylabel="excess kurtosis",
        title="shape of each row's residuals",
    )
    fig.suptitle(
        f"Norms calibration: {ov['n_controls']} controls, {ov['n_rows']} rows, "
        f"condition {fit.norms.condition}",
        fontsize=11,
    )
    fig.tight_layout()
    return fig
