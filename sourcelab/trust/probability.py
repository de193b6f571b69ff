"""The calibrated probability that a deviation's generator lies in the area it is named after.

The area named for a map is the area of highest evidence around the map's peak over all areas
(:func:`~sourcelab.trust.naming.listed_naming`, the candidate list's rule; a peak named after an
area not resolvable from 19 electrodes is not shown, and such maps are not in the fit).  The
probability that the generator lies in it is a logistic model

    logit P = c0 + c1 · sign(b) log1p(|b|) + c2 · margin + c3 · log(n_sources)
              + c4 · logit(own) + c5 · logit(posterior)

of five features of the named area: the peak's signed distance ``b`` (mm) along the mesh to its
border (the candidate table's ``border_mm``; negative when the peak lies outside it),
the margin by which its maximum beats every other source (:func:`~sourcelab.trust.localise.
peak_margin`; 0 when another area holds the peak), its size, its leakage own-share, and its
share of the (tempered, uncalibrated) area evidence (:meth:`~sourcelab.trust.naming.
MatchResult.posterior`).  One coefficient set per map kind (``"power"`` for maps without norms,
``"z"`` for per-source excess |z| maps), fitted by maximum likelihood on simulations under model
mismatch (:mod:`sourcelab.simulate.localisation`, which also refits and checks it) and shipped
in ``sourcelab/data/localisation_probability.json``.  The probability is calibrated *under that
simulation model* (an independent spherical true head, 10 mm electrode jitter, noise); a real
head can differ more.

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

FEATURES = (
    "signed_log1p_border_mm",
    "margin",
    "log_n_sources",
    "logit_own_share",
    "logit_posterior",
)
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


def area_features(
    values: np.ndarray,
    space,
    area: int,
    own: np.ndarray,
    *,
    kind: str = "z",
    peak: int | None = None,
    evidence=None,
) -> np.ndarray:
    """The model's features (:data:`FEATURES`) for ``area`` named at ``peak`` of a map.

    Parameters
    ----------
    values : ndarray, shape (n_src,)
        Non-negative map over ``space``'s sources (excess ``|z|`` or power).
    space : CortexSpace
        Supplies area codes, the mesh and each source's distance to its area's border, mm.
    area : int
        Area code (must have sources).
    own : ndarray, shape (n_codes,)
        Leakage own-share per area code, 0..1 (clipped to [1e-4, 1 - 1e-4]).
    kind : {"z", "power"}
        Map kind (the templates of the evidence computed when ``evidence`` is not given).
    peak : int, optional
        Source of the peak the area was named for (default the map's maximum).
    evidence : MatchResult, optional
        :func:`~sourcelab.trust.naming.area_evidence` at ``peak`` (computed when not given).

    Returns
    -------
    ndarray, shape (5,)
        In the order of :data:`FEATURES`: ``sign(d) log1p(|d|)`` of the peak's signed distance
        ``d`` to the named area's border (mm, :func:`~sourcelab.trust.localise.
        signed_border_distance`), the peak margin of the area's maximum
        (:func:`~sourcelab.trust.localise.peak_margin`), log of the area's number of sources,
        logit of its own-share, logit of its evidence share (clipped to [1e-4, 1 - 1e-4]).
    """
    from .localise import peak_margin, signed_border_distance
    from .naming import PATCH_MM, area_evidence

    v = np.asarray(values, dtype=float)
    sel = np.flatnonzero(space.codes == area)
    if sel.size == 0:
        raise InputError(f"area code {area} has no sources")
    peak = int(np.argmax(v)) if peak is None else int(peak)
    if evidence is None:
        evidence = area_evidence(v, space, peak, patch_mm=PATCH_MM[kind])
    best = sel[np.argmax(v[sel])]
    margin = peak_margin(v, space.codes, area, float(v[best]))
    d = signed_border_distance(space.codes, space.mesh, space.border_mm, peak, area)

    def logit(x):
        x = float(np.clip(x, 1e-4, 1 - 1e-4))
        return np.log(x / (1 - x))

    return np.array(
        [
            np.sign(d) * np.log1p(abs(d)),
            margin,
            np.log(sel.size),
            logit(own[area]),
            logit(evidence.posterior()[area]),
        ]
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
    values: np.ndarray,
    space,
    area: int,
    own: np.ndarray,
    *,
    kind: str,
    model: dict | None = None,
    peak: int | None = None,
    evidence=None,
) -> float:
    """Calibrated probability that the generator lies in ``area`` (the named area).

    Parameters
    ----------
    values : ndarray, shape (n_src,)
        Non-negative map (``|z|`` for ``kind="z"``, power for ``kind="power"``).
    space : CortexSpace
        Supplies area codes and border distances (mm).
    area : int
        Area code named for the map (the candidate list's name,
        :func:`~sourcelab.trust.naming.listed_naming`).
    own : ndarray
        Own-share per area code.
    kind : {"power", "z"}
    model : dict, optional
        Default :func:`shipped_model`.
    peak, evidence
        Of :func:`area_features` (default: the map's maximum and its evidence).

    Returns
    -------
    prob : float
        Probability, 0..1, calibrated under the simulation model of
        :mod:`sourcelab.simulate.localisation` (a real head can differ more).

    Raises
    ------
    sourcelab.errors.InputError
        When ``kind`` has no coefficients in ``model``, their number does not match
        :data:`FEATURES`, or ``area`` has no sources.
    """
    model = model or shipped_model()
    check_option("kind", kind, sorted(model["coefficients"]))
    coef = np.asarray(model["coefficients"][kind], dtype=float)
    x = area_features(values, space, area, own, kind=kind, peak=peak, evidence=evidence)
    if coef.size != x.size + 1:
        raise InputError(
            f"localisation probability model: {coef.size} coefficients for {x.size} features"
        )
    return float(predict_logistic(coef, x)[0])
