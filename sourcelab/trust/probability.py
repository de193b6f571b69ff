"""The calibrated probability that a deviation's generator lies in the area it is named after.

The area named for a map is the first of :func:`~sourcelab.trust.localise.rank_areas` (the area
holding the highest value; areas not resolvable from 19 electrodes left out).  The probability
that the generator lies in it is a logistic model

    logit P = c0 + c1 · log1p(border_mm) + c2 · margin + c3 · log(n_sources) + c4 · logit(own)

of four features of the named area: distance along the mesh from its maximum to its border, the
margin by which its maximum beats every other source (:func:`~sourcelab.trust.localise.
peak_margin`), its size, and its leakage own-share.  One coefficient set per map kind
(``"power"`` for maps without norms, ``"z"`` for per-source |z| maps), fitted by maximum
likelihood on simulations under model mismatch (:mod:`sourcelab.simulate.localisation`, which
also refits and checks it) and shipped in ``sourcelab/data/localisation_probability.json``.  The
probability is calibrated *under that simulation model* (an independent spherical true head,
10 mm electrode jitter, noise); a real head can differ more.

References
----------
Cox DR (1958).  The regression analysis of binary sequences.  J R Stat Soc B 20:215-242 (from
memory): logistic regression.
"""

from __future__ import annotations

import functools
import json

import numpy as np

from ..checks import check_option
from ..errors import InputError

FEATURES = ("log1p_border_mm", "margin", "log_n_sources", "logit_own_share")
MODEL_FILE = "localisation_probability.json"


@functools.lru_cache(maxsize=1)
def shipped_model() -> dict:
    """The shipped coefficients (``sourcelab/data/localisation_probability.json``).

    Returns
    -------
    model : dict
        ``format``, ``description``, ``features`` (:data:`FEATURES`), ``coefficients`` (one
        list of ``1 + len(FEATURES)`` numbers per map kind, ``"power"`` and ``"z"``, intercept
        first) and ``fit`` (how they were fitted).  Cached: the same dict on every call.
    """
    from ..data import shipped_bytes

    return json.loads(shipped_bytes(MODEL_FILE)[0].decode("utf-8"))


def named_area(values: np.ndarray, space, exclude=None) -> int:
    """Code of the first area of :func:`~sourcelab.trust.localise.rank_areas`.

    Parameters
    ----------
    values : ndarray, shape (n_src,)
        Map over ``space``'s sources (``|z|`` or power).
    space : CortexSpace
        Supplies the area code per source and the number of areas.
    exclude : array of int, optional
        Area codes left out (e.g. not resolvable from 19 electrodes).

    Returns
    -------
    code : int
        Area code holding the highest value; 0 when no area is left.
    """
    from .localise import rank_areas

    order = rank_areas(values, space.codes, space.n_areas, exclude=exclude)
    return int(order[0]) if order.size else 0


def area_features(values: np.ndarray, space, area: int, own: np.ndarray) -> np.ndarray:
    """The model's features (:data:`FEATURES`) for ``area`` of a non-negative map.

    Parameters
    ----------
    values : ndarray, shape (n_src,)
        Non-negative map over ``space``'s sources (``|z|`` or power).
    space : CortexSpace
        Supplies area codes and each source's distance to its area's border, mm.
    area : int
        Area code (must have sources).
    own : ndarray, shape (n_codes,)
        Leakage own-share per area code, 0..1 (clipped to [1e-4, 1 - 1e-4]).

    Returns
    -------
    ndarray, shape (4,)
        ``log1p`` of the border distance (mm) at the area's maximum, the peak margin
        (:func:`~sourcelab.trust.localise.peak_margin`), log of the area's number of sources,
        logit of its own-share (the order of :data:`FEATURES`).
    """
    from .localise import peak_margin

    v = np.asarray(values, dtype=float)
    sel = np.flatnonzero(space.codes == area)
    if sel.size == 0:
        raise InputError(f"area code {area} has no sources")
    best = sel[np.argmax(v[sel])]
    margin = peak_margin(v, space.codes, area, float(v[best]))
    o = float(np.clip(own[area], 1e-4, 1 - 1e-4))
    return np.array(
        [np.log1p(float(space.border_mm[best])), margin, np.log(sel.size), np.log(o / (1 - o))]
    )


def predict_logistic(coef: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Probabilities of :func:`fit_logistic`'s model, shape (n,).

    Parameters
    ----------
    coef : ndarray, shape (k + 1,)
        Intercept first, then one slope per feature.
    x : ndarray, shape (n, k) or (k,)
        Features, one row per map.

    Returns
    -------
    prob : ndarray, shape (n,)
        Logistic probabilities, 0..1 (``n = 1`` for a single feature vector).
    """
    eta = np.asarray(coef)[0] + np.atleast_2d(x) @ np.asarray(coef)[1:]
    return 0.5 * (1 + np.tanh(0.5 * eta))


def area_probability(
    values: np.ndarray, space, area: int, own: np.ndarray, *, kind: str, model: dict | None = None
) -> float:
    """Calibrated probability that the generator lies in ``area`` (the named area).

    Parameters
    ----------
    values : ndarray, shape (n_src,)
        Non-negative map (``|z|`` for ``kind="z"``, power for ``kind="power"``).
    space : CortexSpace
        Supplies area codes and border distances (mm).
    area : int
        Area code named for the map (first of the peak ranking).
    own : ndarray
        Own-share per area code.
    kind : {"power", "z"}
    model : dict, optional
        Default :func:`shipped_model`.

    Returns
    -------
    prob : float
        Probability, 0..1, calibrated under the simulation model of
        :mod:`sourcelab.simulate.localisation` (a real head can differ more).

    Raises
    ------
    sourcelab.errors.InputError
        When ``kind`` has no coefficients in ``model`` or ``area`` has no sources.
    """
    model = model or shipped_model()
    check_option("kind", kind, sorted(model["coefficients"]))
    coef = np.asarray(model["coefficients"][kind], dtype=float)
    return float(predict_logistic(coef, area_features(values, space, area, own))[0])
