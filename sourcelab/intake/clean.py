"""Cleaning: mains notch, band-pass, segment selection, epoching and epoch rejection."""

from __future__ import annotations

import logging
from dataclasses import dataclass

import mne
import numpy as np
from scipy.signal import welch

from ..config import AnalysisConfig
from ..constants import SITES_1020
from ..errors import InputError
from .recording import Recording

logger = logging.getLogger("sourcelab")

#: Defaults of the thresholds that are not (yet) AnalysisConfig fields.
#: Muscle: RMS of the 25 Hz-to-h_freq band above this (µV) in any site rejects the epoch.  EMG
#: dominates scalp EEG above ~20 Hz (Goncharova et al. 2003, Clin Neurophysiol 114:1580-1593 —
#: from memory); the value is common practice for resting recordings.
MUSCLE_UV = 8.0
MUSCLE_BAND_HZ = (25.0, 45.0)
#: Blink: the Fp1/Fp2 mean, low-passed at 3 Hz, deviating from its epoch median by more than this
#: (µV).  Blinks give 50-200 µV frontal deflections (Croft & Barry 2000, Neurophysiol Clin
#: 30:5-19 — from memory).
BLINK_UV = 70.0
BLINK_LOWPASS_HZ = 3.0
BLINK_GRADIENT = 2.0
#: Annotations whose description starts with this (case-insensitive) mark bad spans (EDF+/MNE
#: common practice: "BAD_", "bad ...").
BAD_PREFIX = "bad"
REASONS = ("annotated-bad", "flat", "amplitude", "blink", "muscle", "fragments")


@dataclass(frozen=True)
class CleanData:
    """Clean epochs ready for spectra.

    Attributes
    ----------
    epochs : ndarray, shape (n_epochs, 19, n_times)
        Filtered signals, µV, float64, reference as recorded.
    sfreq : float
    ch_names : tuple of str
        :data:`sourcelab.config.SITES_1020`.
    epoch_onsets_s : ndarray, shape (n_epochs,)
        Onset of each kept epoch from the start of the recording, s.
    kept_s : float
    rejected_s : dict
        Seconds lost per reason: ``annotated-bad``, ``flat``, ``amplitude``, ``blink``, ``muscle``
        (an epoch failing several checks counts once, in that order) and ``fragments`` (selected
        pieces shorter than one epoch).
    channel_kept_fraction : dict
        Site -> fraction of candidate epochs in which that site passed its own checks.
    mains_hz : float | None
        Notched mains frequency (given or detected), None when none was found.
    thresholds : dict
        Effective values of every threshold and filter edge.
    warnings : tuple of str
    """

    epochs: np.ndarray
    sfreq: float
    ch_names: tuple[str, ...]
    epoch_onsets_s: np.ndarray
    kept_s: float
    rejected_s: dict
    channel_kept_fraction: dict
    mains_hz: float | None
    thresholds: dict
    warnings: tuple[str, ...]


def detect_mains(data_uv: np.ndarray, sfreq: float, *, min_ratio: float = 3.0) -> float | None:
    """Mains frequency (50 or 60 Hz) from the spectrum, or None.

    Parameters
    ----------
    data_uv : ndarray, shape (n_channels, n_times)
    sfreq : float
    min_ratio : float
        The peak (max PSD within ±0.5 Hz) must exceed the median PSD 2-5 Hz either side by this
        factor, in the median channel.

    Returns
    -------
    float | None
    """
    nper = int(min(data_uv.shape[1], round(2 * sfreq)))
    f, p = welch(data_uv, fs=sfreq, nperseg=nper, axis=1)
    best, best_ratio = None, min_ratio
    for mains in (50.0, 60.0):
        if mains + 5 >= sfreq / 2:
            continue
        peak = p[:, np.abs(f - mains) <= 0.5].max(axis=1)
        ring = (np.abs(f - mains) >= 2) & (np.abs(f - mains) <= 5)
        ratio = float(np.median(peak / np.maximum(np.median(p[:, ring], axis=1), 1e-30)))
        if ratio > best_ratio:
            best, best_ratio = mains, ratio
    return best


def _spans(raw, keep) -> list[tuple[float, float, str]]:
    """Annotation spans (start, stop, description) in s from the first sample.

    A zero-duration annotation (a state marker such as "eyes closed") spans until the next
    annotation onset, or the end of the recording.
    """
    ann = raw.annotations
    end = raw.n_times / raw.info["sfreq"]
    onsets = np.asarray(ann.onset, float) - raw.first_time
    order = np.argsort(onsets, kind="stable")
    out = []
    for k, i in enumerate(order):
        start, dur, desc = onsets[i], float(ann.duration[i]), str(ann.description[i])
        if not keep(desc):
            continue
        if dur > 0:
            stop = start + dur
        else:
            later = onsets[order[k + 1:]]
            later = later[later > start]
            stop = float(later.min()) if later.size else end
        out.append((max(start, 0.0), min(stop, end), desc))
    return out


