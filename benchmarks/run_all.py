"""sourcelab speed goals (issue 19) in one run: each goal with today's value, saved as it goes.

    python benchmarks/run_all.py                 # quick mode (the default): every goal, < ~5 min
    python -m benchmarks.run_all --full          # longer recordings, more repeats, 40 in the batch
    python -m benchmarks.run_all --only startup,atlas_list
    python benchmarks/run_all.py --out /tmp/res  # writes /tmp/res.json and /tmp/res.md

Run from the repository root with sourcelab installed (editable or not).  Everything that is timed
as "a process" runs in a fresh interpreter started with ``-I`` (isolated: neither the current
directory nor ``PYTHONPATH`` on ``sys.path``) in a temporary working directory, so it uses the
*installed* package, as a user's shell would.

Goals are ratios measured in the same run on the same machine (the machine is shared: the load
average is printed beside every value and medians are reported):

startup       ``sourcelab --help`` wall and the ``-X importtime`` total of ``sourcelab.cli.main``
atlas_list    ``sourcelab atlas list`` wall
analyze_10    tables-only ``sourcelab analyze`` of a 10-min recording vs a floor process (MNE's EDF
              reader + one Hann-windowed FFT pass + band cross-spectra), both fresh processes;
              peak resident memory of the analysis process
analyze_60    the same for a 60-min recording (peak memory)
exponent      time of ``analyze(path)`` (warm, in one process) over 1-10 min (quick) or 1-60 min
              (full) recordings, log-log slope
core_vs_mne   sourcelab's cross-spectral core vs MNE's ``csd_array_fourier`` ->
              ``apply_inverse_cov``
              and vs ``compute_source_psd`` (sLORETA), same clean epochs; map correlation
outputs       ``sourcelab demo`` wall (simulate, analyse, all outputs) and, by difference with
              ``sourcelab demo --no-figures --no-report --no-maps``, the time of all outputs
              (figures, report, maps); whole fresh processes, alternated
batch         ``run_batch`` with 2 worker processes vs 1 (and a 2-worker Dask local cluster if
              ``distributed`` is installed) on 20 30-s (quick) or 40 70-s (full) recordings
headmodel, norms (``--full`` only) the template head-model load and ``build_norms`` growth

All recordings are invented (simulated through the shipped template head model) and cached in
``~/.cache/sourcelab-bench`` (``SOURCELAB_BENCH_CACHE``) so that reruns skip the simulation.
"""

from __future__ import annotations

import argparse
import datetime
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
CACHE = Path(os.environ.get("SOURCELAB_BENCH_CACHE", Path.home() / ".cache" / "sourcelab-bench"))

#: (key, description, target, unit, comparison) — the goals of issue 19
GOALS = {
    "startup_s": ("CLI start-up (`sourcelab --help` wall)", 0.5, "s", "<="),
    "import_cli_s": ("import sourcelab.cli.main (-X importtime total)", 0.5, "s", "<="),
    "atlas_list_s": ("`sourcelab atlas list` wall", 1.0, "s", "<="),
    "analyze10_over_floor": ("tables-only analyze 10 min / floor process", 3.0, "×", "<="),
    "peak_mb_10": ("peak memory, 10-min analyze", 500.0, "MiB", "<="),
    "peak_mb_60": ("peak memory, 60-min analyze", 800.0, "MiB", "<="),
    "length_exponent": ("time ∝ length^k (between the two longest lengths run)", 1.1, "", "<="),
    "core_over_mne_cov": ("core vs csd_array_fourier → apply_inverse_cov", 10.0, "×", ">="),
    "core_over_mne_psd": ("core vs compute_source_psd (sLORETA)", 500.0, "×", ">="),
    "core_min_r": (
        "map correlation core vs compute_source_psd (min over bands)",
        0.999999,
        "",
        ">=",
    ),
    "all_outputs_s": (
        "all outputs (figures, report, maps): demo minus tables-only demo",
        8.0,
        "s",
        "<=",
    ),
    "demo_wall_s": ("`sourcelab demo` wall", 12.0, "s", "<="),
    "batch_speedup_2": ("batch 2 worker processes vs 1", 1.7, "×", ">="),
    "dask_over_pool": ("Dask local cluster (2) / process pool (2) throughput", 0.85, "", ">="),
}


