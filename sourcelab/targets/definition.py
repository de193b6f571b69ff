"""A portable training-target definition: one ROI, one band, its spatial filter and its norm.

The definition is sourcelab's own open JSON layout, ``"sourcelab-target/1"`` (see ``SCHEMA.md``
beside this module).  It carries everything a real-time program needs to compute the same ROI band
power that the offline analysis reported, without sourcelab or the head model:

* the 19 channel names in the order the weights expect (any reference: the average-reference
  projector is folded into the weights);
* the band edges and a causal Butterworth band-pass (design and second-order sections);
* the ROI's template vertices and the sensor-space *ROI power matrix*
  ``M = (1/|r|) Σ_{i∈r} K_iᵀ K_i`` (19 x 19), where ``K_i`` are the standardised sLORETA kernel rows
  of source ``i`` (1 row for fixed, 3 for free orientation).  ROI mean source power of band-passed
  data ``x`` (µV) over a window is ``tr(M · cov(x))`` — exactly the offline quantity
  ``mean_i Σ_rows diag(K_i C K_iᵀ)`` with the Welch cross-spectrum ``C`` replaced by the window
  covariance of the band-passed signal;
* for *relative* power, which is a per-source ratio and so not a quadratic form, the kernel rows
  ``K_r`` themselves (``n_rows x 19``) and the filters of every analysed band;
* the norm's mean, SD and transform at the participant's age, the direction to train, and the
  pipeline fingerprint.

Why M and not always the kernel rows: M has 190 free numbers whatever the ROI size, while a network
holds thousands of sources (e.g. 3,000 x 19 = 57,000 numbers); M gives absolute power exactly
(``Σ_i k_i C k_iᵀ = tr((Σ_i k_iᵀ k_i) C)``) and costs 361 multiply-adds per window.

References
----------
Pascual-Marqui RD (2002) Standardized low-resolution brain electromagnetic tomography (sLORETA):
technical details. Methods Find Exp Clin Pharmacol 24 Suppl D:5-12.
Butterworth S (1930) On the theory of filter amplifiers. Experimental Wireless 7:536-541.
"""

from __future__ import annotations

import json
import logging
import math
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from .. import PIPELINE_VERSION
from .._docs import fill_doc
from ..cautions import CAUTIONS
from ..config import AnalysisConfig
from ..constants import SITES_1020
from ..errors import InputError
from ..inverse import roi_rows
from ..provenance import Fingerprint, atomic_write_text
from .live import TIME_CONSTANT_S, check_live, live_section

log = logging.getLogger("sourcelab")

#: Schema identifier written into (and required from) every target file.
SCHEMA = "sourcelab-target/1"
#: Butterworth prototype order per band edge: ``butter(4, [lo, hi], "bandpass")`` is an 8th-order
#: band-pass (4 second-order sections), -3 dB at the band edges, maximally flat (no passband
#: ripple), 48 dB/octave roll-off beyond the edges (common practice for EEG feedback filters).
FILTER_ORDER = 4
#: Sliding window length and step, seconds (common practice for neurofeedback displays).
WINDOW_S = 1.0
STEP_S = 0.25
MEASURES = ("absolute", "relative")
#: Largest target file read: a relative-power target of the largest network holds ~25 MB of
#: kernel rows (18,715 sources x 3 rows x 19 numbers).
TARGET_MAX_BYTES = 64 * 1024 * 1024
#: Window and step bounds, s: the streaming state holds window_s / step_s blocks of
#: n_bands x 19 x 19 numbers, so the ratio is capped at 600 (<= 55 MB for 32 bands); a 10-ms
#: step is already finer than any display refresh; 60-s windows are far beyond feedback use.
WINDOW_S_RANGE = (0.05, 60.0)
STEP_S_MIN = 0.01
MAX_BLOCKS = 600
#: Direction to train: away from the deviation, towards the norm mean.
DIRECTIONS = {1: "decrease", -1: "increase"}
POWER_FORMULA = (
    "ROI power = mean over the ROI's sources i of sum over i's kernel rows k of "
    "mean over the window of (k . x_band(t))^2 = tr(M cov(x_band)); x in µV, "
    "x_band causally band-passed, cov over the window without mean removal"
)


def butter_sos(lo: float, hi: float, sfreq: float, *, order: int = FILTER_ORDER) -> np.ndarray:
    """Causal Butterworth band-pass as second-order sections.

    Parameters
    ----------
    lo, hi : float
        Band edges (Hz), the -3 dB points; ``0 < lo < hi < sfreq / 2``.
    sfreq : float
        Sampling rate, Hz.
    order : int
        Prototype order (the band-pass has order ``2 * order``).

    Returns
    -------
    sos : ndarray, shape (order, 6)
        Second-order sections for :func:`scipy.signal.sosfilt` (band-pass of order ``2 * order``).
    """
    from scipy.signal import butter

    if not (0 < lo < hi < sfreq / 2):
        raise InputError(
            f"band {lo:g}-{hi:g} Hz: need 0 < low < high < Nyquist "
            f"({sfreq / 2:g} Hz) for a causal band-pass"
        )
    return butter(order, [lo, hi], btype="bandpass", output="sos", fs=sfreq)


