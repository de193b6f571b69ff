"""Replay a target definition causally over a recording, as a real-time program would.

Every output sample uses only data up to its time stamp: each band is filtered by the target's
causal Butterworth sections (state carried across chunks, no look-ahead, no zero-phase filtering),
and ROI power is the mean over a sliding window (default 1 s, updated every 250 ms) of the
band-passed signal's quadratic form ``tr(M · x xᵀ)``.  :class:`OnlineTarget` is the streaming
form (one call per incoming chunk); :func:`replay_array` gives identical numbers for a whole array.

Agreement with the offline analysis
-----------------------------------
Offline band power sums Hann-windowed Welch bins ``lo <= f < hi``; the replay sees the data through
the IIR's response ``|H(f)|²`` (-3 dB at the edges, tails beyond them).  For a spectrum ``S(f)``
projected through ``M`` the expected ratio replay/offline is
``∫ |H(f)|² S(f) df / ∫ E(f) S(f) df`` with ``E`` the Welch band's effective response
(:func:`welch_band_response`); :func:`expected_ratio` computes it, and the tests check the
replayed mean against it.

References
----------
Welch P (1967) IEEE Trans Audio Electroacoust 15:70-73.
Harris FJ (1978) On the use of windows for harmonic analysis with the discrete Fourier transform.
Proc IEEE 66:51-83.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..constants import Z_THRESHOLD
from ..errors import InputError
from .definition import TargetDefinition

log = logging.getLogger("sourcelab")

#: Windows ending before this time (s) after the start are marked warm-up (IIR transient: an
#: 8th-order Butterworth band-pass 1 Hz wide settles to <1 % within ~1.5 s; 2 s is conservative).
WARMUP_S = 2.0
#: Windows with a channel's band-limited (0.5-45 Hz, causal, in the recorded reference)
#: peak-to-peak below this are flat (µV).
FLAT_UV = 0.5


def _zscore(power: np.ndarray, norm: dict | None) -> np.ndarray:
    """z of power values against a target's norm (NaN without a norm or outside the domain)."""
    from ..norms import zscore

    power = np.asarray(power, dtype=float)
    if norm is None:
        return np.full(power.shape, np.nan)
    ok = np.isfinite(power) & (power > 0)
    if norm["transform"] == "logit":
        ok &= power < 1
    out = np.full(power.shape, np.nan)
    out[ok] = zscore(power[ok], float(norm["mean"]), float(norm["sd"]), norm["transform"])
    return out


# --------------------------------------------------------------------------------------------
# plumbing shared by the area replay (here) and the pair / edge replay (coupling.py)


def chunk_array(chunk, n_channels: int) -> np.ndarray:
    """A chunk pushed into an online target, checked.

    Parameters
    ----------
    chunk : array-like, shape (n_channels, n_samples)
        µV, channels in the target's order.
    n_channels : int
        Channels of the target.

    Returns
    -------
    ndarray of float, shape (n_channels, n_samples)

    Raises
    ------
    InputError
        For a chunk of another shape.
    """
    chunk = np.asarray(chunk, dtype=float)
    if chunk.ndim != 2 or chunk.shape[0] != n_channels:
        raise InputError(f"chunk: need shape ({n_channels}, n_samples), got {chunk.shape}")
    return chunk


def push_in_chunks(tracker, data_uv: np.ndarray, n: int) -> list:
    """Feed a whole array to an online target in chunks of ``n`` samples.

    Parameters
    ----------
    tracker : OnlineTarget | sourcelab.targets.coupling.OnlineCoupling
        Anything with ``push(chunk) -> list of rows``.
    data_uv : ndarray, shape (19, n_times)
        µV, channels in the target's order.
    n : int
        Samples per chunk.

    Returns
    -------
    list
        Every row ``push`` returned, in order.
    """
    rows = []
    for start in range(0, data_uv.shape[1], n):
        rows += tracker.push(data_uv[:, start : start + n])
    return rows


