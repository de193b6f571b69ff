"""Real recording for tests: the absence-epilepsy EEG shipped in the eeghdf 0.2.4 source package.

Source: PyPI ``eeghdf`` 0.2.4 sdist (BSD-3-Clause), file ``data/absence_epilepsy.eeg.h5``:
36 signals, int16 with physical min/max in µV, 200 Hz, 1,811 s, a child (~10 y) with absence
epilepsy.  The tarball is fetched once with pip, its sha256 checked, and cached outside the
repository (``$SOURCELAB_TEST_DATA`` or ``~/.cache/sourcelab-test-data``).  Nothing here is ever
committed.  When the registry cannot be reached the tests that need the file are skipped with
one line (``pytest -ra`` shows it), unless ``SOURCELAB_REQUIRE_NETWORK=1`` (CI sets it): then
they fail.  A hash mismatch always fails.
"""

from __future__ import annotations

import hashlib
import os
import subprocess
import sys
import tarfile
import tempfile
from pathlib import Path

import numpy as np

PACKAGE = "eeghdf==0.2.4"
SDIST = "eeghdf-0.2.4.tar.gz"
SDIST_SHA256 = "e9b3f91ed5dadb99ff6ab3ba48ba40cbb2146925069a3d450deef1089c5039a2"
MEMBER = "eeghdf-0.2.4/data/absence_epilepsy.eeg.h5"

#: Clean eyes-closed windows (s), read off the recording's annotations ("eyes closed" ...
#: "eyes open") and checked by eye for artefact (DATA-SOURCES.md).
EYES_CLOSED = ((928.5, 938.5), (1197.5, 1213.0), (1651.0, 1663.3))
#: Eyes-open windows (s) after an "eyes open" annotation, awake, away from photic stimulation,
#: hyperventilation and seizures.
EYES_OPEN = ((958.0, 990.0), (1250.0, 1282.0), (1666.0, 1720.0))


