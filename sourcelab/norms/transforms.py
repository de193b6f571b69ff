"""Normalising transforms for band power, as a dispatch table with inverses.

Absolute band power is right-skewed and roughly log-normal across people; relative power is a
fraction in (0, 1).  Norms are therefore modelled on ``log10(power)`` and ``logit(fraction)``.

References
----------
Gasser T, Bächer P, Möcks J (1982).  Transformations towards the normal distribution of broad band
spectral parameters of the EEG.  Electroencephalogr Clin Neurophysiol 53:119-124 (from memory).
John ER, Ahn H, Prichep L, et al. (1980).  Developmental equations for the electroencephalogram.
Science 210:1255-1258 (from memory).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from ..checks import check_option
from ..errors import InputError


def _in_domain(x, inside: Callable[[np.ndarray], np.ndarray], problem: str) -> np.ndarray:
    """``x`` as floats, or an InputError naming ``problem`` and the first finite values outside."""
    x = np.asarray(x, dtype=float)
    bad = np.isfinite(x) & ~inside(x)
    if bad.any():
        raise InputError(f"{problem}; got {x[bad][:3].tolist()}")
    return x


def _log10(x: np.ndarray) -> np.ndarray:
    x = _in_domain(x, lambda v: v > 0, "log10 transform: values must be > 0 (absolute power)")
    return np.log10(x)


def _exp10(y: np.ndarray) -> np.ndarray:
    return np.power(10.0, np.asarray(y, dtype=float))


def _logit(x: np.ndarray) -> np.ndarray:
    x = _in_domain(
        x,
        lambda v: (v > 0) & (v < 1),
        "logit transform: values must lie in the open interval (0, 1) (relative power)",
    )
    return np.log(x) - np.log1p(-x)


def _expit(y: np.ndarray) -> np.ndarray:
    y = np.asarray(y, dtype=float)
    return 0.5 * (1.0 + np.tanh(0.5 * y))  # numerically stable logistic


def _identity(x: np.ndarray) -> np.ndarray:
    return np.asarray(x, dtype=float)


def _fisher(x: np.ndarray) -> np.ndarray:
    x = _in_domain(
        x,
        lambda v: np.abs(v) < 1,
        "fisher transform: values must lie in (-1, 1) (a correlation-type measure)",
    )
    return np.arctanh(x)


def _fisher_sqrt(x: np.ndarray) -> np.ndarray:
    x = _in_domain(
        x,
        lambda v: (v >= 0) & (v < 1),
        "fisher_sqrt transform: values must lie in [0, 1) (a squared coherence-type measure)",
    )
    return np.arctanh(np.sqrt(x))


def _tanh_sq(y: np.ndarray) -> np.ndarray:
    return np.tanh(np.asarray(y, dtype=float)) ** 2


def _fisher_ssqrt(x: np.ndarray) -> np.ndarray:
    x = _in_domain(x, lambda v: np.abs(v) < 1, "fisher_ssqrt transform: values must lie in (-1, 1)")
    return np.arctanh(np.sign(x) * np.sqrt(np.abs(x)))


def _tanh_ssq(y: np.ndarray) -> np.ndarray:
    t = np.tanh(np.asarray(y, dtype=float))
    return np.sign(t) * t * t


def _circular_deg(x: np.ndarray) -> np.ndarray:
    """Angles in degrees, wrapped into [-180, 180)."""
    x = np.asarray(x, dtype=float)
    return (x + 180.0) % 360.0 - 180.0


@dataclass(frozen=True)
class Transform:
    """A normalising transform and its inverse (both elementwise, NaN passes through).

    ``period`` marks a circular scale (angles): differences from a norm mean are wrapped into
    ``[-period/2, period/2)`` before dividing by the SD, and norms are fitted to deviations
    from the cohort's circular mean direction.
    """

    name: str
    forward: Callable[[np.ndarray], np.ndarray]
    inverse: Callable[[np.ndarray], np.ndarray]
    domain: str
    period: float | None = None

    def difference(self, t, mean) -> np.ndarray:
        """``t - mean`` on the transformed scale (wrapped for a circular scale).

        Parameters
        ----------
        t : array-like
            Transformed values.
        mean : array-like
            Norm means on the same scale, broadcastable against ``t``.

        Returns
        -------
        ndarray
            The broadcast difference; for a circular transform wrapped into
            ``[-period/2, period/2)`` (degrees for ``circular_deg``).
        """
        d = np.asarray(t, dtype=float) - np.asarray(mean, dtype=float)
        if self.period is not None:
            d = (d + self.period / 2.0) % self.period - self.period / 2.0
        return d


#: The transforms a norms file may name.
TRANSFORMS: dict[str, Transform] = {
    "log10": Transform("log10", _log10, _exp10, "(0, inf)"),
    "logit": Transform("logit", _logit, _expit, "(0, 1)"),
    # coupling measures (sourcelab.norms.coupling explains which measure uses which)
    "identity": Transform("identity", _identity, _identity, "(-inf, inf)"),
    "fisher": Transform("fisher", _fisher, np.tanh, "(-1, 1)"),
    "fisher_sqrt": Transform("fisher_sqrt", _fisher_sqrt, _tanh_sq, "[0, 1)"),
    "fisher_ssqrt": Transform("fisher_ssqrt", _fisher_ssqrt, _tanh_ssq, "(-1, 1)"),
    # phase angles in degrees: circular differences (period 360)
    "circular_deg": Transform(
        "circular_deg", _circular_deg, _circular_deg, "angle (degrees)", period=360.0
    ),
}

#: The transform used for each measure when norms are built.
TRANSFORM_FOR_MEASURE: dict[str, str] = {"absolute": "log10", "relative": "logit"}


def get_transform(name: str) -> Transform:
    """Look a transform up by name.

    Parameters
    ----------
    name : str
        A key of :data:`TRANSFORMS` (``"log10"``, ``"logit"``, ``"identity"``, ``"fisher"``,
        ``"fisher_sqrt"``, ``"fisher_ssqrt"``, ``"circular_deg"``).

    Returns
    -------
    Transform
        Forward and inverse functions, domain and (for angles) period.

    Raises
    ------
    InputError
        For an unknown name; the message lists the allowed ones.
    """
    return TRANSFORMS[check_option("transform", name, sorted(TRANSFORMS))]


def transform_for_measure(measure: str) -> str:
    """Name of the transform used for a band-power measure.

    Parameters
    ----------
    measure : {"absolute", "relative"}
        Absolute power (µV²) or relative power (a fraction in (0, 1)).

    Returns
    -------
    str
        ``"log10"`` for absolute, ``"logit"`` for relative power.

    Raises
    ------
    InputError
        For any other measure.
    """
    return TRANSFORM_FOR_MEASURE[check_option("measure", measure, sorted(TRANSFORM_FOR_MEASURE))]


def forward(values, name: str) -> np.ndarray:
    """Apply transform ``name`` to ``values``.

    Parameters
    ----------
    values : array-like, any shape
        Values in the measure's own unit (µV² for absolute power, a fraction for relative power).
    name : str
        Transform name (see :func:`get_transform`).

    Returns
    -------
    ndarray of float, same shape
        Transformed values; NaN passes through.

    Raises
    ------
    InputError
        If a finite value lies outside the transform's domain.
    """
    return get_transform(name).forward(values)


def inverse(values, name: str) -> np.ndarray:
    """Undo transform ``name``.

    Parameters
    ----------
    values : array-like, any shape
        Values on the transformed scale.
    name : str
        Transform name (see :func:`get_transform`).

    Returns
    -------
    ndarray of float, same shape
        Values in the measure's own unit.
    """
    return get_transform(name).inverse(values)