def replay_input(target, recording):
    """The recording a target is replayed on, with the target's channels.

    Parameters
    ----------
    target : TargetDefinition | sourcelab.targets.coupling.CouplingTarget
    recording : str | Path | sourcelab.intake.Recording
        A read recording or a file for :func:`sourcelab.intake.read_recording`.

    Returns
    -------
    sourcelab.intake.Recording

    Raises
    ------
    InputError
        For a recording whose channels are not ``target.channels`` (in order).
    """
    from ..intake import Recording, read_recording

    rec = recording if isinstance(recording, Recording) else read_recording(recording)
    raw = rec.raw
    if tuple(raw.ch_names) != tuple(target.channels):
        raise InputError(
            f"recording channels {raw.ch_names} differ from the target's {list(target.channels)}",
            path=rec.path,
        )
    return rec


def draw_z_panel(ax, time_s, z, norm, *, ylabel: str, xlabel: str, **line) -> None:
    """The z panel of a replay figure: z over time, 0 and ±Z_THRESHOLD, a note without a norm.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
        Axes to draw into.
    time_s, z : ndarray, shape (n_rows,)
        Row end times (s) and z-scores.
    norm : dict | None
        The target's norm (None: the panel says z is not available).
    ylabel, xlabel : str
        Axis labels.
    **line
        Style of the z line (``lw``, ``marker``...), in gray.
    """
    ax.plot(time_s, z, color="0.2", **line)
    ax.axhline(0, color="0.5", lw=0.5)
    for lim in (-Z_THRESHOLD, Z_THRESHOLD):
        ax.axhline(lim, ls=":", color="0.5", lw=0.8)
    if norm is None:
        ax.text(
            0.5,
            0.5,
            "no norm in this target: z not available",
            ha="center",
            va="center",
            transform=ax.transAxes,
            color="0.4",
        )
    ax.set_ylabel(ylabel)
    ax.set_xlabel(xlabel)


def shade_unclean(axes, time_s, clean) -> None:
    """Shade the unclean rows of a replay on every panel (full height, gray).

    Parameters
    ----------
    axes : iterable of matplotlib.axes.Axes
    time_s : ndarray, shape (n_rows,)
        Row end times, s.
    clean : ndarray of bool, shape (n_rows,)
    """
    for ax in axes:
        ax.fill_between(
            time_s,
            0,
            1,
            where=~np.asarray(clean, dtype=bool),
            color="0.85",
            step="pre",
            transform=ax.get_xaxis_transform(),
        )


def write_replay(out, frame, fig, summary: dict, *, recording, target) -> None:
    """Write a replay's ``replay.tsv``, ``replay.png`` and ``replay.json`` into ``out``, atomically.

    The folder is marked as a replay whose inputs are the recording's and the target's files.

    Parameters
    ----------
    out : str | Path
        Output folder (new, or an earlier sourcelab replay, replaced).
    frame : DataFrame
        One row per replay step or segment.
    fig : matplotlib.figure.Figure
        The replay figure.
    summary : dict
        Written as JSON (NaN as null).
    recording : Recording
        The replayed recording (its ``path`` may be None for one made in memory).
    target : TargetDefinition | CouplingTarget
        The replayed target (its ``path``, when read from a file, is an input).
    """
    from ..provenance import atomic_output_dir, dumps_json

    inputs = [p for p in (recording.path, getattr(target, "path", None)) if p is not None]
    with atomic_output_dir(Path(out), kind="replay", inputs=inputs) as tmp:
        frame.to_csv(tmp / "replay.tsv", sep="\t", index=False, na_rep="", float_format="%.6g")
        fig.savefig(tmp / "replay.png", dpi=100)
        (tmp / "replay.json").write_text(dumps_json(summary, indent=2), encoding="utf-8")


