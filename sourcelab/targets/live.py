"""Honest live values: the expected fluctuation of a live ROI value, smoothing and a threshold.

A live feedback value is one short window of data (default 1 s), so it fluctuates from window to
window even when the person's state does not change.  Scoring such a window against the norm's
*between-person* SD mixes two different spreads: a 1-s theta window scatters by about 0.2 log10
units around the person's own mean, a between-person SD is about 0.13, so the window z of a person
exactly at the norm mean scatters with SD ≈ 1.5.  This module computes, per target, the expected
window-to-window SD under the person's own steady state from the analysis' clean epochs, the SD
after smoothing, and a threshold expressed in the same units.

Derivation (:func:`expected_live_sd`)
-------------------------------------
1. **Per-epoch values.**  From the analysis' per-epoch band cross-spectra ``C_e`` (``epochs.npz``)
   the target's quantity is computed for every clean epoch: absolute ROI power ``tr(M C_e)`` or
   relative ROI power (mean over the ROI's sources of band / total), and transformed like the norm
   (log10 or logit): ``L_e``.
2. **State and sampling parts.**  ``Var(L_e)`` holds a slow *state* part (waxing and waning of
   the rhythm over many seconds) and a *sampling* part (a finite stretch of a random signal).  The
   sampling errors of non-overlapping epochs are independent, so the covariance of time-adjacent
   epochs estimates the state variance: ``v_state = clip(Cov(L_e, L_e+1), 0, Var(L_e))``, over
   pairs whose onsets are exactly one epoch apart; ``v_samp,epoch = Var(L_e) - v_state``.
3. **From an epoch to a live window.**  A band-power estimate of Gaussian data is a quadratic
   form ``xᵀQx`` and is distributed approximately as a scaled χ² with
   ``ν = tr(QΣ)² / tr((QΣ)²)`` degrees of freedom (Satterthwaite 1946; Box 1954).  For white
   data within the band (Σ = I) this gives ν of one channel for the offline estimate
   (periodic Hann window, one epoch, Welch bins lo ≤ f < hi) and for the live estimate (mean
   square over the window of the causal Butterworth output).  The spatial sum of an ROI
   multiplies both by the same factor, so the ratio ``r = ν_window / ν_epoch`` carries over.  The
   observed sampling variance fixes the epoch's effective ν_e through ``Var(ln P̂) = ψ'(ν/2)``
   (ψ' the trigamma function; exact for a scaled χ²), the window has ``ν_w = r ν_e``, and
   ``v_samp,window = v_samp,epoch · ψ'(ν_w/2) / ψ'(ν_e/2)``.  For the default 1-s window and
   2-s Hann epochs ``r`` is close to 1 (a Hann window's effective length is 18/35 of its length),
   so the result hardly depends on how step 2 splits the variance.
4. **Live SD** ``sd_window = sqrt(v_state + v_samp,window)`` on the transformed scale, and in z
   units ``sd_window / sd_norm``.
5. **Smoothed SD.**  Overlapping windows (1 s every 0.25 s) have correlated sampling errors,
   ``ρ(d) = Σ_t,u R(t-u-d)² / Σ_t,u R(t-u)²`` with ``R`` the autocorrelation of the filter's
   impulse response (d the lag in samples).  A smoother with weights ``c_i`` over past clean
   windows has ``v = v_state + v_samp,window Σ_ij c_i c_j ρ(|i-j| step)``; the state part is kept
   whole (assumed slower than the smoother), which is conservative.

For relative power step 3 uses the ratio of the band's own absolute power, an approximation (the
total in the denominator co-varies with the band).  The spectrum within the band is taken as flat;
a steep in-band slope changes ν by a few per cent.

References
----------
Satterthwaite FE (1946) An approximate distribution of estimates of variance components.
Biometrics Bulletin 2:110-114.
Box GEP (1954) Some theorems on quadratic forms applied in the study of analysis of variance
problems, I. Ann Math Stat 25:290-302.
Welch P (1967) IEEE Trans Audio Electroacoust 15:70-73.
Harris FJ (1978) Proc IEEE 66:51-83 (Hann window).
"""

