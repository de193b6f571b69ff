"""Per-source norms: an age model of log10 band power at every cortical source (prototype).

The ROI norms (``norms.tsv``) model one value per ROI; peak localisation needs a z-map, so the
same model is fitted at every source: ``log10 power = b0 + b1 x + ... `` with ``x = log10(age)``
and a constant residual SD per source, band and measure (log10 for absolute power, logit for
relative power, as the ROI norms).  Fitting is vectorised over sources (one least-squares solve
per band and measure; the optional robust exclusion re-solves per source with weights).

File: an open ``.npz`` (no pickles; read with ``allow_pickle=False``) written beside the norms
TSV as ``<stem>_sources.npz`` with the same pipeline fingerprint.  Arrays:

=================  ===========================================  ==============================
key                shape                                        meaning
=================  ===========================================  ==============================
``format``         ()                                           ``"sourcelab-source-norms 1"``
``fingerprint``    ()                                           pipeline fingerprint JSON
``condition``      ()                                           recording condition
``vertices``       (n_src,) int32                               template vertex of each source
``bands``          (n_bands,) str                               band names (fingerprint order)
``measures``       (n_meas,) str                                ``absolute`` / ``relative``
``transforms``     (n_meas,) str                                ``log10`` / ``logit``
``degree``         () int                                       age-model degree (0-3)
``coef``           (n_meas, n_bands, degree + 1, n_src) f4      coefficients on log10 age
``sd``             (n_meas, n_bands, n_src) f4                  residual SD (transformed)
``n``              (n_meas, n_bands, n_src) i2                  controls kept
``xtx_inv``        (degree + 1, degree + 1) f8                  ``(XᵀX)⁻¹`` of all controls
``age_range``      (2,) f8                                      youngest, oldest control
=================  ===========================================  ==============================

For predictive p-values the leverage uses ``xtx_inv`` of all controls scaled by
``n_all / n_kept`` (exact when no control was excluded at that source; the robust rule excludes
few).  At 18,715 sources x 5 bands x 2 measures and degree 2 the file is about 3 MB (float32).

References
----------
John ER, Ahn H, Prichep L, et al. (1980).  Science 210:1255-1258 (from memory): age-regression
norms of transformed EEG measures.
Crawford JR, Garthwaite PH (2006).  Neuropsychology 20:259-271 (from memory).
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .._docs import fill_doc
from ..errors import InputError
from .models import MAD_TO_SD, ROBUST_MAX_ITER, ROBUST_SD

FORMAT = "sourcelab-source-norms 1"


@dataclass(frozen=True, eq=False)
class SourceNorms:
    """Per-source age models (see the module docstring for the arrays)."""

    vertices: np.ndarray
    bands: tuple[str, ...]
    measures: tuple[str, ...]
    transforms: tuple[str, ...]
    degree: int
    coef: np.ndarray
    sd: np.ndarray
    n: np.ndarray
    xtx_inv: np.ndarray
    age_range: tuple[float, float]
    fingerprint: dict
    condition: str

    @property
    def n_src(self) -> int:
        return self.vertices.size

    def _age_powers(self, age: float) -> np.ndarray:
        """``[1, x, x**2, ...]`` with ``x = log10(age)``, shape (degree + 1,)."""
        return np.log10(float(age)) ** np.arange(self.degree + 1)

    @fill_doc
    def mean(self, age: float) -> np.ndarray:
        """Model mean at ``age``, shape (n_meas, n_bands, n_src).

        %(age_parameters)s

        Returns
        -------
        ndarray, shape (n_meas, n_bands, n_src)
            Mean on the transformed scale (log10 µV² for absolute, logit for relative power).
        """
        return np.einsum("mbks,k->mbs", self.coef.astype(float), self._age_powers(age))

    @fill_doc
    def leverage(self, age: float) -> np.ndarray:
        """Leverage of a new participant of ``age``, shape (n_meas, n_bands, n_src).

        ``x₀ᵀ (XᵀX)⁻¹ x₀`` of all controls, scaled by ``n_all / n_kept`` per source (see the module
        docstring).

        %(age_parameters)s

        Returns
        -------
        ndarray, shape (n_meas, n_bands, n_src)
            Dimensionless leverage ``h₀`` per measure, band and source.
        """
        x = self._age_powers(age)
        h_all = float(x @ self.xtx_inv @ x)
        n_all = int(self.n.max())
        return h_all * n_all / np.maximum(self.n.astype(float), 1.0)


def fit_source_models(
    age: np.ndarray,
    y: np.ndarray,
    degree: int,
    *,
    robust: bool = True,
):
    """Vectorised polynomial fits in log10(age) for many quantities sharing the controls.

    The robust rule is :func:`sourcelab.norms.models.fit_poly`'s with its defaults (first a MAD
    screen, then sigma clipping against the retained controls' SD until stable, beyond
    :data:`~sourcelab.norms.models.ROBUST_SD` SDs in at most
    :data:`~sourcelab.norms.models.ROBUST_MAX_ITER` passes; at most a quarter excluded), applied
    to every column at once.

    Parameters
    ----------
    age : ndarray, shape (n,)
        Years, > 0 when ``degree > 0``.
    y : ndarray, shape (n, q)
        Transformed values (finite).
    degree : int
        Polynomial degree in log10(age), 0..3.
    robust : bool
        Apply the robust exclusion rule.

    Returns
    -------
    coef : ndarray, shape (degree + 1, q)
        Coefficients on powers of log10(age), transformed scale.
    sd : ndarray, shape (q,)
        Residual SD of the kept controls, transformed scale.
    n_kept : ndarray of int, shape (q,)
        Controls kept per quantity.
    xtx_inv : ndarray, shape (degree + 1, degree + 1)
        Of all ``n`` controls.
    """
    age = np.asarray(age, dtype=float)
    y = np.asarray(y, dtype=float)
    n, q = y.shape
    p = int(degree) + 1
    if not np.isfinite(y).all():
        raise InputError("source norms: values must be finite")
    if n < p + 2:
        raise InputError(f"source norms: need at least {p + 2} controls for degree {degree}")
    x = np.log10(age) if degree > 0 else np.zeros(n)
    X = np.vander(x, p, increasing=True)
    xtx_inv = np.linalg.inv(X.T @ X)
    coef = xtx_inv @ X.T @ y  # (p, q)
    w = np.ones((n, q))
    if robust:
        cap = n // 4
        for it in range(ROBUST_MAX_ITER):
            r = y - X @ coef
            if it == 0:
                centre = np.median(r, axis=0)
                s = MAD_TO_SD * np.median(np.abs(r - centre), axis=0)
            else:
                centre = 0.0
                s = np.sqrt(np.sum(w * r**2, axis=0) / (w.sum(0) - p))
            dev = np.abs(r - centre) / np.where(s > 0, s, np.inf)
            out = dev > ROBUST_SD
            # cap: only the most extreme quarter
            too_many = out.sum(0) > cap
            if too_many.any():
                kth = -np.sort(-dev[:, too_many], axis=0)[cap - 1]
                out[:, too_many] = dev[:, too_many] >= kth
            new = (~out).astype(float)
            if np.array_equal(new, w) and it > 0:
                break
            w = new
            xtwx = np.einsum("ni,nq,nj->qij", X, w, X)
            xtwy = np.einsum("ni,nq,nq->qi", X, w, y)
            coef = np.linalg.solve(xtwx, xtwy[..., None])[..., 0].T
    r = y - X @ coef
    n_kept = w.sum(0)
    sd = np.sqrt(np.sum(w * r**2, axis=0) / (n_kept - p))
    return coef, sd, n_kept.astype(np.int64), xtx_inv


def fit_source_norms(
    age: np.ndarray,
    values: dict,
    *,
    degree: int,
    bands,
    fingerprint: dict,
    condition: str,
    vertices: np.ndarray,
    robust: bool = True,
) -> SourceNorms:
    """Fit per-source norms from a cohort's per-source band power.

    Parameters
    ----------
    age : ndarray, shape (n,)
        Years.
    values : dict
        ``{"absolute": ndarray (n, n_bands, n_src) power, "relative": ndarray (...) fraction}``
        (either key may be absent).
    degree : int
        Age-model degree (use the ROI norms' degree so both files agree).
    bands : sequence of str
    fingerprint : dict
        ``Fingerprint.to_dict()`` of the pipeline that made the values.
    condition : str
    vertices : ndarray of int, shape (n_src,)
    robust : bool

    Returns
    -------
    SourceNorms
        One age model per measure, band and source (float32 coefficients and SDs).
    """
    from .transforms import get_transform, transform_for_measure

    measures = tuple(m for m in ("absolute", "relative") if m in values)
    if not measures:
        raise InputError("source norms: need absolute and/or relative values")
    coefs, sds, ns = [], [], []
    xtx_inv = None
    for m in measures:
        v = np.asarray(values[m], dtype=float)
        n, n_b, n_s = v.shape
        if n_s != len(vertices) or n_b != len(bands):
            raise InputError(
                f"source norms: {m} values shape {v.shape} does not match "
                f"{len(bands)} bands x {len(vertices)} sources"
            )
        y = get_transform(transform_for_measure(m)).forward(v).reshape(n, -1)
        c, s, k, xtx_inv = fit_source_models(age, y, degree, robust=robust)
        coefs.append(c.reshape(degree + 1, n_b, n_s).transpose(1, 0, 2))
        sds.append(s.reshape(n_b, n_s))
        ns.append(k.reshape(n_b, n_s))
    return SourceNorms(
        vertices=np.asarray(vertices, dtype=np.int32),
        bands=tuple(bands),
        measures=measures,
        transforms=tuple(transform_for_measure(m) for m in measures),
        degree=int(degree),
        coef=np.stack(coefs).astype(np.float32),
        sd=np.stack(sds).astype(np.float32),
        n=np.stack(ns).astype(np.int16),
        xtx_inv=xtx_inv,
        age_range=(float(np.min(age)), float(np.max(age))),
        fingerprint=dict(fingerprint),
        condition=str(condition),
    )


def source_z(
    norms: SourceNorms,
    values: np.ndarray,
    *,
    age: float,
    measure: str = "absolute",
    predictive: bool = True,
) -> np.ndarray:
    """Per-source z-map of one participant.

    Parameters
    ----------
    norms : SourceNorms
    values : ndarray, shape (n_bands, n_src)
        The participant's per-source power (absolute) or fraction (relative), on the norms'
        sources.
    age : float
        Years; must lie in the norms' age range.
    measure : {"absolute", "relative"}
    predictive : bool
        True: normal-equivalent z of the predictive t (:mod:`sourcelab.norms.predictive`);
        False: plain ``(T(value) - mean) / sd``.

    Returns
    -------
    ndarray, shape (n_bands, n_src)
        Dimensionless z per band and source (NaN where a value is NaN).
    """
    from .predictive import predictive_t
    from .transforms import get_transform

    if measure not in norms.measures:
        raise InputError(f"measure: {measure!r} not in the source norms {norms.measures}")
    lo, hi = norms.age_range
    if not lo <= float(age) <= hi:
        raise InputError(f"age {age:g} y is outside the source norms' range {lo:g}-{hi:g} y")
    k = norms.measures.index(measure)
    v = np.asarray(values, dtype=float)
    if v.shape != norms.sd.shape[1:]:
        raise InputError(f"values: need shape {norms.sd.shape[1:]}, got {v.shape}")
    y = get_transform(norms.transforms[k]).forward(v)
    mean = norms.mean(age)[k]
    sd = norms.sd[k].astype(float)
    if not predictive:
        return (y - mean) / sd
    out = predictive_t(
        y.ravel(),
        mean.ravel(),
        sd.ravel(),
        n=norms.n[k].ravel(),
        degree=np.full(y.size, norms.degree),
        h0=norms.leverage(age)[k].ravel(),
    )
    return out["z_equivalent"].reshape(y.shape)


def source_norms_path(norms_tsv: str | Path) -> Path:
    """``<stem>_sources.npz`` beside a norms TSV.

    Parameters
    ----------
    norms_tsv : str | Path
        The ROI norms file, e.g. ``norms.tsv``.

    Returns
    -------
    Path
        e.g. ``norms_sources.npz`` in the same folder.
    """
    p = Path(norms_tsv)
    return p.with_name(p.stem + "_sources.npz")


@fill_doc
def write_source_norms(norms: SourceNorms, path: str | Path) -> Path:
    """Write :class:`SourceNorms` as an open ``.npz`` (atomic; fixed zip timestamps).

    An existing ``path`` is replaced only when sourcelab wrote it
    (:func:`sourcelab.provenance.atomic_write_bytes`).

    Parameters
    ----------
    norms : SourceNorms
    path : str | Path
        Output file, usually :func:`source_norms_path` of the norms TSV.

    %(returns_path)s

    Raises
    ------
    InputError
        If ``path`` exists and was not written by sourcelab.
    """
    from ..provenance import atomic_write_bytes, npz_bytes

    path = Path(path)
    arrays = {
        "format": np.array(FORMAT),
        "fingerprint": np.array(json.dumps(norms.fingerprint, sort_keys=True)),
        "condition": np.array(norms.condition),
        "vertices": norms.vertices,
        "bands": np.array(norms.bands),
        "measures": np.array(norms.measures),
        "transforms": np.array(norms.transforms),
        "degree": np.array(norms.degree),
        "coef": norms.coef,
        "sd": norms.sd,
        "n": norms.n,
        "xtx_inv": norms.xtx_inv,
        "age_range": np.array(norms.age_range),
    }
    atomic_write_bytes(path, npz_bytes(arrays))
    return path


def read_source_norms(path: str | Path, *, fingerprint: dict | None = None) -> SourceNorms:
    """Read a per-source norms file; with ``fingerprint``, require the same pipeline.

    Parameters
    ----------
    path : str | Path
        A ``*_sources.npz`` written by :func:`write_source_norms` (never unpickled).
    fingerprint : dict, optional
        Pipeline fingerprint (:meth:`Fingerprint.to_dict`) the file must match.

    Returns
    -------
    SourceNorms
        Arrays as stored (float32 coefficients and SDs).

    Raises
    ------
    InputError
        Missing/damaged file, wrong format, inconsistent shapes, or a different fingerprint.
    """
    from ..provenance import Fingerprint

    path = Path(path)
    need = (
        "format",
        "fingerprint",
        "condition",
        "vertices",
        "bands",
        "measures",
        "transforms",
        "degree",
        "coef",
        "sd",
        "n",
        "xtx_inv",
        "age_range",
    )
    try:
        with np.load(path, allow_pickle=False) as z:
            missing = [k for k in need if k not in z.files]
            if missing:
                raise InputError(f"source norms file lacks arrays {missing}", path=path)
            a = {k: z[k] for k in need}
    except FileNotFoundError:
        raise InputError("source norms file not found", path=path) from None
    except (OSError, ValueError) as exc:
        raise InputError(f"source norms file unreadable ({exc})", path=path) from None
    if str(a["format"]) != FORMAT:
        raise InputError(f"not a {FORMAT} file (format {str(a['format'])!r})", path=path)
    fp = json.loads(str(a["fingerprint"]))
    if fingerprint is not None:
        diffs = Fingerprint.from_dict(fp).differences(Fingerprint.from_dict(fingerprint))
        if diffs:
            raise InputError(
                "pipeline fingerprint of the source norms differs (" + "; ".join(diffs) + ")",
                path=path,
            )
    deg = int(a["degree"])
    n_m, n_b = len(a["measures"]), len(a["bands"])
    n_s = a["vertices"].size
    if (
        a["coef"].shape != (n_m, n_b, deg + 1, n_s)
        or a["sd"].shape != (n_m, n_b, n_s)
        or a["n"].shape != (n_m, n_b, n_s)
        or a["xtx_inv"].shape != (deg + 1, deg + 1)
    ):
        raise InputError("source norms arrays have inconsistent shapes", path=path)
    if not (np.isfinite(a["sd"]).all() and (a["sd"] > 0).all()):
        raise InputError("source norms: every sd must be finite and > 0", path=path)
    return SourceNorms(
        vertices=a["vertices"],
        bands=tuple(str(b) for b in a["bands"]),
        measures=tuple(str(m) for m in a["measures"]),
        transforms=tuple(str(t) for t in a["transforms"]),
        degree=deg,
        coef=a["coef"],
        sd=a["sd"],
        n=a["n"],
        xtx_inv=a["xtx_inv"],
        age_range=(float(a["age_range"][0]), float(a["age_range"][1])),
        fingerprint=fp,
        condition=str(a["condition"]),
    )