class OnlineTarget:
    """Streaming, causal ROI band power of one target.

    Parameters
    ----------
    target : TargetDefinition
    sfreq : float
        Sampling rate of the incoming data, Hz.  ``window_s`` and ``step_s`` must be whole numbers
        of samples at this rate (rounded otherwise).

    Notes
    -----
    Call :meth:`push` with chunks of shape (19, n) in µV, channels in ``target.channels`` order.
    Each completed step returns one ``(t_end_s, power, z, clean)`` row; ``power`` and ``z`` are
    NaN when the window is not clean (warm-up, artefact or flat channel).  Per step the cost is the
    IIR filtering of ``step`` samples plus one 19 x 19 outer-product block and ``tr(M C)``
    (absolute) or ``n_rows x 19 x 19`` per band (relative).
    """

    def __init__(self, target: TargetDefinition, sfreq: float):
        from scipy.signal import butter, sosfilt_zi

        self.target = target
        self.sfreq = float(sfreq)
        self.step = max(1, int(round(target.step_s * sfreq)))
        self.n_blocks = max(1, int(round(target.window_s / target.step_s)))
        self.sos = target.sos_for(self.sfreq)
        self.bands = [target.band] if target.measure == "absolute" else [b[0] for b in target.bands]
        self.band_index = self.bands.index(target.band)
        self._zi = {b: None for b in self.bands}
        self._zi_unit = {b: sosfilt_zi(self.sos[b]) for b in self.bands}
        nyq = self.sfreq / 2
        self._hp = butter(
            2, [0.5, min(45.0, 0.9 * nyq)], btype="bandpass", output="sos", fs=self.sfreq
        )
        self._hp_zi_unit = sosfilt_zi(self._hp)
        self._hp_zi = None
        n_ch = len(target.channels)
        self._blocks = np.zeros((self.n_blocks, len(self.bands), n_ch, n_ch))
        # (max, min) per block of the average-referenced artefact signal, then of the signal in
        # its recorded reference (a disconnected channel is flat there, not after referencing)
        self._ptp = np.zeros((self.n_blocks, 4, n_ch))
        self._n_done = 0
        #: per-channel peak-to-peak (µV, 0.5-45 Hz, recorded reference) of the last full window
        self.last_ptp = np.full(n_ch, np.nan)
        self._pending = np.zeros((n_ch, 0))
        self._m = target.matrix
        self._rows = target.kernel_rows
        if target.norm is not None:
            self._norm_mean = float(target.norm["mean"])
            self._norm_sd = float(target.norm["sd"])

    def _filter(self, sos, zi_unit, zi, x):
        from scipy.signal import sosfilt

        if zi is None:  # steady state for the first sample (DC offset causes no transient)
            zi = np.einsum("sk,c->sck", zi_unit, x[:, 0])
        y, zi = sosfilt(sos, x, axis=-1, zi=zi)
        return y, zi

    def _power(self, cov: np.ndarray) -> float:
        """ROI power from band covariances ``cov`` (n_bands_used, 19, 19)."""
        if self.target.measure == "absolute":
            return float(np.einsum("cd,cd->", self._m, cov[0]))
        k = self._rows
        nc = self.target.n_comp
        p = np.sum((k @ cov) * k, axis=-1)  # (n_bands, n_rows): diag(K C_b Kᵀ)
        p = p.reshape(len(self.bands), -1, nc).sum(-1)  # (n_bands, n_sources)
        total = p.sum(axis=0)
        with np.errstate(invalid="ignore", divide="ignore"):
            rel = np.where(total > 0, p[self.band_index] / total, np.nan)
        return float(np.mean(rel))

    def push(self, chunk: np.ndarray) -> list[tuple[float, float, float, bool]]:
        """Feed samples (19, n) in µV; return one ``(t_end_s, power, z, clean)`` per step.

        Parameters
        ----------
        chunk : ndarray, shape (19, n_samples)
            µV, channels in ``target.channels`` order, any reference; any number of samples
            (the remainder of a step is kept for the next call).

        Returns
        -------
        list of (t_end_s, power, z, clean)
            Per completed step: window end time (s), ROI band power over the trailing window (the
            offline ``value``'s unit; NaN until the first full window or when unclean), its z
            against the target's norm (NaN without one) and whether the window is clean.

        Raises
        ------
        InputError
            For a chunk of the wrong shape.
        """
        chunk = chunk_array(chunk, len(self.target.channels))
        data = np.concatenate([self._pending, chunk], axis=1)
        n_full = data.shape[1] // self.step
        self._pending = data[:, n_full * self.step :]
        if n_full == 0:
            return []
        x = data[:, : n_full * self.step]
        # filtering a block of steps at once equals step-by-step filtering (state carried)
        ys = []
        for b in self.bands:
            y, self._zi[b] = self._filter(self.sos[b], self._zi_unit[b], self._zi[b], x)
            ys.append(y)
        h, self._hp_zi = self._filter(self._hp, self._hp_zi_unit, self._hp_zi, x)
        h_ref = h - h.mean(axis=0, keepdims=True)  # average reference for the artefact check
        out = []
        for j in range(n_full):
            sl = slice(j * self.step, (j + 1) * self.step)
            out.append(self._step([y[:, sl] for y in ys], h_ref[:, sl], h[:, sl]))
        return out

    def _step(self, ys, h, h_own) -> tuple[float, float, float, bool]:
        slot = self._n_done % self.n_blocks
        for b_i, y in enumerate(ys):
            self._blocks[slot, b_i] = y @ y.T
        self._ptp[slot, 0] = h.max(axis=1)
        self._ptp[slot, 1] = h.min(axis=1)
        self._ptp[slot, 2] = h_own.max(axis=1)
        self._ptp[slot, 3] = h_own.min(axis=1)
        self._n_done += 1
        t_end = self._n_done * self.step / self.sfreq
        if self._n_done < self.n_blocks:
            return (t_end, np.nan, np.nan, False)
        ptp = self._ptp[:, 0].max(axis=0) - self._ptp[:, 1].min(axis=0)
        own = self._ptp[:, 2].max(axis=0) - self._ptp[:, 3].min(axis=0)
        self.last_ptp = own
        clean = bool(
            t_end >= WARMUP_S and ptp.max() <= self.target.reject_uv and own.min() >= FLAT_UV
        )
        if not clean:  # an unclean window (warm-up, artefact, flat channel) carries no value
            return (t_end, np.nan, np.nan, False)
        cov = self._blocks.sum(axis=0) / (self.n_blocks * self.step)
        power = self._power(cov)
        z = self._z(power)
        return (t_end, power, z, clean)

    def _z(self, power: float) -> float:
        norm = self.target.norm
        if norm is None or not np.isfinite(power) or power <= 0:
            return float("nan")
        if norm["transform"] == "log10":
            tv = np.log10(power)
        elif norm["transform"] == "logit" and power < 1:
            tv = np.log(power / (1.0 - power))
        else:
            return float(_zscore(np.array([power]), norm)[0])
        return float((tv - self._norm_mean) / self._norm_sd)


