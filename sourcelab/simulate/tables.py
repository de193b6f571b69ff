"""A statistical test cohort: tidy tables whose transformed values are Gaussian by construction.

Used by the tests and for demonstrating the norms machinery.  These are *invented* numbers (no
signal simulation, no real people): ``T(value) = a + b x + c x^2 + sd * N(0, 1)`` with
``x = log10(age)`` and ``T`` = log10 (absolute) or logit (relative).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .._docs import fill_doc
from ..constants import UNITS
from ..norms.transforms import get_transform, transform_for_measure

_ROIS = ("BA17", "BA19", "BA9", "BA40")
_HEMIS = ("left", "right")
_CHANNELS = ("O1", "Fz", "C4")
_BANDS = ("theta", "alpha", "beta")
_MEASURES = ("absolute", "relative")


@dataclass(frozen=True, eq=False)
class GaussianCohort:
    """Truth of a simulated cohort.

    Attributes
    ----------
    keys : DataFrame
        One row per quantity: kind, atlas, name, hemisphere, band, measure.
    coef : ndarray, shape (q, 3)
        True ``a, b, c`` of the mean ``a + b x + c x**2``, ``x = log10(age)``.
    sd : ndarray, shape (q,)
        True SD on the transformed scale.
    entries : list of (participant_id, age, roi_table, sensor_table)
    """

    keys: pd.DataFrame
    coef: np.ndarray
    sd: np.ndarray
    entries: list

    @fill_doc
    def true_mean(self, age: float) -> np.ndarray:
        """True transformed mean of every quantity at ``age``, shape (q,).

        %(age_parameters)s

        Returns
        -------
        ndarray, shape (q,)
            ``a + b x + c x**2`` with ``x = log10(age)``, on the transformed scale (log10 of µV²
            for absolute, logit for relative power).
        """
        x = np.log10(age)
        return self.coef @ np.array([1.0, x, x * x])

    @fill_doc
    def tables_at(self, age: float, z: np.ndarray) -> tuple[pd.DataFrame, pd.DataFrame]:
        """Noise-free tables whose values sit ``z`` true SDs from the true mean.

        Parameters
        ----------
        %(age_years)s
        z : array-like, shape (q,)
            Deviation of each quantity, in true SDs on the transformed scale.

        Returns
        -------
        roi_table, sensor_table : DataFrame
            Tidy analysis-style tables (``value`` back on the measure's scale: invented µV² for
            absolute, a fraction for relative power; ``z`` NaN).
        """
        return _tables(self.keys, self.true_mean(age) + np.asarray(z) * self.sd)


def _tables(keys: pd.DataFrame, tvals: np.ndarray) -> tuple[pd.DataFrame, pd.DataFrame]:
    vals = np.empty(len(keys))
    for m in _MEASURES:
        sel = (keys["measure"] == m).to_numpy()
        vals[sel] = get_transform(transform_for_measure(m)).inverse(tvals[sel])
    k = keys.assign(value=vals)
    roi = k[k["kind"] == "roi"]
    sen = k[k["kind"] == "sensor"]
    roi_t = pd.DataFrame(
        {
            "atlas": roi["atlas"],
            "roi": roi["name"],
            "hemisphere": roi["hemisphere"],
            "band": roi["band"],
            "measure": roi["measure"],
            "value": roi["value"],
            "unit": [UNITS[m] for m in roi["measure"]],
            "n_vertices": 100,
            "small": False,
            "z": np.nan,
        }
    ).reset_index(drop=True)
    sen_t = pd.DataFrame(
        {
            "channel": sen["name"],
            "band": sen["band"],
            "measure": sen["measure"],
            "value": sen["value"],
            "unit": ["µV²" if m == "absolute" else UNITS[m] for m in sen["measure"]],
            "z": np.nan,
        }
    ).reset_index(drop=True)
    return roi_t, sen_t


def gaussian_cohort(n: int, *, rng: np.random.Generator, age_range=(6.0, 80.0)) -> GaussianCohort:
    """Simulate ``n`` participants x 66 quantities (48 ROI, 18 sensor), Gaussian after transform.

    Parameters
    ----------
    n : int
        Number of invented participants.
    rng : numpy Generator
    age_range : (float, float)
        Ages are log-uniform over this range, years (rounded to 0.01).

    Returns
    -------
    GaussianCohort
        The true coefficients and SDs, and ``entries`` ready for
        :func:`sourcelab.norms.fit_norms` (IDs ``sub-001``...).
    """
    rows = [
        ("roi", "brodmann", r, h, b, m)
        for r in _ROIS
        for h in _HEMIS
        for b in _BANDS
        for m in _MEASURES
    ]
    rows += [
        ("sensor", "n/a", c, "n/a", b, m) for c in _CHANNELS for b in _BANDS for m in _MEASURES
    ]
    keys = pd.DataFrame(rows, columns=["kind", "atlas", "name", "hemisphere", "band", "measure"])
    q = len(keys)
    rel = (keys["measure"] == "relative").to_numpy()
    # an inverted-U development curve on log age, different per quantity
    a = np.where(rel, rng.uniform(-2.0, -0.5, q), rng.uniform(0.5, 2.0, q))
    b = rng.uniform(-1.0, 1.0, q)
    c = rng.uniform(-0.6, 0.2, q)
    sd = np.where(rel, rng.uniform(0.25, 0.5, q), rng.uniform(0.12, 0.3, q))
    coh = GaussianCohort(keys=keys, coef=np.column_stack([a, b, c]), sd=sd, entries=[])
    lo, hi = np.log10(age_range[0]), np.log10(age_range[1])
    ages = np.round(10 ** rng.uniform(lo, hi, n), 2)
    for i, age in enumerate(ages):
        roi_t, sen_t = coh.tables_at(age, rng.standard_normal(q))
        coh.entries.append((f"sub-{i + 1:03d}", float(age), roi_t, sen_t))
    return coh
