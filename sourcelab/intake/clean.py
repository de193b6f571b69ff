"""Cleaning: mains notch, band-pass, segment selection, ocular correction, epoching, rejection."""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass, field

import numpy as np

from ..config import AnalysisConfig
from ..constants import SITES_1020
from ..errors import InputError
from . import fir
from .power import long_welch
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
#: Epochs beyond this multiple of the peak-to-peak ceiling (movement, electrode pops) are kept
#: out of the ocular decomposition, which would otherwise spend components on them (Jas et al.
#: 2017 advise rejecting such epochs before ICA); blinks (100s of µV) stay in.
GROSS_FACTOR = 2.0
REASONS = ("annotated-bad", "procedure", "flat", "amplitude", "blink", "muscle", "fragments")


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
        Seconds of the selection removed per reason: ``annotated-bad``, ``procedure``
        (hyperventilation, photic stimulation ... spans), ``flat``, ``amplitude``, ``blink``,
        ``muscle`` (an epoch failing several checks counts once, in that order) and
        ``fragments`` (selected pieces shorter than one epoch).
    channel_kept_fraction : dict
        Site -> fraction of candidate epochs in which that site passed its own checks.
    mains_hz : float | None
        Notched mains frequency (given or detected), None when none was found.
    thresholds : dict
        Effective values of every threshold and filter edge.
    warnings : tuple of str
    excluded : tuple of dict
        Procedure spans that overlapped the selection: ``kind``, ``label``, ``start_s``,
        ``stop_s``, ``overlap_s``.
    ocular : dict
        Ocular correction (:meth:`sourcelab.intake.ocular.OcularCorrection.summary`: method,
        removed components and their scalp maps) and ``residual_delta`` (the delta-topography
        check).
    timings_s : dict
        Wall time of each cleaning stage, s.
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
    excluded: tuple[dict, ...] = ()
    ocular: dict = field(default_factory=dict)
    timings_s: dict = field(default_factory=dict)


def detect_mains(
    data_uv: np.ndarray, sfreq: float, *, min_ratio: float = 3.0, psd=None
) -> float | None:
    """Mains frequency (50 or 60 Hz) from the spectrum, or None.

    Parameters
    ----------
    data_uv : ndarray, shape (n_channels, n_times)
    sfreq : float
    min_ratio : float
        The peak (max PSD within ±0.5 Hz) must exceed the median PSD 2-5 Hz either side by this
        factor, in the median channel.
    psd : (ndarray, ndarray), optional
        ``(freqs, psd)`` of ``data_uv`` from :func:`sourcelab.intake.power.long_welch`, if
        already computed (it is then not recomputed).

    Returns
    -------
    float | None
    """
    f, p = long_welch(data_uv, sfreq) if psd is None else psd
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


def _annotations(raw) -> list[tuple[float, float, str]]:
    """(onset s from the first sample, duration s, description) of every annotation."""
    ann = raw.annotations
    onsets = np.asarray(ann.onset, float) - raw.first_time
    return [(float(o), float(d), str(t)) for o, d, t in zip(onsets, ann.duration, ann.description)]


def _spans(raw, keep) -> list[tuple[float, float, str]]:
    """Annotation spans (start, stop, description) in s from the first sample.

    A zero-duration annotation spans until the next annotation onset, or the end of the
    recording (used for "bad" markers; states end at the next state marker instead, see
    :func:`sourcelab.intake.states.state_spans`).
    """
    end = raw.n_times / raw.info["sfreq"]
    ann = sorted(_annotations(raw), key=lambda a: a[0])
    onsets = np.array([a[0] for a in ann])
    out = []
    for k, (start, dur, desc) in enumerate(ann):
        if not keep(desc):
            continue
        if dur > 0:
            stop = start + dur
        else:
            later = onsets[k + 1 :]
            later = later[later > start]
            stop = float(later.min()) if later.size else end
        out.append((max(start, 0.0), min(stop, end), desc))
    return out


def _to_mask(spans, n: int, sf: float) -> np.ndarray:
    t = np.arange(n) / sf
    mask = np.zeros(n, bool)
    for s in spans:
        a, b = (s.start, s.stop) if hasattr(s, "start") else (s[0], s[1])
        mask |= (t >= a) & (t < b)
    return mask


