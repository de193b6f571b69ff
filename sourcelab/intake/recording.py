"""Read a recording into canonical 19-site form: names, order, units, bad sites, interpolation."""

from __future__ import annotations

import logging
import re
from dataclasses import dataclass
from pathlib import Path

import mne
import numpy as np
from scipy.ndimage import uniform_filter1d

from ..constants import SITES_1020
from ..errors import InputError
from .channels import match_channels
from .files import read_file
from .power import long_welch

logger = logging.getLogger("sourcelab")

#: Plausible robust amplitude (µV) of scalp EEG after removing slow drift.  Resting scalp EEG is
#: of the order of 10-100 µV (Niedermeyer's Electroencephalography, 6th ed. 2011 — from memory);
#: the window is wide (0.2-2000 µV) so that only scale errors (V vs µV, factor 1e6; mV, 1e3) fall
#: outside it.
PLAUSIBLE_UV = (0.2, 2000.0)
#: At most this many bad sites are interpolated; more is refused.
MAX_BAD_SITES = 2
#: A site is "flat" below this robust amplitude (µV), or below this fraction of the median site.
FLAT_SITE_UV = 0.1
FLAT_SITE_FRACTION = 0.02
#: A site is "wildly noisy" above this multiple of the median site's robust amplitude.
NOISY_SITE_FACTOR = 5.0
#: A site is "line-noise dominated" (disconnected) when mains-band power exceeds the power in the
#: rest of 1-45 Hz by this factor.
LINE_DOMINATED_RATIO = 1.0


@dataclass(frozen=True)
class Recording:
    """A recording reduced to the 19 canonical 10-20 sites.

    Attributes
    ----------
    raw : mne.io.BaseRaw
        Exactly the 19 sites of :data:`sourcelab.config.SITES_1020`, in that order and with those
        names, data in volts, template positions (MNE ``fsaverage_1020``) set.
    path : Path | None
    sha256 : str | None
        Hash of the file (header and data files combined for BrainVision/EEGLAB).
    channel_map : dict
        Canonical site -> original label.
    sfreq : float
        Sampling rate, Hz.
    duration_s : float
    original_reference : str
        Best guess: ``"average"``, ``"linked ears"``, ``"single site"`` or ``"unknown"``.
    interpolated : tuple of str
        Sites replaced by spherical-spline interpolation.
    annotations : tuple of (str, int, float)
        Summary: (description, count, total duration in s), sorted by first onset.
    warnings : tuple of str
    eog_uv : ndarray, shape (n_eog, n_times) | None
        Real EOG channels of the file (type ``eog`` or named EOG/VEOG/HEOG/LOC/ROC), µV, for
        ocular regression; None when there are none.
    eog_names : tuple of str
        Their original labels.
    mains_psd : (ndarray, ndarray) | None
        ``(freqs, psd)`` of the 19 sites' data as stored in ``raw``, µV²/Hz
        (:func:`sourcelab.intake.power.long_welch`), computed once for the line-noise check and
        reused by mains detection; None when a site was interpolated (the data changed since).
    """

    raw: mne.io.BaseRaw
    path: Path | None
    sha256: str | None
    channel_map: dict
    sfreq: float
    duration_s: float
    original_reference: str
    interpolated: tuple[str, ...]
    annotations: tuple[tuple[str, int, float], ...]
    warnings: tuple[str, ...]
    eog_uv: np.ndarray | None = None
    eog_names: tuple[str, ...] = ()
    mains_psd: tuple[np.ndarray, np.ndarray] | None = None


#: Labels of real EOG channels (after removing a leading "EEG "/"POL " and a reference suffix).
EOG_LABEL = re.compile(r"^(eog.*|.*[^a-z]eog.*|[vh]eog.*|[lr]oc|eog[lrvh]?)$", re.IGNORECASE)


def eog_channels(raw) -> list[str]:
    """Channels of ``raw`` that are real EOG recordings (by type or by label).

    Parameters
    ----------
    raw : mne.io.BaseRaw
        The recording as read (all its channels).

    Returns
    -------
    list of str
        Channel names of type ``eog`` or whose label (without an ``EEG``/``POL`` prefix and a
        reference suffix) matches :data:`EOG_LABEL`, in channel order.
    """
    out = []
    for name, kind in zip(raw.ch_names, raw.get_channel_types()):
        label = re.sub(r"^(eeg|pol)\s+", "", name.strip(), flags=re.IGNORECASE)
        label = re.sub(r"[-_ ]?(ref|avg|le|ar)$", "", label, flags=re.IGNORECASE)
        if kind == "eog" or EOG_LABEL.match(label):
            out.append(name)
    return out


