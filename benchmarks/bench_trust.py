"""Benchmark: bootstrap intervals for every ROI and band of a 10-minute recording, and leakage.

Run: ``python benchmarks/bench_trust.py [--n-epochs 300] [--n-boot 1000] [--orientation fixed]``.
Synthetic per-epoch cross-spectra (Wishart epochs of a random covariance) stand in for a
recording: 300 two-second epochs = 10 minutes.  Prints wall times; goal <= 2 s on 2 cores.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import pandas as pd


def _table(atlases, bands):
    rows = []
    for at in atlases:
        for measure in ("absolute", "relative"):
            for band in bands:
                for roi in at.rois:
                    rows.append(
                        dict(
                            atlas=at.name,
                            roi=roi.name,
                            hemisphere=roi.hemisphere,
                            band=band,
                            measure=measure,
                            value=np.nan,
                            z=np.nan,
                        )
                    )
    return pd.DataFrame(rows)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__)
    p.add_argument("--n-epochs", type=int, default=300)
    p.add_argument("--n-boot", type=int, default=1000)
    p.add_argument("--orientation", choices=("fixed", "free"), default="fixed")
    args = p.parse_args(argv)

    from sourcelab.config import AnalysisConfig
    from sourcelab.headmodel import load_head_model
    from sourcelab.analysis import DEFAULT_ATLASES
    from sourcelab.inverse import inverse_operator
    from sourcelab.rois import load_atlas
    from sourcelab.trust import add_intervals, add_sensor_intervals, leakage_matrix

    cfg = AnalysisConfig(orientation=args.orientation)
    t = time.perf_counter()
    model = load_head_model()
    op = inverse_operator(cfg.method, cfg.orientation, cfg.lambda2)
    atlases = [load_atlas(a) for a in DEFAULT_ATLASES]
    print(f"setup (head model, operator, atlases): {time.perf_counter() - t:.2f} s")

    rng = np.random.default_rng(0)
    n_ch, bands = len(model.ch_names), cfg.bands.names
    a = rng.standard_normal((len(bands), n_ch, n_ch))
    x = np.einsum("bcd,ebdt->ebct", a, rng.standard_normal((args.n_epochs, len(bands), n_ch, 8)))
    csd = np.einsum("ebct,ebdt->ebcd", x, x) / 8
    table = _table(atlases, bands)
    n_rois = sum(len(at.rois) for at in atlases)

    from sourcelab.trust.bootstrap import source_quadratic_forms

    t = time.perf_counter()
    source_quadratic_forms(op)  # once per operator (cached), like the pipeline's operator cache
    print(f"per-operator quadratic forms (cached): {time.perf_counter() - t:.2f} s")
    for rep in range(2):
        t, c = time.perf_counter(), time.process_time()
        out = add_intervals(table, csd, op, atlases, n_boot=args.n_boot, seed=rep)
        t_roi, c_roi = time.perf_counter() - t, time.process_time() - c
        print(
            f"ROI intervals: {len(out)} rows ({n_rois} ROIs x {len(bands)} bands x 2 "
            f"measures), {args.n_epochs} epochs, {args.n_boot} replicates, {args.orientation}: "
            f"wall {t_roi:.2f} s, CPU {c_roi:.2f} s (all threads)"
        )
    stable = table[table.measure == "absolute"]
    t = time.perf_counter()
    add_intervals(stable, csd, op, atlases, n_boot=args.n_boot, seed=0)
    print(f"  absolute rows only: {time.perf_counter() - t:.2f} s")

    srows = pd.DataFrame(
        [
            dict(channel=c, band=b, measure=m, value=np.nan, z=np.nan)
            for m in ("absolute", "relative")
            for b in bands
            for c in model.ch_names
        ]
    )
    t = time.perf_counter()
    add_sensor_intervals(srows, csd, ch_names=model.ch_names, n_boot=args.n_boot, seed=0)
    print(f"sensor intervals: {time.perf_counter() - t:.2f} s")

    for at in atlases:
        t = time.perf_counter()
        leakage_matrix(op, model.gain, at, normals=model.src_nn)
        print(f"leakage matrix {at.name} ({len(at.rois)} ROIs): {time.perf_counter() - t:.2f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