#: Why a goal can be missed today (shown under the table for every goal not met).
WHY = {
    "analyze10_over_floor": (
        "The default analysis is much more than the floor: 1,000 bootstrap replicates of ROI "
        "relative power over every labelled source (n_boot x sources x 171 quadratic-form terms, "
        "the largest single cost), pair and network coupling with 199 replicates each, ICA "
        "ocular correction (MNE + scikit-learn FastICA, also their import), leakage and "
        "resolvability tables, and 1-3 s of imports (scipy.signal/stats, pandas, sklearn) that "
        "the floor does not pay; under a load far above the core count the longer process is "
        "interrupted more, which inflates the ratio."
    ),
    "peak_mb_10": (
        "The peak is in the coupling statistics (per epoch, bin and pair, six float32 "
        "arrays) or in cleaning."
    ),
    "peak_mb_60": (
        "The peak is in the coupling statistics (the envelope moments of network coupling, "
        "per epoch x bin x pair): cleaning now works inside the recording's own buffer and "
        "builds the epochs there (one float64 copy of the hour, ~140 MB, instead of three)."
    ),
    "core_over_mne_psd": (
        "In quick mode compute_source_psd runs on 1 minute (30 epochs), where the core's "
        "fixed cost (operator products, ROI means) dominates its time; use --full for the "
        "10-minute comparison; a heavy load also slows the short core more."
    ),
    "batch_speedup_2": (
        "With the load average far above the 2 cores a second worker gains little (most "
        "likely the scheduler shares the CPU between sessions, not processes); the goal can only "
        "be judged on a quiet "
        "machine; each worker now starts with one BLAS/OpenMP thread."
    ),
    "dask_over_pool": (
        "Dask starts a scheduler, two nannies and their workers (2-6 s of the wall on a busy "
        "machine) and its runs come last, when the load is usually highest; its workers now run "
        "as the pool's (no MALLOC_TRIM_THRESHOLD_ from the nanny, which cost ~18 % CPU in page "
        "faults, no profiler, one BLAS thread)."
    ),
    "all_outputs_s": (
        "About 76 figures (glass brains, surfaces, ROI charts, coupling, scalp maps), each a "
        "matplotlib figure of 1-10 axes whose text (matplotlib 3.11's shaped text layout) and "
        "axes set-up dominate; two worker processes draw them, the HTML and PDF reports and the "
        "maps follow in one process; a load above the core count stretches every wall time."
    ),
    "demo_wall_s": (
        "The demo is the whole pipeline (simulation, default analysis with bootstrap intervals, "
        "coupling and ocular correction) plus all outputs; see the row above."
    ),
    "core_over_mne_cov": (
        "The core's time is short (tens of ms) and suffers most from a heavy load."
    ),
}


def _load() -> float:
    return float(os.getloadavg()[0])


def _median(x) -> float:
    return float(np.median(np.asarray(x, dtype=float)))


# ------------------------------------------------------------------------------ invented data


def invented_raw(model, seed: int, duration_s: float):
    """An invented resting recording: bilateral occipital alpha, frontal theta, central beta."""
    from sourcelab.simulate import Generator, simulate_raw

    rng = np.random.default_rng(seed)
    a = rng.uniform(0.2, 0.45)
    gens = (
        Generator((-18, -92, 4), "left", amplitude=a),
        Generator((20, -92, 4), "right", amplitude=a),
        Generator((4, 40, 20), "right", freq=6.0, amplitude=rng.uniform(0.1, 0.4)),
        Generator(
            (-38, -20, 55), "left", freq=18.0, bandwidth=6.0, amplitude=rng.uniform(0.1, 0.3)
        ),
    )
    return simulate_raw(
        model, duration_s=duration_s, sfreq=256.0, generators=gens, background_uv=10.0, rng=rng
    )


def _recording_path(seed: int, duration_s: float, folder: Path | None = None) -> Path:
    """An invented EDF, simulated once and cached (keyed by sourcelab version, seed, length)."""
    import sourcelab

    folder = folder or CACHE / f"recordings-{sourcelab.__version__}"
    path = folder / f"invented_{seed}_{duration_s:g}s.edf"
    if path.exists():
        return path
    import mne

    from sourcelab.headmodel import load_head_model

    folder.mkdir(parents=True, exist_ok=True)
    raw = invented_raw(load_head_model(), seed, duration_s)
    tmp = path.with_name(path.stem + ".part.edf")
    mne.export.export_raw(tmp, raw, fmt="edf", verbose="error", overwrite=True)
    os.replace(tmp, path)
    return path