def group_delay_s(sos: np.ndarray, sfreq: float, freq: float) -> float:
    """Group delay of ``sos`` at ``freq`` (s): the display latency of a feedback signal there.

    Parameters
    ----------
    sos : ndarray, shape (n_sections, 6)
        Second-order sections (e.g. from :func:`butter_sos`).
    sfreq : float
        Sampling rate, Hz.
    freq : float
        Frequency, Hz (a central difference of the phase over ±0.01 Hz).

    Returns
    -------
    float
        Group delay, s.
    """
    from scipy.signal import sosfreqz

    df = 0.01
    f = np.array([freq - df, freq + df])
    _, h = sosfreqz(sos, worN=f, fs=sfreq)
    ph = np.unwrap(np.angle(h))
    return float(-(ph[1] - ph[0]) / (2 * np.pi * 2 * df))


def band_edges(bands, band: str) -> tuple[float, float]:
    """Edges of one band in a target's band list.

    Parameters
    ----------
    bands : sequence of (str, float, float)
        Every analysed band ``(name, lo, hi)``, Hz.
    band : str
        The band looked up.

    Returns
    -------
    (float, float)
        Its low and high edge, Hz.

    Raises
    ------
    InputError
        If ``band`` is not in ``bands``.
    """
    for name, lo, hi in bands:
        if name == band:
            return lo, hi
    raise InputError(f"band {band!r} is not among {[b[0] for b in bands]}")


def utc_stamp() -> str:
    """The current time as a target file's ``created_utc`` (ISO 8601, seconds, ``Z``).

    Returns
    -------
    str
        E.g. ``"2026-01-31T12:00:00Z"``.
    """
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def direction_of(z: float | None) -> str:
    """The direction to train for an offline z: towards the norm mean.

    Parameters
    ----------
    z : float or None
        The offline z-score.

    Returns
    -------
    {"decrease", "increase", "none"}
        ``"none"`` without a finite, non-zero z.
    """
    if z is None or not np.isfinite(z) or z == 0:
        return "none"
    return DIRECTIONS[int(np.sign(z))]


class TargetFile:
    """What every target kind (area, pair, edge) shares: band edges and the JSON text.

    Subclasses are dataclasses with ``band``, ``bands``, ``norm``, ``offline``, ``direction``,
    ``fingerprint`` and a ``to_dict()`` method.
    """

    @property
    def band_edges(self) -> tuple[float, float]:
        """Edges of the trained band, Hz (:func:`band_edges`)."""
        return band_edges(self.bands, self.band)

    def to_json(self) -> str:
        """:meth:`to_dict` as indented JSON text (UTF-8 characters kept).

        Returns
        -------
        str
            Indented JSON text of the target file.
        """
        return json.dumps(self.to_dict(), indent=1, ensure_ascii=False)

    def _norm_sections(self) -> dict:
        """The norm, offline, direction and fingerprint sections (after each kind's estimator).

        Returns
        -------
        dict
            ``norm``, ``offline``, ``direction`` and ``fingerprint`` (as a dict).
        """
        return {
            "norm": self.norm,
            "offline": self.offline,
            "direction": self.direction,
            "fingerprint": self.fingerprint.to_dict(),
        }


def checked_channels(d: dict, bad) -> tuple[str, ...]:
    """The ``channels`` of a parsed target, which must be the 19 sites in sourcelab order.

    Parameters
    ----------
    d : dict
        Parsed target JSON.
    bad : callable
        ``bad(message)`` returns the exception to raise (naming the file).

    Returns
    -------
    tuple of str
        :data:`sourcelab.constants.SITES_1020`.

    Raises
    ------
    InputError
        (from ``bad``) for any other channel list; KeyError without ``channels``.
    """
    channels = tuple(str(c) for c in d["channels"])
    if channels != SITES_1020:
        raise bad(
            f"channels {list(channels)} differ from the 19 sites in sourcelab order "
            f"{list(SITES_1020)}"
        )
    return channels


