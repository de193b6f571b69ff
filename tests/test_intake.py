"""Intake on constructed recordings: known answers, detection of bad sites, bad-input errors."""

from __future__ import annotations

from pathlib import Path

import matplotlib
import mne
import numpy as np
import pytest
from scipy.signal import welch

from sourcelab.config import AnalysisConfig
from sourcelab.constants import SITES_1020
from sourcelab.errors import InputError
from sourcelab.intake import (
    band_power,
    canonical_site,
    clean_recording,
    detect_mains,
    epoch_band_power,
    plot_quality,
    read_recording,
    pearson_r,
    reliability_summary,
    spearman_brown,
    split_half,
    test_retest,
)

matplotlib.use("Agg")

SF = 250.0
#: Old names and decorations on purpose (T3/T4/T5/T6 = T7/T8/P7/P8).
LABELS = [
    "EEG FP1-REF",
    "EEG FP2-REF",
    "F7-Ref",
    "F3",
    "FZ",
    "F4",
    "F8",
    "T3",
    "C3",
    "Cz",
    "C4",
    "T4",
    "T5",
    "P3",
    "Pz",
    "P4",
    "T6",
    "O1",
    "O2",
]
CFG = AnalysisConfig(min_clean_s=30.0, warn_clean_s=60.0)