def _cohort(n: int, duration_s: float) -> Path:
    import sourcelab

    folder = CACHE / f"cohort-{sourcelab.__version__}-{n}x{duration_s:g}s"
    for i in range(n):
        _recording_path(5000 + i, duration_s, folder)
    return folder


# ------------------------------------------------------------------------------ fresh processes

#: Run in a fresh ``python -I`` process: a CLI command or the floor, then write the process's own
#: peak resident memory (VmHWM, reset at exec; ru_maxrss is not) and exit code as JSON.
_CHILD = r"""
import json, sys
report, mode, args = sys.argv[1], sys.argv[2], sys.argv[3:]

def peak_mb():
    try:
        with open("/proc/self/status", encoding="ascii") as f:
            for line in f:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024.0
    except OSError:
        pass
    import resource
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0

rc = 0
if mode == "cli":
    from sourcelab.cli.main import main
    try:
        rc = main(args)
    except SystemExit as e:
        rc = e.code if isinstance(e.code, int) else 0
elif mode == "floor":
    # the physical floor: read the EDF with MNE, one Hann-windowed FFT pass over 2-s epochs,
    # the band cross-spectra (and the broadband one) averaged over epochs
    import numpy as np
    import mne
    path, epoch_s, edges = args[0], float(args[1]), json.loads(args[2])
    raw = mne.io.read_raw_edf(path, preload=True, verbose="error")
    x = raw.get_data()
    sf = raw.info["sfreq"]
    n = int(round(epoch_s * sf))
    ne = x.shape[1] // n
    ep = x[:, :ne * n].reshape(x.shape[0], ne, n).transpose(1, 0, 2)
    f = np.fft.rfft(ep * np.hanning(n), axis=-1)
    freqs = np.fft.rfftfreq(n, 1 / sf)
    out = []
    for lo, hi in edges:
        s = f[..., (freqs >= lo) & (freqs < hi)]
        out.append(np.einsum("ecf,edf->cd", s, s.conj()).real / ne)
    assert np.isfinite(np.stack(out)).all()
elif mode == "pass":
    pass
with open(report, "w", encoding="utf-8") as fh:
    json.dump({"peak_mb": peak_mb(), "rc": rc}, fh)
"""


def _process(mode: str, *args: str, extra_flags: tuple[str, ...] = ()) -> dict:
    """Wall time, peak memory and exit code of one fresh isolated interpreter."""
    with tempfile.TemporaryDirectory(prefix="sourcelab-bench-proc-") as d:
        report = Path(d) / "report.json"
        cmd = [sys.executable, "-I", *extra_flags, "-c", _CHILD, str(report), mode, *args]
        t0 = time.perf_counter()
        p = subprocess.run(cmd, cwd=d, capture_output=True, text=True)
        wall = time.perf_counter() - t0
        if p.returncode != 0 or not report.exists():
            raise RuntimeError(
                f"{mode} {' '.join(args)} failed (exit {p.returncode}): {p.stderr.strip()[-800:]}"
            )
        rep = json.loads(report.read_text(encoding="utf-8"))
        if rep["rc"] not in (0, None):
            raise RuntimeError(
                f"{mode} {' '.join(args)}: exit code {rep['rc']}: {p.stderr.strip()[-800:]}"
            )
        return {"wall_s": wall, "peak_mb": rep["peak_mb"], "stderr": p.stderr}


def _analyze_cli(path: Path, out: Path) -> dict:
    return _process(
        "cli", "analyze", str(path), "--out", str(out), "--no-figures", "--no-report", "--no-maps"
    )


def _floor(path: Path) -> dict:
    from sourcelab.config import AnalysisConfig

    c = AnalysisConfig()
    edges = [list(e) for e in c.bands.edges] + [[1.0, 45.0]]
    return _process("floor", str(path), str(getattr(c, "epoch_s", 2.0)), json.dumps(edges))


# ------------------------------------------------------------------------------ steps