@dataclass(frozen=True, eq=False)
class TargetDefinition(TargetFile):
    """One training target (see ``SCHEMA.md`` for the JSON layout).

    Attributes
    ----------
    name : str
        Human-readable label, e.g. ``"brodmann BA17 right alpha absolute"``.
    channels : tuple of str
        The 19 sites in weight order.
    atlas, roi, hemisphere : str
    vertices : ndarray of int, shape (n_v,)
        fsaverage5 surface vertices (0..20,483, left hemisphere first) of the ROI's sources.
    band : str
        Band trained; ``bands`` holds every analysed band ``(name, lo, hi)`` (Hz).
    measure : {"absolute", "relative"}
    matrix : ndarray, shape (19, 19)
        ROI power matrix ``M`` (symmetric positive semi-definite; per µV²).
    kernel_rows : ndarray, shape (n_rows, 19) | None
        Kernel rows of the ROI's sources (needed for relative power only).
    n_comp : int
        Kernel rows per source.
    sfreq : float
        Sampling rate the stored ``sos`` were designed for (a recording at another rate gets
        filters re-designed from the same specification).
    sos : dict of str -> ndarray, shape (FILTER_ORDER, 6)
        Causal band-pass per band (only the trained band for absolute power).
    window_s, step_s : float
    norm : dict | None
        ``mean``, ``sd``, ``transform`` (log10 / logit), ``age``, ``n``, ``norms_sha256``,
        ``condition``; ``z = (T(power) - mean) / sd``.
    offline : dict
        The analysis's ``value`` and ``z`` for this ROI, and its result folder's recording sha256.
    direction : {"decrease", "increase", "none"}
        Towards the norm mean (``"none"`` without a norm).
    fingerprint : Fingerprint
    reject_uv : float
        Peak-to-peak threshold marking a window unclean, µV.
    created_utc : str
    live : dict | None
        Expected live fluctuation, smoothing and threshold (:func:`sourcelab.targets.live.
        live_section`); None in files written before it existed.
    """

    name: str
    channels: tuple[str, ...]
    atlas: str
    roi: str
    hemisphere: str
    vertices: np.ndarray
    band: str
    bands: tuple[tuple[str, float, float], ...]
    measure: str
    matrix: np.ndarray
    kernel_rows: np.ndarray | None
    n_comp: int
    sfreq: float
    sos: dict
    fingerprint: Fingerprint
    window_s: float = WINDOW_S
    step_s: float = STEP_S
    norm: dict | None = None
    offline: dict = field(default_factory=dict)
    direction: str = "none"
    reject_uv: float = AnalysisConfig.reject_uv
    small: bool = False
    created_utc: str = ""
    filter_order: int = FILTER_ORDER
    live: dict | None = None

    def sos_for(self, sfreq: float) -> dict[str, np.ndarray]:
        """Band-pass sections for a sampling rate (the stored ones when it matches).

        Parameters
        ----------
        sfreq : float
            Sampling rate of the data fed, Hz.

        Returns
        -------
        dict of str to ndarray, shape (filter_order, 6)
            One entry per stored band; re-designed from the same specification (Butterworth,
            :attr:`filter_order`, -3 dB at the band edges) when ``sfreq`` differs from
            :attr:`sfreq`.
        """
        if math.isclose(sfreq, self.sfreq, rel_tol=1e-9):
            return dict(self.sos)
        return {
            b: butter_sos(lo, hi, sfreq, order=self.filter_order)
            for b, lo, hi in self.bands
            if b in self.sos
        }

    def to_dict(self) -> dict:
        """The ``sourcelab-target/1`` JSON document of this area target (see ``SCHEMA.md``).

        Returns
        -------
        dict
            JSON-serialisable; arrays as nested lists; includes the cautions.
        """
        lo, hi = self.band_edges
        return {
            "schema": SCHEMA,
            "kind": "area",
            "name": self.name,
            "created_utc": self.created_utc,
            "channels": list(self.channels),
            "reference": "average (folded into the weights; any reference may be fed)",
            "data_unit": "µV",
            "roi": {
                "atlas": self.atlas,
                "name": self.roi,
                "hemisphere": self.hemisphere,
                "n_sources": int(self.vertices.size),
                "small": bool(self.small),
                "source_space": "fsaverage5 surface vertices (0..20483, left hemisphere "
                "first) of the ROI's cortical sources",
                "vertices": self.vertices.tolist(),
            },
            "band": {"name": self.band, "low_hz": lo, "high_hz": hi},
            "bands": [list(b) for b in self.bands],
            "measure": self.measure,
            "filter": {
                "family": "butterworth",
                "type": "bandpass",
                "prototype_order": self.filter_order,
                "causal": True,
                "edges": "-3 dB at low_hz and high_hz",
                "sfreq": self.sfreq,
                "initial_state": "steady state for the first sample",
                "sos": {b: np.asarray(s).tolist() for b, s in self.sos.items()},
                "group_delay_s": group_delay_s(self.sos[self.band], self.sfreq, (lo + hi) / 2),
            },
            "spatial_filter": {
                "n_comp": int(self.n_comp),
                "matrix": np.asarray(self.matrix).tolist(),
                "kernel_rows": (
                    None if self.kernel_rows is None else np.asarray(self.kernel_rows).tolist()
                ),
            },
            "power": {
                "formula": POWER_FORMULA,
                "window_s": self.window_s,
                "step_s": self.step_s,
                "reject_uv": self.reject_uv,
                "relative": "per source: band power / sum over 'bands', then ROI mean",
            },
            **self._norm_sections(),
            **({"live": self.live} if self.live is not None else {}),
            "cautions": list(CAUTIONS),
        }


@fill_doc
def write_target(target, path: str | Path) -> Path:
    """Write ``target`` (area, pair or edge) as JSON (atomically).

    Parameters
    ----------
    target : TargetDefinition or CouplingTarget
        Anything with a ``to_json()`` method.
    path : str | Path
        Output file, ending in ``.json``; replaced only when sourcelab wrote it.

    %(returns_path)s

    Raises
    ------
    InputError
        If ``path`` does not end in ``.json`` or cannot be written.
    """
    path = Path(path)
    if path.suffix.lower() != ".json":
        raise InputError("a target file must end in .json", path=path)
    atomic_write_text(path, target.to_json() + "\n")
    return path