def robust_amplitude(data_uv: np.ndarray, sfreq: float) -> np.ndarray:
    """Robust standard deviation per channel after removing drift slower than ~1 Hz.

    Parameters
    ----------
    data_uv : ndarray, shape (n_channels, n_times)
        Signals in µV.
    sfreq : float
        Hz.

    Returns
    -------
    ndarray, shape (n_channels,)
        1.4826 x median absolute deviation of the de-drifted signal, µV (Rousseeuw & Croux 1993,
        J Am Stat Assoc 88:1273-1283 — from memory).
    """
    width = max(int(round(sfreq)), 1)
    data_uv = np.asarray(data_uv, dtype=float)
    out = np.empty(data_uv.shape[0])
    # one working row at a time (the filter and the medians treat each row on its own; the
    # medians only reorder it in place, the values they need are kept)
    for c, row in enumerate(data_uv):
        x = uniform_filter1d(row, width, mode="nearest")
        np.subtract(row, x, out=x)
        x -= np.median(x, overwrite_input=True)
        np.abs(x, out=x)
        out[c] = 1.4826 * np.median(x, overwrite_input=True)
    return out


def line_noise_ratio(data_uv: np.ndarray, sfreq: float, *, psd=None) -> np.ndarray:
    """Mains-band power (50 and 60 Hz, ±1 Hz) over the power in the rest of 1-45 Hz, per channel.

    Parameters
    ----------
    data_uv : ndarray, shape (n_channels, n_times)
    sfreq : float
    psd : (ndarray, ndarray), optional
        ``(freqs, psd)`` of ``data_uv`` from :func:`sourcelab.intake.power.long_welch`, if
        already computed.

    Returns
    -------
    ndarray, shape (n_channels,)
        0 when the sampling rate cannot represent 50 Hz.
    """
    f, p = long_welch(data_uv, sfreq) if psd is None else psd
    line = np.zeros(len(f), bool)
    for mains in (50.0, 60.0):
        if mains + 1 < sfreq / 2:
            line |= np.abs(f - mains) <= 1.0
    if not line.any():
        return np.zeros(data_uv.shape[0])
    rest = (f >= 1) & (f < 45) & ~line
    return p[:, line].sum(1) / np.maximum(p[:, rest].sum(1), 1e-30)


def detect_bad_sites(
    data_uv: np.ndarray, sfreq: float, names, *, amplitude: np.ndarray | None = None, psd=None
) -> dict[str, str]:
    """Flat, wildly noisy and line-noise-dominated (disconnected) sites.

    Parameters
    ----------
    data_uv : ndarray, shape (n_channels, n_times)
        µV.
    sfreq : float
    names : sequence of str
    amplitude : ndarray, shape (n_channels,), optional
        :func:`robust_amplitude` of ``data_uv`` if already computed.
    psd : (ndarray, ndarray), optional
        ``(freqs, psd)`` of ``data_uv`` (:func:`sourcelab.intake.power.long_welch`) if already
        computed.

    Returns
    -------
    dict
        Site -> reason (``"flat"``, ``"noisy"``, ``"line noise"``).  Thresholds are the module
        constants ``FLAT_SITE_UV``, ``FLAT_SITE_FRACTION``, ``NOISY_SITE_FACTOR``,
        ``LINE_DOMINATED_RATIO`` (common practice, in the spirit of Bigdely-Shamlo et al. 2015,
        Front Neuroinform 9:16 — from memory).
    """
    amp = robust_amplitude(data_uv, sfreq) if amplitude is None else np.asarray(amplitude)
    ratio = line_noise_ratio(data_uv, sfreq, psd=psd)
    live = amp > FLAT_SITE_UV
    med = float(np.median(amp[live])) if live.any() else 0.0
    bad: dict[str, str] = {}
    for name, a, r in zip(names, amp, ratio):
        if a <= FLAT_SITE_UV or a < FLAT_SITE_FRACTION * med:
            bad[name] = "flat"
        elif r > LINE_DOMINATED_RATIO:
            bad[name] = "line noise"
        elif a > NOISY_SITE_FACTOR * med:
            bad[name] = "noisy"
    return bad