def procedure_mask(raw) -> tuple[np.ndarray, list]:
    """Samples inside hyperventilation, post-HV, photic stimulation and seizure spans.

    Parameters
    ----------
    raw : mne.io.BaseRaw
        The recording, with its annotations (onsets taken from the first sample).

    Returns
    -------
    mask : ndarray of bool, shape (n_times,)
        True inside a procedure span.
    spans : list of :class:`sourcelab.intake.states.Span`
        The spans, start/stop in s from the first sample.
    """
    from .states import procedure_spans

    sf = raw.info["sfreq"]
    spans = procedure_spans(_annotations(raw), raw.n_times / sf)
    return _to_mask(spans, raw.n_times, sf), spans


def selection_mask(raw, select, *, where=None) -> np.ndarray:
    """Boolean mask of samples chosen by annotation descriptions and/or time ranges.

    Parameters
    ----------
    raw : mne.io.BaseRaw
    select : None | str | (float, float) | sequence of str and (float, float)
        Descriptions match case-insensitively and exactly; "EC"/"EO" and other spellings of
        eyes closed/open match every marker of that state.  A state marker selects until the
        next state-changing marker (:func:`sourcelab.intake.states.state_spans`).  Ranges are
        [t0, t1) seconds from the first sample.  The union is taken.  None selects everything.
        Procedure spans are removed afterwards, by :func:`clean_recording`.
    where : str | Path, optional
        File named in error messages.

    Returns
    -------
    ndarray of bool, shape (n_times,)
        True for selected samples.

    Raises
    ------
    InputError
        An unknown description, a malformed or empty range, or a selection with no data.
    """
    from .states import Span, canonical_state, state_spans

    n, sf = raw.n_times, raw.info["sfreq"]
    if select is None:
        return np.ones(n, bool)
    items = (
        [select]
        if isinstance(select, str)
        or (
            isinstance(select, tuple)
            and len(select) == 2
            and all(isinstance(v, (int, float)) for v in select)
        )
        else list(select)
    )
    ann = _annotations(raw)
    spans: list = []
    for item in items:
        if isinstance(item, str):
            got = state_spans(ann, item, n / sf)
            if not got:
                present = sorted({str(d) for d in raw.annotations.description})[:20]
                alias = canonical_state(item)
                hint = f" (read as {alias!r})" if alias and alias != item.strip().lower() else ""
                raise InputError(
                    f"select: no annotation {item!r}{hint}; descriptions present: {present}",
                    path=where,
                )
            spans += got
        else:
            try:
                t0, t1 = (float(v) for v in item)
            except (TypeError, ValueError):
                raise InputError(
                    f"select: {item!r} is neither an annotation description nor a "
                    "(start, stop) pair in seconds",
                    path=where,
                ) from None
            if not t1 > t0:
                raise InputError(f"select: empty time range {item!r}", path=where)
            spans.append(Span(t0, t1, "range", "range"))
    mask = _to_mask(spans, n, sf)
    if not mask.any():
        raise InputError(f"select: {select!r} selects no data", path=where)
    return mask


def excluded_procedures(chosen: np.ndarray, spans, sf: float) -> list[dict]:
    """Procedure spans overlapping the chosen samples, with the seconds they removed.

    Parameters
    ----------
    chosen : ndarray of bool, shape (n_times,)
        Samples selected before procedure spans are removed.
    spans : sequence of :class:`sourcelab.intake.states.Span`
        Procedure spans (see :func:`procedure_mask`), s from the first sample.
    sf : float
        Sampling rate, Hz.

    Returns
    -------
    list of dict
        Per overlapping span: ``kind``, ``label``, ``start_s``, ``stop_s`` and ``overlap_s``
        (chosen seconds inside the span), rounded to ms.
    """
    out = []
    t = np.arange(len(chosen)) / sf
    for s in spans:
        inside = chosen & (t >= s.start) & (t < s.stop)
        if inside.any():
            out.append(
                {
                    "kind": s.kind,
                    "label": s.label,
                    "start_s": round(s.start, 3),
                    "stop_s": round(s.stop, 3),
                    "overlap_s": round(inside.sum() / sf, 3),
                }
            )
    return out