from __future__ import annotations

import math

import numpy as np

from .._docs import fill_doc
from ..errors import InputError

#: Smoothing kinds: name -> description of the time constant.
SMOOTHING = {
    "exponential": "exponential moving average over clean windows, weight 1 - exp(-step/tau); "
    "mean delay tau",
    "moving": "mean of the clean windows of the last tau seconds; mean delay tau/2",
    "none": "no smoothing",
}
#: Default smoothing time constant, s.  Four 1-s windows' worth of data at the default 0.25-s
#: step: the smoothed SD falls to about half the raw window SD (sampling part) while the display
#: follows a change within a few seconds.
TIME_CONSTANT_S = 2.0


# --------------------------------------------------------------------------------------------
# quadratic-form degrees of freedom


def _impulse(sos: np.ndarray, n: int) -> np.ndarray:
    from scipy.signal import sosfilt

    x = np.zeros(n)
    x[0] = 1.0
    return sosfilt(sos, x)


def window_acf(sos: np.ndarray, sfreq: float, *, tail_s: float = 8.0) -> np.ndarray:
    """Autocorrelation ``R(k)`` of the filter's impulse response, k = 0, 1, ... (samples).

    Parameters
    ----------
    sos : ndarray, shape (n_sections, 6)
        Second-order sections of the causal band-pass filter.
    sfreq : float
        Sampling rate, Hz.
    tail_s : float
        Length of impulse response used, s (it must have decayed by then).

    Returns
    -------
    ndarray, shape (round(tail_s * sfreq),)
        ``R(k) = Σ_t h(t) h(t + k)`` (unnormalised).
    """
    h = _impulse(np.asarray(sos, float), int(round(tail_s * sfreq)))
    n = 2 * h.size
    spec = np.abs(np.fft.rfft(h, n)) ** 2
    return np.fft.irfft(spec, n)[: h.size]


def _pair_sum(r: np.ndarray, n_win: int, shift: int) -> float:
    """Σ_{t,u in 0..n_win-1} R(t - u - shift)²  (R symmetric, zero beyond its length)."""
    lags = np.arange(-(n_win - 1), n_win)
    counts = n_win - np.abs(lags)
    k = np.abs(lags + shift)
    vals = np.where(k < r.size, r[np.minimum(k, r.size - 1)], 0.0)
    return float(np.sum(counts * vals**2))


@fill_doc
def live_window_dof(sos: np.ndarray, sfreq: float, window_s: float) -> float:
    """Degrees of freedom of the live mean-square estimate of one channel (white input).

    ``ν = (n R(0))² / Σ_t,u R(t-u)²`` for a window of n samples of the causal filter's output.

    Parameters
    ----------
    %(live_filter_window)s

    Returns
    -------
    float
        Effective χ² degrees of freedom.
    """
    n = int(round(window_s * sfreq))
    r = window_acf(sos, sfreq)
    return float((n * r[0]) ** 2 / _pair_sum(r, n, 0))


@fill_doc
def window_correlation(sos: np.ndarray, sfreq: float, window_s: float, lags_s) -> np.ndarray:
    """Correlation of the sampling errors of two live windows ``lag`` seconds apart.

    ``ρ(d) = Σ_t,u R(t-u-d)² / Σ_t,u R(t-u)²`` (module docstring, step 5).

    Parameters
    ----------
    %(live_filter_window)s
    lags_s : sequence of float
        Lags between window ends, s (rounded to whole samples).

    Returns
    -------
    ndarray, shape (len(lags_s),)
        In [0, 1]; 1 at lag 0.
    """
    n = int(round(window_s * sfreq))
    r = window_acf(sos, sfreq)
    base = _pair_sum(r, n, 0)
    return np.array([_pair_sum(r, n, int(round(lag * sfreq))) / base for lag in lags_s])