def _current_fingerprint_check(fp: Fingerprint, current: Fingerprint | None, path) -> None:
    if current is None:
        from ..headmodel import load_head_model

        sha = load_head_model().sha256
        diffs = []
        if fp.headmodel_sha256 != sha:
            diffs.append(f"headmodel_sha256: {fp.headmodel_sha256[:12]} vs {sha[:12]}")
        if fp.pipeline_version != PIPELINE_VERSION:
            diffs.append(f"pipeline_version: {fp.pipeline_version} vs {PIPELINE_VERSION}")
    else:
        diffs = fp.differences(current)
    if diffs:
        raise InputError(
            "target was made by a different pipeline ("
            + "; ".join(diffs)
            + "); export it again from a current analysis",
            path=path,
        )


@fill_doc
def target_from_dict(
    d: dict, *, path="target", current: Fingerprint | None = None, check_fingerprint: bool = True
) -> TargetDefinition:
    """Validate a parsed target and build the dataclass.

    Parameters
    ----------
    d : dict
        Parsed JSON.
    %(target_check)s

    Returns
    -------
    TargetDefinition | sourcelab.targets.coupling.CouplingTarget
        ``"kind"`` ``"area"`` (the default when absent) or ``"pair"`` / ``"edge"``.

    Raises
    ------
    InputError
        Wrong schema, wrong channel set or order, malformed arrays, fingerprint mismatch.
    """

    def bad(msg):
        return InputError(msg, path=path)

    if not isinstance(d, dict) or d.get("schema") != SCHEMA:
        got = d.get("schema") if isinstance(d, dict) else type(d).__name__
        raise bad(f"not a sourcelab target: schema {got!r}, expected {SCHEMA!r}")
    kind = d.get("kind", "area")  # files written before kinds existed are area targets
    if kind in ("pair", "edge"):
        from .coupling import coupling_target_from_dict

        return coupling_target_from_dict(
            d, path=path, current=current, check_fingerprint=check_fingerprint
        )
    if kind != "area":
        raise bad(f"kind {kind!r} is not one of area, pair, edge")
    try:
        channels = checked_channels(d, bad)
        roi, band, sf, flt = d["roi"], d["band"], d["spatial_filter"], d["filter"]
        bands = tuple((str(b[0]), float(b[1]), float(b[2])) for b in d["bands"])
        measure = str(d["measure"])
        if measure not in MEASURES:
            raise bad(f"measure {measure!r} is not one of {MEASURES}")
        matrix = np.asarray(sf["matrix"], dtype=float)
        n = len(channels)
        if matrix.shape != (n, n) or not np.all(np.isfinite(matrix)):
            raise bad(
                f"spatial_filter.matrix must be a finite {n} x {n} array, got shape {matrix.shape}"
            )
        if not np.allclose(matrix, matrix.T, rtol=1e-9, atol=1e-12 * np.abs(matrix).max()):
            raise bad("spatial_filter.matrix must be symmetric")
        rows = sf.get("kernel_rows")
        n_comp = int(sf["n_comp"])
        if rows is not None:
            rows = np.asarray(rows, dtype=float)
            if rows.ndim != 2 or rows.shape[1] != n or rows.shape[0] % n_comp:
                raise bad(f"spatial_filter.kernel_rows must have shape (n_rows, {n})")
            if not np.allclose(
                rows.T @ rows * n_comp / rows.shape[0],
                matrix,
                rtol=1e-6,
                atol=1e-9 * np.abs(matrix).max(),
            ):
                raise bad("spatial_filter.kernel_rows do not reproduce spatial_filter.matrix")
        if measure == "relative" and rows is None:
            raise bad("relative power needs spatial_filter.kernel_rows")
        sfreq = float(flt["sfreq"])
        sos = {str(b): np.asarray(s, dtype=float) for b, s in flt["sos"].items()}
        for b, s in sos.items():
            if s.ndim != 2 or s.shape != (int(flt["prototype_order"]), 6):
                raise bad(f"filter.sos[{b!r}] must have shape (prototype_order, 6)")
        need = [b[0] for b in bands] if measure == "relative" else [str(band["name"])]
        missing = [b for b in need if b not in sos]
        if missing:
            raise bad(f"filter.sos lacks bands {missing}")
        fp = Fingerprint.from_dict(d["fingerprint"])
        power = d["power"]
        target = TargetDefinition(
            name=str(d["name"]),
            channels=channels,
            atlas=str(roi["atlas"]),
            roi=str(roi["name"]),
            hemisphere=str(roi["hemisphere"]),
            vertices=np.asarray(roi["vertices"], dtype=np.int64),
            band=str(band["name"]),
            bands=bands,
            measure=measure,
            matrix=matrix,
            kernel_rows=rows,
            n_comp=n_comp,
            sfreq=sfreq,
            sos=sos,
            fingerprint=fp,
            window_s=float(power["window_s"]),
            step_s=float(power["step_s"]),
            norm=d.get("norm"),
            offline=dict(d.get("offline", {})),
            direction=str(d.get("direction", "none")),
            reject_uv=float(power["reject_uv"]),
            small=bool(roi.get("small", False)),
            created_utc=str(d.get("created_utc", "")),
            filter_order=int(flt["prototype_order"]),
            live=check_live(d.get("live"), path),
        )
    except InputError:
        raise
    except (KeyError, TypeError, ValueError, AttributeError, IndexError) as exc:
        raise bad(f"malformed {SCHEMA} file ({exc!r})") from None
    _check_values(target, d, band, path)
    if check_fingerprint:
        _current_fingerprint_check(fp, current, path)
    return target