def selection_mask(raw, select, *, where=None) -> np.ndarray:
    """Boolean mask of samples chosen by annotation descriptions and/or time ranges.

    Parameters
    ----------
    raw : mne.io.BaseRaw
    select : None | str | (float, float) | sequence of str and (float, float)
        Descriptions match case-insensitively and exactly; ranges are [t0, t1) seconds from the
        first sample.  The union is taken.  None selects everything.

    Returns
    -------
    ndarray of bool, shape (n_times,)
    """
    n, sf = raw.n_times, raw.info["sfreq"]
    if select is None:
        return np.ones(n, bool)
    items = [select] if isinstance(select, str) or (
        isinstance(select, tuple) and len(select) == 2
        and all(isinstance(v, (int, float)) for v in select)) else list(select)
    t = np.arange(n) / sf
    mask = np.zeros(n, bool)
    for item in items:
        if isinstance(item, str):
            want = item.strip().lower()
            spans = _spans(raw, lambda d: d.strip().lower() == want)
            if not spans:
                present = sorted({str(d) for d in raw.annotations.description})[:20]
                raise InputError(f"select: no annotation {item!r}; descriptions present: "
                                 f"{present}", path=where)
        else:
            try:
                t0, t1 = (float(v) for v in item)
            except (TypeError, ValueError):
                raise InputError(f"select: {item!r} is neither an annotation description nor a "
                                 "(start, stop) pair in seconds", path=where) from None
            if not t1 > t0:
                raise InputError(f"select: empty time range {item!r}", path=where)
            spans = [(t0, t1, "range")]
        for a, b, _ in spans:
            mask |= (t >= a) & (t < b)
    if not mask.any():
        raise InputError(f"select: {select!r} selects no data", path=where)
    return mask


def bad_mask(raw) -> np.ndarray:
    """Samples inside annotations whose description starts with "bad" (any case)."""
    n, sf = raw.n_times, raw.info["sfreq"]
    t = np.arange(n) / sf
    mask = np.zeros(n, bool)
    for a, b, _ in _spans(raw, lambda d: d.strip().lower().startswith(BAD_PREFIX)):
        mask |= (t >= a) & (t < b)
    return mask


def epoch_starts(allowed: np.ndarray, n_per: int) -> tuple[np.ndarray, int]:
    """Non-overlapping epoch start samples inside each run of allowed samples.

    Returns
    -------
    starts : ndarray of int
    leftover : int
        Allowed samples not covered by an epoch.
    """
    edges = np.flatnonzero(np.diff(np.r_[0, allowed.astype(np.int8), 0]))
    starts = [np.arange(a, b - n_per + 1, n_per) for a, b in zip(edges[::2], edges[1::2])]
    starts = np.concatenate(starts) if starts else np.zeros(0, int)
    return starts.astype(int), int(allowed.sum()) - len(starts) * n_per


def _windows(x: np.ndarray, starts: np.ndarray, n_per: int) -> np.ndarray:
    idx = starts[:, None] + np.arange(n_per)[None, :]
    return np.ascontiguousarray(x[:, idx].transpose(1, 0, 2))