def welch_epoch_dof(lo: float, hi: float, sfreq: float, epoch_s: float) -> float:
    """Degrees of freedom of one epoch's Welch band power (periodic Hann, bins lo <= f < hi).

    ``Q = Re Σ_k a_k a_kᴴ`` with ``a_k = w · exp(-2πi f_k t)``; ``ν = tr(Q)² / tr(Q²)``.

    Parameters
    ----------
    lo, hi : float
        Band edges, Hz, ``[lo, hi)``.
    sfreq : float
        Sampling rate, Hz.
    epoch_s : float
        Epoch length, s.

    Returns
    -------
    float
        Effective χ² degrees of freedom of the band-power estimate.

    Raises
    ------
    InputError
        If the band holds no bin at ``1 / epoch_s`` Hz resolution.
    """
    n = int(round(epoch_s * sfreq))
    t = np.arange(n)
    w = 0.5 - 0.5 * np.cos(2 * np.pi * t / n)
    fk = np.fft.rfftfreq(n, 1 / sfreq)
    fk = fk[(fk >= lo) & (fk < hi)]
    if fk.size == 0:
        raise InputError(f"band {lo:g}-{hi:g} Hz holds no frequency bin at {1 / epoch_s:g} Hz")
    a = w[None, :] * np.exp(-2j * np.pi * np.outer(fk, t) / sfreq)  # (n_bins, n)
    # weights of the one-sided density (DC and Nyquist bins count once)
    wt = np.where((fk == 0) | (np.isclose(fk, sfreq / 2)), 1.0, 2.0)
    q = np.real((a.conj().T * wt) @ a)
    return float(np.trace(q) ** 2 / np.sum(q * q))


def log_variance_dof(v_ln: float) -> float:
    """The ν with ``Var(ln(χ²_ν / ν)) = ψ'(ν/2) = v_ln`` (trigamma; inf when v_ln <= 0).

    Parameters
    ----------
    v_ln : float
        Variance of the natural log of a power estimate.

    Returns
    -------
    float
        Degrees of freedom ν; ``inf`` when ``v_ln <= 0`` or below what ν = 2e9 gives, 2e-4 when
        above what ν = 2e-4 gives.
    """
    from scipy.optimize import brentq
    from scipy.special import polygamma

    if not v_ln > 0:
        return math.inf
    f = lambda x: float(polygamma(1, x)) - v_ln  # noqa: E731
    lo, hi = 1e-4, 1e9
    if f(hi) > 0:
        return math.inf
    if f(lo) < 0:
        return 2 * lo
    return 2.0 * brentq(f, lo, hi, xtol=1e-10, rtol=1e-10)


def _trigamma_half(nu: float) -> float:
    from scipy.special import polygamma

    return 0.0 if not np.isfinite(nu) else float(polygamma(1, nu / 2.0))


# --------------------------------------------------------------------------------------------
# per-epoch values of a target


def epoch_values(target, epoch_csd: np.ndarray) -> np.ndarray:
    """The target's quantity in every epoch, untransformed, shape (n_epochs,).

    Parameters
    ----------
    target : TargetDefinition
    epoch_csd : ndarray, shape (n_epochs, n_bands, 19, 19)
        Real band cross-spectra, µV², band order as ``target.bands``.

    Returns
    -------
    ndarray, shape (n_epochs,)
        Absolute: ROI mean power ``tr(M C_e)`` (sLORETA-standardised units); relative: mean over
        the ROI's sources of band / total-over-bands power (a fraction; NaN where the total is 0).
    """
    c = np.asarray(epoch_csd, float)
    names = [b[0] for b in target.bands]
    if c.ndim != 4 or c.shape[1] != len(names):
        raise InputError(f"epoch_csd: need shape (n_epochs, {len(names)}, 19, 19), got {c.shape}")
    b = names.index(target.band)
    if target.measure == "absolute":
        return np.einsum("cd,edc->e", target.matrix, c[:, b])
    k = target.kernel_rows
    p = np.einsum("rc,ebcd,rd->ebr", k, c, k)  # (n_ep, n_bands, n_rows)
    p = p.reshape(c.shape[0], c.shape[1], -1, target.n_comp).sum(-1)
    total = p.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        rel = np.where(total > 0, p[:, b] / total, np.nan)
    return np.nanmean(rel, axis=1)