def step_startup(opts) -> dict:
    python = [_process("pass")["wall_s"] for _ in range(opts.reps)]
    helps = [_process("cli", "--help")["wall_s"] for _ in range(opts.reps)]

    def top_level(code):
        with tempfile.TemporaryDirectory() as d:
            p = subprocess.run(
                [sys.executable, "-I", "-X", "importtime", "-c", code],
                cwd=d,
                capture_output=True,
                text=True,
                check=True,
            )
        out = {}
        for line in p.stderr.splitlines():
            parts = line.split("|")
            # top-level imports have one space before the name; nested ones more
            if len(parts) == 3 and parts[2].startswith(" ") and not parts[2].startswith("  "):
                try:
                    out[parts[2].strip()] = int(parts[1]) / 1e6
                except ValueError:
                    pass
        return out

    bare = set(top_level("pass"))  # what the interpreter itself imports at start-up
    imports = [
        sum(v for k, v in top_level("import sourcelab.cli.main").items() if k not in bare)
        for _ in range(opts.reps)
    ]
    return {
        "values": {"startup_s": _median(helps), "import_cli_s": _median(imports)},
        "python_bare_s": _median(python),
        "help_runs_s": helps,
        "import_runs_s": imports,
        "note": "`python -I -c <wrapper> cli --help`: the wall includes the interpreter "
        "itself (python_bare_s)",
    }


def step_atlas_list(opts) -> dict:
    runs = [_process("cli", "atlas", "list")["wall_s"] for _ in range(opts.reps)]
    return {"values": {"atlas_list_s": _median(runs)}, "runs_s": runs}


def step_analyze_10(opts) -> dict:
    path = _recording_path(2026, 600.0)
    floors, walls, peaks = [], [], []
    with tempfile.TemporaryDirectory(prefix="sourcelab-bench-") as d:
        for i in range(opts.reps):
            floors.append(_floor(path)["wall_s"])
            r = _analyze_cli(path, Path(d) / f"out{i}")
            walls.append(r["wall_s"])
            peaks.append(r["peak_mb"])
    return {
        "values": {
            "analyze10_over_floor": _median(walls) / _median(floors),
            "peak_mb_10": max(peaks),
        },
        "floor_s": floors,
        "analyze_s": walls,
        "peak_mb": peaks,
        "note": "fresh processes, alternating floor and analyze; `sourcelab analyze REC --out "
        "D --no-figures --no-report --no-maps` with the default configuration "
        "(bootstrap intervals, coupling, ocular correction on)",
    }


def step_analyze_60(opts) -> dict:
    path = _recording_path(2027, 3600.0)
    with tempfile.TemporaryDirectory(prefix="sourcelab-bench-") as d:
        fl = _floor(path)
        r = _analyze_cli(path, Path(d) / "out")
    return {
        "values": {"peak_mb_60": r["peak_mb"]},
        "analyze_s": r["wall_s"],
        "floor_s": fl["wall_s"],
        "analyze_over_floor": r["wall_s"] / fl["wall_s"],
    }


_EXPONENT_CHILD = r"""
import json, sys, time, logging
logging.getLogger("sourcelab").setLevel(logging.ERROR)
from sourcelab.analysis import analyze
paths, reps = json.loads(sys.argv[1]), int(sys.argv[2])
analyze(paths[0])  # warm the caches (imports, head model, operator, atlases)
out = []
for p in paths:
    ts = []
    for _ in range(reps):
        t0 = time.perf_counter(); analyze(p); ts.append(time.perf_counter() - t0)
    out.append(sorted(ts)[len(ts) // 2])
print(json.dumps(out))
"""


def step_exponent(opts) -> dict:
    minutes = (1, 5, 10, 30, 60) if opts.full else (1, 3, 10)
    paths = [str(_recording_path(3000 + m, 60.0 * m)) for m in minutes]
    with tempfile.TemporaryDirectory() as d:
        p = subprocess.run(
            [
                sys.executable,
                "-I",
                "-c",
                _EXPONENT_CHILD,
                json.dumps(paths),
                str(3 if opts.full else 1),
            ],
            cwd=d,
            capture_output=True,
            text=True,
        )
    if p.returncode != 0:
        raise RuntimeError(p.stderr[-800:])
    times = json.loads(p.stdout.strip().splitlines()[-1])
    k_fit = float(np.polyfit(np.log(minutes), np.log(times), 1)[0])
    # the slope between the two longest recordings: fixed per-analysis costs flatten the fit
    # over short ones, the marginal slope shows any super-linear part
    k_last = float(np.log(times[-1] / times[-2]) / np.log(minutes[-1] / minutes[-2]))
    return {
        "values": {"length_exponent": k_last},
        "minutes": list(minutes),
        "analyze_s": times,
        "fit_exponent_all_lengths": k_fit,
        "note": "analyze(EDF path) in one warm process, median per length; goal value = "
        "slope of log(time) on log(length) between the two longest recordings",
    }


