"""Measure the demo against issue 14: peak candidates and relative-power z (invented data).

Run: ``python benchmarks/bench_demo_candidates.py --norms PATH.tsv [--rebuild]`` (``--rebuild``
simulates and analyses the invented cohort first, about 3-5 min, and writes ``PATH.tsv`` and
``PATH_sources.npz``; never commit them — the shipped demo norms are rebuilt once by
``sourcelab demo --rebuild-norms``).

Prints: the largest |z| of any relative-power row of the demo's ROI and sensor tables (target:
none above 6), the ROI-table candidates of today's ranking (first 5), and the peak candidates
from the cortex-only per-source z-map (predictive z against the per-source norms), absolute
first (target: #1 is the planted left dorsolateral-prefrontal absolute theta).
"""

from __future__ import annotations

import argparse
import json
import tempfile
from pathlib import Path

import numpy as np


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__)
    p.add_argument("--norms", required=True)
    p.add_argument("--rebuild", action="store_true")
    p.add_argument("--out", help="write the measured figures as JSON here")
    args = p.parse_args(argv)

    import pandas as pd

    from sourcelab import demo
    from sourcelab.config import AnalysisConfig
    from sourcelab.norms.source_norms import read_source_norms, source_norms_path, source_z
    from sourcelab.pipeline import analyze, fingerprint_for
    from sourcelab.targets.candidates import candidates_for_table
    from sourcelab.targets.peaks import peak_candidates
    from sourcelab.trust.cortex import cortex_source_maps, cortex_space
    from sourcelab.trust.resolvability import (own_shares, resolvability_table,
                                               unresolvable_codes)

    pd.set_option("display.width", 200)
    norms = Path(args.norms)
    if args.rebuild:
        demo.build_demo_norms(norms)
    cfg = AnalysisConfig()
    with tempfile.TemporaryDirectory() as tmp:
        edf = demo.write_edf(demo.demo_recording(), Path(tmp) / "demo.edf",
                             description="INVENTED demo recording")
        res = analyze(edf, config=cfg, age=demo.DEMO_AGE, norms=norms,
                      condition=demo.DEMO_CONDITION)
    from sourcelab.norms import read_norms
    from sourcelab.norms.predictive import approximate_leverage, predictive_t

    nm = read_norms(norms)
    degree = int(nm.cohort.get("degree", 0))
    out = {"norms_degree": degree}
    for name, t in (("roi", res.roi_table), ("sensor", res.sensor_table)):
        # predictive z (normal-equivalent of the Student t; exact leverage 1/n for degree 0)
        n = t["norm_n"].to_numpy()
        zeq = predictive_t(t["z"].to_numpy(), np.zeros(len(t)), np.ones(len(t)), n=n,
                           degree=np.full(len(t), degree),
                           h0=approximate_leverage(n, degree))["z_equivalent"]
        rel_sel = (t.measure == "relative").to_numpy()
        out[f"max_abs_z_equivalent_relative_{name}"] = round(float(np.abs(zeq[rel_sel]).max()),
                                                             2)
        rel = t[t.measure == "relative"]
        i = rel.z.abs().idxmax()
        out[f"max_abs_z_relative_{name}"] = round(float(rel.z.abs().max()), 2)
        out[f"max_abs_z_absolute_{name}"] = round(float(t[t.measure == "absolute"].z.abs().max()),
                                                  2)
        print(f"{name} table: max |z| relative {rel.z.abs().max():.2f} "
              f"({rel.loc[i].to_dict().get('roi', rel.loc[i].get('channel'))} "
              f"{rel.loc[i, 'band']}), absolute "
              f"{t[t.measure == 'absolute'].z.abs().max():.2f}")
    today = candidates_for_table(res.roi_table)
    print("today's ROI candidates (first 5):")
    print(today.head(5)[["rank", "atlas", "roi", "hemisphere", "band", "measure", "z"]])

    sp = cortex_space(cfg.lambda2)
    from sourcelab.headmodel import load_head_model

    model = load_head_model()
    table = resolvability_table(sp, cortex_space(cfg.lambda2, cortex_only=False), model.ch_pos,
                                model.src_pos)
    sn = read_source_norms(source_norms_path(norms), fingerprint=fingerprint_for(cfg).to_dict())
    maps = cortex_source_maps(res, sp)
    zmaps = {}
    for m in ("absolute", "relative"):
        z = source_z(sn, maps[m], age=demo.DEMO_AGE, measure=m)
        for b, band in enumerate(cfg.bands.names):
            zmaps[(m, band)] = z[b]
    cands = peak_candidates(zmaps, sp, own=own_shares(sp), exclude=unresolvable_codes(sp, table))
    cols = ["rank", "role", "measure", "band", "direction", "area", "hemisphere", "peak_z",
            "x_mni152", "y_mni152", "z_mni152", "border_mm", "own_share", "probability"]
    print("peak candidates (first 10):")
    print(cands.head(10)[cols].to_string(index=False))
    first = cands.iloc[0]
    out["peak_first"] = {c: (first[c].item() if hasattr(first[c], "item") else first[c])
                         for c in cols}
    out["planted_is_first"] = bool(first.measure == "absolute" and first.band == "theta"
                                   and first.hemisphere == "left"
                                   and first.area in demo.PLANTED["rois"])
    out["max_abs_z_relative_source"] = round(float(max(np.abs(zmaps[("relative", b)]).max()
                                                       for b in cfg.bands.names)), 2)
    print(json.dumps(out, indent=1, default=str))
    if args.out:
        Path(args.out).write_text(json.dumps(out, indent=1, default=str))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
