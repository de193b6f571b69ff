"""Portable coupling targets: one electrode pair or one network/lobe edge, one band, one measure.

A coupling target (``"kind": "pair"`` or ``"edge"`` in a ``sourcelab-target/1`` file; see
``SCHEMA.md``) carries what a real-time program needs to compute the same pair or edge measure
that the offline analysis reported, without sourcelab:

* two *node* signals ``y = N x`` from the 19 channels (µV, any reference: the weights sum to 0):
  for a pair the two average-referenced electrodes (rows ``e_a - 1/19``, ``e_b - 1/19``); for an
  edge the two ROIs' fixed spatial filters (:func:`sourcelab.coupling.source.roi_filters`);
* the estimator of the offline analysis: non-overlapping segments of the analysis' epoch length
  (default 2 s), mean removed, periodic Hann taper, the DFT at the band's bins
  ``low_hz <= k / segment_s < high_hz``, scaled as :func:`sourcelab.spectra.epoch_fourier`;
  each measure from those coefficients exactly as :mod:`sourcelab.coupling.measures` computes
  it over epochs (orthogonalised envelope correlation: the untapered coefficients, as
  :mod:`sourcelab.coupling.source`);
* the norm's mean, SD and transform at the participant's age, and the direction to train.

Replay (:class:`OnlineCoupling`, :func:`replay_coupling_array`) is causal: data pass a causal
0.5-45 Hz Butterworth band-pass (the same on every channel, so it leaves cross-spectral phase
and coherence untouched), each completed segment is checked for artefacts (peak to peak above
``reject_uv`` after the band-pass and average reference, or a flat channel, as the offline
epochs are), and after each segment the measure is computed from the clean segments among the
last ``window_segments`` (the feedback value).  The *pooled* value over all clean segments of a
recording is the offline estimator applied to the replay's segments: on the analysed recording it
must equal the offline value up to the pre-filtering and the dropped warm-up segment.

A short window is a noisier and, for the magnitude measures (``msc``, ``lagcoh``, ``lps``,
``wpli``), upward-biased version of the same estimator: with ``K`` segments the coherence of
independent signals averages about ``1/K`` instead of 0 (e.g. 0.07 for the default 15).  The
norm describes the whole-recording estimate, so a window's z is a guide to direction, not a
calibrated z.

References
----------
Bendat JS, Piersol AG (2010).  Random Data, 4th ed., Wiley, ch. 9 (bias of coherence
estimates from K segments; from memory).
Nolte G et al. (2004).  Clin Neurophysiol 115:2292-2307.
Pascual-Marqui RD (2007).  arXiv:0706.1776 (lagged coherence; from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .._docs import fill_doc
from ..cautions import CAUTIONS
from ..config import AnalysisConfig
from ..errors import InputError
from ..provenance import Fingerprint
from .definition import (
    SCHEMA,
    TargetFile,
    analysis_reject_uv,
    checked_channels,
    direction_of,
    finite_or_none,
    norm_row,
    offline_section,
    target_norm,
    utc_stamp,
)
from .replay import (
    chunk_array,
    draw_offline_value,
    plot_replay,
    push_in_chunks,
    replay_input,
    write_replay,
)

#: Target kinds of this module.
KINDS = ("pair", "edge")
#: Segments in the trailing window of the feedback value (30 s of 2-s segments).
WINDOW_SEGMENTS = 15
#: Segments ending before this time (s) are warm-up (the 0.5-45 Hz band-pass settles).
WARMUP_S = 2.0
#: A channel whose peak to peak in a segment is below this is flat (µV, as the offline check).
FLAT_UV = 0.5
FORMULAS = {
    "msc": "mean over bins of |<S>|² / (<Pa><Pb>)",
    "imcoh": "mean over bins of Im<S> / sqrt(<Pa><Pb>)",
    "lagcoh": "mean over bins of (Im<S>)² / (<Pa><Pb> - (Re<S>)²)",
    "wpli": "mean over bins of |<Im S>| / <|Im S|>",
    "wpli2_debiased": "mean over bins of ((Σ Im S)² - Σ (Im S)²) / ((Σ |Im S|)² - Σ (Im S)²)",
    "lps": "mean over bins of (Im<u>)² / (1 - (Re<u>)²), u = S/|S|",
    "phase_deg": "angle of the band sum of <S>, degrees",
    "lag_ms": "Σ_f |<S>| angle(<S>)/(2π f) / Σ_f |<S>|, ms",
    "phase_sd_deg": "mean over bins of sqrt(-2 ln |<u>|), degrees",
    "asymmetry": "(Σ_f <Pa> - Σ_f <Pb>) / (Σ_f <Pa> + Σ_f <Pb>)",
    "aec_orth": "Pearson correlation, pooled over segments, of |y_b| and |Im(y_a conj(y_b)) / "
    "|y_b||| and vice versa, averaged; y: band-limited analytic signals of the "
    "untapered segments",
}
FORMULA_NOTE = (
    "S = Ya conj(Yb) per segment and bin, Pa = |Ya|², Pb = |Yb|²; <.> = mean over "
    "the window's clean segments; Y: scaled DFT coefficients of the node signals"
)


@dataclass(frozen=True, eq=False)
class CouplingTarget(TargetFile):
    """One pair or edge target (``SCHEMA.md``).

    Attributes
    ----------
    kind : {"pair", "edge"}
    name : str
    channels : tuple of str
        The 19 sites in weight order.
    label : str
        Pair ``"F3-F4"`` or edge ``"roi.hemisphere|roi.hemisphere"``, as in the tables.
    nodes : tuple of str
        The two nodes (sites, or ``roi.hemisphere``), node a first.
    atlas : str | None
        The edge's atlas.
    node_weights : ndarray, shape (2, 19)
        Node signals ``y = N x`` (x in µV); rows sum to 0.
    band : str
    bands : tuple of (str, float, float)
    measure : str
    segment_s : float
    window_segments : int
    fingerprint : Fingerprint
    norm : dict | None
    offline : dict
    direction : str
    reject_uv : float
    details : dict
        Pair flags or the edge's ROIs (vertices, filter shares), for the record.
    created_utc : str
    """

    kind: str
    name: str
    channels: tuple[str, ...]
    label: str
    nodes: tuple[str, str]
    atlas: str | None
    node_weights: np.ndarray
    band: str
    bands: tuple
    measure: str
    segment_s: float
    window_segments: int
    fingerprint: Fingerprint
    norm: dict | None = None
    offline: dict = field(default_factory=dict)
    direction: str = "none"
    reject_uv: float = AnalysisConfig.reject_uv
    details: dict = field(default_factory=dict)
    created_utc: str = ""

    @property
    def min_clean_segments(self) -> int:
        """Clean segments a window needs for a value (half the window, at least 2)."""
        return max(2, int(math.ceil(self.window_segments / 2)))

    def to_dict(self) -> dict:
        """The ``sourcelab-target/1`` JSON document of this pair / edge target (see ``SCHEMA.md``).

        Returns
        -------
        dict
            JSON-serialisable; arrays as nested lists; includes the estimator and the cautions.
        """
        lo, hi = self.band_edges
        node = {
            "label": self.label,
            "node_a": self.nodes[0],
            "node_b": self.nodes[1],
            **self.details,
        }
        if self.kind == "edge":
            node["atlas"] = self.atlas
        return {
            "schema": SCHEMA,
            "kind": self.kind,
            "name": self.name,
            "created_utc": self.created_utc,
            "channels": list(self.channels),
            "reference": "any: the node weights sum to zero (average reference for pairs, "
            "ROI filters from the average-referenced inverse for edges)",
            "data_unit": "µV",
            self.kind: node,
            "band": {"name": self.band, "low_hz": lo, "high_hz": hi},
            "bands": [list(b) for b in self.bands],
            "measure": self.measure,
            "coupling": {
                "node_weights": np.asarray(self.node_weights).tolist(),
                "segment_s": self.segment_s,
                "step": "one segment (non-overlapping segments, as the offline epochs)",
                "taper": "periodic Hann (mean removed first); none for aec_orth",
                "bins": "k / segment_s for low_hz <= f < high_hz",
                "scaling": "sqrt(w_k / (sfreq · Σ taper²) · sfreq / n) · DFT, w_k = 2 "
                "(1 at 0 Hz and Nyquist): |Y|² summed over a band is band power "
                "(µV²)",
                "prefilter": "causal Butterworth band-pass 0.5-45 Hz (order 2), every channel",
                "window_segments": self.window_segments,
                "min_clean_segments": self.min_clean_segments,
                "reject_uv": self.reject_uv,
                "flat_uv": FLAT_UV,
                "warmup_s": WARMUP_S,
                "formula": FORMULAS[self.measure],
                "formula_terms": FORMULA_NOTE,
            },
            **self._norm_sections(),
            "cautions": list(CAUTIONS),
        }


@fill_doc
def coupling_target_from_dict(
    d: dict, *, path="target", current: Fingerprint | None = None, check_fingerprint: bool = True
) -> CouplingTarget:
    """Validate a parsed pair or edge target and build the dataclass.

    Parameters
    ----------
    d : dict
        Parsed JSON with ``"kind"`` ``"pair"`` or ``"edge"``.
    %(target_check)s

    Returns
    -------
    CouplingTarget
        The validated pair or edge target.

    Raises
    ------
    InputError
        Wrong channels, malformed weights or estimator, unknown measure, fingerprint mismatch.
    """
    from ..coupling import BAND_MEASURES
    from .definition import DIRECTIONS, _current_fingerprint_check

    def bad(msg):
        return InputError(msg, path=path)

    kind = d.get("kind")
    try:
        channels = checked_channels(d, bad)
        node, cp, band = d[kind], d["coupling"], d["band"]
        measure = str(d["measure"])
        allowed = set(BAND_MEASURES) | ({"asymmetry"} if kind == "pair" else {"aec_orth"})
        if measure not in allowed:
            raise bad(f"measure {measure!r} is not one of {sorted(allowed)} for a {kind}")
        w = np.asarray(cp["node_weights"], dtype=float)
        if w.shape != (2, len(channels)) or not np.all(np.isfinite(w)):
            raise bad(
                f"coupling.node_weights must be a finite 2 x {len(channels)} array, got "
                f"shape {w.shape}"
            )
        if not np.allclose(w.sum(axis=1), 0.0, atol=1e-9 * max(1.0, np.abs(w).max())):
            raise bad("coupling.node_weights rows must sum to 0 (reference-free)")
        target = CouplingTarget(
            kind=kind,
            name=str(d["name"]),
            channels=channels,
            label=str(node["label"]),
            nodes=(str(node["node_a"]), str(node["node_b"])),
            atlas=str(node["atlas"]) if kind == "edge" else None,
            node_weights=w,
            band=str(band["name"]),
            bands=tuple((str(b[0]), float(b[1]), float(b[2])) for b in d["bands"]),
            measure=measure,
            segment_s=float(cp["segment_s"]),
            window_segments=int(cp["window_segments"]),
            fingerprint=Fingerprint.from_dict(d["fingerprint"]),
            norm=d.get("norm"),
            offline=dict(d.get("offline") or {}),
            direction=str(d.get("direction", "none")),
            reject_uv=float(cp["reject_uv"]),
            details={
                k: v for k, v in node.items() if k not in ("label", "node_a", "node_b", "atlas")
            },
            created_utc=str(d.get("created_utc", "")),
        )
    except InputError:
        raise
    except (KeyError, TypeError, ValueError, AttributeError, IndexError) as exc:
        raise bad(f"malformed {kind} target ({exc!r})") from None
    lo, hi = target.band_edges
    if not (
        np.isclose(float(band.get("low_hz", lo)), lo)
        and np.isclose(float(band.get("high_hz", hi)), hi)
    ):
        raise bad("band edges differ from the 'bands' list")
    if not target.segment_s > 0 or target.window_segments < 2:
        raise bad("coupling.segment_s must be > 0 and window_segments >= 2")
    if target.norm is not None:
        for k in ("mean", "sd", "transform"):
            if k not in target.norm:
                raise bad(f"norm lacks {k!r}")
        if not float(target.norm["sd"]) > 0:
            raise bad("norm.sd must be > 0")
    if target.direction not in (*DIRECTIONS.values(), "none"):
        raise bad(f"direction {target.direction!r} is not one of increase, decrease, none")
    if check_fingerprint:
        _current_fingerprint_check(target.fingerprint, current, path)
    return target


# --------------------------------------------------------------------------------------------
# the measure from node coefficients (the offline estimator)


def segment_value(
    measure: str, spec: np.ndarray, plain: np.ndarray | None, freqs: np.ndarray
) -> float:
    """One pair / edge measure from the node coefficients of ``K`` segments.

    Parameters
    ----------
    measure : str
    spec : ndarray, shape (K, 2, n_bins), complex
        Hann-tapered scaled coefficients of the two nodes at the band's bins.
    plain : ndarray, shape (K, 2, n_bins), complex, or None
        Untapered coefficients (needed for ``aec_orth``).
    freqs : ndarray, shape (n_bins,)
        Hz.

    Returns
    -------
    float
        NaN with fewer than 2 segments.
    """
    from ..coupling.measures import coupling_from_statistics, pair_statistics_from_fourier
    from ..coupling.source import aec_from_moments, band_analytic, envelope_moments

    if spec.shape[0] < 2:
        return float("nan")
    idx = [np.arange(len(freqs))]
    if measure == "asymmetry":
        p = np.sum(np.abs(spec) ** 2, axis=(0, 2), dtype=float)
        return float((p[0] - p[1]) / (p[0] + p[1]))
    if measure == "aec_orth":
        mom = envelope_moments(band_analytic(plain, idx[0]))
        return float(aec_from_moments(mom)[0, 0, 1])
    ps = pair_statistics_from_fourier(spec, freqs, np.array([[0, 1]]))
    return float(coupling_from_statistics(ps, idx, measures=(measure,))[measure][0, 0, 0])


def _z(value: float, norm: dict | None) -> float:
    from ..norms import zscore

    if norm is None or not np.isfinite(value):
        return float("nan")
    try:
        return float(
            zscore(np.array([value]), float(norm["mean"]), float(norm["sd"]), norm["transform"])[0]
        )
    except InputError:  # on the edge of the measure's range (e.g. coherence 1)
        return float("nan")


class OnlineCoupling:
    """Streaming, causal pair / edge measure of one coupling target.

    Parameters
    ----------
    target : CouplingTarget
    sfreq : float
        Sampling rate of the incoming data, Hz.

    Notes
    -----
    Call :meth:`push` with chunks (19, n) in µV, channels in ``target.channels`` order.  Each
    completed segment returns one ``(t_end_s, value, z, n_clean, clean)`` row: the measure over
    the clean segments among the last ``window_segments`` (NaN below ``min_clean_segments``),
    its z against the target's norm, how many segments it used, and whether this segment was
    clean.  :meth:`pooled_value` is the measure over every clean segment so far.
    """

    def __init__(self, target: CouplingTarget, sfreq: float):
        from scipy.signal import butter, sosfilt_zi

        from ..config import Bands
        from ..spectra import analysed_bins

        self.target = target
        self.sfreq = float(sfreq)
        self.n_seg = int(round(target.segment_s * self.sfreq))
        lo, hi = target.band_edges
        self._bands = Bands((target.band,), ((lo, hi),))
        _, self.freqs = analysed_bins(self.n_seg, self.sfreq, self._bands)
        nyq = self.sfreq / 2
        self._hp = butter(
            2, [0.5, min(45.0, 0.9 * nyq)], btype="bandpass", output="sos", fs=self.sfreq
        )
        self._zi_unit = sosfilt_zi(self._hp)
        self._zi = None
        self._pending = np.zeros((len(target.channels), 0))
        self._raw_pending = np.zeros((len(target.channels), 0))
        self._n_done = 0
        self._window: list[tuple[np.ndarray, np.ndarray | None, bool]] = []
        self._clean_spec: list[np.ndarray] = []
        self._clean_plain: list[np.ndarray] = []
        self._plain = target.measure == "aec_orth"

    def _coefficients(self, seg: np.ndarray, taper: bool) -> np.ndarray:
        from ..spectra import epoch_fourier

        y = self.target.node_weights @ seg  # (2, n_seg)
        spec, _ = epoch_fourier(y[None], self.sfreq, self._bands, taper=taper)
        return spec[0]  # (2, n_bins)

    def push(self, chunk: np.ndarray) -> list[tuple[float, float, float, int, bool]]:
        """Feed samples (19, n) in µV; one row per completed segment.

        Parameters
        ----------
        chunk : ndarray, shape (19, n_samples)
            µV, channels in ``target.channels`` order, any reference; any number of samples.

        Returns
        -------
        list of (time_s, value, z, n_clean, clean)
            Per completed segment: its end time (s), the measure over the trailing window's clean
            segments (NaN when fewer than ``min_clean_segments``), its z against the target's norm
            (NaN without one), the number of clean segments used, and whether this segment is clean
            (after the warm-up, peak-to-peak <= ``reject_uv`` and no channel flatter than
            :data:`FLAT_UV`).

        Raises
        ------
        InputError
            For a chunk of the wrong shape.
        """
        from scipy.signal import sosfilt

        chunk = chunk_array(chunk, len(self.target.channels))
        if chunk.shape[1] == 0:
            return []
        if self._zi is None:
            self._zi = np.einsum("sk,c->sck", self._zi_unit, chunk[:, 0])
        filtered, self._zi = sosfilt(self._hp, chunk, axis=-1, zi=self._zi)
        self._pending = np.concatenate([self._pending, filtered], axis=1)
        self._raw_pending = np.concatenate([self._raw_pending, chunk], axis=1)
        out = []
        while self._pending.shape[1] >= self.n_seg:
            seg, self._pending = np.split(self._pending, [self.n_seg], axis=1)
            raw, self._raw_pending = np.split(self._raw_pending, [self.n_seg], axis=1)
            out.append(self._step(seg, raw))
        return out

    def _step(self, seg: np.ndarray, raw: np.ndarray):
        self._n_done += 1
        t_end = self._n_done * self.n_seg / self.sfreq
        ref = seg - seg.mean(axis=0, keepdims=True)
        clean = bool(
            t_end >= WARMUP_S + self.target.segment_s - 1e-9
            and np.ptp(ref, axis=1).max() <= self.target.reject_uv
            and np.ptp(raw, axis=1).min() >= FLAT_UV
        )
        spec = self._coefficients(seg, True)
        plain = self._coefficients(seg, False) if self._plain else None
        self._window.append((spec, plain, clean))
        if len(self._window) > self.target.window_segments:
            self._window.pop(0)
        if clean:
            self._clean_spec.append(spec)
            if plain is not None:
                self._clean_plain.append(plain)
        use = [w for w in self._window if w[2]]
        value = float("nan")
        if len(use) >= self.target.min_clean_segments:
            value = self._value([w[0] for w in use], [w[1] for w in use])
        return (t_end, value, _z(value, self.target.norm), len(use), clean)

    def _value(self, specs, plains) -> float:
        spec = np.stack(specs)
        plain = np.stack(plains) if self._plain else None
        return segment_value(self.target.measure, spec, plain, self.freqs)

    @property
    def n_clean(self) -> int:
        return len(self._clean_spec)

    def pooled_value(self) -> float:
        """The measure over every clean segment so far (the offline estimator).

        Returns
        -------
        float
            In the measure's unit; NaN with fewer than 2 clean segments.
        """
        if self.n_clean < 2:
            return float("nan")
        return self._value(self._clean_spec, self._clean_plain)


@dataclass(frozen=True, eq=False)
class CouplingReplay:
    """Replayed time course of a coupling target.

    Attributes
    ----------
    time_s : ndarray, shape (n_seg,)
        Segment end times, s.
    value : ndarray, shape (n_seg,)
        Measure over the trailing window's clean segments (NaN when too few).
    z : ndarray, shape (n_seg,)
    n_clean : ndarray of int, shape (n_seg,)
        Clean segments behind each value.
    clean : ndarray of bool, shape (n_seg,)
        This segment passed the checks.
    pooled_value : float
        The measure over every clean segment of the recording.
    """

    time_s: np.ndarray
    value: np.ndarray
    z: np.ndarray
    n_clean: np.ndarray
    clean: np.ndarray
    pooled_value: float

    def to_frame(self):
        """The replayed time course as a table.

        Returns
        -------
        DataFrame
            Columns ``time_s, value, z, n_clean, clean``, one row per segment.
        """
        import pandas as pd

        return pd.DataFrame(
            {
                "time_s": self.time_s,
                "value": self.value,
                "z": self.z,
                "n_clean": self.n_clean,
                "clean": self.clean,
            }
        )


def replay_coupling_array(
    data_uv: np.ndarray, sfreq: float, target: CouplingTarget, *, chunk_s: float = 10.0
) -> CouplingReplay:
    """Replay a coupling target over a whole array, causally (same numbers as streaming).

    Parameters
    ----------
    data_uv, sfreq, chunk_s
        As in :func:`sourcelab.targets.replay.replay_array`: µV (19, n_times), Hz, s.
    target : CouplingTarget

    Returns
    -------
    CouplingReplay
        One row per completed segment.
    """
    data_uv = np.asarray(data_uv, dtype=float)
    tracker = OnlineCoupling(target, sfreq)
    rows = push_in_chunks(tracker, data_uv, max(1, int(round(chunk_s * sfreq))))
    if not rows:
        raise InputError(f"recording shorter than one {target.segment_s:g}-s segment")
    t, v, z, k, c = (np.array(x) for x in zip(*rows))
    return CouplingReplay(
        time_s=t,
        value=v,
        z=z,
        n_clean=k.astype(int),
        clean=c.astype(bool),
        pooled_value=tracker.pooled_value(),
    )


def draw_coupling_values(ax, result: CouplingReplay, target: CouplingTarget, **line) -> None:
    """The value panel of a coupling target's replay figure (:func:`~.replay.plot_replay`).

    Parameters
    ----------
    ax : matplotlib.axes.Axes
    result : CouplingReplay
        From :func:`replay_coupling_array`.
    target : CouplingTarget
        The replayed target (measure, window, offline value).
    **line
        Style of the windowed-value line (``lw``, ``marker``...), in gray.
    """
    label = f"replayed (last {target.window_segments} segments)"
    ax.plot(result.time_s, result.value, color="0.2", label=label, **line)
    draw_offline_value(ax, target)
    if np.isfinite(result.pooled_value):
        ax.axhline(
            result.pooled_value, ls=":", color="tab:orange", label="replay, all clean segments"
        )
    ax.set_ylabel(target.measure)
    ax.set_title(
        f"{target.name}: {target.segment_s:g}-s segments, window of {target.window_segments}"
    )
    ax.legend(loc="upper right", fontsize=8)


def replay_coupling_recording(target: CouplingTarget, recording, out: str | Path) -> dict:
    """Replay a coupling target on a recording.

    Writes ``replay.tsv``, ``replay.png`` and ``replay.json`` into ``out`` (atomically).

    Parameters
    ----------
    target : CouplingTarget
    recording : Recording or path
        A read recording or a file for :func:`sourcelab.intake.read_recording`; its channels
        must be ``target.channels``.
    out : str | Path
        Output folder (new, or an earlier sourcelab output, replaced).

    Returns
    -------
    dict
        Summary: segments, clean segments, pooled value, offline value and their difference,
        the median windowed value.

    Raises
    ------
    InputError
        For a recording with other channels or shorter than one segment.
    """
    rec = replay_input(target, recording)
    res = replay_coupling_array(rec.raw.get_data() * 1e6, rec.sfreq, target)
    off = target.offline.get("value")
    finite = np.isfinite(res.value)
    summary = {
        "target": target.name,
        "kind": target.kind,
        "measure": target.measure,
        "recording": str(rec.path) if rec.path else None,
        "recording_sha256": rec.sha256,
        "sfreq": float(rec.sfreq),
        "n_segments": int(res.time_s.size),
        "n_clean": int(res.clean.sum()),
        "pooled_value": res.pooled_value,
        "pooled_z": _z(res.pooled_value, target.norm),
        "offline_value": off,
        "difference_to_offline": (res.pooled_value - off) if off is not None else None,
        "median_window_value": float(np.median(res.value[finite])) if finite.any() else None,
        "window_segments": target.window_segments,
        "segment_s": target.segment_s,
    }
    write_replay(
        out,
        res.to_frame(),
        plot_replay(res, target),
        summary,
        recording=rec,
        target=target,
    )
    return summary


# --------------------------------------------------------------------------------------------
# export from an analysis folder


def _read_table(folder: Path, name: str):
    import pandas as pd

    path = folder / f"{name}.tsv"
    if not path.is_file():
        raise InputError(
            f"analysis folder lacks {name}.tsv (analysed with coupling off, or "
            "by an older sourcelab)",
            path=folder,
        )
    try:
        return pd.read_csv(path, sep="\t", keep_default_na=False, na_values=[""])
    except (pd.errors.ParserError, UnicodeDecodeError, ValueError) as exc:
        raise InputError(f"cannot read {name}.tsv ({exc})", path=path) from None


def _select_pair(t, label: str):
    parts = [p.strip() for p in str(label).split("-")]
    if len(parts) != 2 or not all(parts):
        raise InputError(f"--pair: need two sites joined by '-', e.g. F3-F4, got {label!r}")
    a, b = parts
    fwd = f"{a}-{b}"
    rev = f"{b}-{a}"
    hit = t[t["pair"].isin([fwd, rev])]
    if hit.empty:
        raise InputError(
            f"no pair {label!r} in the pair table (sites: "
            f"{sorted(set(t['channel_a']) | set(t['channel_b']))})"
        )
    return hit


def _select_edge(t, label: str, atlas: str | None):
    parts = [p.strip() for p in str(label).split("|")]
    if len(parts) != 2 or not all(parts):
        raise InputError(
            f"--edge: need two ROIs joined by '|', e.g. 'visual.left|visual.right', got {label!r}"
        )
    a, b = parts
    hit = t[t["edge"].isin([f"{a}|{b}", f"{b}|{a}"])]
    if atlas is not None:
        hit = hit[hit["atlas"] == atlas]
    if hit.empty:
        have = sorted(set(t["atlas"]))
        raise InputError(
            f"no edge {label!r}"
            + (f" in atlas {atlas}" if atlas else "")
            + f" (atlases: {have}; ROIs as roi.hemisphere)"
        )
    atlases = sorted(set(hit["atlas"]))
    if len(atlases) > 1:
        raise InputError(f"edge {label!r} exists in atlases {atlases}; pass --atlas")
    return hit


def export_coupling_target(
    result_dir: str | Path,
    *,
    kind: str,
    label: str,
    band: str,
    measure: str | None = None,
    atlas: str | None = None,
    norms=None,
    allow_extrapolation: bool = False,
    window_segments: int = WINDOW_SEGMENTS,
) -> CouplingTarget:
    """Build the target of one electrode pair or one network/lobe edge from an analysis folder.

    Parameters
    ----------
    result_dir : path
        Folder written by ``sourcelab analyze`` (``pair_table.tsv`` / ``coupling_table.tsv``,
        ``provenance.json``).
    kind : {"pair", "edge"}
    label : str
        ``"F3-F4"`` (either order) or ``"visual.left|visual.right"`` (either order); the target
        keeps the table's order, which sets the sign of ``imcoh``, ``lag_ms``, ``phase_deg``
        and ``asymmetry``.
    band : str
    measure : str, optional
        Default ``msc`` for pairs, ``lagcoh`` for edges.
    atlas : str, optional
        The edge's atlas (needed when the edge's ROI names exist in several).
    norms, allow_extrapolation
        As in :func:`sourcelab.targets.definition.export_target`.
    window_segments : int
        Segments of the feedback window (default 15: 30 s of 2-s segments).

    Returns
    -------
    CouplingTarget
        Node weights (2, 19), the offline value and, with norms, the norm at the participant's
        age.

    Raises
    ------
    InputError
        Unknown pair, edge, band or measure; pipeline or norms different from the analysis'.
    """
    from ..headmodel import load_head_model
    from .candidates import read_result_folder
    from .definition import _current_fingerprint_check

    if kind not in KINDS:
        raise InputError(f"kind: {kind!r} is not one of {KINDS}")
    if not (isinstance(window_segments, (int, np.integer)) and window_segments >= 2):
        raise InputError(f"window_segments: need an integer >= 2, got {window_segments!r}")
    res = read_result_folder(result_dir)
    fp = res.fingerprint
    _current_fingerprint_check(fp, None, res.path / "provenance.json")
    measure = measure or ("msc" if kind == "pair" else "lagcoh")
    t = _read_table(res.path, "pair_table" if kind == "pair" else "coupling_table")
    hit = _select_pair(t, label) if kind == "pair" else _select_edge(t, label, atlas)
    measures = sorted(set(hit["measure"]))
    if measure not in measures:
        raise InputError(f"measure {measure!r} is not among this {kind}'s measures {measures}")
    sel = hit[(hit["measure"] == measure) & (hit["band"] == band)]
    if sel.empty:
        raise InputError(f"band {band!r} is not among {sorted(set(hit['band']))}")
    row = sel.iloc[0]
    model = load_head_model()
    names = list(model.ch_names)
    if kind == "pair":
        nodes = (str(row["channel_a"]), str(row["channel_b"]))
        n = len(names)
        w = np.full((2, n), -1.0 / n)
        for i, c in enumerate(nodes):
            w[i, names.index(c)] += 1.0
        details = {
            k: bool(row[k])
            for k in ("homologous", "anterior_posterior", "intrahemispheric")
            if k in row
        }
        item_label, at_name = str(row["pair"]), None
    else:
        from ..coupling import roi_filters
        from ..inverse import inverse_operator
        from ..rois import load_atlas

        at_name = str(row["atlas"])
        op = inverse_operator(fp.method, fp.orientation, fp.lambda2)
        f = roi_filters(op, load_atlas(at_name), normals=model.src_nn)
        keys = list(zip(f.names, f.hemispheres))
        ia = keys.index((str(row["roi_a"]), str(row["hemisphere_a"])))
        ib = keys.index((str(row["roi_b"]), str(row["hemisphere_b"])))
        w = f.weights[[ia, ib]].copy()
        nodes = (f"{row['roi_a']}.{row['hemisphere_a']}", f"{row['roi_b']}.{row['hemisphere_b']}")
        details = {
            "roi_a": str(row["roi_a"]),
            "hemisphere_a": str(row["hemisphere_a"]),
            "roi_b": str(row["roi_b"]),
            "hemisphere_b": str(row["hemisphere_b"]),
            "filter_share_a": float(f.share[ia]),
            "filter_share_b": float(f.share[ib]),
            "source_space": "fsaverage5 surface vertices (0..20483, left hemisphere "
            "first) of each ROI's cortical sources",
            "vertices_a": model.vertno[f.vertices[ia]].tolist(),
            "vertices_b": model.vertno[f.vertices[ib]].tolist(),
        }
        item_label = str(row["edge"])
    norm = target_norm(
        res,
        norms,
        coupling_norm_at_age,
        kind=kind,
        label=item_label,
        atlas=at_name,
        band=band,
        measure=measure,
        allow_extrapolation=allow_extrapolation,
    )
    interval = {k: finite_or_none(row.get(k)) for k in ("value_lo", "value_hi")}
    offline = offline_section(res, row, {**interval, "n_epochs": int(row["n_epochs"])})
    name = (
        f"pair {item_label} {band} {measure}"
        if kind == "pair"
        else f"{at_name} {item_label} {band} {measure}"
    )
    return CouplingTarget(
        kind=kind,
        name=name,
        channels=tuple(names),
        label=item_label,
        nodes=nodes,
        atlas=at_name,
        node_weights=w,
        band=band,
        bands=fp.bands,
        measure=measure,
        segment_s=float(fp.epoch_s),
        window_segments=int(window_segments),
        fingerprint=fp,
        norm=norm,
        offline=offline,
        direction=direction_of(offline["z"]),
        reject_uv=analysis_reject_uv(res),
        details=details,
        created_utc=utc_stamp(),
    )


def coupling_norm_at_age(
    norms,
    *,
    kind: str,
    label: str,
    band: str,
    measure: str,
    age: float,
    fingerprint: Fingerprint,
    atlas: str | None = None,
    condition: str | None = None,
    allow_extrapolation: bool = False,
) -> dict:
    """The norm of one pair / edge quantity at ``age``.

    The pair / edge counterpart of :func:`sourcelab.targets.definition.norm_at_age` (the same
    row selection).

    Parameters
    ----------
    norms : Norms
    kind : {"pair", "edge"}
    label : str
        Pair label (``"F3-F4"``) or edge label (``"roi.hemisphere|roi.hemisphere"``).
    band, measure : str
        Band name and coupling measure.
    age : float
        Participant age, years.
    fingerprint : Fingerprint
        Pipeline the norms must match.
    atlas : str, optional
        Atlas of an edge.
    condition : str, optional
        Recording condition; a mismatch is allowed here (recorded in ``condition``).
    allow_extrapolation : bool
        Accept an age outside the norms' age range.

    Returns
    -------
    dict
        ``mean, sd`` (on the measure's transformed scale), ``transform``, ``age`` (years),
        ``n``, ``extrapolated``, ``norms_sha256``, ``condition`` (the norms').

    Raises
    ------
    InputError
        If the norms have no row for the quantity.
    """
    one = {"band": band, "measure": measure}
    one.update({"pair": label} if kind == "pair" else {"atlas": atlas, "edge": label})
    return norm_row(
        norms,
        one,
        what=f"{kind} row for {label} {band} {measure}",
        age=age,
        fingerprint=fingerprint,
        condition=condition,
        allow_extrapolation=allow_extrapolation,
        kind=kind,
    )