def step_core_vs_mne(opts) -> dict:
    import mne

    from sourcelab.config import AnalysisConfig
    from sourcelab.headmodel import load_head_model, make_info, to_mne_forward
    from sourcelab.intake import clean_recording, read_recording
    from sourcelab.inverse import inverse_operator
    from sourcelab.rois import load_atlas
    from sourcelab.spectra import epoch_cross_spectra

    config = AnalysisConfig()
    model = load_head_model()
    res = {}
    # csd route on 10 min; compute_source_psd (minutes per run) on 10 min with --full, else 1 min
    for route, minutes in (("cov", 10), ("psd", 10 if opts.full else 1)):
        path = _recording_path(2026 if minutes == 10 else 2028, 60.0 * minutes)
        atlas = load_atlas("brodmann")
        idx = [roi.vertices for roi in atlas.rois]
        clean = clean_recording(read_recording(path), config)
        epochs_uv = clean.epochs
        n_ep, n_ch, n_t = epochs_uv.shape
        op = inverse_operator(config.method, config.orientation, config.lambda2)

        def ours():
            csd = epoch_cross_spectra(epochs_uv, clean.sfreq, config.bands).mean(axis=0)
            power = op.power(csd)
            return power, np.stack([power[:, v].mean(axis=1) for v in idx], axis=1)

        ours()
        t_ours = [time.perf_counter()]
        for _ in range(9):
            ours()
            t_ours.append(time.perf_counter())
        t_ours = _median(np.diff(t_ours))
        power_ours, _ = ours()
        info = make_info(clean.sfreq, average_reference=True)
        fwd = to_mne_forward(model, info)  # built once, not timed
        noise = mne.Covariance(
            np.eye(n_ch) * 1e-12, info["ch_names"], [], info["projs"], nfree=10**6, verbose="error"
        )
        data_v = epochs_uv * 1e-6

        def make_inv():
            return mne.minimum_norm.make_inverse_operator(
                info, fwd, noise, loose=0.0, fixed=True, depth=None, verbose="error"
            )

        if route == "cov":

            def theirs(inv=None):
                inv = inv if inv is not None else make_inv()
                csd = mne.time_frequency.csd_array_fourier(
                    data_v, clean.sfreq, fmin=0.5, fmax=45.5, n_fft=n_t, verbose="error"
                )
                f = np.asarray(csd.frequencies)
                out = []
                for lo, hi in config.bands.edges:
                    sel = np.flatnonzero((f >= lo) & (f < hi))
                    c = np.sum([csd.get_data(index=int(i)) for i in sel], axis=0).real
                    cov = mne.Covariance(
                        c, info["ch_names"], [], info["projs"], nfree=n_ep, verbose="error"
                    )
                    stc = mne.minimum_norm.apply_inverse_cov(
                        cov,
                        info,
                        inv,
                        nave=1,
                        lambda2=config.lambda2,
                        method="sLORETA",
                        verbose="error",
                    )
                    out.append(stc.data[:, 0])
                return np.stack(out)

            reps = 5 if opts.full else 3
        else:
            mraw = mne.io.RawArray(np.concatenate(list(data_v), axis=1), info, verbose="error")

            def theirs(inv=None):
                inv = inv if inv is not None else make_inv()
                stc = mne.minimum_norm.compute_source_psd(
                    mraw,
                    inv,
                    lambda2=config.lambda2,
                    method="sLORETA",
                    n_fft=n_t,
                    overlap=0.0,
                    fmin=0.0,
                    fmax=clean.sfreq / 2,
                    bandwidth="hann",
                    pca=True,
                    verbose="error",
                )
                f = stc.times
                return np.stack(
                    [stc.data[:, (f >= lo) & (f < hi)].sum(axis=1) for lo, hi in config.bands.edges]
                )

            reps = 1
        t_mne = []
        for _ in range(reps):
            t0 = time.perf_counter()
            power_mne = theirs()
            t_mne.append(time.perf_counter() - t0)
        if route == "cov" or opts.full:
            inv = make_inv()
            t0 = time.perf_counter()
            theirs(inv)
            t_mne_no_inv = time.perf_counter() - t0
        else:
            t_mne_no_inv = None  # not measured in quick mode (a second multi-second run)
        r = [
            float(np.corrcoef(power_ours[i], power_mne[i])[0, 1])
            for i in range(len(config.bands.names))
        ]
        res[route] = {
            "minutes": minutes,
            "n_epochs": n_ep,
            "core_s": t_ours,
            "mne_s": _median(t_mne),
            "mne_runs_s": t_mne,
            "ratio": _median(t_mne) / t_ours,
            "mne_without_make_inverse_s": t_mne_no_inv,
            "ratio_without_make_inverse": (None if t_mne_no_inv is None else t_mne_no_inv / t_ours),
            "r_per_band": dict(zip(config.bands.names, r)),
        }
    return {
        "values": {
            "core_over_mne_cov": res["cov"]["ratio"],
            "core_over_mne_psd": res["psd"]["ratio"],
            # the goal names compute_source_psd's maps; csd_array_fourier tapers with a
            # symmetric Hann window (np.hanning in MNE's _csd_fourier), the core and
            # compute_source_psd with the periodic one (Welch's), so its r is shown beside only
            "core_min_r": min(res["psd"]["r_per_band"].values()),
        },
        **res,
        "note": "same clean epochs; core = band cross-spectra + sLORETA power + Brodmann ROI "
        "means (median of 10, operator cached); MNE = make_inverse_operator (same "
        "forward via to_mne_forward, identity noise covariance, fixed orientation) "
        "+ its route, ROI means not counted; 'without make_inverse' beside it; the csd route's "
        "r is below 1 by ~1e-6 because csd_array_fourier uses a symmetric Hann window",
    }