def _check_values(target: TargetDefinition, d: dict, band: dict, path) -> None:
    """Types and bounds of a parsed target's numbers (see :mod:`sourcelab.checks`)."""
    from ..checks import check_number, check_option

    def num(name, value, **kw):
        return check_number(name, value, where=path, **kw)

    lo, hi = target.band_edges
    for b, blo, bhi in target.bands:
        num(f"bands.{b} low edge", blo, low=0.0, high=1000.0)
        num(f"bands.{b} high edge", bhi, low=blo, high=1000.0, low_open=True)
    if not isinstance(band, dict):
        raise InputError("band: must be an object", path=path, field="band")
    if not np.isclose(num("band.low_hz", band.get("low_hz", lo)), lo) or not np.isclose(
        num("band.high_hz", band.get("high_hz", hi)), hi
    ):
        raise InputError("band edges differ from the 'bands' list", path=path)
    flt, power, sf = d["filter"], d["power"], d["spatial_filter"]  # raw values: no bool
    num("filter.sfreq", flt["sfreq"], low=1.0, high=1e6)
    num("filter.prototype_order", flt["prototype_order"], kind=int, low=1, high=12)
    check_option(
        "spatial_filter.n_comp",
        num("spatial_filter.n_comp", sf["n_comp"], kind=int),
        (1, 3),
        where=path,
    )
    num("power.reject_uv", power["reject_uv"], low=0.0, low_open=True)  # huge: no rejection
    window = num("power.window_s", power["window_s"], low=WINDOW_S_RANGE[0], high=WINDOW_S_RANGE[1])
    step = num("power.step_s", power["step_s"], low=STEP_S_MIN, high=window)
    if window / step > MAX_BLOCKS:
        raise InputError(
            f"power.step_s: window_s / step_s must be at most {MAX_BLOCKS}, got "
            f"{window:g} / {step:g}",
            path=path,
            field="power.step_s",
        )
    v = target.vertices
    if v.ndim != 1 or v.size == 0 or v.min() < 0 or v.max() >= 1_000_000:
        raise InputError("roi.vertices: must be a non-empty list of source indices", path=path)
    for b, s in target.sos.items():
        if not np.all(np.isfinite(s)):
            raise InputError(f"filter.sos[{b!r}]: must hold finite numbers", path=path)
    if target.kernel_rows is not None and not np.all(np.isfinite(target.kernel_rows)):
        raise InputError("spatial_filter.kernel_rows: must hold finite numbers", path=path)
    if target.norm is not None:
        if not isinstance(target.norm, dict):
            raise InputError("norm: must be an object or null", path=path, field="norm")
        for k in ("mean", "sd", "transform"):
            if k not in target.norm:
                raise InputError(f"norm lacks {k!r}", path=path)
        num("norm.mean", target.norm["mean"])
        num("norm.sd", target.norm["sd"], low=0.0, low_open=True)
        check_option("norm.transform", target.norm["transform"], ("log10", "logit"), where=path)
    check_option("direction", target.direction, (*DIRECTIONS.values(), "none"), where=path)


def read_target(
    path: str | Path, *, current: Fingerprint | None = None, check_fingerprint: bool = True
):
    """Read and validate a ``sourcelab-target/1`` JSON file (see :func:`target_from_dict`).

    Parameters
    ----------
    path : str | Path
        The target file (at most :data:`TARGET_MAX_BYTES`).
    current : Fingerprint, optional
        The pipeline the target must match; default: the shipped head model and this
        sourcelab's pipeline version.
    check_fingerprint : bool
        False skips the fingerprint check (e.g. when only the target's name is needed).

    Returns
    -------
    TargetDefinition | sourcelab.targets.coupling.CouplingTarget
        An area target, or a pair / edge target (``"kind"`` in the file).

    Raises
    ------
    InputError
        For an unreadable, malformed or mismatching file; the message names ``path``.
    """
    from ..checks import load_json

    path = Path(path)
    d = load_json(path, max_bytes=TARGET_MAX_BYTES, what="target file")  # bounded, finite
    return target_from_dict(d, path=path, current=current, check_fingerprint=check_fingerprint)


class _KernelView:
    """A kernel with its rows-per-source, as :func:`sourcelab.inverse.roi_rows` reads it."""

    def __init__(self, kernel, n_comp):
        self.kernel = np.asarray(kernel)
        self.n_comp = int(n_comp)
        self.n_src = self.kernel.shape[0] // self.n_comp