def _review(spans, codes: str) -> dict:
    starts = [a + 2.0 * k for a, b in spans for k in range(int((b - a) // 2.0))]
    assert len(starts) == len(codes), (len(starts), len(codes))
    return dict(zip(starts, codes))


#: By-eye review of every 2-s epoch of the spans above, done before the rejection rule was
#: written (display: 60 Hz notch, 0.5-45 Hz band-pass, 100 µV between traces, all 19 sites, plus
#: zoomed views of the frontal and temporal sites).  Codes: "C" no artefact; "O" ocular only
#: (blinks, eye movements - corrected, not rejected); "M" muscle bursts clearly above the
#: ongoing EEG, movement or electrode artefact.  Artefact-free time = "C" + "O" epochs.
#: Epoch start (s) -> code.
REVIEW_EC = _review(EYES_CLOSED, "MCCCO" + "CMMMCCC" + "OOMOOO")
REVIEW_EO = _review(EYES_OPEN, "MMMMMMMMMMMOOMMM" + "MMMOCOCCOMOMMOOM" + "MOCOOOOCOO" + "M" * 17)


def cache_dir() -> Path:
    d = Path(os.environ.get("SOURCELAB_TEST_DATA", Path.home() / ".cache" / "sourcelab-test-data"))
    d.mkdir(parents=True, exist_ok=True)
    return d


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


#: Set to 1 to make an unreachable registry a failure instead of a skip.
REQUIRE_ENV = "SOURCELAB_REQUIRE_NETWORK"
_UNREACHABLE: list[str] = []  # remembered for the session: one attempt, not one per test


def _unavailable(message: str):
    """Skip (one line) or, with SOURCELAB_REQUIRE_NETWORK=1, fail."""
    import pytest

    if os.environ.get(REQUIRE_ENV, "").strip() not in ("", "0"):
        pytest.fail(f"{message} ({REQUIRE_ENV}=1)", pytrace=False)
    pytest.skip(f"real recording unavailable offline: {message}", allow_module_level=True)


def require() -> Path:
    """Call at the top of a real-data test module: the recording, or one skip line for the
    module when the registry cannot be reached (a failure with SOURCELAB_REQUIRE_NETWORK=1)."""
    return h5_path()


def fetch_sdist() -> Path:
    """Download (once) and hash-check the eeghdf 0.2.4 source distribution."""
    target = cache_dir() / SDIST
    if target.is_file() and _sha256(target) == SDIST_SHA256:
        return target
    if _UNREACHABLE:
        _unavailable(_UNREACHABLE[0])
    with tempfile.TemporaryDirectory(dir=cache_dir()) as tmp:
        cmd = [
            sys.executable,
            "-m",
            "pip",
            "download",
            "--no-deps",
            "--no-binary=:all:",
            PACKAGE,
            "-d",
            tmp,
            "-q",
            "--retries",
            "1",
            "--timeout",
            "20",
        ]
        try:
            proc = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
        except subprocess.TimeoutExpired:
            proc = None
        got = Path(tmp) / SDIST
        if proc is None or proc.returncode != 0 or not got.is_file():
            detail = (
                "timed out"
                if proc is None
                else (proc.stderr.strip().splitlines() or ["no output"])[-1][:200]
            )
            _UNREACHABLE.append(
                f"could not download {PACKAGE} from the package registry ({detail})"
            )
            _unavailable(_UNREACHABLE[0])
        digest = _sha256(got)
        if digest != SDIST_SHA256:
            raise RuntimeError(f"{SDIST}: sha256 {digest} != pinned {SDIST_SHA256}")
        os.replace(got, target)
    return target


def h5_path() -> Path:
    """The extracted ``absence_epilepsy.eeg.h5`` (extracted from the checked tarball once)."""
    sdist = fetch_sdist()
    out = cache_dir() / "absence_epilepsy.eeg.h5"
    stamp = cache_dir() / "absence_epilepsy.eeg.h5.from-sha256"
    if out.is_file() and stamp.is_file() and stamp.read_text() == SDIST_SHA256:
        return out
    with tarfile.open(sdist) as tar:
        member = tar.getmember(MEMBER)
        src = tar.extractfile(member)
        fd, tmp = tempfile.mkstemp(prefix=".absence.", dir=cache_dir())  # safe if run twice
        with os.fdopen(fd, "wb") as f:
            f.write(src.read())
    os.replace(tmp, out)
    stamp.write_text(SDIST_SHA256)
    return out


def read_h5(*, include_extra: bool = True):
    """The recording as arrays.

    Returns
    -------
    data_uv : ndarray, shape (n_signals, n_times)
        Physical values, µV (digital -> physical with the stored min/max, EDF convention).
    labels : list of str
    sfreq : float
    annotations : list of (onset_s, duration_s, text)
    """
    import h5py

    with h5py.File(h5_path(), "r") as f:
        r = f["record-0"]
        labels = [x.decode() if isinstance(x, bytes) else str(x) for x in r["signal_labels"][:]]
        units = [
            x.decode() if isinstance(x, bytes) else str(x) for x in r["physical_dimensions"][:]
        ]
        dmin = r["signal_digital_mins"][:].astype(float)
        dmax = r["signal_digital_maxs"][:].astype(float)
        pmin = r["signal_physical_mins"][:]
        pmax = r["signal_physical_maxs"][:]
        dig = r["signals"][:].astype(float)
        sfreq = float(r.attrs["sample_frequency"])
        ann = r["edf_annotations"]
        onsets = ann["starts_100ns"][:] / 1e7
        texts = [x.decode() if isinstance(x, bytes) else str(x) for x in ann["texts"][:]]
    gain = (pmax - pmin) / (dmax - dmin)
    data = (dig - dmin[:, None]) * gain[:, None] + pmin[:, None]
    keep = [
        i
        for i, (lab, u) in enumerate(zip(labels, units))
        if u == "uV" and (include_extra or lab.startswith("EEG "))
    ]
    return (
        data[keep],
        [labels[i] for i in keep],
        round(sfreq, 6),
        [(float(o), 0.0, t) for o, t in zip(onsets, texts)],
    )


def absence_raw(*, include_extra: bool = True):
    """An ``mne.io.RawArray`` with the original labels ("EEG Fp1", "EEG T3", ...), volts.

    With ``include_extra`` the non-10-20 µV channels (A1, A2, FT9, ECG ...) are kept too, so that
    the reader has something to ignore.
    """
    import mne

    data, labels, sfreq, ann = read_h5(include_extra=include_extra)
    info = mne.create_info(labels, sfreq, ch_types="eeg")
    raw = mne.io.RawArray(data * 1e-6, info, verbose="error")
    raw.set_annotations(
        mne.Annotations([a[0] for a in ann], [a[1] for a in ann], [a[2] for a in ann])
    )
    return raw


def window_mask(n_times: int, sfreq: float, windows) -> np.ndarray:
    t = np.arange(n_times) / sfreq
    m = np.zeros(n_times, bool)
    for a, b in windows:
        m |= (t >= a) & (t < b)
    return m