def bad_mask(raw) -> np.ndarray:
    """Samples inside annotations whose description starts with "bad" (any case).

    Parameters
    ----------
    raw : mne.io.BaseRaw
        The recording with its annotations.

    Returns
    -------
    ndarray of bool, shape (n_times,)
        True inside a ``bad`` annotation.
    """
    n, sf = raw.n_times, raw.info["sfreq"]
    t = np.arange(n) / sf
    mask = np.zeros(n, bool)
    for a, b, _ in _spans(raw, lambda d: d.strip().lower().startswith(BAD_PREFIX)):
        mask |= (t >= a) & (t < b)
    return mask


def epoch_starts(allowed: np.ndarray, n_per: int) -> tuple[np.ndarray, int]:
    """Non-overlapping epoch start samples inside each run of allowed samples.

    Parameters
    ----------
    allowed : ndarray of bool, shape (n_times,)
        Samples an epoch may cover.
    n_per : int
        Epoch length, samples.

    Returns
    -------
    starts : ndarray of int, shape (n_epochs,)
        First sample of each epoch, increasing; each run starts an epoch at its first sample.
    leftover : int
        Allowed samples not covered by an epoch.
    """
    edges = np.flatnonzero(np.diff(np.r_[0, allowed.astype(np.int8), 0]))
    starts = [np.arange(a, b - n_per + 1, n_per) for a, b in zip(edges[::2], edges[1::2])]
    starts = np.concatenate(starts) if starts else np.zeros(0, int)
    return starts.astype(int), int(allowed.sum()) - len(starts) * n_per


def _windows(x: np.ndarray, starts: np.ndarray, n_per: int) -> np.ndarray:
    """Epochs ``x[:, st:st + n_per]`` stacked, shape (n_epochs, n_channels, n_per) (one copy)."""
    out = np.empty((len(starts), x.shape[0], n_per), dtype=x.dtype)
    for i, st in enumerate(starts):
        out[i] = x[:, st : st + n_per]
    return out


def _epochs_in_place(x: np.ndarray, starts: np.ndarray, n_per: int) -> np.ndarray:
    """The epochs of :func:`_windows`, built inside ``x``'s own buffer (``x`` is overwritten).

    The same values in the same (n_epochs, n_channels, n_per) C-ordered layout, without a
    second copy of the recording: each row's epochs are packed to the front of the buffer
    (every block moves towards the start, never over data still to be moved), then the
    (n_channels, n_epochs) grid of n_per-sample blocks is transposed in place by following the
    permutation's cycles.  ``x`` must be C-contiguous and writeable (its own array).

    Returns
    -------
    ndarray, shape (n_epochs, n_channels, n_per)
        A view of the front of ``x``'s buffer.
    """
    n_ch, n_t = x.shape
    k = len(starts)
    flat = x.reshape(-1)  # a view: x is C-contiguous
    if k == 0:
        return flat[:0].reshape(0, n_ch, n_per)
    take = np.asarray(starts)[:, None] + np.arange(n_per)
    for c in range(n_ch):  # row c's epochs (a one-row copy) to [c k n_per, (c + 1) k n_per)
        flat[c * k * n_per : (c + 1) * k * n_per] = x[c][take].reshape(-1)
    blocks = flat[: n_ch * k * n_per].reshape(n_ch * k, n_per)
    # block p = c k + e goes to e n_ch + c; positions 0 and n_ch k - 1 stay
    size = n_ch * k
    done = np.zeros(size, bool)
    tmp = np.empty(n_per, x.dtype)
    for p0 in range(1, size - 1):
        if done[p0]:
            continue
        tmp[:] = blocks[p0]
        p = p0
        while True:  # pull into p the block that belongs there
            src = (p % n_ch) * k + p // n_ch
            done[p] = True
            if src == p0:
                blocks[p] = tmp
                break
            blocks[p] = blocks[src]
            p = src
    return blocks.reshape(k, n_ch, n_per)


#: Epochs reduced at once by :func:`_window_reduce` (bounds the working memory of the features).
_REDUCE_BLOCK = 256


def _window_reduce(x: np.ndarray, starts: np.ndarray, n_per: int, fn) -> np.ndarray:
    """``fn(_windows(x, starts, n_per))`` a block of epochs at a time (``fn`` reduces the last
    axis), without holding every epoch's copy at once."""
    if not len(starts):
        return fn(_windows(x, starts, n_per))
    return np.concatenate(
        [
            fn(_windows(x, starts[s : s + _REDUCE_BLOCK], n_per))
            for s in range(0, len(starts), _REDUCE_BLOCK)
        ]
    )