def step_outputs(opts) -> dict:
    reps = opts.reps if opts.full else 1
    full, tables, loads = [], [], []
    tables_only = ("--no-figures", "--no-report", "--no-maps")
    with tempfile.TemporaryDirectory(prefix="sourcelab-bench-") as d:
        for i in range(reps):
            full.append(_process("cli", "demo", "--out", str(Path(d) / f"all{i}"))["wall_s"])
            loads.append(_load())
            out = str(Path(d) / f"tables{i}")
            tables.append(_process("cli", "demo", "--out", out, *tables_only)["wall_s"])
            loads.append(_load())
    return {
        "values": {
            "all_outputs_s": max(0.0, _median(full) - _median(tables)),
            "demo_wall_s": _median(full),
        },
        "demo_s": full,
        "demo_tables_only_s": tables,
        "load_after_each": loads,
        "note": "fresh processes, alternating `sourcelab demo --out D` and `sourcelab demo --out "
        "D --no-figures --no-report --no-maps`; all outputs = the difference of their medians "
        f"({reps} run{'s' if reps > 1 else ''} each)",
    }


def step_batch(opts) -> dict:
    from sourcelab.batch import discover, make_engine, run_batch

    n, dur = (40, 70.0) if opts.full else (20, 30.0)
    folder = _cohort(n, dur)
    items = discover([folder])
    res = {"n_recordings": n, "duration_s": dur}
    runs = [("processes", 1), ("processes", 2)]
    try:
        import distributed  # noqa: F401

        runs.append(("dask", 2))
    except ImportError:
        res["dask"] = "not installed: dask run skipped"
    with tempfile.TemporaryDirectory(prefix="sourcelab-bench-") as d:
        for kind, w in runs:
            t0 = time.perf_counter()
            with make_engine(kind, workers=w) as engine:
                summary = run_batch(
                    items, Path(d) / f"out_{kind}{w}", engine=engine, progress=False
                )
            wall = time.perf_counter() - t0
            res[f"{kind}_{w}"] = {
                "wall_s": wall,
                "recordings_per_min": 60.0 * n / wall,
                "failed": summary.count("failed"),
                "max_peak_rss_mb": max(o.peak_rss_mb for o in summary.outcomes),
                "load": _load(),
            }
    values = {
        "batch_speedup_2": res["processes_2"]["recordings_per_min"]
        / res["processes_1"]["recordings_per_min"]
    }
    if "dask_2" in res:
        values["dask_over_pool"] = (
            res["dask_2"]["recordings_per_min"] / res["processes_2"]["recordings_per_min"]
        )
    return {
        "values": values,
        **res,
        "note": "run_batch as `sourcelab batch` (tables only, default configuration); wall "
        "includes starting the workers",
    }