@dataclass(frozen=True, eq=False)
class ReplayResult:
    """Replayed time course.

    Attributes
    ----------
    time_s : ndarray, shape (n_win,)
        Window end times, s from the recording start.
    power : ndarray, shape (n_win,)
        ROI band power (same unit as the offline ``value``); NaN until the first full window.
    z : ndarray, shape (n_win,)
        Against the target's norm (NaN without one).
    clean : ndarray of bool, shape (n_win,)
        Past the warm-up, no peak-to-peak above ``reject_uv``, no flat channel.  Unclean windows
        carry no value: their power and z are NaN.
    smoothed : ndarray, shape (n_win,) | None
        Smoothed transformed value (log10 or logit) over clean windows
        (:class:`sourcelab.targets.live.LiveValue`); NaN on unclean windows.
    smoothed_z : ndarray, shape (n_win,) | None
        The smoothed value as z against the target's norm.
    threshold_met : ndarray, shape (n_win,) | None
        1/0 when the target's ``live`` section sets a threshold, NaN otherwise.
    """

    time_s: np.ndarray
    power: np.ndarray
    z: np.ndarray
    clean: np.ndarray
    smoothed: np.ndarray | None = None
    smoothed_z: np.ndarray | None = None
    threshold_met: np.ndarray | None = None

    def clean_mean(self) -> float:
        """Mean power over clean windows (NaN if none).

        Returns
        -------
        float
            Same unit as :attr:`power`.
        """
        return float(np.mean(self.power[self.clean])) if self.clean.any() else float("nan")

    def to_frame(self):
        """The replayed time course as a table.

        Returns
        -------
        DataFrame
            Columns ``time_s, power, z, clean`` and, when present, ``smoothed, smoothed_z,
            threshold_met``; one row per window.
        """
        import pandas as pd

        cols = {"time_s": self.time_s, "power": self.power, "z": self.z, "clean": self.clean}
        for name in ("smoothed", "smoothed_z", "threshold_met"):
            if getattr(self, name) is not None:
                cols[name] = getattr(self, name)
        return pd.DataFrame(cols)