#: Samples (sites x times) of the muscle band filtered at once: a 10-minute recording at 256 Hz
#: in one pass (one filter design), longer ones a few sites at a time (memory).
_HF_BLOCK_SAMPLES = 4 << 20


def _ptp(w: np.ndarray) -> np.ndarray:
    return np.ptp(w, axis=-1)


def _rms(w: np.ndarray) -> np.ndarray:
    return np.sqrt(np.mean(w**2, axis=-1))


def _delta_edges(config: AnalysisConfig) -> tuple[float, float]:
    names = list(config.bands.names)
    return tuple(config.bands.edges[names.index("delta")]) if "delta" in names else (1.0, 4.0)


def band_csd(epochs: np.ndarray, sfreq: float, band: tuple[float, float]) -> np.ndarray:
    """Mean real cross-spectrum of epochs summed over ``band`` (Hann window), µV².

    Parameters
    ----------
    epochs : ndarray, shape (n_epochs, n_channels, n_times)
        Epochs, µV.
    sfreq : float
        Sampling rate, Hz.
    band : (float, float)
        Band edges, Hz; frequency bins with ``lo <= f < hi`` are summed.

    Returns
    -------
    ndarray, shape (n_channels, n_channels)
        Real part of the Hann-windowed, unnormalised ``rfft`` cross-products summed over the band
        and averaged over epochs (zeros when there are no epochs).
    """
    n = epochs.shape[-1]
    f = np.fft.rfftfreq(n, 1 / sfreq)
    sel = (f >= band[0]) & (f < band[1])
    win = np.hanning(n)
    out = np.zeros((epochs.shape[1], epochs.shape[1]))
    for s in range(0, len(epochs), _REDUCE_BLOCK):  # a block of epochs at a time (memory)
        x = np.fft.rfft(epochs[s : s + _REDUCE_BLOCK] * win, axis=-1)[..., sel]
        out += np.real(np.einsum("eck,edk->cd", x, x.conj()))
    return out / max(len(epochs), 1)


#: Nasion of MNE's fsaverage_1020 montage in head coordinates, metres (the template positions
#: every recording gets).
DEFAULT_NASION = np.array([0.0, 0.1148, 0.0])


def _nasion(raw) -> np.ndarray:
    for d in raw.info["dig"] or []:
        if d["kind"] == 1 and d["ident"] == 2:  # FIFFV_POINT_CARDINAL, FIFFV_POINT_NASION
            return np.asarray(d["r"], float)
    return DEFAULT_NASION


