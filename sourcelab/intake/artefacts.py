"""Epoch rejection thresholds learned from the recording, within age-aware plausibility bounds.

Rule (``rejection = "auto"``, the default): for every site, the distribution of an epoch feature
over all usable epochs of the recording (outside procedures and bad spans, after ocular
correction) gives a threshold ``exp(median + z * 1.4826 * MAD)`` of the log feature — the robust
(median/MAD) form of the FASTER criterion "reject beyond 3 standard deviations" (Nolan et al.
2010; median and MAD instead of mean and SD as recommended by Leys et al. 2013, so that the
artefacts being looked for do not inflate the scale).  The log is taken because epoch amplitudes
are right-skewed and close to log-normal (common practice, as for log power; Gasser et al. 1982).

The learned value is then clipped into plausibility bounds: a floor (an amplitude that is always
acceptable EEG, so that a very clean recording does not lose normal epochs) and a ceiling (an
amplitude that is never resting EEG, so that a very noisy recording cannot learn to accept its
artefacts).  The amplitude bounds scale with age: children's EEG is about twice the adult
amplitude until late childhood and falls to adult values through adolescence (Niedermeyer's
Electroencephalography, 6th ed. 2011, chapters on the normal EEG of children; Gasser et al. 1988
— from memory).  Without an age the child bounds are used (the widest), so that children are
not refused; the learned part does the work.

Features: peak-to-peak amplitude of the band-passed epoch (µV) and the RMS of its 25-45 Hz band
(µV, muscle).  Flat epochs stay a fixed hardware check.

Everything here is a pure function over arrays; :mod:`sourcelab.intake.clean` applies it.

References
----------
Nolan H, Whelan R, Reilly RB (2010). FASTER: Fully Automated Statistical Thresholding for EEG
artifact Rejection. J Neurosci Methods 192:152-162.
Leys C, Ley C, Klein O, Bernard P, Licata L (2013). Detecting outliers: do not use standard
deviation around the mean, use absolute deviation around the median. J Exp Soc Psychol
49:764-766.
Jas M, Engemann DA, Bekhti Y, Raimondo F, Gramfort A (2017). Autoreject: automated artifact
rejection for MEG and EEG data. NeuroImage 159:417-429 (the global threshold this rule was
compared with: benchmarks/bench_intake.py).
Gasser T, Bächer P, Möcks J (1982). Transformations towards the normal distribution of broad band
spectral parameters of the EEG. Electroencephalogr Clin Neurophysiol 53:119-124.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Robust z beyond which an epoch feature is rejected (FASTER's 3).
REJECT_Z = 3.0
#: MAD -> SD of a normal distribution.
MAD_SCALE = 1.4826
#: Adult peak-to-peak bounds, µV: 100 (floor: the common fixed threshold for adult resting EEG
#: lies at 100-150 µV, so 100 µV is always accepted) and 250 (ceiling: blinks and movements
#: reach 100s of µV; adult resting background rarely exceeds 100-150 µV peak to peak — common
#: practice).
PTP_BOUNDS_ADULT_UV = (100.0, 250.0)
#: Muscle (25-45 Hz RMS) bounds, µV, not age dependent: 8 (floor: the former fixed threshold,
#: common practice) and 15 (ceiling: scalp EEG above 25 Hz is of the order of 1-5 µV RMS;
#: Goncharova et al. 2003, Clin Neurophysiol 114:1580-1593 — from memory).
MUSCLE_BOUNDS_UV = (8.0, 15.0)
#: Amplitude factor children/adults and the ages over which it falls to 1 (linear in age).
CHILD_FACTOR = 2.0
CHILD_UNTIL_Y = 12.0
ADULT_FROM_Y = 18.0
#: Fewer usable epochs than this: the learned part is not trusted and the floors are used.
MIN_LEARN_EPOCHS = 20


def amplitude_factor(age: float | None) -> float:
    """EEG amplitude relative to adults: 2 up to 12 y, falling linearly to 1 at 18 y.

    ``None`` (age unknown) gives the child factor (widest bounds).

    Parameters
    ----------
    age : float or None
        Age in years; None or NaN when unknown.

    Returns
    -------
    float
        Factor in [1, 2]: :data:`CHILD_FACTOR` at ``age <= 12`` y (and for an unknown age), 1 at
        ``age >= 18`` y, linear in between.
    """
    if age is None:
        return CHILD_FACTOR
    a = float(age)
    if not np.isfinite(a) or a <= CHILD_UNTIL_Y:
        return CHILD_FACTOR
    if a >= ADULT_FROM_Y:
        return 1.0
    return CHILD_FACTOR + (1.0 - CHILD_FACTOR) * (a - CHILD_UNTIL_Y) / (
        ADULT_FROM_Y - CHILD_UNTIL_Y
    )


def plausibility_bounds(age: float | None) -> dict:
    """Floor and ceiling of each learned threshold, µV.

    Parameters
    ----------
    age : float or None
        Age in years (None or NaN: unknown, the child bounds); scales the peak-to-peak bounds
        by :func:`amplitude_factor`.

    Returns
    -------
    dict
        ``{"ptp_uv": (lo, hi), "muscle_uv": (lo, hi), "age_factor": f}``; bounds in µV (the
        muscle bounds do not depend on age).
    """
    f = amplitude_factor(age)
    lo, hi = PTP_BOUNDS_ADULT_UV
    return {"ptp_uv": (lo * f, hi * f), "muscle_uv": MUSCLE_BOUNDS_UV, "age_factor": f}


def robust_threshold(values: np.ndarray, *, z: float = REJECT_Z) -> np.ndarray:
    """Per-column threshold ``exp(median(log v) + z * 1.4826 * MAD(log v))``.

    Parameters
    ----------
    values : ndarray, shape (n_epochs, n_ch)
        Positive epoch features (µV); values below 1e-12 are raised to it before the log.
    z : float
        Robust z (default :data:`REJECT_Z` = 3, FASTER).

    Returns
    -------
    ndarray, shape (n_ch,)
        Threshold per column, in the unit of ``values`` (µV).
    """
    v = np.log(np.maximum(np.asarray(values, float), 1e-12))
    med = np.median(v, axis=0)
    mad = MAD_SCALE * np.median(np.abs(v - med), axis=0)
    return np.exp(med + z * mad)


@dataclass(frozen=True)
class Thresholds:
    """Per-site rejection thresholds.

    Attributes
    ----------
    ptp_uv, muscle_uv : ndarray, shape (n_ch,)
        Effective thresholds, µV.
    learned_ptp_uv, learned_muscle_uv : ndarray, shape (n_ch,)
        Before clipping into the bounds (NaN when not learned).
    bounds : dict
        From :func:`plausibility_bounds`.
    n_epochs : int
        Epochs learned from.
    mode : {"auto", "fixed"}
        ``rejection`` setting the thresholds come from.
    """

    ptp_uv: np.ndarray
    muscle_uv: np.ndarray
    learned_ptp_uv: np.ndarray
    learned_muscle_uv: np.ndarray
    bounds: dict
    n_epochs: int
    mode: str

    def summary(self, ch_names) -> dict:
        """JSON-serialisable form, site -> value.

        Parameters
        ----------
        ch_names : sequence of str, length n_ch
            Site names, in the order of the threshold arrays.

        Returns
        -------
        dict
            ``mode``, ``n_epochs_learned_from``, the four thresholds as site -> µV (rounded to
            0.01 µV; None where not finite) and ``bounds`` (tuples as lists).
        """

        def site(a):
            return {
                s: (None if not np.isfinite(v) else round(float(v), 2)) for s, v in zip(ch_names, a)
            }

        return {
            "mode": self.mode,
            "n_epochs_learned_from": int(self.n_epochs),
            "ptp_uv": site(self.ptp_uv),
            "muscle_uv": site(self.muscle_uv),
            "learned_ptp_uv": site(self.learned_ptp_uv),
            "learned_muscle_uv": site(self.learned_muscle_uv),
            "bounds": {k: (list(v) if isinstance(v, tuple) else v) for k, v in self.bounds.items()},
        }


def learn_thresholds(
    ptp_uv: np.ndarray, muscle_uv: np.ndarray, *, age: float | None = None, z: float = REJECT_Z
) -> Thresholds:
    """Thresholds from the usable epochs of a recording.

    Parameters
    ----------
    ptp_uv : ndarray, shape (n_epochs, n_ch)
        Peak-to-peak amplitude of every usable epoch and site, µV.
    muscle_uv : ndarray, shape (n_epochs, n_ch)
        25-45 Hz RMS, µV.
    age : float | None
        Years; sets the amplitude bounds (:func:`plausibility_bounds`).
    z : float
        Robust z (default 3, FASTER).

    Returns
    -------
    Thresholds
        With fewer than :data:`MIN_LEARN_EPOCHS` epochs the floors are used.
    """
    b = plausibility_bounds(age)
    n_ch = np.asarray(ptp_uv).shape[1]
    n = int(np.asarray(ptp_uv).shape[0])
    if n < MIN_LEARN_EPOCHS:
        nan = np.full(n_ch, np.nan)
        return Thresholds(
            np.full(n_ch, b["ptp_uv"][0]),
            np.full(n_ch, b["muscle_uv"][0]),
            nan,
            nan.copy(),
            b,
            n,
            "auto",
        )
    lp = robust_threshold(ptp_uv, z=z)
    lm = robust_threshold(muscle_uv, z=z)
    return Thresholds(np.clip(lp, *b["ptp_uv"]), np.clip(lm, *b["muscle_uv"]), lp, lm, b, n, "auto")


def fixed_thresholds(n_ch: int, *, reject_uv: float, muscle_uv: float) -> Thresholds:
    """The same threshold at every site (``rejection = "fixed"``).

    Parameters
    ----------
    n_ch : int
        Number of sites.
    reject_uv : float
        Peak-to-peak threshold, µV.
    muscle_uv : float
        25-45 Hz RMS threshold, µV.

    Returns
    -------
    Thresholds
        ``mode`` ``"fixed"``, no learned values (NaN), empty ``bounds`` and ``n_epochs`` 0.
    """
    nan = np.full(n_ch, np.nan)
    return Thresholds(
        np.full(n_ch, float(reject_uv)),
        np.full(n_ch, float(muscle_uv)),
        nan,
        nan.copy(),
        {},
        0,
        "fixed",
    )


__all__ = [
    "Thresholds",
    "learn_thresholds",
    "fixed_thresholds",
    "robust_threshold",
    "plausibility_bounds",
    "amplitude_factor",
    "REJECT_Z",
]
