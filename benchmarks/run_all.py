"""sourcelab benchmarks P1-P4 in one run; prints the figures and writes results.json / results.md.

    python -m benchmarks.run_all                 # everything; P3 with 100 recordings (~15 min)
    python -m benchmarks.run_all --n-batch 200   # the full P3 cohort (~30 min on 2 busy cores)
    python -m benchmarks.run_all --only P1,P2

P1  one 10-min 19-channel 256 Hz invented recording → Brodmann ROI table: sourcelab's
    cross-spectral route vs MNE-Python's per-window route (``compute_source_psd``, sLORETA, same
    forward via ``to_mne_forward``, same clean data, 2-s Hann windows without overlap, identity
    noise covariance, fixed orientation), then band sums and ROI means.  Times, ratio, per-band
    map correlation; and the whole file → table step (``analyze(path)``) after import.
P2  template head-model load: cold (first in process), warm (file in the OS cache), cached.
P3  N invented recordings end to end through ``run_batch`` with 1 and 2 worker processes:
    throughput, scaling efficiency, peak RSS per worker.
P4  ``build_norms`` from 100 and 200 participants' full-size tables.

Every number is measured in this run on this machine; ratios compare numbers from the same run.
Recordings are invented (simulated through the shipped template head model).
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
GOALS = {"P1_ratio": 100.0, "P1_r": 0.9999, "P1_file_to_table_s": 1.5, "P2_warm_s": 0.3,
         "P3_peak_rss_mb": 1536.0}


def _t(fn, *a, **k):
    t0 = time.perf_counter()
    out = fn(*a, **k)
    return out, time.perf_counter() - t0


def invented_raw(model, seed: int, duration_s: float):
    """An invented resting recording: bilateral occipital alpha, frontal theta, central beta."""
    from sourcelab.simulate import Generator, simulate_raw

    rng = np.random.default_rng(seed)
    a = rng.uniform(0.2, 0.45)
    gens = (Generator((-18, -92, 4), "left", amplitude=a),
            Generator((20, -92, 4), "right", amplitude=a),
            Generator((4, 40, 20), "right", freq=6.0, amplitude=rng.uniform(0.1, 0.4)),
            Generator((-38, -20, 55), "left", freq=18.0, bandwidth=6.0,
                      amplitude=rng.uniform(0.1, 0.3)))
    return simulate_raw(model, duration_s=duration_s, sfreq=256.0, generators=gens,
                        background_uv=10.0, rng=rng)


# ----------------------------------------------------------------------------------------- P1

def p1(tmp: Path) -> dict:
    import mne

    from sourcelab.config import AnalysisConfig
    from sourcelab.headmodel import load_head_model, make_info, to_mne_forward
    from sourcelab.intake import clean_recording, read_recording
    from sourcelab.analysis import analyze
    from sourcelab.inverse import inverse_operator
    from sourcelab.rois import load_atlas
    from sourcelab.spectra import epoch_cross_spectra

    config = AnalysisConfig()
    model = load_head_model()
    raw = invented_raw(model, 2026, 600.0)
    path = tmp / "p1_invented_10min.edf"
    mne.export.export_raw(path, raw, fmt="edf", verbose="error")
    atlas = load_atlas("brodmann")
    idx = [roi.vertices for roi in atlas.rois]
    analyze(path, config=config)  # warm every cache (imports, head model, operator, atlases)

    # the same clean epochs feed both routes
    clean = clean_recording(read_recording(path), config)
    epochs_uv = clean.epochs
    n_ep, n_ch, n_t = epochs_uv.shape

    def ours():
        csd = epoch_cross_spectra(epochs_uv, clean.sfreq, config.bands).mean(axis=0)
        power = inverse_operator(config.method, config.orientation, config.lambda2).power(csd)
        return power, np.stack([power[:, v].mean(axis=1) for v in idx], axis=1)

    ours()
    reps = 5
    t_ours = min(_t(ours)[1] for _ in range(reps))
    power_ours, roi_ours = ours()

    info = make_info(clean.sfreq, average_reference=True)
    fwd = to_mne_forward(model, info)  # built once (forward construction is not timed)
    data_v = np.concatenate(list(epochs_uv), axis=1) * 1e-6
    mraw = mne.io.RawArray(data_v, info, verbose="error")
    noise = mne.Covariance(np.eye(n_ch) * 1e-12, info["ch_names"], [], info["projs"],
                           nfree=10**6, verbose="error")

    def theirs():
        inv = mne.minimum_norm.make_inverse_operator(info, fwd, noise, loose=0.0, fixed=True,
                                                     depth=None, verbose="error")
        stc = mne.minimum_norm.compute_source_psd(
            mraw, inv, lambda2=config.lambda2, method="sLORETA", n_fft=n_t, overlap=0.0,
            fmin=0.0, fmax=clean.sfreq / 2, bandwidth="hann", pca=True, verbose="error")
        f = stc.times
        power = np.stack([stc.data[:, (f >= lo) & (f < hi)].sum(axis=1)
                          for lo, hi in config.bands.edges])
        return power, np.stack([power[:, v].mean(axis=1) for v in idx], axis=1)

    c0 = time.process_time()
    (power_mne, roi_mne), t_mne = _t(theirs)
    cpu_mne = time.process_time() - c0
    c0 = time.process_time()
    for _ in range(reps):
        ours()
    cpu_ours = (time.process_time() - c0) / reps
    r_map = {b: float(np.corrcoef(power_ours[i], power_mne[i])[0, 1])
             for i, b in enumerate(config.bands.names)}
    r_roi = {b: float(np.corrcoef(roi_ours[i], roi_mne[i])[0, 1])
             for i, b in enumerate(config.bands.names)}
    ratio_scale = power_mne / power_ours  # a constant (λ² × the PSD scaling) if maps agree
    t_analyze_raw = min(_t(analyze, raw, config=config)[1] for _ in range(3))
    t_file = min(_t(analyze, path, config=config)[1] for _ in range(3))
    no_boot = config.replace(n_boot=0) if getattr(config, "n_boot", 0) else config
    t_file_no_boot = min(_t(analyze, path, config=no_boot)[1] for _ in range(3))
    # peak resident memory of a fresh process analysing the 10-minute file (tables only)
    code = ("import sys; from sourcelab.analysis import analyze; "
            "from sourcelab.batch.runner import _peak_rss_mb; "
            "analyze(sys.argv[1]); print(_peak_rss_mb())")
    rss = subprocess.run([sys.executable, "-c", code, str(path)], capture_output=True,
                         text=True, check=True).stdout.split()[-1]
    return {
        "recording": f"{raw.times[-1] + 1 / 256:.0f} s, 19 ch, 256 Hz; {n_ep} clean "
                     f"{n_t / clean.sfreq:g}-s epochs",
        "sourcelab_core_s": t_ours, "mne_compute_source_psd_s": t_mne,
        "ratio": t_mne / t_ours,
        "sourcelab_core_cpu_s": cpu_ours, "mne_cpu_s": cpu_mne, "ratio_cpu": cpu_mne / cpu_ours,
        "r_map_per_band": r_map, "min_r_map": min(r_map.values()),
        "r_roi_per_band": r_roi,
        "mne_over_sourcelab_scale_cv": float(np.std(ratio_scale) / np.mean(ratio_scale)),
        "analyze_raw_in_memory_s": t_analyze_raw,
        "file_to_table_s": t_file,
        "file_to_table_no_bootstrap_s": t_file_no_boot,
        "n_boot_default": int(getattr(config, "n_boot", 0)),
        "analyze_10min_fresh_process_peak_rss_mb": float(rss),
        "notes": "sourcelab core = band cross-spectra of the clean epochs + sLORETA power + "
                 "Brodmann ROI means (best of 5); MNE = make_inverse_operator + "
                 "compute_source_psd (same epochs concatenated, n_fft = epoch length, no "
                 "overlap, Hann) + band sums + ROI means (one run); file_to_table = "
                 "analyze(EDF path) with warm caches (read, clean, spectra, inverse, 4 atlases, "
                 "quality; best of 3)",
    }


# ----------------------------------------------------------------------------------------- P2

def p2() -> dict:
    from sourcelab.headmodel import load, load_head_model

    load._load_shipped.cache_clear()
    _, cold = _t(load_head_model)
    warm = []
    for _ in range(5):
        load._load_shipped.cache_clear()
        warm.append(_t(load_head_model)[1])
    _, cached = _t(load_head_model)
    return {"first_in_process_s": cold, "warm_s": min(warm), "warm_median_s": float(
        np.median(warm)), "cached_s": cached,
        "notes": "warm = lru cache cleared, file in the OS page cache (read + sha256 + checks)"}


# ----------------------------------------------------------------------------------------- P3

def _write_cohort(folder: Path, n: int, duration_s: float) -> list[Path]:
    import mne

    from sourcelab.headmodel import load_head_model

    model = load_head_model()
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for i in range(n):
        p = folder / f"inv{i + 1:04d}.edf"
        mne.export.export_raw(p, invented_raw(model, 5000 + i, duration_s), fmt="edf",
                              verbose="error")
        paths.append(p)
    return paths


def p3(tmp: Path, n: int, duration_s: float) -> dict:
    from sourcelab.batch import Outcome, discover, make_engine, run_batch

    _, t_gen = _t(_write_cohort, tmp / "cohort", n, duration_s)
    items = discover([tmp / "cohort"])
    res = {"n_recordings": n, "duration_s": duration_s, "simulate_and_write_s": t_gen}
    runs = [("processes", 1), ("processes", 2)]
    try:
        import distributed  # noqa: F401

        runs.append(("dask", 2))
    except ImportError:
        res["dask"] = "not installed: dask run skipped"
    for kind, w in runs:
        t0 = time.perf_counter()
        with make_engine(kind, workers=w) as engine:
            t_start = time.perf_counter() - t0
            summary = run_batch(items, tmp / f"out_{kind}{w}", engine=engine, progress=False)
        wall = time.perf_counter() - t0
        per_worker: dict[str, list[Outcome]] = {}
        for o in summary.outcomes:
            per_worker.setdefault(o.worker, []).append(o)
        busy = max(sum(o.seconds for o in v) for v in per_worker.values())
        res[f"{kind}_{w}"] = {
            "wall_s": wall, "engine_start_s": t_start,
            "recordings_per_min": 60.0 * n / wall,
            "busy_recordings_per_min": 60.0 * n / busy,
            "failed": summary.count("failed"),
            "median_s_per_recording_in_worker": float(np.median(
                [o.seconds for o in summary.outcomes])),
            "recordings_per_worker": {k: len(v) for k, v in per_worker.items()},
            "peak_rss_mb_per_worker": {k: max(o.peak_rss_mb for o in v)
                                       for k, v in per_worker.items()},
            "rss_mb_after_first_vs_last": {k: [v[0].peak_rss_mb, v[-1].peak_rss_mb]
                                           for k, v in per_worker.items()},
        }
    one, two = res["processes_1"], res["processes_2"]
    res["speedup_2_vs_1"] = two["recordings_per_min"] / one["recordings_per_min"]
    res["scaling_efficiency_2"] = res["speedup_2_vs_1"] / 2
    res["busy_scaling_efficiency_2"] = (two["busy_recordings_per_min"]
                                        / one["busy_recordings_per_min"] / 2)
    res["max_peak_rss_mb"] = max(max(res[f"{k}_{w}"]["peak_rss_mb_per_worker"].values())
                                 for k, w in runs)
    with open(tmp / "out_processes2" / "group_roi_table.tsv", encoding="utf-8") as f:
        res["group_rows"] = sum(1 for _ in f) - 1
    return res


# ----------------------------------------------------------------------------------------- P4

def p4(tmp: Path, sizes=(100, 200)) -> dict:
    """build_norms timing on full-size tables: analysed invented recordings, varied per
    participant (log-normal scaling with an age trend) so that 200 participants are distinct."""
    from sourcelab.config import AnalysisConfig
    from sourcelab.headmodel import load_head_model
    from sourcelab.norms import norms_from_tables as build_norms
    from sourcelab.analysis import analyze, fingerprint_for

    config = AnalysisConfig()
    model = load_head_model()
    bases = [analyze(invented_raw(model, 9000 + i, 70.0), config=config) for i in range(4)]
    rng = np.random.default_rng(4)

    def entry(i):
        b = bases[i % len(bases)]
        age = float(rng.uniform(18, 80))
        out = []
        for t in (b.roi_table, b.sensor_table):
            t = t.copy()
            f = np.exp(rng.normal(0, 0.25, len(t)) - 0.004 * (age - 18))
            rel = t.measure == "relative"
            v = t.value.to_numpy() * f
            v[rel.to_numpy()] = np.clip(v[rel.to_numpy()], 1e-6, 1 - 1e-6)
            t["value"] = v
            out.append(t)
        return (f"inv{i + 1:04d}", age, out[0], out[1])

    entries = [entry(i) for i in range(max(sizes))]
    fp = fingerprint_for(config)
    res = {"rows_per_participant": int(len(entries[0][2]) + len(entries[0][3]))}
    for n in sizes:
        _, t = _t(build_norms, entries[:n], fingerprint=fp, condition="eyes closed")
        res[f"n{n}_s"] = t
    res["growth_200_over_100"] = res[f"n{sizes[1]}_s"] / res[f"n{sizes[0]}_s"]
    return res


# ----------------------------------------------------------------------------------------- main

def _fmt(results: dict) -> str:
    L = ["# sourcelab benchmark results", "",
         f"Machine: {results['machine']}", ""]
    p = results.get("P1")
    if p:
        L += ["## P1 one 10-minute recording → ROI table", "",
              f"- {p['recording']}",
              f"- sourcelab (cross-spectra → sLORETA power → ROI means): "
              f"**{p['sourcelab_core_s'] * 1e3:.1f} ms**",
              f"- MNE compute_source_psd route: **{p['mne_compute_source_psd_s']:.2f} s**",
              f"- ratio: **{p['ratio']:.0f}×** wall, {p['ratio_cpu']:.0f}× CPU time "
              f"({p['sourcelab_core_cpu_s']:.3f} s vs {p['mne_cpu_s']:.1f} s) "
              f"(goal ≥ {GOALS['P1_ratio']:.0f}×)",
              "- map correlation per band: " + ", ".join(
                  f"{b} {r:.7f}" for b, r in p["r_map_per_band"].items())
              + f" (goal ≥ {GOALS['P1_r']})",
              "- ROI correlation per band: " + ", ".join(
                  f"{b} {r:.7f}" for b, r in p["r_roi_per_band"].items()),
              f"- MNE/sourcelab power ratio, coefficient of variation over sources and bands: "
              f"{p['mne_over_sourcelab_scale_cv']:.2e} (a constant factor)",
              f"- analyze(raw in memory): {p['analyze_raw_in_memory_s']:.2f} s; "
              f"file → table (analyze(EDF path), warm): **{p['file_to_table_s']:.2f} s** "
              f"(goal ≤ {GOALS['P1_file_to_table_s']} s) with the default {p['n_boot_default']} "
              f"bootstrap resamples; without intervals (n_boot = 0): "
              f"**{p['file_to_table_no_bootstrap_s']:.2f} s**",
              f"- peak RSS of a fresh process analysing the 10-minute file: "
              f"{p['analyze_10min_fresh_process_peak_rss_mb']:.0f} MiB", f"- {p['notes']}", ""]
    p = results.get("P2")
    if p:
        L += ["## P2 head-model load", "",
              f"- first in process {p['first_in_process_s']:.3f} s; warm "
              f"**{p['warm_s']:.3f} s** (median {p['warm_median_s']:.3f}; goal ≤ "
              f"{GOALS['P2_warm_s']} s); cached {p['cached_s'] * 1e6:.0f} µs", ""]
    p = results.get("P3")
    if p:
        L += [f"## P3 batch: {p['n_recordings']} invented {p['duration_s']:.0f}-s recordings", ""]
        for key in ("processes_1", "processes_2", "dask_2"):
            q = p.get(key)
            if not isinstance(q, dict):
                continue
            L.append(f"- {key.replace('_', ', ')} worker(s): {q['wall_s']:.1f} s wall "
                     f"(engine start {q['engine_start_s']:.1f} s), "
                     f"**{q['recordings_per_min']:.1f} recordings/min** "
                     f"({q['busy_recordings_per_min']:.1f}/min counting worker busy time), "
                     f"{q['failed']} failed, recordings per worker "
                     + "/".join(str(v) for v in q["recordings_per_worker"].values())
                     + ", peak RSS per worker (MiB) "
                     + ", ".join(f"{v:.0f}" for v in q["peak_rss_mb_per_worker"].values()))
        L += [f"- processes 2 vs 1: speed-up {p['speedup_2_vs_1']:.2f}×, scaling efficiency "
              f"**{p['scaling_efficiency_2']:.0%}** wall ({p['busy_scaling_efficiency_2']:.0%} "
              f"on worker busy time); max peak RSS **{p['max_peak_rss_mb']:.0f} MiB** "
              f"(goal ≤ {GOALS['P3_peak_rss_mb']:.0f})", ""]
    p = results.get("P4")
    if p:
        L += ["## P4 build_norms", "",
              f"- {p['rows_per_participant']} rows per participant; 100: "
              f"**{p['n100_s']:.2f} s**, 200: **{p['n200_s']:.2f} s** "
              f"(200/100 = {p['growth_200_over_100']:.2f}; linear = 2)", ""]
    return "\n".join(L)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--only", default="P1,P2,P3,P4", help="comma-separated subset")
    ap.add_argument("--n-batch", type=int, default=100, help="P3 cohort size (default 100)")
    ap.add_argument("--batch-duration", type=float, default=70.0,
                    help="P3 recording length, s (default 70)")
    ap.add_argument("--out", default=str(HERE / "results"), help="results path stem")
    args = ap.parse_args(argv)
    only = {s.strip().upper() for s in args.only.split(",")}
    import logging

    logging.getLogger("sourcelab").setLevel(logging.ERROR)
    results = {"machine": f"{platform.machine()}, {os.cpu_count()} cores, Python "
                          f"{platform.python_version()}, load average at start "
                          f"{os.getloadavg()[0]:.1f}"}
    with tempfile.TemporaryDirectory(prefix="sourcelab-bench-") as d:
        tmp = Path(d)
        for name, fn in (("P2", p2), ("P1", lambda: p1(tmp)),
                         ("P3", lambda: p3(tmp, args.n_batch, args.batch_duration)),
                         ("P4", lambda: p4(tmp))):
            if name in only:
                print(f"running {name} ...", file=sys.stderr, flush=True)
                results[name] = fn()
    results["machine"] += f", load average at end {os.getloadavg()[0]:.1f}"
    text = _fmt(results)
    print(text)
    out = Path(args.out)
    out.with_suffix(".json").write_text(json.dumps(results, indent=2), encoding="utf-8")
    out.with_suffix(".md").write_text(text + "\n", encoding="utf-8")
    print(f"wrote {out.with_suffix('.json')} and {out.with_suffix('.md')}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