def clean_recording(
    recording: Recording,
    config: AnalysisConfig,
    *,
    select=None,
    age: float | None = None,
    muscle_uv: float | None = None,
    muscle_band=MUSCLE_BAND_HZ,
    blink_uv: float | None = None,
    overwrite: bool = False,
) -> CleanData:
    """Filter, select, correct eye artefacts, epoch and reject artefacts.

    Parameters
    ----------
    recording : Recording
        From :func:`read_recording`.
    config : AnalysisConfig
        Uses ``l_freq``, ``h_freq``, ``notch``, ``epoch_s``, ``rejection``, ``reject_z``,
        ``reject_uv``, ``muscle_uv``, ``blink_uv``, ``flat_uv``, ``ocular_correction``,
        ``exclude_procedures``, ``min_clean_s``, ``warn_clean_s``.
    select : None | str | (float, float) | sequence of those
        Segments to analyse (see :func:`selection_mask`).
    age : float, optional
        Years; sets the plausibility bounds of learned thresholds
        (:func:`sourcelab.intake.artefacts.plausibility_bounds`).
    muscle_uv : float, optional
        Overrides ``config.muscle_uv`` (``rejection = "fixed"``); ``inf`` disables muscle checks.
    muscle_band : (float, float)
        Band-pass of the muscle check, Hz (default 25-45 Hz); the upper edge is lowered to the
        low-pass edge (or 0.9 × Nyquist) when that is lower.
    blink_uv : float, optional
        Overrides ``config.blink_uv``: Fp1/Fp2 low-frequency (< 3 Hz) deflection threshold, µV;
        the deflection must also be at least twice the O1/O2 one.  Applied only when ocular
        correction removed nothing; ``inf`` disables.
    overwrite : bool
        Work inside ``recording.raw``'s own data buffer instead of a copy, and build the
        epochs inside it (memory: one copy of the recording instead of three).  The raw is left
        holding meaningless data: for callers that discard the recording afterwards (as
        :func:`sourcelab.analysis.analyze` does with a recording it read itself).  Without a
        preloaded float64 buffer a copy is made as usual.  The results are the same.

    Returns
    -------
    CleanData

    Raises
    ------
    InputError
        Nothing selected, or less clean data than ``config.min_clean_s``.

    Notes
    -----
    Order: notch and band-pass; procedure spans (hyperventilation, photic stimulation ...) and
    "bad" annotations removed; ocular correction learned from all usable data of the recording
    (:func:`sourcelab.intake.ocular.correct_ocular`); rejection thresholds learned from all
    usable epochs of the recording (:func:`sourcelab.intake.artefacts.learn_thresholds`) or
    fixed; the selected epochs are checked; the delta-band topography of the kept epochs is
    compared with the ocular pattern (:func:`sourcelab.intake.ocular.ocular_residual`).
    """
    from .artefacts import fixed_thresholds, learn_thresholds, plausibility_bounds
    from .ocular import correct_ocular, ocular_residual, ocular_templates

    clock = time.perf_counter()
    timings: dict[str, float] = {}

    def lap(name):
        nonlocal clock
        now = time.perf_counter()
        timings[name] = round(now - clock, 4)
        clock = now

    muscle_uv = config.muscle_uv if muscle_uv is None else float(muscle_uv)
    blink_uv = config.blink_uv if blink_uv is None else float(blink_uv)
    raw = recording.raw
    where = recording.path or "recording"
    sf = float(raw.info["sfreq"])
    nyq = sf / 2
    notes: list[str] = []
    buf = getattr(raw, "_data", None) if overwrite else None
    if _own_buffer(buf, (len(raw.ch_names), raw.n_times)):
        data = buf  # the recording's own buffer (the caller gave it up)
    else:
        data = raw.get_data()  # this function's own array (scaled and filtered in place below)
    work = data  # the buffer that filtering and ocular correction work inside
    del buf
    data *= 1e6  # µV
    mains = (
        config.notch
        if config.notch is not None
        else detect_mains(data, sf, psd=recording.mains_psd)
    )
    h_freq = config.h_freq if config.h_freq is not None and config.h_freq < nyq * 0.9 else None
    if config.h_freq is not None and h_freq is None:
        notes.append(f"h_freq {config.h_freq} Hz not below 0.9 x Nyquist ({nyq} Hz); no low-pass")

    def band_pass(x):
        """Notch and band-pass, in place (``x`` is this function's own array)."""
        if mains is not None and mains < nyq - 1:
            x = fir.notch_filter(x, sf, np.arange(mains, nyq - 1, mains))
        return fir.filter_data(x, sf, config.l_freq, h_freq)

    n_per = int(round(config.epoch_s * sf))
    bad = bad_mask(raw)
    if config.exclude_procedures:
        proc, proc_spans = procedure_mask(raw)
    else:
        proc, proc_spans = np.zeros(raw.n_times, bool), []
    chosen = selection_mask(raw, select, where=where)
    excluded = excluded_procedures(chosen & ~bad, proc_spans, sf)
    usable = ~bad & ~proc
    allowed = chosen & usable
    starts, leftover = epoch_starts(allowed, n_per)
    # flatness is judged before filtering (filters smear neighbours in)
    flat = _window_reduce(data, starts, n_per, _ptp) < config.flat_uv
    lap("select")

    data = band_pass(data)
    lap("filter")

    # --- ocular correction, learned from all usable data -------------------------------------
    bounds = plausibility_bounds(age)
    all_starts, _ = epoch_starts(usable, n_per)
    if len(all_starts):
        gross = (
            _window_reduce(data, all_starts, n_per, _ptp) > bounds["ptp_uv"][1] * GROSS_FACTOR
        ).any(1)
        fit_mask = usable.copy()
        for st in all_starts[gross]:
            fit_mask[st : st + n_per] = False
    else:
        fit_mask = usable
    eog = None
    if recording.eog_uv is not None and len(recording.eog_uv):
        eog = band_pass(np.nan_to_num(np.asarray(recording.eog_uv, float)))
    ocular = correct_ocular(
        data,
        sf,
        SITES_1020,
        _positions(raw),
        _nasion(raw),
        fit_mask=fit_mask,
        eog_uv=eog,
        method=config.ocular_correction,
        highpass_hz=config.l_freq,
        overwrite=True,  # data is this function's own array (memory)
    )
    data = ocular.data
    notes.extend(ocular.notes)
    corrected = ocular.method in ("ica", "regression")
    lap("ocular")

    # --- features: selected epochs, and all usable epochs for learning ------------------------
    # the selected epochs are copied out only once they are known (memory)
    ptp = _window_reduce(data, starts, n_per, _ptp)
    hi = min(muscle_band[1], (h_freq or nyq * 0.9))
    muscle_on = np.isfinite(muscle_uv) and muscle_band[0] < hi
    learn = config.rejection == "auto"
    # without a selection the selected epochs are all usable epochs: their features once
    same = learn and np.array_equal(starts, all_starts)
    hf_sel = np.zeros((len(starts), len(SITES_1020)))
    hf_all = hf_sel if same else np.zeros((len(all_starts), len(SITES_1020))) if learn else None
    if muscle_on:
        # the muscle band a few sites at a time (each row is filtered on its own: the same
        # numbers, without a band-passed copy of the whole recording)
        rows = max(1, _HF_BLOCK_SAMPLES // data.shape[1])
        for c in range(0, data.shape[0], rows):
            hf = fir.filter_data(data[c : c + rows].copy(), sf, muscle_band[0], hi)
            hf_sel[:, c : c + rows] = _window_reduce(hf, starts, n_per, _rms)
            if learn and not same:
                hf_all[:, c : c + rows] = _window_reduce(hf, all_starts, n_per, _rms)
        del hf
    if learn:
        ptp_all = ptp if same else _window_reduce(data, all_starts, n_per, _ptp)
        thr = learn_thresholds(ptp_all, hf_all, age=age, z=config.reject_z)
        if thr.n_epochs < 20:
            notes.append(
                f"only {thr.n_epochs} usable epochs to learn rejection thresholds "
                "from; the plausibility floors are used"
            )
    else:
        thr = fixed_thresholds(len(SITES_1020), reject_uv=config.reject_uv, muscle_uv=muscle_uv)
    lap("features and thresholds")

    # --- per-epoch, per-site checks ----------------------------------------------------------
    amp = ptp > thr.ptp_uv[None, :]
    muscle = (hf_sel > thr.muscle_uv[None, :]) if muscle_on else np.zeros_like(amp)
    fp = [SITES_1020.index("Fp1"), SITES_1020.index("Fp2")]
    if np.isfinite(blink_uv) and not corrected and len(starts):
        occ = [SITES_1020.index("O1"), SITES_1020.index("O2")]
        pair = np.stack([data[fp].mean(0), data[occ].mean(0)])
        lf = fir.filter_data(pair, sf, None, BLINK_LOWPASS_HZ)
        w = _windows(lf, starts, n_per)
        dev = np.abs(w - np.median(w, axis=-1, keepdims=True)).max(-1)
        # frontal deflection, at least BLINK_GRADIENT times the occipital one (blinks fall off
        # steeply from front to back; generalised slow waves do not)
        blink = (dev[:, 0] > blink_uv) & (dev[:, 0] > BLINK_GRADIENT * dev[:, 1])
    else:
        blink = np.zeros(len(starts), bool)

    epoch_s = n_per / sf
    reasons = {
        "flat": flat.any(1),
        "amplitude": amp.any(1),
        "blink": blink,
        "muscle": muscle.any(1),
    }
    taken = np.zeros(len(starts), bool)
    rejected = {
        "annotated-bad": float((bad & chosen).sum() / sf),
        "procedure": float((proc & chosen & ~bad).sum() / sf),
    }
    for name in ("flat", "amplitude", "blink", "muscle"):
        hit = reasons[name] & ~taken
        rejected[name] = float(hit.sum() * epoch_s)
        taken |= hit
    rejected["fragments"] = float(leftover / sf)
    keep = ~taken
    site_fail = flat | amp | muscle
    site_fail[:, fp] |= blink[:, None]
    n_cand = max(len(starts), 1)
    kept_fraction = {
        s: float(1 - site_fail[:, i].sum() / n_cand) if len(starts) else 0.0
        for i, s in enumerate(SITES_1020)
    }
    kept_s = float(keep.sum() * epoch_s)
    thresholds = {
        "rejection": config.rejection,
        "reject_z": config.reject_z,
        "reject_uv": config.reject_uv,
        "flat_uv": config.flat_uv,
        "muscle_uv": float(muscle_uv),
        "muscle_band_hz": (muscle_band[0], hi),
        "blink_uv": float(blink_uv) if not corrected else None,
        "blink_lowpass_hz": BLINK_LOWPASS_HZ,
        "blink_front_back_ratio": BLINK_GRADIENT,
        "l_freq": config.l_freq,
        "h_freq": h_freq,
        "notch": mains,
        "epoch_s": epoch_s,
        "min_clean_s": config.min_clean_s,
        "warn_clean_s": config.warn_clean_s,
        "age": age,
        "per_site": thr.summary(SITES_1020),
    }
    summary = ", ".join(f"{k} {v:.0f} s" for k, v in rejected.items() if v)
    if kept_s < config.min_clean_s:
        raise InputError(
            f"only {kept_s:.0f} s of clean data, at least {config.min_clean_s:g} s "
            f"needed (removed: {summary or 'nothing'})",
            path=where,
        )
    if kept_s < config.warn_clean_s:
        notes.append(
            f"only {kept_s:.0f} s of clean data (below {config.warn_clean_s:g} s); "
            "spectra will be noisier"
        )

    # --- does the slow-wave topography still look ocular? ------------------------------------
    templates = ocular_templates(_positions(raw), _nasion(raw))
    ocular_info, ocular_method = ocular.summary(), ocular.method
    del ocular
    n_kept = int(keep.sum())
    in_place = (
        _own_buffer(work, data.shape)
        and _same_view(data, work)
        and n_kept * n_per >= KEEP_IN_PLACE * data.shape[1]
    )
    if in_place:  # the epochs inside the continuous array's buffer: no second copy
        kept_ep = _epochs_in_place(work, starts[keep], n_per)
    else:  # a copy (most of the recording rejected: what is kept, and the rest is freed)
        kept_ep = _windows(data, starts[keep], n_per)
    del data, work  # the continuous array is no longer needed (memory)
    residual = ocular_residual(band_csd(kept_ep, sf, _delta_edges(config)), templates)
    if residual["ocular"]:
        how = (
            "after ocular correction"
            if corrected
            else "without ocular correction"
            if ocular_method == "off"
            else "although no ocular component was found"
        )
        notes.append(
            f"the dominant delta-band scalp pattern matches an eye-movement pattern "
            f"(r = {residual['r']:.2f}, threshold {residual['threshold']:g}) {how}: "
            "frontal slow activity may be eye artefact rather than a cortical "
            "generator"
        )
    ocular_info["residual_delta"] = residual
    lap("ocular check")
    for msg in notes:
        logger.warning("%s: %s", where, msg)
    logger.info("%s: kept %.0f s in %d epochs; removed %s", where, kept_s, keep.sum(), summary)
    return CleanData(
        epochs=kept_ep,
        sfreq=sf,
        ch_names=tuple(SITES_1020),
        epoch_onsets_s=starts[keep] / sf,
        kept_s=kept_s,
        rejected_s=rejected,
        channel_kept_fraction=kept_fraction,
        mains_hz=mains,
        thresholds=thresholds,
        warnings=tuple(recording.warnings) + tuple(notes),
        excluded=tuple(excluded),
        ocular=ocular_info,
        timings_s=timings,
    )


#: Kept fraction of the samples from which the epochs are built inside the filtered
#: recording's buffer (which then stays allocated) rather than copied out of it.
KEEP_IN_PLACE = 0.75


def _own_buffer(x, shape) -> bool:
    """Whether ``x`` is a writeable, C-contiguous float64 array of ``shape`` owning its data."""
    return (
        isinstance(x, np.ndarray)
        and x.shape == tuple(shape)
        and x.dtype == np.float64
        and x.flags.c_contiguous
        and x.flags.writeable
        and x.base is None
    )


def _same_view(a: np.ndarray, b: np.ndarray) -> bool:
    """Whether ``a`` and ``b`` are the same array (the same memory, shape and strides)."""
    return (
        a.__array_interface__["data"][0] == b.__array_interface__["data"][0]
        and a.shape == b.shape
        and a.strides == b.strides
        and a.dtype == b.dtype
    )


def _positions(raw) -> np.ndarray:
    return np.array([ch["loc"][:3] for ch in raw.info["chs"]], float)
