"""Benchmark: false positives under a complete null, plain z vs predictive t (issue 14).

Run: ``python benchmarks/bench_null.py [--reps-roi 60] [--reps-sensor 150] [--out FILE.json]``
(about 10-12 min on one core).  See :mod:`sourcelab.simulate.null` for the model:
60 controls per reference cohort, regression norms by the real builder (degree by
leave-one-out, robust rule), 20 held-out normal people per cohort; ROI-like tables 115 ROIs x
5 bands x 2 measures = 1,150 rows, sensor-like 19 x 5 x 2 = 190 rows; within band x measure
correlation 0.5.  Targets: people with >= 1 FDR-flagged row 5 ± 2 %; held-out |z| > 1.96 rate
5 ± 1.5 %.
"""

from __future__ import annotations

import argparse
import json
import time


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__)
    p.add_argument("--reps-roi", type=int, default=60)
    p.add_argument("--reps-sensor", type=int, default=150)
    p.add_argument("--rho", type=float, default=0.5)
    p.add_argument("--out")
    args = p.parse_args(argv)
    from sourcelab.simulate.null import complete_null

    res = []
    for kind, n_rois, reps in (("sensor", 19, args.reps_sensor), ("roi", 115, args.reps_roi)):
        t0 = time.perf_counter()
        r = complete_null(kind=kind, n_rois=n_rois, n_reps=reps, rho=args.rho, seed=7)
        r["seconds"] = round(time.perf_counter() - t0, 1)
        print(json.dumps(r))
        res.append(r)
    if args.out:
        with open(args.out, "w", encoding="utf-8") as f:
            json.dump(res, f, indent=1)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