def clean_recording(recording: Recording, config: AnalysisConfig, *, select=None,
                    muscle_uv: float = MUSCLE_UV, muscle_band=MUSCLE_BAND_HZ,
                    blink_uv: float = BLINK_UV) -> CleanData:
    """Filter, select, epoch and reject artefacts.

    Parameters
    ----------
    recording : Recording
        From :func:`read_recording`.
    config : AnalysisConfig
        Uses ``l_freq``, ``h_freq``, ``notch``, ``epoch_s``, ``reject_uv``, ``flat_uv``,
        ``min_clean_s``, ``warn_clean_s``.
    select : None | str | (float, float) | sequence of those
        Segments to analyse (see :func:`selection_mask`).
    muscle_uv : float
        RMS threshold in ``muscle_band`` (Hz), µV; ``inf`` disables.
    blink_uv : float
        Fp1/Fp2 low-frequency (< 3 Hz) deflection threshold, µV; the deflection must also be at
        least twice the O1/O2 one.  ``inf`` disables.

    Returns
    -------
    CleanData

    Raises
    ------
    InputError
        Nothing selected, or less clean data than ``config.min_clean_s``.
    """
    raw = recording.raw
    where = recording.path or "recording"
    sf = float(raw.info["sfreq"])
    nyq = sf / 2
    notes: list[str] = []
    data = raw.get_data() * 1e6
    unfiltered = data  # flatness is judged before filtering (filters smear neighbours in)
    mains = config.notch if config.notch is not None else detect_mains(data, sf)
    if mains is not None and mains < nyq - 1:
        freqs = np.arange(mains, nyq - 1, mains)
        data = mne.filter.notch_filter(data, sf, freqs, verbose="error")
    h_freq = config.h_freq if config.h_freq is not None and config.h_freq < nyq * 0.9 else None
    if config.h_freq is not None and h_freq is None:
        notes.append(f"h_freq {config.h_freq} Hz not below 0.9 x Nyquist ({nyq} Hz); no low-pass")
    data = mne.filter.filter_data(data, sf, config.l_freq, h_freq, verbose="error")

    n_per = int(round(config.epoch_s * sf))
    chosen = selection_mask(raw, select, where=where)
    bad = bad_mask(raw) & chosen
    allowed = chosen & ~bad
    starts, leftover = epoch_starts(allowed, n_per)
    ep = _windows(data, starts, n_per)

    # --- per-epoch, per-site checks ----------------------------------------------------------
    ptp = np.ptp(ep, axis=-1)
    flat = np.ptp(_windows(unfiltered, starts, n_per), axis=-1) < config.flat_uv
    amp = ptp > config.reject_uv
    hi = min(muscle_band[1], (h_freq or nyq * 0.9))
    if np.isfinite(muscle_uv) and muscle_band[0] < hi:
        hf = mne.filter.filter_data(data, sf, muscle_band[0], hi, verbose="error")
        hf_rms = np.sqrt(np.mean(_windows(hf, starts, n_per) ** 2, axis=-1))
    else:
        hf_rms = np.zeros_like(ptp)
    muscle = hf_rms > muscle_uv
    fp = [SITES_1020.index("Fp1"), SITES_1020.index("Fp2")]
    if np.isfinite(blink_uv):
        occ = [SITES_1020.index("O1"), SITES_1020.index("O2")]
        pair = np.stack([data[fp].mean(0), data[occ].mean(0)])
        lf = mne.filter.filter_data(pair, sf, None, BLINK_LOWPASS_HZ, verbose="error")
        w = _windows(lf, starts, n_per)
        dev = np.abs(w - np.median(w, axis=-1, keepdims=True)).max(-1)
        # frontal deflection, at least BLINK_GRADIENT times the occipital one (blinks fall off
        # steeply from front to back; generalised slow waves do not)
        blink = (dev[:, 0] > blink_uv) & (dev[:, 0] > BLINK_GRADIENT * dev[:, 1])
    else:
        blink = np.zeros(len(starts), bool)

    epoch_s = n_per / sf
    reasons = {"flat": flat.any(1), "amplitude": amp.any(1), "blink": blink,
               "muscle": muscle.any(1)}
    taken = np.zeros(len(starts), bool)
    rejected = {"annotated-bad": float(bad.sum() / sf)}
    for name in ("flat", "amplitude", "blink", "muscle"):
        hit = reasons[name] & ~taken
        rejected[name] = float(hit.sum() * epoch_s)
        taken |= hit
    rejected["fragments"] = float(leftover / sf)
    keep = ~taken
    site_fail = flat | amp | muscle
    site_fail[:, fp] |= blink[:, None]
    n_cand = max(len(starts), 1)
    kept_fraction = {s: float(1 - site_fail[:, i].sum() / n_cand) if len(starts) else 0.0
                     for i, s in enumerate(SITES_1020)}
    kept_s = float(keep.sum() * epoch_s)
    thresholds = {"reject_uv": config.reject_uv, "flat_uv": config.flat_uv,
                  "muscle_uv": float(muscle_uv), "muscle_band_hz": (muscle_band[0], hi),
                  "blink_uv": float(blink_uv), "blink_lowpass_hz": BLINK_LOWPASS_HZ,
                  "blink_front_back_ratio": BLINK_GRADIENT,
                  "l_freq": config.l_freq, "h_freq": h_freq, "notch": mains,
                  "epoch_s": epoch_s, "min_clean_s": config.min_clean_s,
                  "warn_clean_s": config.warn_clean_s}
    summary = ", ".join(f"{k} {v:.0f} s" for k, v in rejected.items() if v)
    if kept_s < config.min_clean_s:
        raise InputError(f"only {kept_s:.0f} s of clean data, at least {config.min_clean_s:g} s "
                         f"needed (rejected: {summary or 'nothing'})", path=where)
    if kept_s < config.warn_clean_s:
        notes.append(f"only {kept_s:.0f} s of clean data (below {config.warn_clean_s:g} s); "
                     "spectra will be noisier")
    for msg in notes:
        logger.warning("%s: %s", where, msg)
    logger.info("%s: kept %.0f s in %d epochs; rejected %s", where, kept_s, keep.sum(), summary)
    return CleanData(
        epochs=ep[keep].astype(np.float64), sfreq=sf, ch_names=tuple(SITES_1020),
        epoch_onsets_s=starts[keep] / sf, kept_s=kept_s, rejected_s=rejected,
        channel_kept_fraction=kept_fraction, mains_hz=mains, thresholds=thresholds,
        warnings=tuple(recording.warnings) + tuple(notes))