def make_target(
    *,
    kernel: np.ndarray,
    n_comp: int,
    atlas: str,
    roi: str,
    hemisphere: str,
    vertices: np.ndarray,
    band: str,
    sources: np.ndarray | None = None,
    bands,
    measure: str,
    fingerprint: Fingerprint,
    sfreq: float,
    norm: dict | None = None,
    offline: dict | None = None,
    z: float | None = None,
    reject_uv: float = AnalysisConfig.reject_uv,
    small: bool = False,
    window_s: float = WINDOW_S,
    step_s: float = STEP_S,
    filter_order: int = FILTER_ORDER,
) -> TargetDefinition:
    """Assemble a target from a kernel and an ROI (pure: no files, no head model).

    Parameters
    ----------
    kernel : ndarray, shape (n_src * n_comp, 19)
        Standardised source kernel, source-major rows (per µV).
    n_comp : int
        Kernel rows per source (1 fixed, 3 free orientation).
    atlas, roi, hemisphere : str
        The ROI's identity.
    vertices : ndarray of int
        The ROI's sources as fsaverage5 surface vertices (stored in the file: portable).
    band : str
        Band trained; one of ``bands``.
    sources : ndarray of int, optional
        The same sources as rows of ``kernel`` (source indices); default ``vertices`` (for a
        kernel whose rows are the surface vertices themselves).
    bands : sequence of (name, lo, hi)
        Every analysed band, edges in Hz.
    measure : {"absolute", "relative"}
    fingerprint : Fingerprint
        Pipeline of the analysis the target comes from.
    sfreq : float
        Sampling rate the stored filters are designed for, Hz.
    norm : dict, optional
        From :func:`norm_at_age`.
    offline : dict, optional
        The analysis's value and z for this ROI.
    z : float, optional
        The offline z; its sign sets ``direction`` (train towards the norm).
    reject_uv : float
        Peak-to-peak threshold marking a live window unclean, µV.
    small : bool
        The ROI is flagged small.
    window_s, step_s : float
        Live window length and step, s.
    filter_order : int
        Butterworth prototype order, 1..12.

    Returns
    -------
    TargetDefinition
        ``matrix`` is the ROI power matrix ``M``, shape (19, 19); ``kernel_rows`` only for
        relative power; filters for the trained band (absolute) or every band (relative).

    Raises
    ------
    InputError
        For an unknown measure or band, or a filter order outside 1..12.
    """
    if measure not in MEASURES:
        raise InputError(f"measure: {measure!r} is not one of {MEASURES}")
    bands = tuple((str(b), float(lo), float(hi)) for b, lo, hi in bands)
    names = [b[0] for b in bands]
    if band not in names:
        raise InputError(f"band: {band!r} is not one of {names}")
    sources = np.asarray(vertices if sources is None else sources, dtype=np.int64)
    rows = roi_rows(_KernelView(kernel, n_comp), sources)
    m = rows.T @ rows / len(sources)
    need = names if measure == "relative" else [band]
    if not 1 <= int(filter_order) <= 12:
        raise InputError(f"filter_order: need 1..12, got {filter_order}")
    sos = {
        b: butter_sos(lo, hi, sfreq, order=int(filter_order)) for b, lo, hi in bands if b in need
    }
    direction = direction_of(z)
    return TargetDefinition(
        name=f"{atlas} {roi} {hemisphere} {band} {measure}",
        channels=SITES_1020,
        atlas=atlas,
        roi=roi,
        hemisphere=hemisphere,
        vertices=np.asarray(vertices, dtype=np.int64),
        band=band,
        bands=bands,
        measure=measure,
        matrix=m,
        kernel_rows=rows if measure == "relative" else None,
        n_comp=int(n_comp),
        sfreq=float(sfreq),
        sos=sos,
        fingerprint=fingerprint,
        window_s=window_s,
        step_s=step_s,
        norm=norm,
        offline=dict(offline or {}),
        direction=direction,
        reject_uv=float(reject_uv),
        small=bool(small),
        created_utc=utc_stamp(),
        filter_order=int(filter_order),
    )


def norm_at_age(
    norms,
    *,
    atlas: str,
    roi: str,
    hemisphere: str,
    band: str,
    measure: str,
    age: float,
    fingerprint: Fingerprint,
    condition: str | None = None,
    allow_extrapolation: bool = False,
) -> dict:
    """The norm of one ROI quantity at ``age``: mean and SD on the transformed scale.

    Row selection is :func:`sourcelab.norms.match_norms`'s (fingerprint, condition, age range).

    Parameters
    ----------
    norms : Norms
    atlas, roi, hemisphere, band, measure : str
        The ROI quantity.
    age : float
        Participant age, years.
    fingerprint : Fingerprint
        Pipeline the norms must match.
    condition : str, optional
        Recording condition; a mismatch is allowed here (recorded in ``condition``).
    allow_extrapolation : bool
        Accept an age outside the norms' age range (the nearest covered age is used).

    Returns
    -------
    dict
        ``mean, sd`` (transformed scale: log10 of the power unit, or logit), ``transform``,
        ``age`` (years), ``n``, ``extrapolated``, ``norms_sha256``, ``condition`` (the norms').

    Raises
    ------
    InputError
        If the norms have no row for the quantity.
    """
    return norm_row(
        norms,
        {"atlas": atlas, "roi": roi, "hemisphere": hemisphere, "band": band, "measure": measure},
        what=f"row for {atlas} {roi} {hemisphere} {band} {measure}",
        age=age,
        fingerprint=fingerprint,
        condition=condition,
        allow_extrapolation=allow_extrapolation,
    )