def step_headmodel(opts) -> dict:
    from sourcelab.headmodel import load, load_head_model

    warm = []
    for _ in range(5):
        load._load_shipped.cache_clear()
        t0 = time.perf_counter()
        load_head_model()
        warm.append(time.perf_counter() - t0)
    return {"values": {}, "warm_median_s": _median(warm)}


def step_norms(opts) -> dict:
    from sourcelab.analysis import analyze, fingerprint_for
    from sourcelab.config import AnalysisConfig
    from sourcelab.norms import norms_from_tables as build_norms

    config = AnalysisConfig()
    bases = [analyze(_recording_path(9000 + i, 70.0), config=config) for i in range(4)]
    rng = np.random.default_rng(4)

    def entry(i):
        b = bases[i % len(bases)]
        age = float(rng.uniform(18, 80))
        out = []
        for t in (b.roi_table, b.sensor_table):
            t = t.copy()
            f = np.exp(rng.normal(0, 0.25, len(t)) - 0.004 * (age - 18))
            rel = (t.measure == "relative").to_numpy()
            v = t.value.to_numpy() * f
            v[rel] = np.clip(v[rel], 1e-6, 1 - 1e-6)
            t["value"] = v
            out.append(t)
        return (f"inv{i + 1:04d}", age, out[0], out[1])

    entries = [entry(i) for i in range(200)]
    fp = fingerprint_for(config)
    res = {}
    for n in (100, 200):
        t0 = time.perf_counter()
        build_norms(entries[:n], fingerprint=fp, condition="eyes closed")
        res[f"n{n}_s"] = time.perf_counter() - t0
    return {"values": {}, **res, "growth_200_over_100": res["n200_s"] / res["n100_s"]}


STEPS = {
    "startup": step_startup,
    "atlas_list": step_atlas_list,
    "analyze_10": step_analyze_10,
    "analyze_60": step_analyze_60,
    "exponent": step_exponent,
    "core_vs_mne": step_core_vs_mne,
    "outputs": step_outputs,
    "batch": step_batch,
    "headmodel": step_headmodel,
    "norms": step_norms,
}
FULL_ONLY = ("headmodel", "norms")


# ------------------------------------------------------------------------------ reporting


def _met(key: str, value: float) -> bool:
    _, target, _, cmp = GOALS[key]
    return value <= target if cmp == "<=" else value >= target


def _fmt_value(key: str, value: float) -> str:
    unit = GOALS[key][2]
    if key == "core_min_r":
        return f"{value:.7f}"
    if unit == "s":
        return f"{value:.2f} s"
    if unit == "MiB":
        return f"{value:.0f} MiB"
    if unit == "×":
        return f"{value:.2f}×" if value < 100 else f"{value:.0f}×"
    return f"{value:.4f}"


def goal_line(key: str, value: float, load: float) -> str:
    desc, target, unit, cmp = GOALS[key]
    tgt = f"{cmp} {_fmt_value(key, target)}".replace("<=", "≤").replace(">=", "≥")
    return (
        f"| {desc} | {tgt} | **{_fmt_value(key, value)}** | "
        f"{'met' if _met(key, value) else 'NOT met'} | {load:.1f} |"
    )


def render(doc: dict) -> str:
    L = [
        "# sourcelab benchmark results (issue 19 goals)",
        "",
        f"Run {doc['started']} ({doc['mode']} mode); {doc['machine']}; sourcelab "
        f"{doc['sourcelab']} from `{doc['sourcelab_path']}`.",
        "",
        "Ratios compare numbers measured in the same run.  The machine is shared: the "
        "1-minute load average when each step finished is beside each value (2 cores).",
        "",
        *([f"Note: {doc['notes']}", ""] if doc.get("notes") else []),
        "| goal | target | today | | load |",
        "|---|---|---|---|---|",
    ]
    for name, step in doc["steps"].items():
        for key, value in step.get("values", {}).items():
            L.append(goal_line(key, value, step["load_end"]))
    L += [""]
    missed = [
        (k, v)
        for step in doc["steps"].values()
        for k, v in step.get("values", {}).items()
        if not _met(k, v)
    ]
    if missed:
        L += ["Goals not met, by how much and why:", ""]
        for k, v in missed:
            target = GOALS[k][1]
            by = v / target if GOALS[k][3] == "<=" else target / v if v else float("inf")
            L.append(
                f"- {GOALS[k][0]}: {_fmt_value(k, v)} against {_fmt_value(k, target)}, "
                f"missed by a factor {by:.2f}. {WHY.get(k, '')}".rstrip()
            )
        L.append("")
    for name, step in doc["steps"].items():
        L.append(f"## {name}")
        L.append("")
        if "error" in step:
            L.append(f"- failed: {step['error']}")
        for k, v in step.items():
            if k in ("values", "load_end", "error"):
                continue
            L.append(f"- {k}: {_short(v)}")
        L.append("")
    return "\n".join(L)


