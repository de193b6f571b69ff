"""Benchmark: the cleaning stages of a 10-minute, 19-channel, 256 Hz invented recording, and the
learned rejection rule against autoreject's global threshold (Jas et al. 2017).

Run: ``python benchmarks/bench_intake.py [--real]``.  Prints the wall time of every cleaning stage
(filter, selection, ocular correction, features + learned thresholds, ocular check), of the
whole tables-only analysis, and, for the same epochs, the time and value of
``autoreject.get_rejection_threshold`` (if installed: ``pip install autoreject``; not a
dependency) next to the robust per-site rule.  ``--real`` repeats the comparison on the eeghdf
0.2.4 recording used by the tests (fetched and cached by ``tests/realdata.py``).

Timings on a shared 2-core machine vary with the load: the load average is printed; ratios
measured in the same run are what count.  Not a test.
"""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

import numpy as np


def _invented(duration_s: float = 600.0, sfreq: float = 256.0, seed: int = 2026):
    """Invented recording: alpha, theta and delta generators, pink background, blinks and
    horizontal eye movements (sourcelab.simulate)."""
    import mne

    from sourcelab.headmodel import load_head_model
    from sourcelab.intake.clean import DEFAULT_NASION
    from sourcelab.simulate import Generator, ocular_artefacts, simulate_raw

    model = load_head_model()
    rng = np.random.default_rng(seed)
    gens = (
        Generator((14.0, -95.0, 2.0), "right", freq=10.0, amplitude=1.5),
        Generator((-14.0, -95.0, 2.0), "left", freq=10.0, amplitude=1.5),
        Generator((-40.0, -60.0, 40.0), "left", freq=2.0, bandwidth=2.0, amplitude=0.7),
        Generator((-5.0, 35.0, 30.0), "left", freq=6.0, bandwidth=2.0, amplitude=1.0),
    )
    raw = simulate_raw(model, duration_s=duration_s, sfreq=sfreq, generators=gens, rng=rng)
    eye = ocular_artefacts(
        model.ch_pos,
        DEFAULT_NASION,
        n_times=raw.n_times,
        sfreq=sfreq,
        rng=rng,
        saccade_rate_hz=1.0,
        saccade_uv=80.0,
    )
    return mne.io.RawArray(raw.get_data() + eye, raw.info, verbose="error")


def _autoreject(epochs_uv: np.ndarray, sfreq: float) -> tuple[float, float]:
    """autoreject's global peak-to-peak threshold (µV) and its wall time (s)."""
    import mne
    from autoreject import get_rejection_threshold

    from sourcelab.config import SITES_1020

    info = mne.create_info(list(SITES_1020), sfreq, "eeg")
    ep = mne.EpochsArray(epochs_uv * 1e-6, info, verbose="error")
    t0 = time.perf_counter()
    thr = get_rejection_threshold(ep, ch_types="eeg", random_state=0, verbose=False)
    return thr["eeg"] * 1e6, time.perf_counter() - t0


def _compare(name: str, rec, config) -> None:
    from sourcelab.intake import clean_recording
    from sourcelab.intake.artefacts import learn_thresholds
    from sourcelab.intake.clean import _windows, epoch_starts

    clean_recording(rec, config)  # warm (imports)
    t0 = time.perf_counter()
    clean = clean_recording(rec, config)
    total = time.perf_counter() - t0
    print(f"[{name}] clean_recording {total:.2f} s; stages (s): {clean.timings_s}")
    oc = clean.ocular
    print(
        f"[{name}] ocular: {oc['method']}, removed {oc['removed_components']} "
        f"(template r {oc['template_r']}), fitted on {oc['fit_s']:.0f} s in {oc['seconds']:.2f} s"
    )
    # the rule alone on the corrected, usable epochs (all sites)
    starts, _ = epoch_starts(np.ones(rec.raw.n_times, bool), int(config.epoch_s * rec.sfreq))
    data = rec.raw.get_data() * 1e6
    import mne

    data = mne.filter.filter_data(data, rec.sfreq, config.l_freq, config.h_freq, verbose="error")
    ep = _windows(data, starts, int(config.epoch_s * rec.sfreq))
    ptp = np.ptp(ep, axis=-1)
    t0 = time.perf_counter()
    thr = learn_thresholds(ptp, ptp * 0 + 1.0)
    t_rule = time.perf_counter() - t0
    learned = thr.learned_ptp_uv
    print(
        f"[{name}] robust rule: {t_rule * 1e3:.2f} ms; learned peak-to-peak per site "
        f"{np.nanmin(learned):.0f}-{np.nanmax(learned):.0f} µV (median "
        f"{np.nanmedian(learned):.0f}); effective {thr.ptp_uv.min():.0f}-{thr.ptp_uv.max():.0f}"
    )
    try:
        ar, t_ar = _autoreject(ep, rec.sfreq)
    except ImportError:
        print(f"[{name}] autoreject not installed: comparison skipped")
        return
    rej_ours = float(np.mean((ptp > thr.ptp_uv[None, :]).any(1)))
    rej_ar = float(np.mean((ptp > ar).any(1)))
    print(
        f"[{name}] autoreject global threshold {ar:.0f} µV in {t_ar:.2f} s "
        f"({t_ar / max(t_rule, 1e-9):.0f}x the robust rule); epochs rejected: robust rule "
        f"{rej_ours:.1%}, autoreject {rej_ar:.1%}"
    )


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    from sourcelab.config import AnalysisConfig
    from sourcelab.intake import read_recording
    from sourcelab.analysis import analyze

    print(f"load average at start: {os.getloadavg()}")
    config = AnalysisConfig()
    rec = read_recording(_invented())
    _compare("invented 10 min 256 Hz", rec, config)
    analyze(rec, config=config)  # warm
    for n_boot in (config.n_boot, 0):
        t0 = time.perf_counter()
        analyze(rec, config=config.replace(n_boot=n_boot))
        print(
            f"[invented 10 min 256 Hz] analyze (tables only, n_boot={n_boot}) "
            f"{time.perf_counter() - t0:.2f} s"
        )
    if "--real" in argv:
        sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
        import realdata

        _compare("eeghdf 0.2.4, 30 min 200 Hz", read_recording(realdata.absence_raw()), config)
    print(f"load average at end: {os.getloadavg()}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