def norm_row(norms, quantity: dict, *, what: str, kind: str = "roi", **match) -> dict:
    """The norm of one table row at ``age`` (:func:`sourcelab.norms.match_norms`'s selection).

    Parameters
    ----------
    norms : Norms
    quantity : dict of str to str
        The row's key columns (e.g. ``atlas, roi, hemisphere, band, measure``).
    what : str
        The row as named in the error message (``"norms have no " + what``).
    kind : {"roi", "pair", "edge"}
        The norms table kind of ``quantity``.
    **match
        ``age`` (years, required), ``fingerprint`` (required), ``condition`` and
        ``allow_extrapolation``, as in :func:`norm_at_age`.

    Returns
    -------
    dict
        As :func:`norm_at_age`.

    Raises
    ------
    InputError
        If the norms have no row for the quantity.
    """
    import pandas as pd

    from ..norms import match_norms

    where = norms.path if norms.path is not None else "norms"
    table = pd.DataFrame({k: [v] for k, v in quantity.items()})
    rows = match_norms(table, norms, allow_condition_mismatch=True, kind=kind, **match)
    if not rows.has[0]:
        raise InputError(f"norms have no {what}", path=where)
    return {
        "mean": float(rows.mean[0]),
        "sd": float(rows.sd[0]),
        "transform": str(rows.transform[0]),
        "age": float(match["age"]),
        "n": int(rows.n[0]),
        "extrapolated": bool(rows.extrapolated[0]),
        "norms_sha256": norms.sha256,
        "condition": norms.condition,
    }


def analysis_norms(res, norms=None):
    """The norms an analysis was z-scored with, checked, and the participant's age.

    Parameters
    ----------
    res : AnalysisFolder
        The analysis read back from its folder (provenance, tables, fingerprint).
    norms : str | Path | Norms | None
        Norms to use instead of the file the analysis' provenance names.

    Returns
    -------
    (Norms, float) | (None, None)
        The norms (the sha256 the analysis used, the same pipeline) and the participant's age in
        years; ``(None, None)`` when the analysis had no norms and none are given.
    """
    from ..norms import read_norms

    prov = res.provenance
    norms_info = (prov.get("inputs") or {}).get("norms")
    if norms is None and norms_info and norms_info.get("path"):
        norms = Path(norms_info["path"])
        if not norms.is_file():
            raise InputError(
                "the norms file recorded in the analysis' provenance is gone; pass --norms",
                path=norms,
            )
    if norms is None:
        return None, None
    nm = read_norms(norms) if isinstance(norms, (str, Path)) else norms
    if norms_info and norms_info.get("sha256") and nm.sha256 != norms_info["sha256"]:
        raise InputError("norms file differs from the one the analysis used (sha256)", path=nm.path)
    diffs = nm.fingerprint.differences(res.fingerprint)
    if diffs:
        raise InputError(
            "norms were made by a different pipeline (" + "; ".join(diffs) + ")", path=nm.path
        )
    age = prov.get("recording", {}).get("age")
    if age is None:
        raise InputError(
            "the analysis has no participant age; the norm cannot be set", path=res.path
        )
    return nm, float(age)


def target_norm(res, norms, norm_of, *, allow_extrapolation: bool = False, **quantity):
    """The norm of one quantity at the participant's age, from the analysis' norms.

    Parameters
    ----------
    res : AnalysisFolder
        The analysis read back from its folder.
    norms : str | Path | Norms | None
        As in :func:`analysis_norms`.
    norm_of : callable
        :func:`norm_at_age` or :func:`sourcelab.targets.coupling.coupling_norm_at_age`.
    allow_extrapolation : bool
        Accept a participant age outside the norms' age range.
    **quantity
        The quantity's keywords for ``norm_of`` (atlas, roi, band, measure...).

    Returns
    -------
    dict | None
        From ``norm_of`` at the recorded age and condition; None when the analysis had no norms
        and none are given.
    """
    nm, age = analysis_norms(res, norms)
    if nm is None:
        return None
    return norm_of(
        nm,
        age=age,
        fingerprint=res.fingerprint,
        condition=res.provenance.get("recording", {}).get("condition"),
        allow_extrapolation=allow_extrapolation,
        **quantity,
    )


def offline_section(res, row, extra: dict | None = None) -> dict:
    """The ``offline`` section of a target: the analysed row's value and z, and where it came from.

    Parameters
    ----------
    res : AnalysisFolder
        The analysis read back from its folder.
    row : pandas.Series
        The table row of the target's quantity (``value``, ``z``).
    extra : dict, optional
        Further entries, placed after ``z``.

    Returns
    -------
    dict
        ``value``, ``z`` (None when missing or not finite), ``extra``, ``result_dir`` and
        ``recording_sha256``.
    """
    return {
        "value": float(row["value"]),
        "z": finite_or_none(row.get("z")),
        **(extra or {}),
        "result_dir": str(res.path),
        "recording_sha256": res.provenance.get("recording", {}).get("sha256"),
    }


def analysis_reject_uv(res) -> float:
    """The analysis' peak-to-peak rejection threshold, µV (the configuration's default when
    not recorded).

    Parameters
    ----------
    res : AnalysisFolder
        The analysis read back from its folder.

    Returns
    -------
    float
        ``parameters.reject_uv`` of its provenance.
    """
    return float(res.provenance.get("parameters", {}).get("reject_uv", AnalysisConfig.reject_uv))