def replay_array(
    data_uv: np.ndarray, sfreq: float, target: TargetDefinition, *, chunk_s: float = 10.0
) -> ReplayResult:
    """Replay ``target`` over a whole array, causally (same numbers as streaming).

    Parameters
    ----------
    data_uv : ndarray, shape (19, n_times)
        Recording in µV, channels in ``target.channels`` order, any reference.
    sfreq : float
        Hz.
    target : TargetDefinition
    chunk_s : float
        Processing chunk (affects speed only).

    Returns
    -------
    ReplayResult
        One row per step, with the smoothed value and threshold flag.
    """
    data_uv = np.asarray(data_uv, dtype=float)
    tracker = OnlineTarget(target, sfreq)
    n = max(tracker.step, int(round(chunk_s * sfreq)) // tracker.step * tracker.step)
    rows = push_in_chunks(tracker, data_uv, n)
    if not rows:
        raise InputError(f"recording shorter than one {target.step_s:g}-s step")
    from .live import LiveValue

    lv = LiveValue(target)
    extra = np.array([lv.update(r[1], r[3]) for r in rows]).reshape(-1, 3)
    t, p, z, c = (np.array(v) for v in zip(*rows))
    return ReplayResult(
        time_s=t,
        power=p,
        z=z,
        clean=c.astype(bool),
        smoothed=extra[:, 0],
        smoothed_z=extra[:, 1],
        threshold_met=extra[:, 2],
    )


def welch_band_response(
    freqs: np.ndarray, lo: float, hi: float, *, sfreq: float, n_times: int
) -> np.ndarray:
    """Effective power response of Welch band power (periodic Hann, bins ``lo <= f < hi``).

    ``E(f) = Σ_k |W(f - f_k)|² / (N Σ w²)`` summed over the band's bins ``f_k``: a sinusoid at
    an interior bin contributes exactly its power (the bins' weights sum to 1).

    Parameters
    ----------
    freqs : ndarray, shape (n_f,)
        Hz.
    lo, hi : float
        Band edges, Hz, ``[lo, hi)``.
    sfreq : float
        Sampling rate, Hz.
    n_times : int
        Samples per Welch segment (epoch).

    Returns
    -------
    ndarray, shape (n_f,)
        Dimensionless power gain at each frequency.
    """
    n = np.arange(n_times)
    w = 0.5 - 0.5 * np.cos(2 * np.pi * n / n_times)
    fk = np.fft.rfftfreq(n_times, 1 / sfreq)
    fk = fk[(fk >= lo) & (fk < hi)]
    out = np.zeros(len(freqs))
    for f0 in fk:
        ph = np.exp(-2j * np.pi * np.outer(np.asarray(freqs) - f0, n) / sfreq)
        out += np.abs(ph @ w) ** 2
    return out / (n_times * np.sum(w**2))


def expected_ratio(
    psd: np.ndarray,
    freqs: np.ndarray,
    sos: np.ndarray,
    lo: float,
    hi: float,
    *,
    sfreq: float,
    epoch_s: float,
) -> float:
    """Expected replayed / offline band power for a spectrum ``psd`` (any unit per Hz).

    Parameters
    ----------
    psd : ndarray, shape (n_f,)
        Power spectral density on a fine uniform grid ``freqs`` (e.g. ``tr(M S(f))``).
    freqs : ndarray, shape (n_f,)
        Hz.
    sos : ndarray, shape (n_sections, 6)
        The replay's band-pass.
    lo, hi : float
        Offline band edges, Hz, ``[lo, hi)``.
    sfreq : float
        Sampling rate, Hz.
    epoch_s : float
        Offline Welch segment length, s.

    Returns
    -------
    float
        ``Σ |H(f)|² psd / Σ E(f) psd`` with ``E`` from :func:`welch_band_response`
        (dimensionless; 1 when both estimators agree).
    """
    from scipy.signal import sosfreqz

    _, h = sosfreqz(sos, worN=np.asarray(freqs), fs=sfreq)
    e = welch_band_response(freqs, lo, hi, sfreq=sfreq, n_times=int(round(epoch_s * sfreq)))
    return float(np.sum(np.abs(h) ** 2 * psd) / np.sum(e * psd))


def plot_replay(result, target, *, figure=None):
    """Replayed value and z over time; unclean rows shaded; offline value as a dashed line.

    Parameters
    ----------
    result : ReplayResult or CouplingReplay
        From :func:`replay_array` (band-power target) or
        :func:`~sourcelab.targets.coupling.replay_coupling_array` (pair or edge target).
    target : TargetDefinition or CouplingTarget
        The replayed target (labels, window, offline value, norm).
    figure : matplotlib.figure.Figure, optional
        Figure to draw into; default a new one.

    Returns
    -------
    matplotlib.figure.Figure
        Two panels: the replayed value (band power, or the pair/edge measure) and z (the drawn
        ``figure`` when given).
    """
    from matplotlib.figure import Figure

    from .coupling import CouplingTarget, draw_coupling_values

    fig = figure if figure is not None else Figure(figsize=(9, 5), layout="constrained")
    ax_v, ax_z = fig.subplots(2, 1, sharex=True)
    if isinstance(target, CouplingTarget):
        line = {"lw": 0.9, "marker": ".", "ms": 3}
        draw_coupling_values(ax_v, result, target, **line)
        ylabel, xlabel = "z (window)", "time (s, segment end)"
    else:
        line = {"lw": 0.8}
        ax_v.plot(result.time_s, result.power, color="0.2", label="replayed (causal)", **line)
        draw_offline_value(ax_v, target)
        ax_v.set_ylabel(f"{target.measure} power")
        ax_v.set_title(f"{target.name}: {target.window_s:g}-s windows every {target.step_s:g} s")
        ax_v.legend(loc="upper right", fontsize=8)
        ylabel, xlabel = "z", "time (s, window end)"
    draw_z_panel(ax_z, result.time_s, result.z, target.norm, ylabel=ylabel, xlabel=xlabel, **line)
    shade_unclean((ax_v, ax_z), result.time_s, result.clean)
    return fig


def draw_offline_value(ax, target) -> None:
    """The target's offline value as a dashed line on the value panel of a replay figure.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
    target : TargetDefinition or CouplingTarget
        Nothing is drawn when its offline value is missing or not finite.
    """
    off = target.offline.get("value")
    if off is not None and np.isfinite(off):
        ax.axhline(off, ls="--", color="tab:blue", label="offline analysis")


def replay_recording(target: TargetDefinition, recording, out: str | Path) -> dict:
    """Replay ``target`` on a recording file; write ``replay.tsv``, ``.png`` and ``.json``.

    Parameters
    ----------
    target : TargetDefinition
    recording : str | Path | sourcelab.intake.Recording
    out : path
        Output folder (replaced atomically).

    Returns
    -------
    dict
        Summary: windows, clean windows, clean mean power and z, offline value, ratio.
    """
    from .coupling import CouplingTarget, replay_coupling_recording

    if isinstance(target, CouplingTarget):  # a pair or edge target
        return replay_coupling_recording(target, recording, out)
    rec = replay_input(target, recording)
    res = replay_array(rec.raw.get_data() * 1e6, rec.sfreq, target)
    mean = res.clean_mean()
    off = target.offline.get("value")
    summary = {
        "target": target.name,
        "recording": str(rec.path) if rec.path else None,
        "recording_sha256": rec.sha256,
        "sfreq": float(rec.sfreq),
        "n_windows": int((res.time_s >= target.window_s - 0.5 / rec.sfreq).sum()),
        "n_clean": int(res.clean.sum()),
        "clean_mean_power": mean,
        "clean_mean_z": float(_zscore(np.array([mean]), target.norm)[0]),
        "offline_value": off,
        "ratio_to_offline": (mean / off) if off else None,
        "window_s": target.window_s,
        "step_s": target.step_s,
    }
    write_replay(
        out, res.to_frame(), plot_replay(res, target), summary, recording=rec, target=target
    )
    return summary