def _short(v) -> str:
    if isinstance(v, float):
        return f"{v:.4g}"
    if isinstance(v, list):
        return "[" + ", ".join(_short(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{k}: {_short(x)}" for k, x in v.items()) + "}"
    return str(v)


def _write(doc: dict, out: Path) -> None:
    for suffix, text in (
        (".json", json.dumps(doc, indent=2, default=float)),
        (".md", render(doc) + "\n"),
    ):
        p = out.with_suffix(suffix)
        tmp = p.with_name(p.name + ".part")
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, p)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    mode = ap.add_mutually_exclusive_group()
    mode.add_argument("--quick", action="store_true", help="quick mode (the default)")
    mode.add_argument(
        "--full",
        action="store_true",
        help="10-min compute_source_psd, more repeats, 40-recording batch, "
        "head-model and norms steps",
    )
    ap.add_argument("--only", help="comma-separated steps: " + ", ".join(STEPS))
    ap.add_argument("--out", default=str(HERE / "results"), help="results path stem")
    ap.add_argument("--note", help="a remark about the run, printed in results.md")
    ap.add_argument(
        "--render-only", action="store_true", help="rewrite OUT.md from OUT.json (no measurement)"
    )
    args = ap.parse_args(argv)
    if args.render_only:
        out = Path(args.out)
        doc = json.loads(out.with_suffix(".json").read_text(encoding="utf-8"))
        if args.note:
            doc["notes"] = args.note
            out.with_suffix(".json").write_text(json.dumps(doc, indent=2), encoding="utf-8")
        out.with_suffix(".md").write_text(render(doc) + "\n", encoding="utf-8")
        return 0
    args.reps = 5 if args.full else 3
    names = (
        [s.strip() for s in args.only.split(",")]
        if args.only
        else [s for s in STEPS if args.full or s not in FULL_ONLY]
    )
    unknown = [s for s in names if s not in STEPS]
    if unknown:
        ap.error(f"--only: unknown step(s) {', '.join(unknown)}; choose from {', '.join(STEPS)}")
    import logging

    import sourcelab

    logging.getLogger("sourcelab").setLevel(logging.ERROR)
    doc = {
        "started": datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
        "mode": "full" if args.full else "quick",
        "machine": f"{platform.machine()}, {os.cpu_count()} cores, Python "
        f"{platform.python_version()}, load average at start {_load():.1f}",
        "sourcelab": sourcelab.__version__,
        "sourcelab_path": str(Path(sourcelab.__file__).parent),
        "notes": args.note or "",
        "steps": {},
    }
    out = Path(args.out)
    print("| goal | target | today | | load |\n|---|---|---|---|---|", flush=True)
    t_all = time.perf_counter()
    failed = 0
    for name in names:
        t0 = time.perf_counter()
        try:
            step = STEPS[name](args)
        except Exception as exc:  # a failed step is recorded, the others still run
            step = {"values": {}, "error": f"{type(exc).__name__}: {exc}"}
            failed += 1
            print(f"{name}: FAILED: {step['error']}", file=sys.stderr, flush=True)
        step["seconds"] = time.perf_counter() - t0
        step["load_end"] = _load()
        doc["steps"][name] = step
        _write(doc, out)  # saved as each step completes
        for key, value in step["values"].items():
            print(goal_line(key, value, step["load_end"]), flush=True)
    doc["total_s"] = time.perf_counter() - t_all
    doc["machine"] += f", at end {_load():.1f}"
    _write(doc, out)
    print(
        f"{doc['total_s']:.0f} s; wrote {out.with_suffix('.json')} and {out.with_suffix('.md')}",
        file=sys.stderr,
    )
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