def guess_reference(hint: str, data_uv: np.ndarray) -> str:
    """Original reference: an average reference makes the across-site sum vanish.

    Parameters
    ----------
    hint : str
        Reference read from the file; anything but ``"unknown"`` is returned as it is.
    data_uv : ndarray, shape (n_channels, n_times)
        Signals in µV.

    Returns
    -------
    str
        ``hint``; else ``"average"`` when the standard deviation of the across-channel sum is
        below 1e-3 of the median per-channel standard deviation, else ``"unknown"``.
    """
    if hint != "unknown":
        return hint
    total = np.std(data_uv.sum(axis=0))
    typical = np.median([np.std(row) for row in data_uv])  # row by row (memory)
    if typical > 0 and total < 1e-3 * typical:
        return "average"
    return "unknown"


def _annotation_summary(raw) -> tuple[tuple[str, int, float], ...]:
    seen: dict[str, list] = {}
    for a in raw.annotations:
        s = seen.setdefault(a["description"], [0, 0.0])
        s[0] += 1
        s[1] += float(a["duration"])
    return tuple((d, n, round(t, 3)) for d, (n, t) in seen.items())


def read_recording(source, *, montage_check: bool = True) -> Recording:
    """Read an EEG recording and reduce it to the 19 canonical 10-20 sites.

    Parameters
    ----------
    source : str | Path | mne.io.BaseRaw
        EDF/EDF+, BDF, BrainVision ``.vhdr``, EEGLAB ``.set``, FIF, a BIDS folder or BIDS
        ``*_eeg.*`` file (``status=bad`` in ``*_channels.tsv`` is honoured), or a Raw in memory
        (copied, never modified).
    montage_check : bool
        Compare positions stored in the file (if any) with the template and warn when a site is
        more than 30° away; the template positions are used in any case.

    Returns
    -------
    Recording

    Raises
    ------
    InputError
        Missing or unreadable file, sampling rate below 100 Hz, missing sites, all-NaN site,
        implausible amplitude scale, more than two bad sites.
    """
    notes: list[str] = []
    if isinstance(source, mne.io.BaseRaw):
        raw = source.copy().load_data(verbose="error")
        path = None if not raw.filenames or raw.filenames[0] is None else Path(raw.filenames[0])
        sha, file_bads, where = None, (), path or "recording in memory"
    else:
        raw, path, sha, file_bads, reader_notes = read_file(source)
        notes.extend(reader_notes)
        where = path
    sfreq = float(raw.info["sfreq"])
    if sfreq < 100:
        raise InputError(f"sampling rate {sfreq:g} Hz is below the 100 Hz minimum", path=where)
    match = match_channels(raw.ch_names)
    if match.missing:
        raise InputError(
            f"missing 10-20 sites {list(match.missing)} (found "
            f"{len(match.channel_map)} of 19; channels: {raw.ch_names[:40]})",
            path=where,
        )
    notes.extend(f"duplicate label: {d}" for d in match.duplicates)
    originals = [match.channel_map[s] for s in SITES_1020]
    old_positions = _positions(raw, match.channel_map) if montage_check else None
    marked_bad = tuple(raw.info["bads"])
    extra = len(raw.ch_names) - len(originals)
    eog_names = tuple(c for c in eog_channels(raw) if c not in originals)
    eog_uv = raw.get_data(picks=list(eog_names)) * 1e6 if eog_names else None
    raw.pick(originals)
    raw.rename_channels({o: s for o, s in zip(originals, SITES_1020)})
    raw.set_channel_types({s: "eeg" for s in SITES_1020}, on_unit_change="ignore")
    raw.reorder_channels(list(SITES_1020))
    if extra:
        logger.info("%s: ignored %d non-10-20 channels", where, extra)
    data = raw.get_data()  # a copy of the data, scaled in place (memory)
    data *= 1e6  # µV

    # --- non-finite samples --------------------------------------------------------------------
    finite = np.isfinite(data)
    dead = [s for s, ok in zip(SITES_1020, finite.any(axis=1)) if not ok]
    if dead:
        raise InputError(f"sites with no finite samples (all NaN): {dead}", path=where)
    if not finite.all():
        bad_t = ~finite.all(axis=0)
        data[~finite] = 0.0
        _annotate_runs(raw, bad_t, "BAD_nonfinite")
        notes.append(f"{int(bad_t.sum())} samples with NaN/inf set to 0 and marked BAD_nonfinite")
        raw.apply_function(
            lambda x: np.where(np.isfinite(x), x, 0.0), picks="all", channel_wise=False
        )

    # --- unit plausibility (never rescale) ----------------------------------------------------
    amp = robust_amplitude(data, sfreq)
    live = amp[amp > 0]
    typical = float(np.median(live)) if live.size else 0.0
    lo, hi = PLAUSIBLE_UV
    if not (lo <= typical <= hi):
        raise InputError(
            f"implausible amplitude scale: typical site amplitude {typical:.3g} µV (expected "
            f"{lo:g}-{hi:g} µV); check the units in the file (volts vs µV), it is not rescaled",
            path=where,
        )

    # --- bad sites ---------------------------------------------------------------------------
    psd = long_welch(data, sfreq)  # shared by the line-noise check and mains detection
    bad = detect_bad_sites(data, sfreq, SITES_1020, amplitude=amp, psd=psd)
    for orig in file_bads + marked_bad:
        site = next((s for s, o in match.channel_map.items() if o == orig), None)
        if site and site not in bad:
            bad[site] = "marked bad in the file"
    raw.info["bads"] = []
    if len(bad) > MAX_BAD_SITES:
        desc = ", ".join(f"{s} ({r})" for s, r in bad.items())
        raise InputError(
            f"{len(bad)} bad sites, at most {MAX_BAD_SITES} can be interpolated: {desc}", path=where
        )
    montage = mne.channels.make_standard_montage("fsaverage_1020")
    raw.set_montage(montage, on_missing="raise", verbose="error")
    if old_positions is not None:
        notes.extend(_compare_positions(old_positions, raw))
    interpolated = tuple(s for s in SITES_1020 if s in bad)
    if interpolated:
        raw.info["bads"] = list(interpolated)
        raw.interpolate_bads(
            reset_bads=True, origin="auto", method={"eeg": "spline"}, verbose="error"
        )
        msg = "interpolated (spherical spline): " + ", ".join(
            f"{s} ({bad[s]})" for s in interpolated
        )
        notes.append(msg)
        logger.warning("%s: %s", where, msg)
    reference = guess_reference(match.reference_hint, data)
    return Recording(
        raw=raw,
        path=path,
        sha256=sha,
        channel_map=dict(match.channel_map),
        sfreq=sfreq,
        duration_s=raw.n_times / sfreq,
        original_reference=reference,
        interpolated=interpolated,
        annotations=_annotation_summary(raw),
        warnings=tuple(notes),
        eog_uv=eog_uv,
        eog_names=eog_names,
        mains_psd=None if interpolated else psd,
    )


