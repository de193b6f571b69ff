"""Benchmark: every pair and network coupling measure of a 10-minute recording.

Run: ``python benchmarks/bench_coupling.py [--minutes 10] [--reps 3] [--mne-reps 2]
[--mne-boot-reps 3] [--skip-mne]``.

An invented 10-minute, 19-channel, 256 Hz recording (``run_all.invented_raw``: occipital alpha,
frontal theta, central beta on pink background) is cleaned by ``sourcelab.intake`` into 2-s
epochs.  Measured in the same run:

* ``analyze``: the analysis of the same recording with its default configuration (1,000
  bootstrap replicates of band power) with coupling off (``coupling=False``) and on (the
  default: both tables, 199 coupling replicates), and on without coupling intervals
  (``coupling_n_boot=0``), warm caches, medians of ``--reps`` each, interleaved; the difference
  is what coupling adds to an analysis (wall and CPU time);
* ``coupling``: everything this package adds - tapered and untapered Fourier coefficients, the 171
  pairs x 5 bands x 9 measures + asymmetry with the analytic leakage null and the
  volume-conduction coherence (its covariance is fixed per head model and computed once, like
  the inverse operator), and the edges of lobes, yeo7 and networks (12/14/16 ROIs) x 5
  bands x 6 measures including the orthogonalised envelope correlation, with leakage
  expectations; both tidy tables (median of ``--reps``).  Also with the default 199 (median)
  and 1,000 (once) bootstrap replicates for intervals;
* ``mne``: the same measures with mne-connectivity, the edges from source (ROI) time series -
  ROI time series ``W x`` of the clean epochs (the same filters),
  ``spectral_connectivity_epochs(mode="fourier", method=["coh", "imcoh", "ciplv", "cohy"])``
  per bin over the bands' range, and ``envelope_correlation(orthogonalize="pairwise")`` of the
  band-passed (``mne.filter``), Hilbert-transformed ROI signals per band; the sensor pairs from
  the average-referenced epochs (as ours) with ``coh, imcoh, wpli, wpli2_debiased, ciplv, cohy,
  plv``.  Band values are the means over each band's bins (as ours); ``cohy`` gives lagged
  coherence per bin, phase and lag, ``plv`` the phase dispersion, so both routes compute every
  pair and edge measure (MNE has no leakage null or bootstrap; the asymmetry of band power is
  left out: a few sums).  It runs interleaved with ours, both the default coupling step (199
  replicates, nulls, tables) and measures only (no intervals), ``max(3, --reps, --mne-reps)``
  runs of ours and ``max(2, --mne-reps)`` of MNE's, medians of process CPU and wall time, load
  printed; the ratio to both.
* ``mne`` with intervals, like for like with our default: what an MNE user writes for
  bootstrap intervals over epochs - the epochs resampled with replacement (as many as there
  are) and ``spectral_connectivity_epochs`` + ``envelope_correlation`` rerun per replicate, the
  same 199 replicates as ours.  The ROI projection and band-pass filters act on each epoch
  alone, so they are made once and resampled (exact, and cheaper than redoing them; their
  share of MNE's point-estimate time is printed).  199 replicates would take some 25 minutes:
  ``--mne-boot-reps`` (3) replicates are run, interleaved with the rest, and the cost with
  intervals is **extrapolated**: point estimates + 199 x the median replicate (the
  percentiles over the replicates, milliseconds, left out).  Three ratios
  from the same run: measures only (MNE's point estimates / ours without intervals), with
  intervals (MNE extrapolated / our default), and the mixed one (MNE's point estimates / our
  default), which compares different work.
* peak memory (tracemalloc, numpy allocations) of the coupling step and of the full per-bin
  cross-spectra ``epoch_bin_cross_spectra`` (complex64).

Goals (issue 17): coupling <= 2 s beyond today's analysis; >= 20x faster than computing the
same measures with the MNE route (both like-for-like ratios); <= 1 GB peak.  Times on a
shared 2-core machine vary with the load (printed at start and end); ratios compare this run.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))


def _coupling(clean, model, op, atlases, bands, c0, *, n_boot=0):
    """The analysis' coupling step (``sourcelab.analysis._coupling``: both Fourier transforms,
    pairs, edges, nulls, intervals with ``n_boot`` replicates, both tables) on the default
    atlases and bands; ``c0`` (cached per head model) and ``atlases`` are what it looks up."""
    from sourcelab.analysis import _coupling as coupling_step
    from sourcelab.config import AnalysisConfig

    cfg = AnalysisConfig().replace(coupling_n_boot=n_boot, bands=bands)
    assert tuple(a.name for a in atlases) == tuple(cfg.coupling_atlases)
    return coupling_step(clean, model, op, cfg)


def _band_values(con, freqs, bands):
    """Per-bin MNE scores (n_pairs, n_freqs) -> band means (n_bands, n_pairs), as ours."""
    return np.stack([con[:, (freqs >= lo) & (freqs < hi)].mean(axis=1) for lo, hi in bands.edges])


def _mne_measures(ep, bands, methods):
    """``spectral_connectivity_epochs`` per bin over the bands' range, then our band measures.

    ``cohy`` (complex coherency) gives lagged coherence per bin (``Im² / (1 - Re²)``,
    Pascual-Marqui 2007) and the phase and lag; ``plv`` the phase dispersion
    (``sqrt(-2 ln PLV)``); the others are MNE's measures, averaged over each band's bins.
    """
    from mne_connectivity import spectral_connectivity_epochs

    lo, hi = bands.edges[0][0], max(h for _, h in bands.edges) - 1e-6
    cons = spectral_connectivity_epochs(
        ep, method=list(methods), mode="fourier", fmin=lo, fmax=hi, verbose="error"
    )
    freqs = np.asarray(cons[0].freqs)
    n = len(ep.ch_names)
    lower = np.tril_indices(n, -1)  # the n (n - 1) / 2 pairs MNE computes by default
    out = {}
    for m, c in zip(methods, cons):
        x = c.get_data(output="dense")[lower]  # (n_pairs, n_freqs)
        if m == "cohy":
            out["lagcoh"] = _band_values(x.imag**2 / (1.0 - x.real**2), freqs, bands)
            mag = np.abs(x)
            lag = np.angle(x) / (2.0 * np.pi * freqs) * 1e3
            out["lag_ms"] = _band_values(mag * lag, freqs, bands) / _band_values(mag, freqs, bands)
            out["phase_deg"] = np.degrees(np.angle(_band_values(x, freqs, bands)))
        elif m == "plv":
            sd = np.degrees(np.sqrt(-2.0 * np.log(np.clip(x, 1e-12, 1.0))))
            out["phase_sd_deg"] = _band_values(sd, freqs, bands)
        else:
            out[m] = _band_values(x, freqs, bands)
    return out


#: The measures of the MNE route: sensor pairs (ours: msc, imcoh, lagcoh, wpli, wpli2_debiased,
#: lps, phase_deg, lag_ms, phase_sd_deg) and ROI edges (ours: msc, imcoh, lagcoh, lps, lag_ms;
#: aec_orth from envelope_correlation).
MNE_PAIR_METHODS = ("coh", "imcoh", "wpli", "wpli2_debiased", "ciplv", "cohy", "plv")
MNE_EDGE_METHODS = ("coh", "imcoh", "ciplv", "cohy")


def _mne_inputs(clean, filters, bands):
    """The per-epoch inputs of the MNE route: the average-referenced sensor epochs and, per
    atlas, the ROI time series ``W x`` and their band-passed copies (one per band).

    All three are made epoch by epoch (``filter_data`` filters each epoch's rows on their
    own), so resampling epochs after them equals resampling before: a bootstrap replicate
    reuses them and reruns only the connectivity functions (the cheaper, and exact, route).
    """
    import mne

    # sensor pairs on the average reference, as ours (MNE removes each epoch's mean itself)
    x = clean.epochs - clean.epochs.mean(axis=1, keepdims=True)
    rois = []
    for f in filters:
        roi = np.einsum("rc,ect->ert", f.weights, clean.epochs)
        bps = [
            mne.filter.filter_data(roi, clean.sfreq, lo, hi, verbose="error")
            for lo, hi in bands.edges
        ]
        rois.append((roi, bps))
    return x, rois


def _mne_connectivity(inputs, sfreq, bands, idx=None):
    """Every pair and edge measure with mne-connectivity from :func:`_mne_inputs`, on the
    epochs ``idx`` (a bootstrap resample, with repeats; all epochs when None)."""
    import mne
    from mne_connectivity import envelope_correlation

    x, rois = inputs
    sel = slice(None) if idx is None else idx
    out = []
    ep = mne.EpochsArray(x[sel], mne.create_info(x.shape[1], sfreq, "eeg"), verbose="error")
    out.append(_mne_measures(ep, bands, MNE_PAIR_METHODS))
    # band-power asymmetry of homologous and anterior-posterior pairs: a few band sums of the
    # power spectrum (negligible either way), left out here
    for roi, bps in rois:
        rinfo = mne.create_info(roi.shape[1], sfreq, "eeg")
        rep = mne.EpochsArray(roi[sel], rinfo, verbose="error")
        out.append(_mne_measures(rep, bands, MNE_EDGE_METHODS))
        for bp in bps:
            out.append(envelope_correlation(bp[sel], orthogonalize="pairwise").combine())
    return out


def _mne_replicate(inputs, sfreq, bands, rng):
    """One bootstrap replicate as an MNE user writes it: the epochs resampled with replacement
    (as many as there are), every measure recomputed on them."""
    n = inputs[0].shape[0]
    return _mne_connectivity(inputs, sfreq, bands, rng.integers(0, n, n))


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__)
    p.add_argument("--minutes", type=float, default=10.0)
    p.add_argument("--reps", type=int, default=3, help="repetitions per timing (median)")
    p.add_argument(
        "--mne-reps", type=int, default=2, help="runs of the mne-connectivity route (>= 2)"
    )
    p.add_argument(
        "--mne-boot-reps",
        type=int,
        default=3,
        help="bootstrap replicates of the mne-connectivity route actually run (>= 1); its cost "
        "with intervals is extrapolated from them to the default replicate count",
    )
    p.add_argument("--skip-mne", action="store_true")
    args = p.parse_args(argv)
    print(f"load average at start {os.getloadavg()[0]:.1f}", flush=True)

    from benchmarks.run_all import invented_raw
    from sourcelab.config import AnalysisConfig
    from sourcelab.coupling.source import (
        COUPLING_ATLASES,
        independent_source_covariance,
        roi_filters,
    )
    from sourcelab.headmodel import load_head_model
    from sourcelab.intake import clean_recording, read_recording
    from sourcelab.analysis import analyze
    from sourcelab.inverse import inverse_operator
    from sourcelab.rois import load_atlas
    from sourcelab.spectra import epoch_bin_cross_spectra

    cfg = AnalysisConfig()
    model = load_head_model()
    raw = invented_raw(model, 2026, 60.0 * args.minutes)
    rec = read_recording(raw)
    clean = clean_recording(rec, cfg, muscle_uv=cfg.muscle_uv, blink_uv=cfg.blink_uv)
    print(f"recording: {args.minutes:g} min, {clean.epochs.shape[0]} clean 2-s epochs")
    op = inverse_operator(cfg.method, cfg.orientation, cfg.lambda2)
    atlases = [load_atlas(a) for a in COUPLING_ATLASES]
    # fixed per head model, cached like the inverse operator: the volume-conduction covariance
    c0 = independent_source_covariance(model.gain_fixed)
    analyze(rec, config=cfg)  # warm every cache
    _coupling(clean, model, op, atlases, cfg.bands, c0)

    runs = {
        "off": cfg.replace(coupling=False),
        "on": cfg,
        "on, no coupling intervals": cfg.replace(coupling_n_boot=0),
    }
    wall = {k: [] for k in runs}
    cpu = {k: [] for k in runs}
    for _ in range(args.reps):
        for k, c in runs.items():
            t, tc = time.perf_counter(), time.process_time()
            analyze(rec, config=c)
            wall[k].append(time.perf_counter() - t)
            cpu[k].append(time.process_time() - tc)
    med = statistics.median
    for k in runs:
        print(f"analyze, coupling {k:26s} wall {med(wall[k]):5.2f} s, cpu {med(cpu[k]):5.2f} s")
    added = med(wall["on"]) - med(wall["off"])
    print(
        f"added by coupling (default, 199 replicates): wall {added:.2f} s, cpu "
        f"{med(cpu['on']) - med(cpu['off']):.2f} s (goal <= 2 s); without intervals: "
        f"wall {med(wall['on, no coupling intervals']) - med(wall['off']):.2f} s, cpu "
        f"{med(cpu['on, no coupling intervals']) - med(cpu['off']):.2f} s"
    )
    t_an = med(wall["off"])

    def timed(n_boot):
        t, tc = time.perf_counter(), time.process_time()
        out = _coupling(clean, model, op, atlases, cfg.bands, c0, n_boot=n_boot)
        return out, time.perf_counter() - t, time.process_time() - tc

    reps = [timed(0) for _ in range(args.reps)]
    pt, ct = reps[0][0]
    t_c, cpu_c = med(r[1] for r in reps), med(r[2] for r in reps)
    reps = [timed(cfg.coupling_n_boot) for _ in range(args.reps)]
    t_cd, cpu_cd = med(r[1] for r in reps), med(r[2] for r in reps)
    del reps
    t = time.perf_counter()
    _coupling(clean, model, op, atlases, cfg.bands, c0, n_boot=1000)
    t_cb = time.perf_counter() - t
    print(f"analysis without coupling (default config):      {t_an:6.2f} s")
    print(
        f"coupling, all measures ({len(pt)} pair rows, {len(ct)} edge rows): {t_c:6.2f} s "
        f"(cpu {cpu_c:.2f} s; goal <= 2 s)"
    )
    print(
        f"coupling with {cfg.coupling_n_boot} bootstrap replicates (default):  {t_cd:6.2f} s "
        f"(cpu {cpu_cd:.2f} s)"
    )
    print(f"coupling with 1000 bootstrap replicates:          {t_cb:6.2f} s")

    tracemalloc.start()
    _coupling(clean, model, op, atlases, cfg.bands, c0)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.reset_peak()
    csd, _ = epoch_bin_cross_spectra(clean.epochs, clean.sfreq, cfg.bands)
    _, peak_csd = tracemalloc.get_traced_memory()
    tracemalloc.reset_peak()
    _coupling(clean, model, op, atlases, cfg.bands, c0, n_boot=1000)
    _, peak_boot = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    print(
        f"peak memory, coupling step: {peak / 1e6:.0f} MB; full per-bin cross-spectra "
        f"(complex64, {csd.nbytes / 1e6:.0f} MB): {peak_csd / 1e6:.0f} MB; coupling with "
        f"1000 bootstrap replicates: {peak_boot / 1e6:.0f} MB (goal <= 1000 MB)"
    )
    del csd

    if not args.skip_mne:
        # ours (the default coupling step: 199 bootstrap replicates, analytic leakage nulls, both
        # tables) and the mne-connectivity route, interleaved in the same run so both see the
        # same machine load; process CPU time (all threads; children too, though neither route
        # starts any) and wall time, medians
        import resource

        def cpu_now():
            ch = resource.getrusage(resource.RUSAGE_CHILDREN)
            return time.process_time() + ch.ru_utime + ch.ru_stime

        filters = [roi_filters(op, a, normals=model.src_nn) for a in atlases]
        n_mne = max(2, args.mne_reps)
        k_boot = max(1, args.mne_boot_reps)
        n_pair = max(3, args.reps, args.mne_reps, k_boot)
        routes = {
            "default": cfg.coupling_n_boot,  # 199 bootstrap replicates, nulls, tables
            "measures only": 0,  # no intervals: nulls and tables still made
        }
        ow = {k: [] for k in routes}
        oc = {k: [] for k in routes}
        mne_w, mne_c, mne_in, rep_w, rep_c, loads = [], [], [], [], [], []
        inputs = []
        rng = np.random.default_rng(cfg.boot_seed)
        for i in range(n_pair):  # ours (both variants) and MNE's in turn, same machine load
            loads.append(os.getloadavg()[0])
            for k, nb in routes.items():
                t, tc = time.perf_counter(), cpu_now()
                _coupling(clean, model, op, atlases, cfg.bands, c0, n_boot=nb)
                ow[k].append(time.perf_counter() - t)
                oc[k].append(cpu_now() - tc)
            if i < n_mne:  # MNE's point estimates (inputs, then every measure)
                t, tc = time.perf_counter(), cpu_now()
                inp = _mne_inputs(clean, filters, cfg.bands)
                t_in = time.perf_counter() - t
                _mne_connectivity(inp, clean.sfreq, cfg.bands)
                mne_w.append(time.perf_counter() - t)
                mne_c.append(cpu_now() - tc)
                mne_in.append(t_in)
                inputs = inputs or [inp]
                del inp
            if i < k_boot:  # one MNE bootstrap replicate (epochs resampled, measures rerun)
                t, tc = time.perf_counter(), cpu_now()
                _mne_replicate(inputs[0], clean.sfreq, cfg.bands, rng)
                rep_w.append(time.perf_counter() - t)
                rep_c.append(cpu_now() - tc)
        loads.append(os.getloadavg()[0])
        mw, mc = med(mne_w), med(mne_c)
        nb = cfg.coupling_n_boot
        # MNE with intervals: the point estimates plus nb replicates, extrapolated from the
        # k_boot replicates measured (the percentiles over the replicates are left out: a
        # quantile of nb small arrays, milliseconds)
        bw, bc = mw + nb * med(rep_w), mc + nb * med(rep_c)
        print(
            f"interleaved, load {min(loads):.1f}-{max(loads):.1f}; mne-connectivity route "
            f"({len(mne_w)} runs: wall {', '.join(f'{x:.1f}' for x in mne_w)} s) wall "
            f"{mw:.2f} s, cpu {mc:.2f} s; of which inputs (average reference, ROI time series, "
            f"band-pass filters for the envelopes) wall {med(mne_in):.2f} s"
        )
        print(
            f"  mne-connectivity bootstrap replicate (epochs resampled with replacement, every "
            f"measure recomputed; {len(rep_w)} measured: wall "
            f"{', '.join(f'{x:.1f}' for x in rep_w)} s) wall {med(rep_w):.2f} s, cpu "
            f"{med(rep_c):.2f} s"
        )
        print(
            f"  mne-connectivity with {nb} replicates, EXTRAPOLATED from {len(rep_w)} measured "
            f"(point estimates + {nb} x median replicate): wall {bw:.1f} s, cpu {bc:.1f} s"
        )
        # wall time is the goal's measure; on a machine loaded far above its cores a process
        # waits for a core much of the time, so the CPU-time ratio is printed beside it
        for k in routes:
            w, c = med(ow[k]), med(oc[k])
            print(
                f"  sourcelab coupling, {k:13s} ({len(ow[k])} runs: wall "
                f"{', '.join(f'{x:.2f}' for x in ow[k])} s) wall {w:.2f} s, cpu {c:.2f} s; "
                f"ratio mne / ours {mw / w:5.1f}x wall, {mc / c:5.1f}x cpu (goal >= 20x)"
            )
        (wo, co), (wd, cd) = ((med(ow[k]), med(oc[k])) for k in ("measures only", "default"))
        print("ratios mne / ours (goal >= 20x; wall, cpu):")
        print(
            f"  like for like, measures only (mne point estimates / ours without intervals): "
            f"{mw / wo:6.1f}x wall, {mc / co:6.1f}x cpu"
        )
        print(
            f"  like for like, with {nb} bootstrap replicates (mne extrapolated from "
            f"{len(rep_w)} measured / ours default): {bw / wd:6.1f}x wall, {bc / cd:6.1f}x cpu"
        )
        print(
            f"  mixed (mne point estimates / ours default with intervals; not the same "
            f"measures): {mw / wd:6.1f}x wall, {mc / cd:6.1f}x cpu"
        )
    print(f"load average at end {os.getloadavg()[0]:.1f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