def transform_name(target) -> str:
    """Name of the transform of the target's live value.

    Parameters
    ----------
    target : TargetDefinition

    Returns
    -------
    str
        The norm's transform when the target has a norm, else ``"log10"`` for absolute and
        ``"logit"`` for relative power.
    """
    if target.norm is not None:
        return str(target.norm["transform"])
    return "log10" if target.measure == "absolute" else "logit"


def transform(values, name: str) -> np.ndarray:
    """log10 (absolute) or logit (relative); NaN outside the domain.

    Parameters
    ----------
    values : array-like, any shape
        Power (absolute) or a fraction (relative).
    name : {"log10", "logit"}

    Returns
    -------
    ndarray of float, same shape
        NaN where a value is <= 0 (log10) or outside (0, 1) (logit).

    Raises
    ------
    InputError
        For another transform name.
    """
    v = np.asarray(values, dtype=float)
    out = np.full(v.shape, np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        if name == "log10":
            ok = v > 0
            out[ok] = np.log10(v[ok])
        elif name == "logit":
            ok = (v > 0) & (v < 1)
            out[ok] = np.log(v[ok]) - np.log1p(-v[ok])
        else:
            raise InputError(f"transform {name!r} is not one of log10, logit")
    return out


def inverse_transform(level: float, name: str) -> float:
    """Undo :func:`transform` for one level.

    Parameters
    ----------
    level : float
        Value on the transformed scale.
    name : {"log10", "logit"}
        Any name other than ``"log10"`` is treated as ``"logit"``.

    Returns
    -------
    float
        NaN for a non-finite level.
    """
    if not np.isfinite(level):
        return float("nan")
    return float(10.0**level) if name == "log10" else float(1.0 / (1.0 + math.exp(-level)))


# --------------------------------------------------------------------------------------------
# smoothing


def smoother_weights(
    kind: str, time_constant_s: float, step_s: float, *, tol: float = 1e-6
) -> np.ndarray:
    """Steady-state weights of the smoother over the latest clean windows (newest first).

    Parameters
    ----------
    kind : {"exponential", "moving", "none"}
    time_constant_s : float
        Exponential: ``tau``, s; moving: the span averaged, s.
    step_s : float
        Time between live windows, s.
    tol : float
        Exponential weights are cut where the tail left falls below ``tol``.

    Returns
    -------
    ndarray, shape (n_weights,)
        Summing to 1 (to within ``tol`` for the exponential smoother); ``[1.0]`` for ``"none"``.

    Raises
    ------
    InputError
        For an unknown kind or a time constant that is not > 0.
    """
    if kind not in SMOOTHING:
        raise InputError(f"smoothing: {kind!r} is not one of {sorted(SMOOTHING)}")
    if kind == "none":
        return np.ones(1)
    if not time_constant_s > 0:
        raise InputError(f"time constant: must be > 0 s, got {time_constant_s}")
    if kind == "moving":
        k = max(1, int(round(time_constant_s / step_s)))
        return np.full(k, 1.0 / k)
    a = 1.0 - math.exp(-step_s / time_constant_s)
    n = max(1, int(math.ceil(math.log(tol) / math.log(1.0 - a)))) if a < 1 else 1
    return a * (1.0 - a) ** np.arange(n)


class Smoother:
    """Smooth the transformed live value over clean windows (causal; unclean windows skipped).

    Parameters
    ----------
    kind : {"exponential", "moving", "none"}
    time_constant_s : float
        Exponential: ``tau`` of ``s += (1 - exp(-step/tau)) (L - s)``; moving: the span averaged.
    step_s : float

    Notes
    -----
    The first clean value after a (re)start is taken as it is; the exponential smoother then
    needs about ``tau`` seconds of clean windows before its SD reaches the steady state reported
    by :func:`expected_live_sd`.  An unclean window leaves the state unchanged and yields NaN.
    """

    def __init__(
        self,
        kind: str = "exponential",
        time_constant_s: float = TIME_CONSTANT_S,
        step_s: float = 0.25,
    ):
        self.kind = kind
        self.w = smoother_weights(kind, time_constant_s, step_s)
        self.alpha = (1.0 - math.exp(-step_s / time_constant_s)) if kind == "exponential" else None
        self.reset()

    def reset(self) -> None:
        """Forget the smoothing state (after a restart the next clean value is taken as it is)."""
        self._s = None
        self._hist: list[float] = []

    def update(self, level: float, clean: bool) -> float:
        """Feed one window's transformed value; return the smoothed value.

        Parameters
        ----------
        level : float
            The window's value on the transformed scale (log10 or logit).
        clean : bool
            Whether the window passed the live artefact checks.

        Returns
        -------
        float
            The smoothed level; NaN (state unchanged) for an unclean or non-finite window.
        """
        if not clean or not np.isfinite(level):
            return float("nan")
        if self.kind == "none":
            return float(level)
        if self.kind == "exponential":
            self._s = level if self._s is None else self._s + self.alpha * (level - self._s)
            return float(self._s)
        self._hist.append(float(level))
        del self._hist[: -self.w.size]
        return float(np.mean(self._hist))


# --------------------------------------------------------------------------------------------
# the expected live SD


def expected_live_sd(
    levels: np.ndarray,
    *,
    onsets_s: np.ndarray | None,
    epoch_s: float,
    sfreq: float,
    sos: np.ndarray,
    lo: float,
    hi: float,
    window_s: float,
    step_s: float,
    smoothing: str = "exponential",
    time_constant_s: float = TIME_CONSTANT_S,
    ln_scale: float | None = None,
    abs_levels_ln: np.ndarray | None = None,
) -> dict:
    """Expected window-to-window SD of a live value under the person's steady state.

    Parameters
    ----------
    levels : ndarray, shape (n_epochs,)
        Transformed per-epoch values (log10 or logit), epochs in time order.
    onsets_s : ndarray, shape (n_epochs,) | None
        Epoch onsets (s); adjacency for the state part.  Without them consecutive epochs count
        as adjacent.
    epoch_s, sfreq : float
        The analysis' epoch length and the sampling rate the live filter runs at.
    sos : ndarray
        The live band-pass (second-order sections).
    lo, hi : float
        Band edges, Hz.
    window_s, step_s : float
        Live window and step.
    smoothing : {"exponential", "moving", "none"}
        Smoother kind (see :class:`Smoother`).
    time_constant_s : float
        The smoother's time constant, s.
    ln_scale : float, optional
        Factor turning the transformed scale into natural-log units for the χ² model (ln 10 for
        log10 levels).  Default: ln 10.
    abs_levels_ln : ndarray, optional
        Natural-log absolute band power per epoch, used for the effective ν of relative targets
        (default: ``levels * ln_scale``).

    Returns
    -------
    dict
        ``window_sd``, ``smoothed_sd`` (transformed scale), ``epoch_sd``, ``state_sd``,
        ``nu_epoch``, ``nu_window``, ``dof_ratio``, ``n_epochs``, ``n_adjacent_pairs``.

    Notes
    -----
    See the module docstring for the derivation.
    """
    lv = np.asarray(levels, dtype=float)
    ok = np.isfinite(lv)
    if ok.sum() < 4:
        raise InputError(f"need at least 4 clean epochs with a finite value, got {int(ok.sum())}")
    ln_scale = math.log(10.0) if ln_scale is None else float(ln_scale)
    n = lv.size
    if onsets_s is not None and np.all(np.isfinite(onsets_s)):
        on = np.asarray(onsets_s, dtype=float)
        adj = np.isclose(np.diff(on), epoch_s, atol=0.5 / sfreq)
    else:
        adj = np.ones(n - 1, dtype=bool)
    adj &= ok[:-1] & ok[1:]
    mean = np.nanmean(lv)
    var_obs = float(np.nanvar(lv, ddof=1))
    if adj.sum() >= 3:
        d0, d1 = lv[:-1][adj] - mean, lv[1:][adj] - mean
        v_state = float(np.clip(np.mean(d0 * d1), 0.0, var_obs))
    else:
        v_state = 0.0
    v_samp = var_obs - v_state
    nu_e_theory = welch_epoch_dof(lo, hi, sfreq, epoch_s)
    nu_w_theory = live_window_dof(sos, sfreq, window_s)
    ratio = nu_w_theory / nu_e_theory
    if abs_levels_ln is None:
        v_samp_ln = v_samp * ln_scale**2
    else:
        al = np.asarray(abs_levels_ln, dtype=float)
        fa = float(np.nanvar(al, ddof=1))
        sa = fa * (v_samp / var_obs) if var_obs > 0 else fa
        v_samp_ln = sa
    nu_e = log_variance_dof(v_samp_ln)
    nu_w = nu_e * ratio
    te, tw = _trigamma_half(nu_e), _trigamma_half(nu_w)
    kappa = (tw / te) if te > 0 else 1.0 / ratio
    v_win_samp = v_samp * kappa
    w = smoother_weights(smoothing, time_constant_s, step_s)
    lags = np.arange(w.size) * step_s
    rho = window_correlation(sos, sfreq, window_s, lags)
    ii = np.abs(np.subtract.outer(np.arange(w.size), np.arange(w.size)))
    factor = float(w @ rho[ii] @ w)
    return {
        "window_sd": math.sqrt(v_state + v_win_samp),
        "smoothed_sd": math.sqrt(v_state + v_win_samp * factor),
        "epoch_sd": math.sqrt(var_obs),
        "state_sd": math.sqrt(v_state),
        "nu_epoch": nu_e,
        "nu_window": nu_w,
        "dof_ratio": ratio,
        "smoothing_variance_factor": factor,
        "n_epochs": int(ok.sum()),
        "n_adjacent_pairs": int(adj.sum()),
    }


def live_section(
    target,
    epochs=None,
    *,
    smoothing: str = "exponential",
    time_constant_s: float = TIME_CONSTANT_S,
    threshold_sd: float | None = None,
    direction: str | None = None,
) -> dict:
    """The ``live`` section of a target file.

    Parameters
    ----------
    target : TargetDefinition
    epochs : sourcelab.epochfile.EpochSpectra, optional
        The analysis' per-epoch spectra; without them the expected SD is not available.
    smoothing : {"exponential", "moving", "none"}
        Smoother kind (see :class:`Smoother`).
    time_constant_s : float
        The smoother's time constant, s.
    threshold_sd : float, optional
        Feedback threshold in units of the smoothed SD from the person's own level (the offline
        value), in the training direction: ``level_0 ∓ k · smoothed_sd``.  None: no threshold.
    direction : {"increase", "decrease"}, optional
        Overrides the target's direction for the threshold.

    Returns
    -------
    dict
        ``transform``, ``smoothing`` {kind, time_constant_s, description}, ``expected_sd``
        {window, smoothed: {transformed, z}, ...} or None, ``threshold`` or None, ``note``.
    """
    tname = transform_name(target)
    smoother_weights(smoothing, time_constant_s, target.step_s)  # validates
    out = {
        "transform": tname,
        "smoothing": {
            "kind": smoothing,
            "time_constant_s": float(time_constant_s),
            "description": SMOOTHING[smoothing],
        },
        "expected_sd": None,
        "threshold": None,
        "note": (
            "Expected window-to-window SD of the live value under the person's own "
            "steady state, from the analysis' clean epochs (see sourcelab.targets.live)."
            " Live values are noisy: judge trends over minutes, not single windows."
        ),
    }
    sd_norm = float(target.norm["sd"]) if target.norm is not None else None
    if epochs is not None:
        names = [b[0] for b in target.bands]
        if list(epochs.band_names) != names:
            raise InputError(
                f"epochs bands {list(epochs.band_names)} differ from the target's {names}"
            )
        vals = epoch_values(target, epochs.csd)
        levels = transform(vals, tname)
        lo, hi = target.band_edges
        abs_ln = None
        if target.measure == "relative":
            b = names.index(target.band)
            m = target.matrix
            with np.errstate(divide="ignore", invalid="ignore"):
                abs_ln = np.log(np.einsum("cd,edc->e", m, epochs.csd[:, b]))
        sos = target.sos[target.band]
        st = expected_live_sd(
            levels,
            onsets_s=epochs.onsets_s,
            epoch_s=epochs.epoch_s,
            sfreq=target.sfreq,
            sos=sos,
            lo=lo,
            hi=hi,
            window_s=target.window_s,
            step_s=target.step_s,
            smoothing=smoothing,
            time_constant_s=time_constant_s,
            abs_levels_ln=abs_ln,
        )
        exp = {
            "window": {
                "transformed": st["window_sd"],
                "z": st["window_sd"] / sd_norm if sd_norm else None,
            },
            "smoothed": {
                "transformed": st["smoothed_sd"],
                "z": st["smoothed_sd"] / sd_norm if sd_norm else None,
            },
            "epoch_sd": st["epoch_sd"],
            "state_sd": st["state_sd"],
            "nu_epoch": st["nu_epoch"],
            "nu_window": st["nu_window"],
            "dof_ratio": st["dof_ratio"],
            "smoothing_variance_factor": st["smoothing_variance_factor"],
            "n_epochs": st["n_epochs"],
            "n_adjacent_pairs": st["n_adjacent_pairs"],
            "person_level": float(np.nanmean(levels)),
        }
        out["expected_sd"] = exp
    if threshold_sd is not None:
        d = direction or target.direction
        if d not in ("increase", "decrease"):
            raise InputError(
                "a threshold needs a training direction: the target has none (no "
                "norm); pass the direction"
            )
        if out["expected_sd"] is None:
            raise InputError(
                "a threshold in SD units needs the expected SD, which needs the "
                "analysis' epochs.npz"
            )
        k = float(threshold_sd)
        if not (np.isfinite(k) and k >= 0):
            raise InputError(f"threshold: need a finite k >= 0 SD, got {threshold_sd}")
        off = target.offline.get("value")
        base = (
            float(transform(np.array([off]), tname)[0])
            if off
            else out["expected_sd"]["person_level"]
        )
        sd = out["expected_sd"]["smoothed"]["transformed"]
        sign = 1.0 if d == "increase" else -1.0
        level = base + sign * k * sd
        out["threshold"] = {
            "k_sd": k,
            "direction": d,
            "reference_level": base,
            "level": level,
            "power": inverse_transform(level, tname),
            "z": ((level - float(target.norm["mean"])) / sd_norm) if sd_norm else None,
            "rule": (
                "feedback when the smoothed value is "
                f"{'at or above' if sign > 0 else 'at or below'} the threshold"
            ),
        }
    return _json_safe(out)


def _json_safe(o):
    if isinstance(o, dict):
        return {k: _json_safe(v) for k, v in o.items()}
    if isinstance(o, (float, np.floating)):
        return float(o) if np.isfinite(o) else None
    if isinstance(o, np.integer):
        return int(o)
    return o


def check_live(d, path="target") -> dict | None:
    """Validate a parsed ``live`` section (None passes).

    Parameters
    ----------
    d : dict or None
        The ``live`` object of a target file: ``smoothing`` (``kind``, ``time_constant_s``) and
        an optional ``threshold`` (``direction``, ``level`` on the transformed scale).
    path : str | Path
        Named in messages.

    Returns
    -------
    dict or None
        ``d`` unchanged.

    Raises
    ------
    InputError
        For an unknown smoothing kind, a time constant that is not > 0, or an incomplete
        threshold.
    """
    if d is None:
        return None
    if not isinstance(d, dict):
        raise InputError("live must be an object", path=path)
    sm = d.get("smoothing") or {}
    kind = sm.get("kind", "exponential")
    if kind not in SMOOTHING:
        raise InputError(
            f"live.smoothing.kind {kind!r} is not one of {sorted(SMOOTHING)}", path=path
        )
    tc = sm.get("time_constant_s", TIME_CONSTANT_S)
    if not (isinstance(tc, (int, float)) and tc > 0):
        raise InputError(f"live.smoothing.time_constant_s must be > 0, got {tc!r}", path=path)
    th = d.get("threshold")
    if th is not None:
        if th.get("direction") not in ("increase", "decrease") or not isinstance(
            th.get("level"), (int, float)
        ):
            raise InputError(
                "live.threshold needs direction (increase/decrease) and level", path=path
            )
    return d


def threshold_met(smoothed_level: float, live: dict | None) -> float:
    """1.0 when the smoothed value is beyond the threshold, 0.0 when not, NaN without one.

    Parameters
    ----------
    smoothed_level : float
        Smoothed value on the transformed scale.
    live : dict or None
        The target's ``live`` section.

    Returns
    -------
    float
        ``"increase"``: ``level >= threshold``; ``"decrease"``: ``level <= threshold``; NaN
        without a threshold or for a non-finite level.
    """
    if not live or not live.get("threshold") or not np.isfinite(smoothed_level):
        return float("nan")
    th = live["threshold"]
    if th["direction"] == "increase":
        return float(smoothed_level >= th["level"])
    return float(smoothed_level <= th["level"])


class LiveValue:
    """The smoothed value and threshold flag of one target, window by window.

    Parameters
    ----------
    target : TargetDefinition
        Its ``live`` section sets the smoothing and threshold (default: exponential, 2 s, none).
    """

    def __init__(self, target):
        live = target.live or {}
        sm = live.get("smoothing") or {}
        self.live = live
        self.smoother = Smoother(
            sm.get("kind", "exponential"),
            float(sm.get("time_constant_s", TIME_CONSTANT_S)),
            target.step_s,
        )
        self.tname = transform_name(target)
        self.norm = target.norm

    def reset(self) -> None:
        """Restart the smoother (see :meth:`Smoother.reset`)."""
        self.smoother.reset()

    def update(self, power: float, clean: bool) -> tuple[float, float, float]:
        """Smooth one window's power and score it.

        Parameters
        ----------
        power : float
            The window's ROI power (absolute: sLORETA-standardised units; relative: a fraction).
        clean : bool
            Whether the window passed the live artefact checks.

        Returns
        -------
        smoothed_level, smoothed_z, threshold_met : float
            Smoothed transformed value, its z against the target's norm (NaN without a norm) and
            :func:`threshold_met`; all NaN for an unclean window.
        """
        level = float(transform(np.array([power]), self.tname)[0]) if clean else float("nan")
        s = self.smoother.update(level, clean)
        z = float("nan")
        if self.norm is not None and np.isfinite(s):
            z = (s - float(self.norm["mean"])) / float(self.norm["sd"])
        return s, z, threshold_met(s, self.live)