def _noise(rng, n_ch, n, sf=SF, amp_uv=10.0):
    """Independent 1/f-shaped noise (µV), RMS ~ amp_uv, plus a 10 Hz rhythm."""
    spec = rng.standard_normal((n_ch, n // 2 + 1)) + 1j * rng.standard_normal((n_ch, n // 2 + 1))
    f = np.fft.rfftfreq(n, 1 / sf)
    spec /= np.sqrt(np.maximum(f, 1.0))
    x = np.fft.irfft(spec, n)
    x *= amp_uv / x.std(axis=1, keepdims=True)
    t = np.arange(n) / sf
    return x + 5.0 * np.sin(2 * np.pi * 10 * t + rng.uniform(0, 2 * np.pi, (n_ch, 1)))


def make_raw(data_uv, labels=LABELS, sf=SF, annotations=None):
    info = mne.create_info(list(labels), sf, ch_types="eeg")
    raw = mne.io.RawArray(np.asarray(data_uv) * 1e-6, info, verbose="error")
    if annotations:
        raw.set_annotations(mne.Annotations(*zip(*annotations)))
    return raw


@pytest.fixture
def rng():
    return np.random.default_rng(20240601)


@pytest.fixture
def synth(rng):
    return _noise(rng, 19, int(120 * SF))


def _one_line(exc, name):
    msg = str(exc.value)
    assert "\n" not in msg, msg
    assert str(name) in msg, msg
    return msg


# --- channel recognition -----------------------------------------------------------------------
# Old/new names: T3=T7, T4=T8, T5=P7, T6=P8 (American Clinical Neurophysiology Society 2006
# guideline, J Clin Neurophysiol 23:107-110 — from memory); decorations are common practice.
@pytest.mark.parametrize(
    "label, site",
    [
        ("EEG Fp1", "Fp1"),
        ("EEG T3", "T7"),
        ("FP1-REF", "Fp1"),
        ("EEG FP2-LE", "Fp2"),
        ("Fp1.", "Fp1"),
        ("FP 1", "Fp1"),
        ("T5-AV", "P7"),
        ("t6-M2", "P8"),
        ("O2-A1A2", "O2"),
        ("C3-Ref", "C3"),
        ("EEG T4-A1", "T8"),
        ("cz", "Cz"),
        ("Fp1-F7", None),
        ("EEG A1", None),
        ("ECG X1", None),
        ("Fpz", None),
        ("T9", None),
    ],
)
def test_channel_names(label, site):
    assert canonical_site(label)[0] == site


def test_read_maps_reorders_and_drops_extras(synth, rng):
    extra = rng.standard_normal((2, synth.shape[1])) * 10
    raw = make_raw(np.vstack([synth[::-1], extra]), LABELS[::-1] + ["EEG A1", "ECG"])
    rec = read_recording(raw)
    assert rec.raw.ch_names == list(SITES_1020)
    assert rec.channel_map["T7"] == "T3" and rec.channel_map["P8"] == "T6"
    # data followed its label through the reordering
    np.testing.assert_allclose(rec.raw.get_data(picks=["O2"])[0], synth[18] * 1e-6)
    assert rec.sfreq == SF and rec.duration_s == pytest.approx(120.0)
    assert rec.original_reference == "single site"  # the -REF / -Ref suffixes
    assert rec.interpolated == ()


def test_average_reference_guessed(synth):
    rec = read_recording(make_raw(synth - synth.mean(0), SITES_1020))
    assert rec.original_reference == "average"


# --- known answers ----------------------------------------------------------------------------
def test_sine_power_is_half_amplitude_squared():
    # A sine of amplitude A has power A²/2 (Parseval; textbook): 10 µV -> 50 µV² in alpha.
    n = int(2 * SF)
    t = np.arange(40 * n) / SF
    x = 10.0 * np.sin(2 * np.pi * 10.0 * t)
    epochs = x.reshape(40, 1, n)
    bp = band_power(epochs, SF, [(8.0, 12.0), (1.0, 4.0)])
    assert bp[0, 0] == pytest.approx(50.0, rel=1e-9)
    assert bp[1, 0] < 1e-12


def test_sine_through_read_and_clean():
    # Same known answer through filtering and epoching (FIR pass-band ripple < 1 %, MNE default
    # firwin design — Widmann et al. 2015, J Neurosci Methods 250:34-46, from memory).
    t = np.arange(int(90 * SF)) / SF
    x = np.tile(10.0 * np.sin(2 * np.pi * 10.0 * t), (19, 1))
    clean = clean_recording(read_recording(make_raw(x)), CFG)
    bp = band_power(clean.epochs, clean.sfreq, CFG.bands)
    np.testing.assert_allclose(bp[2], 50.0, rtol=0.01)
    assert clean.epochs.dtype == np.float64 and clean.epochs.shape[1:] == (19, int(2 * SF))


def test_epochs_built_in_place_equal_the_copied_epochs():
    # Known answer: the epochs packed and transposed inside the recording's buffer are exactly
    # the stacked copies x[:, st:st + n] (the copy route), for any channels, lengths and starts.
    from sourcelab.intake.clean import _epochs_in_place, _windows, epoch_starts

    rng = np.random.default_rng(19)
    for _ in range(200):
        n_ch, n, n_t = int(rng.integers(1, 6)), int(rng.integers(1, 9)), int(rng.integers(0, 90))
        starts, _ = epoch_starts(rng.random(n_t) > 0.3, n)
        starts = starts[rng.random(len(starts)) > 0.3]  # rejected epochs leave gaps
        x = rng.standard_normal((n_ch, n_t))
        got = _epochs_in_place(x.copy(), starts, n)
        want = _windows(x, starts, n)
        assert got.shape == want.shape and np.array_equal(got, want)
        assert got.flags.c_contiguous


def test_cleaning_in_the_recordings_own_buffer_gives_the_same_epochs(synth):
    # overwrite=True (what analyze does with a recording it read) must change nothing but memory
    rec = read_recording(make_raw(synth))
    want = clean_recording(rec, CFG)
    own = read_recording(make_raw(synth))
    got = clean_recording(own, CFG, overwrite=True)
    assert np.shares_memory(got.epochs, own.raw._data)  # built inside the recording's buffer
    assert not np.shares_memory(want.epochs, rec.raw._data)
    assert np.array_equal(got.epochs, want.epochs)
    assert np.array_equal(got.epoch_onsets_s, want.epoch_onsets_s)
    assert got.rejected_s == want.rejected_s and got.thresholds == want.thresholds


def test_band_power_matches_scipy_and_mne(synth):
    # Reference implementations: scipy.signal.welch and mne.time_frequency.psd_array_welch
    # (Hann window over the whole epoch, one-sided density), band = sum of bins x df.
    n = int(2 * SF)
    ep = synth[:, : 30 * n].reshape(19, 30, n).transpose(1, 0, 2)
    bands = [(1.0, 4.0), (8.0, 12.0), (12.0, 25.0)]
    ours = band_power(ep, SF, bands)
    f, p = welch(ep, fs=SF, window="hann", nperseg=n, noverlap=0, axis=-1)
    pm, fm = mne.time_frequency.psd_array_welch(
        ep, SF, fmin=0, fmax=SF / 2, n_fft=n, window="hann", verbose="error"
    )
    for k, (lo, hi) in enumerate(bands):
        ref = p[..., (f >= lo) & (f < hi)].sum(-1).mean(0) * (f[1] - f[0])
        ref_mne = pm[..., (fm >= lo) & (fm < hi)].sum(-1).mean(0) * (fm[1] - fm[0])
        np.testing.assert_allclose(ours[k], ref, rtol=1e-10)
        np.testing.assert_allclose(ours[k], ref_mne, rtol=1e-6)


# --- units -------------------------------------------------------------------------------------
@pytest.mark.parametrize("scale", [1e6, 1e3, 1e-6])
def test_implausible_scale_refused(synth, scale):
    # Scalp EEG is tens of µV (Niedermeyer's Electroencephalography 2011 — from memory): a
    # recording read as 1e6 (µV stored as V), 1e3 (mV) or 1e-6 (scaled twice) is refused.
    with pytest.raises(InputError, match="implausible amplitude"):
        read_recording(make_raw(synth * scale))


# --- bad sites ---------------------------------------------------------------------------------
def test_flat_site_detected_and_interpolated(synth):
    x = synth.copy()
    x[SITES_1020.index("C3")] = 0.0
    rec = read_recording(make_raw(x, SITES_1020))
    assert rec.interpolated == ("C3",)
    assert any("C3 (flat)" in w for w in rec.warnings)
    c3 = rec.raw.get_data(picks=["C3"])[0]
    assert np.std(c3) > 1e-6  # replaced by a spline estimate from its neighbours


def test_noisy_and_line_noise_sites_detected(synth):
    x = synth.copy()
    t = np.arange(x.shape[1]) / SF
    x[SITES_1020.index("T8")] *= 20  # wildly noisy
    x[SITES_1020.index("O1")] = 0.5 * synth[SITES_1020.index("O1")] + 200 * np.sin(
        2 * np.pi * 50 * t
    )  # disconnected: mains dominated
    rec = read_recording(make_raw(x, SITES_1020))
    assert set(rec.interpolated) == {"T8", "O1"}
    text = " ".join(rec.warnings)
    assert "T8 (noisy)" in text and "O1 (line noise)" in text


def test_more_than_two_bad_sites_refused(synth):
    x = synth.copy()
    for s in ("Fz", "Cz", "Pz"):
        x[SITES_1020.index(s)] = 0.0
    raw = make_raw(x, SITES_1020)
    with pytest.raises(InputError, match=r"3 bad sites.*Fz \(flat\), Cz \(flat\), Pz \(flat\)"):
        read_recording(raw)


# --- cleaning ----------------------------------------------------------------------------------
def _artefacts(synth, rng):
    x = 0.5 * synth  # quieter background (~5 µV RMS) so that each artefact trips one check
    t = np.arange(x.shape[1]) / SF
    i0 = int(10 * SF)  # epoch [10, 12) s: large amplitude at Cz
    x[SITES_1020.index("Cz"), i0 + 100 : i0 + 110] += 400.0
    i1 = int(20 * SF)  # epoch [20, 22) s: blink-like 100 µV, ~0.5 s frontal bump
    bump = 100.0 * np.exp(-0.5 * ((t[i1 : i1 + 500] - 21.0) / 0.2) ** 2)
    x[[0, 1], i1 : i1 + 500] += bump
    i2 = int(30 * SF)  # epochs [30, 34) s: 30-40 Hz bursts, 12 µV RMS, at T7
    hf = rng.standard_normal(1000)
    f = np.fft.rfftfreq(1000, 1 / SF)
    spec = np.fft.rfft(hf)
    spec[(f < 30) | (f > 40)] = 0
    hf = np.fft.irfft(spec, 1000)
    x[SITES_1020.index("T7"), i2 : i2 + 1000] += 12 * hf / hf.std()
    return x


def test_artefacts_rejected_by_reason_fixed(synth, rng):
    # Fixed thresholds (rejection = "fixed", no ocular correction): each artefact trips its check
    x = _artefacts(synth, rng)
    cfg = CFG.replace(rejection="fixed", ocular_correction="off")
    clean = clean_recording(read_recording(make_raw(x, SITES_1020)), cfg)
    assert clean.rejected_s["amplitude"] == 2.0
    assert clean.rejected_s["blink"] == 2.0
    assert clean.rejected_s["muscle"] == 4.0
    assert clean.kept_s == 120.0 - 8.0
    for onset in (10.0, 20.0, 30.0, 32.0):
        assert onset not in clean.epoch_onsets_s
    assert clean.channel_kept_fraction["T7"] == pytest.approx(58 / 60)
    assert clean.channel_kept_fraction["Fp1"] == pytest.approx(59 / 60)
    assert clean.channel_kept_fraction["O2"] == 1.0
    assert clean.thresholds["reject_uv"] == CFG.reject_uv


def test_artefacts_default_settings(synth, rng):
    # Defaults: learned thresholds within the bounds (peak-to-peak floor 200 µV without an age:
    # the 400 µV step at Cz is rejected; muscle floor 8 µV: the 12 µV T7 burst is rejected) and
    # the frontal bump removed by ICA instead of rejecting its epoch.
    x = _artefacts(synth, rng)
    clean = clean_recording(read_recording(make_raw(x, SITES_1020)), CFG)
    assert clean.rejected_s["amplitude"] == 2.0 and clean.rejected_s["muscle"] == 4.0
    assert clean.rejected_s["blink"] == 0.0
    assert clean.ocular["method"] == "ica" and len(clean.ocular["removed_components"]) >= 1
    assert min(clean.ocular["template_r"]) >= 0.8
    k = list(clean.epoch_onsets_s).index(20.0)
    fp = clean.epochs[k, :2].mean(0)
    assert np.ptp(fp) < 40.0  # the 100 µV bump is gone (background ~5 µV RMS + 2.5 µV sine)
    per_site = clean.thresholds["per_site"]
    assert per_site["mode"] == "auto" and per_site["ptp_uv"]["Cz"] == 200.0
    for onset in (10.0, 30.0, 32.0):
        assert onset not in clean.epoch_onsets_s


def test_flat_epoch_rejected(synth):
    x = synth.copy()
    x[SITES_1020.index("Pz"), int(40 * SF) : int(42 * SF)] = 0.0
    clean = clean_recording(read_recording(make_raw(x, SITES_1020)), CFG)
    assert clean.rejected_s["flat"] == 2.0 and 40.0 not in clean.epoch_onsets_s


def test_bad_annotations_and_selection(synth):
    ann = [
        (5.0, 0.0, "eyes open"),
        (50.0, 0.0, "eyes closed"),
        (100.0, 0.0, "eyes open"),
        (60.0, 10.0, "BAD_movement"),
        (80.0, 4.0, "bad electrode"),
    ]
    rec = read_recording(make_raw(synth, SITES_1020, annotations=ann))
    cl = clean_recording(rec, CFG.replace(min_clean_s=1.0), select="Eyes Closed")
    # the 'eyes closed' state marker lasts until the next state marker ('eyes open' at 100 s);
    # the bad spans inside it are removed: 50-60, 70-80, 84-100 -> 36 s
    assert cl.kept_s == 36.0
    assert np.all((cl.epoch_onsets_s < 60) | (cl.epoch_onsets_s >= 70))
    cl = clean_recording(rec, CFG.replace(min_clean_s=1.0), select=[(50.0, 100.0)])
    assert cl.rejected_s["annotated-bad"] == pytest.approx(14.0)
    assert cl.kept_s == 36.0
    assert np.all((cl.epoch_onsets_s < 60) | (cl.epoch_onsets_s >= 70))
    assert any("below 60 s" in w for w in cl.warnings)  # warn_clean_s


@pytest.mark.parametrize("mains", [50.0, 60.0])
def test_mains_detected(synth, mains):
    t = np.arange(synth.shape[1]) / SF
    x = synth + 5.0 * np.sin(2 * np.pi * mains * t)
    assert detect_mains(x, SF) == mains
    assert detect_mains(synth, SF) is None
    clean = clean_recording(read_recording(make_raw(x, SITES_1020)), CFG)
    assert clean.mains_hz == mains


# --- reliability -------------------------------------------------------------------------------
def test_spearman_brown_known_values():
    # Spearman 1910 / Brown 1910: doubling a test with half-reliability r gives 2r/(1+r).
    assert spearman_brown(0.5) == pytest.approx(2 / 3)
    assert spearman_brown(0.9) == pytest.approx(18 / 19)
    assert spearman_brown(1.0) == 1.0


def test_reliability_properties(rng):
    topo = rng.uniform(1, 100, (3, 19))  # stable band power topography
    stable = topo[None] * rng.lognormal(0, 0.05, (40, 3, 19))
    rel = split_half(stable)
    assert rel.r.shape == (3,) and np.all(rel.r > 0.95) and not rel.flagged.any()
    assert rel.n_epochs == (20, 20)
    noise = rng.lognormal(0, 1.0, (40, 3, 19))
    rr = test_retest(noise, threshold=0.9)
    assert rr.flagged.all() and rr.kind == "test-retest"
    # the flag uses the uncorrected r
    assert np.all(rr.flagged == (rr.r < 0.9))
    assert pearson_r([1, 2, 3, 4], [2, 4, 6, 8]) == pytest.approx(1.0)
    assert pearson_r([1, 2, 3, 4], [8, 6, 4, 2]) == pytest.approx(-1.0)


def test_epoch_band_power_feeds_reliability(synth):
    n = int(2 * SF)
    ep = synth[:, : 40 * n].reshape(19, 40, n).transpose(1, 0, 2)
    p = epoch_band_power(ep, SF, CFG.bands)
    assert p.shape == (40, len(CFG.bands), 19)
    np.testing.assert_allclose(p.mean(0), band_power(ep, SF, CFG.bands))


# --- figure ------------------------------------------------------------------------------------
def test_quality_figure(synth):
    clean = clean_recording(read_recording(make_raw(synth, SITES_1020)), CFG)
    fig = plot_quality(clean)
    axes = fig.get_axes()
    assert len(axes) == 3
    assert len(axes[1].patches) == 19 and len(axes[2].lines) == 19
    assert axes[2].get_xlabel() == "frequency (Hz)"
    import matplotlib.pyplot as plt

    plt.close(fig)


# --- bad input ---------------------------------------------------------------------------------
def _edf(tmp_path, data_uv, labels=SITES_1020, name="rec.edf", sf=SF):
    path = tmp_path / name
    mne.export.export_raw(path, make_raw(data_uv, labels, sf), fmt="edf", verbose="error")
    return path


def test_missing_file(tmp_path):
    p = tmp_path / "nothere.edf"
    with pytest.raises(InputError, match="not found") as e:
        read_recording(p)
    _one_line(e, p)


def test_not_an_eeg_file(tmp_path):
    p = tmp_path / "notes.txt"
    p.write_text("hello")
    with pytest.raises(InputError, match="not a supported EEG file") as e:
        read_recording(p)
    _one_line(e, p)
    q = tmp_path / "fake.edf"
    q.write_text("hello, I am text pretending to be EDF" * 20)
    with pytest.raises(InputError, match="corrupt") as e:
        read_recording(q)
    _one_line(e, q)


def test_truncated_edf(tmp_path, synth):
    p = _edf(tmp_path, synth)
    size = p.stat().st_size
    with open(p, "r+b") as f:
        f.truncate(size // 2)
    with pytest.raises(InputError, match="truncated") as e:
        read_recording(p)
    _one_line(e, p)


def test_corrupt_edf_header(tmp_path, synth):
    p = _edf(tmp_path, synth)
    with open(p, "r+b") as f:
        f.seek(252)
        f.write(b"xx!!")  # number of signals
    with pytest.raises(InputError, match="corrupt") as e:
        read_recording(p)
    _one_line(e, p)


def test_edf_reads_back(tmp_path, synth):
    rec = read_recording(_edf(tmp_path, synth, LABELS))
    assert rec.raw.ch_names == list(SITES_1020) and len(rec.sha256) == 64
    np.testing.assert_allclose(rec.raw.get_data()[5], synth[5] * 1e-6, atol=0.05e-6)


def test_low_sampling_rate(tmp_path, rng):
    x = _noise(rng, 19, 90 * 80, sf=80.0)
    p = _edf(tmp_path, x, name="slow.edf", sf=80.0)
    with pytest.raises(InputError, match="below the 100 Hz") as e:
        read_recording(p)
    _one_line(e, p)


def test_missing_sites(tmp_path, synth):
    p = _edf(tmp_path, synth[:17], SITES_1020[:17], name="short.edf")
    with pytest.raises(InputError, match=r"missing 10-20 sites \['O1', 'O2'\]") as e:
        read_recording(p)
    _one_line(e, p)


def test_all_nan_site(synth):
    x = synth.copy()
    x[3] = np.nan
    with pytest.raises(InputError, match=r"all NaN\): \['F3'\]"):
        read_recording(make_raw(x, SITES_1020))


def test_partial_nan_marked_bad(synth):
    x = synth.copy()
    x[3, 1000:1100] = np.nan
    rec = read_recording(make_raw(x, SITES_1020))
    assert "BAD_nonfinite" in rec.raw.annotations.description
    cl = clean_recording(rec, CFG)
    assert cl.rejected_s["annotated-bad"] == pytest.approx(100 / SF)
    assert np.isfinite(cl.epochs).all()


def test_too_little_clean_data(tmp_path, rng):
    x = _noise(rng, 19, int(16 * SF))
    p = _edf(tmp_path, x, name="brief.edf")
    with pytest.raises(InputError, match="only 16 s of clean data, at least 20 s") as e:
        clean_recording(read_recording(p), AnalysisConfig())
    _one_line(e, p)


def test_selection_matching_nothing(tmp_path, synth):
    raw = make_raw(synth, SITES_1020, annotations=[(5.0, 0.0, "eyes open")])
    p = tmp_path / "sel_raw.fif"
    raw.save(p, verbose="error")
    rec = read_recording(p)
    with pytest.raises(InputError, match="no annotation 'eyes closed'") as e:
        clean_recording(rec, CFG, select="eyes closed")
    _one_line(e, p)


def test_bids_folder(tmp_path, synth):
    eeg = tmp_path / "sub-01" / "eeg"
    eeg.mkdir(parents=True)
    _edf(eeg, synth, LABELS, name="sub-01_task-rest_eeg.edf")
    rows = ["name\ttype\tunits\tstatus"] + [
        f"{lab}\tEEG\tuV\t{'bad' if lab == 'C4' else 'good'}" for lab in LABELS
    ]
    (eeg / "sub-01_task-rest_channels.tsv").write_text("\n".join(rows) + "\n")
    rec = read_recording(tmp_path / "sub-01")
    assert rec.interpolated == ("C4",)
    assert any("marked bad" in w for w in rec.warnings)
    # BIDS path without EEG
    anat = tmp_path / "sub-02" / "anat"
    anat.mkdir(parents=True)
    (anat / "sub-02_T1w.nii.gz").write_bytes(b"\0" * 10)
    with pytest.raises(InputError, match="no EEG recording") as e:
        read_recording(tmp_path / "sub-02")
    _one_line(e, Path(tmp_path / "sub-02"))


def test_montage_check(synth):
    # Stored positions close to 10-20 (MNE's spherical_1020) pass; swapped Fp1/O1 positions are
    # reported (Fp1 and O1 are on opposite sides of the head: Jasper 1958, Electroencephalogr
    # Clin Neurophysiol 10:371-375 — common practice).
    raw = make_raw(synth, SITES_1020)
    raw.set_montage(mne.channels.make_standard_montage("spherical_1020"), verbose="error")
    assert not any("positions" in w for w in read_recording(raw).warnings)
    pos = raw.get_montage().get_positions()["ch_pos"]
    pos["Fp1"], pos["O1"] = pos["O1"], pos["Fp1"]
    raw.set_montage(mne.channels.make_dig_montage(pos, coord_frame="head"), verbose="error")
    rec = read_recording(raw)
    msg = next(w for w in rec.warnings if "positions" in w)
    assert "'Fp1'" in msg and "'O1'" in msg
    assert not any("positions" in w for w in read_recording(raw, montage_check=False).warnings)
    # the template positions are used in every case
    plain = read_recording(make_raw(synth, SITES_1020))
    np.testing.assert_allclose(
        rec.raw.get_montage().get_positions()["ch_pos"]["Fp1"],
        plain.raw.get_montage().get_positions()["ch_pos"]["Fp1"],
    )


def test_given_notch_and_low_pass_limit(synth):
    clean = clean_recording(read_recording(make_raw(synth, SITES_1020)), CFG.replace(notch=60.0))
    assert clean.mains_hz == 60.0 and clean.thresholds["notch"] == 60.0
    # h_freq at/above 0.9 x Nyquist is not applied, and the user is told
    rec = read_recording(make_raw(synth[:, ::2], SITES_1020, sf=SF / 2))
    clean = clean_recording(rec, CFG.replace(h_freq=60.0))
    assert clean.thresholds["h_freq"] is None
    assert any("no low-pass" in w for w in clean.warnings)


def test_reliability_summary_is_json_ready(rng):
    import json

    topo = rng.uniform(1, 100, (2, 19))
    power = topo[None] * rng.lognormal(0, 0.05, (30, 2, 19))
    power[:, 1] = rng.lognormal(0, 1.0, (30, 19))  # an unreliable band
    s = reliability_summary(power, ["alpha", "beta"], threshold=0.9).to_dict()
    json.dumps(s, allow_nan=False)
    assert s["flagged_bands"] == ["beta"] and s["n_epochs"] == 30
    assert s["split_half"]["alpha"] > 0.95
    assert s["split_half_spearman_brown"]["alpha"] == pytest.approx(
        spearman_brown(s["split_half"]["alpha"])
    )
    assert s["min_split_half"] == pytest.approx(s["split_half"]["beta"])
    with pytest.raises(InputError, match="bands"):
        reliability_summary(power, ["alpha"])


@pytest.mark.parametrize(
    "n_times, nperseg", [(153_600, 512), (5_000, 511), (600, 600), (2_000, 1_999)]
)
def test_welch_psd_matches_scipy(rng, n_times, nperseg, monkeypatch):
    # Reference: scipy.signal.welch with its defaults (periodic Hann, 50 % overlap, constant
    # detrend, one-sided density); a small block size forces several blocks of segments.
    from sourcelab.intake import power

    monkeypatch.setattr(power, "_WELCH_BLOCK_BYTES", 1 << 16)
    x = rng.normal(size=(19, n_times)) * 20 + rng.normal(size=(19, 1)) * 100
    f_ref, p_ref = welch(x, fs=256.0, nperseg=nperseg, axis=1)
    f, p = power.welch_psd(x, 256.0, nperseg)
    np.testing.assert_allclose(f, f_ref, rtol=0, atol=1e-12)
    np.testing.assert_allclose(p, p_ref, rtol=1e-10, atol=0)


def test_robust_amplitude_is_the_normal_scaled_mad_and_leaves_its_input(rng):
    # Known answer: 1.4826 x median absolute deviation of the signal minus its 1-s moving mean
    # (Rousseeuw & Croux 1993, from memory); reference computed with scipy.ndimage directly.
    from scipy.ndimage import uniform_filter1d

    from sourcelab.intake.recording import robust_amplitude

    x = rng.normal(size=(19, 25_600)) * np.linspace(1, 40, 19)[:, None]
    before = x.copy()
    d = x - uniform_filter1d(x, 256, axis=1, mode="nearest")
    ref = 1.4826 * np.median(np.abs(d - np.median(d, axis=1, keepdims=True)), axis=1)
    np.testing.assert_allclose(robust_amplitude(x, 256.0), ref, rtol=1e-12)
    np.testing.assert_array_equal(x, before)


# --- the numpy FIR filters against MNE-Python (the filters the pipeline used before) ---------

_FIR_RATES = (256.0, 250.0, 500.0, 200.0, 128.0)


@pytest.mark.reference
@pytest.mark.parametrize("sfreq", _FIR_RATES)
def test_fir_coefficients_match_mne_create_filter(sfreq):
    # reference: mne.filter.create_filter with its defaults (firwin, Hamming, zero phase,
    # "auto" lengths and transition bands); the pipeline's band-pass, muscle band, blink
    # low-pass, a high-pass, and the mains notches (MNE's notch_filter defaults)
    from sourcelab.intake import fir

    nyq = sfreq / 2
    cfg = AnalysisConfig()
    for lo, hi in (
        (cfg.l_freq, cfg.h_freq),
        (25.0, min(45.0, 0.9 * nyq)),
        (None, 3.0),
        (1.0, None),
    ):
        ref = mne.filter.create_filter(None, sfreq, lo, hi, verbose="error")
        ours = fir.fir_coefficients(sfreq, lo, hi)
        assert ours.shape == ref.shape
        assert np.abs(ours - ref).max() <= 1e-12
    for mains in (50.0, 60.0):
        freqs = np.arange(mains, nyq - 1, mains)
        if not len(freqs):
            continue
        lows = [f - f / 400 - 0.5 for f in freqs]  # notch_filter: width f/200, 1 Hz transition
        highs = [f + f / 400 + 0.5 for f in freqs]
        ref = mne.filter.create_filter(
            None, sfreq, highs, lows, l_trans_bandwidth=0.5, h_trans_bandwidth=0.5, verbose="error"
        )
        ours = fir.notch_coefficients(sfreq, freqs)
        assert ours.shape == ref.shape
        assert np.abs(ours - ref).max() <= 1e-12
    assert np.array_equal(fir.fir_coefficients(sfreq, None, None), [1.0])


@pytest.mark.reference
@pytest.mark.parametrize("n_times", [60 * 256, 2000, 300, 40])
def test_fir_filtering_matches_mne_filter_data(rng, n_times):
    # reference: mne.filter.filter_data / notch_filter (defaults, reflect_limited padding,
    # overlap-add), including signals shorter than the filter; 1e-10 µV on ~50 µV data
    from sourcelab.intake import fir

    x = rng.standard_normal((19, n_times)) * 50 + 20
    for lo, hi in ((1.0, 45.0), (25.0, 45.0), (None, 3.0)):
        ref = mne.filter.filter_data(x, 256.0, lo, hi, verbose="error")
        ours = fir.filter_data(x.copy(), 256.0, lo, hi)
        assert np.abs(ours - ref).max() <= 1e-10
    freqs = np.arange(50.0, 127.0, 50.0)
    ref = mne.filter.notch_filter(x, 256.0, freqs, verbose="error")
    ours = x.copy()
    assert fir.notch_filter(ours, 256.0, freqs) is ours  # in place
    assert np.abs(ours - ref).max() <= 1e-10
    # a 3-D array whose rows cannot be viewed as one 2-D block is filtered in place too
    blocks = x[:4].copy().reshape(2, 2, -1).transpose(1, 0, 2)
    expected = mne.filter.filter_data(blocks, 256.0, 1.0, 45.0, verbose="error")
    assert fir.filter_data(blocks, 256.0, 1.0, 45.0) is blocks
    assert np.abs(blocks - expected).max() <= 1e-10
    one = x[0].copy()
    fir.filter_data(one, 256.0, 1.0, 45.0)
    assert (
        np.abs(one - mne.filter.filter_data(x[0], 256.0, 1.0, 45.0, verbose="error")).max() <= 1e-10
    )