def _annotate_runs(raw, mask: np.ndarray, description: str) -> None:
    edges = np.flatnonzero(np.diff(np.r_[0, mask.astype(int), 0]))
    sf = raw.info["sfreq"]
    for a, b in zip(edges[::2], edges[1::2]):
        raw.annotations.append(raw.first_time + a / sf, (b - a) / sf, description)


def _positions(raw, channel_map: dict) -> dict | None:
    """Stored positions by canonical site (None when fewer than 10 sites have one)."""
    locs = {ch["ch_name"]: np.array(ch["loc"][:3], float) for ch in raw.info["chs"]}  # copies
    pos = {}
    for site, orig in channel_map.items():
        loc = locs[orig]
        if np.all(np.isfinite(loc)) and np.linalg.norm(loc) > 0:
            pos[site] = loc
    return pos if len(pos) >= 10 else None


def _compare_positions(old: dict, raw) -> list[str]:
    """Warn for stored positions more than 30° from the template (directions from the centroid)."""
    new = {ch["ch_name"]: np.asarray(ch["loc"][:3]) for ch in raw.info["chs"]}
    sites = list(old)
    olds = np.array([old[s] for s in sites])
    olds = olds - olds.mean(0)
    news = np.array([new[s] for s in sites])
    news = news - news.mean(0)
    cos = np.sum(olds * news, 1) / (np.linalg.norm(olds, axis=1) * np.linalg.norm(news, axis=1))
    off = [s for s, c in zip(sites, cos) if c < np.cos(np.radians(30))]
    if off:
        return [
            f"stored electrode positions differ from the 10-20 template by >30° at {off}; "
            "template positions used"
        ]
    return []