def export_target(
    result_dir: str | Path,
    *,
    roi: str,
    band: str,
    atlas: str = "brodmann",
    hemisphere: str | None = None,
    measure: str = "absolute",
    norms=None,
    allow_extrapolation: bool = False,
    filter_order: int = FILTER_ORDER,
    smoothing: str = "exponential",
    time_constant_s: float = TIME_CONSTANT_S,
    threshold_sd: float | None = None,
) -> TargetDefinition:
    """Build the target of one ROI from an analysis folder.

    Parameters
    ----------
    result_dir : path
        Folder written by ``sourcelab analyze`` (``roi_table.tsv``, ``provenance.json``).
    roi, band : str
        ROI name (e.g. ``"BA17"``) and band name of the analysis.
    atlas : str
        A shipped atlas (custom ROI sets are not exportable: their vertices are not shipped).
    hemisphere : {"left", "right", "both"}, optional
        Needed when the ROI name exists in several hemispheres.
    measure : {"absolute", "relative"}
    norms : path | Norms, optional
        Default: the norms file recorded in the folder's provenance (its sha256 must match).
    allow_extrapolation : bool
        Accept a participant age outside the norms' age range (the nearest covered age is
        used and the norm is marked ``extrapolated``).
    filter_order : int
        Butterworth prototype order per edge (default 4: ~200 ms group delay in alpha).  Higher
        orders leak less power from a strong neighbouring peak (see SCHEMA.md) at more latency.
    smoothing : {"exponential", "moving", "none"}
        How the live value is smoothed (:class:`sourcelab.targets.live.Smoother`).
    time_constant_s : float
        The smoother's time constant, s (default 2).
    threshold_sd : float, optional
        Feedback threshold, in smoothed-SD units from the person's own level towards the norm.

    Returns
    -------
    TargetDefinition
        Its ``live`` section holds the expected window-to-window SD of the live value under
        the person's steady state, computed from the folder's ``epochs.npz`` (None for folders
        written before it existed).

    Raises
    ------
    InputError
        Unknown ROI/band/measure, ambiguous hemisphere, head model or pipeline different from
        the analysis', norms missing or changed.
    """
    from ..headmodel import load_head_model
    from ..inverse import inverse_operator
    from ..rois import load_atlas
    from .candidates import read_result_folder

    res = read_result_folder(result_dir)
    fp = res.fingerprint
    _current_fingerprint_check(fp, None, res.path / "provenance.json")
    t = res.roi_table
    sel = t[
        (t["atlas"] == atlas) & (t["roi"] == roi) & (t["band"] == band) & (t["measure"] == measure)
    ]
    if hemisphere is not None:
        sel = sel[sel["hemisphere"] == hemisphere]
    if sel.empty:
        have = sorted(set(t.loc[t["atlas"] == atlas, "roi"]))[:40]
        raise InputError(
            f"no row for --atlas {atlas} --roi {roi} --hemisphere {hemisphere} "
            f"--band {band} --measure {measure}; ROIs of this atlas: {have}",
            path=res.path,
        )
    if len(sel) > 1:
        raise InputError(
            f"ROI {roi} exists in hemispheres {sorted(sel['hemisphere'])}; pass --hemisphere",
            path=res.path,
        )
    row = sel.iloc[0]
    hemisphere = str(row["hemisphere"])
    at = load_atlas(atlas)
    match = [r for r in at.rois if r.name == roi and r.hemisphere == hemisphere]
    if not match:
        raise InputError(f"atlas {atlas} has no ROI {roi} ({hemisphere})")
    r = match[0]
    op = inverse_operator(fp.method, fp.orientation, fp.lambda2)
    rec = res.provenance.get("recording", {})
    norm = target_norm(
        res,
        norms,
        norm_at_age,
        atlas=atlas,
        roi=roi,
        hemisphere=hemisphere,
        band=band,
        measure=measure,
        allow_extrapolation=allow_extrapolation,
    )
    offline = offline_section(res, row)
    target = make_target(
        kernel=op.kernel,
        n_comp=op.n_comp,
        atlas=atlas,
        roi=roi,
        hemisphere=hemisphere,
        sources=r.vertices,
        vertices=load_head_model().vertno[r.vertices],
        band=band,
        bands=fp.bands,
        measure=measure,
        fingerprint=fp,
        sfreq=float(rec.get("sfreq") or 256.0),
        norm=norm,
        offline=offline,
        z=offline["z"],
        reject_uv=analysis_reject_uv(res),
        small=bool(r.small),
        filter_order=filter_order,
    )
    from ..epochfile import FILENAME, read_epochs

    epochs = None
    if (res.path / FILENAME).is_file():
        epochs = read_epochs(res.path / FILENAME)
        if epochs.fingerprint.differences(fp):
            raise InputError(
                "epochs.npz was made by a different pipeline than the tables",
                path=res.path / FILENAME,
            )
    else:
        log.warning("%s has no %s: the expected live SD is not available", res.path, FILENAME)
    live = live_section(
        target,
        epochs,
        smoothing=smoothing,
        time_constant_s=time_constant_s,
        threshold_sd=threshold_sd,
    )
    import dataclasses

    return dataclasses.replace(target, live=live)


def finite_or_none(v) -> float | None:
    """``float(v)`` when ``v`` is a finite number, else None.

    Parameters
    ----------
    v : object
        A table cell (number, NaN, None, text).

    Returns
    -------
    float or None
    """
    try:
        f = None if v is None else float(v)
    except (TypeError, ValueError):
        return None
    return f if f is not None and math.isfinite(f) else None
