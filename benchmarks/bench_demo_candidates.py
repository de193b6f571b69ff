"""Measure the demo against issue 14: peak candidates and relative-power z (invented data).

Run: ``python benchmarks/bench_demo_candidates.py [--norms PATH.tsv] [--rebuild] [--out FILE]``.

Without ``--norms`` the demo is analysed against the shipped invented demo norms (what
``sourcelab demo`` does: :func:`sourcelab.demo.demo_result`).  ``--norms PATH.tsv --rebuild``
first simulates and analyses the invented cohort (several minutes) and writes ``PATH.tsv`` and
``PATH_sources.npz``; never commit them (the shipped demo norms are rebuilt by
``sourcelab demo --rebuild-norms``).  The analysis goes through the front door,
:func:`sourcelab.analyze`, with the default settings.

Measured (targets of issue 14):

* candidate #1 (``result.candidates``, ranked by the peaks of per-source z-maps, absolute power
  first) is the planted left dorsolateral-prefrontal theta excess, absolute power
  (``sourcelab.demo.PLANTED``: BA8/9/46 left);
* no relative-power row of the ROI and sensor tables has |z| > 6 (``z`` and the predictive
  ``z_equivalent``), and the largest relative |z| of the per-source maps.
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import numpy as np


def _plain(v):
    return v.item() if hasattr(v, "item") else v


def measure(result) -> dict:
    """The issue-14 figures of one demo :class:`~sourcelab.AnalysisResult`."""
    from sourcelab import demo
    from sourcelab.targets.peaks import PEAK_LIST_COLUMNS

    out: dict = {}
    for name, t in (("roi", result.roi_table), ("sensor", result.sensor_table)):
        rel = t[t.measure == "relative"]
        ab = t[t.measure == "absolute"]
        for col in ("z", "z_equivalent"):
            if col in t:
                out[f"max_abs_{col}_relative_{name}"] = round(float(rel[col].abs().max()), 2)
                out[f"max_abs_{col}_absolute_{name}"] = round(float(ab[col].abs().max()), 2)
    if result.source_z is not None and "relative" in result.source_z:
        out["max_abs_z_relative_source"] = round(
            float(np.abs(result.source_z["relative"]).max()), 2
        )
    cands = result.candidates
    if cands is None or not len(cands):
        out["planted_is_first"] = False
        return out
    cols = [c for c in PEAK_LIST_COLUMNS if c in cands]
    first = cands.iloc[0]
    out["peak_first"] = {c: _plain(first[c]) for c in cols}
    out["first_5"] = [
        {
            c: _plain(r[c])
            for c in ("measure", "band", "direction", "area", "hemisphere", "peak_z", "probability")
            if c in cands
        }
        for _, r in cands.head(5).iterrows()
    ]
    out["planted_is_first"] = bool(
        first.get("measure") == "absolute"
        and first.get("band") == demo.PLANTED["band"]
        and first.get("hemisphere") == demo.PLANTED["hemisphere"]
        and first.get("area") in demo.PLANTED["rois"]
    )
    out["relative_max_abs_z_le_6"] = all(
        v <= 6
        for k, v in out.items()
        if k.startswith("max_abs_z") and "relative" in k and "source" not in k
    )
    return out


def main(argv=None) -> int:
    p = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    p.add_argument("--norms", help="norms TSV (default: the shipped invented demo norms)")
    p.add_argument(
        "--rebuild",
        action="store_true",
        help="simulate the invented cohort and write --norms first",
    )
    p.add_argument("--out", help="write the measured figures as JSON here")
    args = p.parse_args(argv)
    if args.rebuild and not args.norms:
        p.error("--rebuild needs --norms PATH.tsv")

    import pandas as pd

    import sourcelab
    from sourcelab import demo

    pd.set_option("display.width", 200)
    t0 = time.perf_counter()
    norms = Path(args.norms) if args.norms else demo.demo_norms_path()
    if args.rebuild:
        demo.build_demo_norms(norms)
    result = sourcelab.analyze(
        demo.demo_recording(), age=demo.DEMO_AGE, norms=norms, condition=demo.DEMO_CONDITION
    )
    out = {"norms": str(norms), "pipeline_version": sourcelab.PIPELINE_VERSION}
    out.update(measure(result))
    out["seconds"] = round(time.perf_counter() - t0, 1)
    if result.candidates is not None:
        print("candidates (first 10):")
        print(result.candidates.head(10).to_string(index=False))
    print(json.dumps(out, indent=1, default=str))
    if args.out:
        Path(args.out).write_text(json.dumps(out, indent=1, default=str) + "\n", encoding="utf-8")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
