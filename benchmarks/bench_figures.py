"""Benchmark: full figure set + HTML report for 5 bands x 2 measures (invented demo result).

Run: ``python benchmarks/bench_figures.py [out_dir [n_jobs]]``.  Prints the time of each stage and the
report size.  Goal (not a test): figures + report within 30 s on 2 cores.
"""

from __future__ import annotations

import resource
import sys
import tempfile
import time
from pathlib import Path

import matplotlib

matplotlib.use("Agg")


def _cpu() -> float:
    """User + system CPU seconds of this process and its finished child processes."""
    total = 0.0
    for who in (resource.RUSAGE_SELF, resource.RUSAGE_CHILDREN):
        r = resource.getrusage(who)
        total += r.ru_utime + r.ru_stime
    return total


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    n_jobs = int(argv[1]) if len(argv) > 1 else 1
    out = Path(argv[0]) if argv else Path(tempfile.mkdtemp(prefix="sourcelab-bench-"))
    t0 = time.perf_counter()
    from sourcelab.figures import result_figures
    from sourcelab.demo import demo_result
    from sourcelab.figures.geometry import sources_to_volume
    from sourcelab.report import write_report

    try:  # the shipped atlases when present (84 Brodmann-style areas, networks)
        result = demo_result()
        from sourcelab.rois import load_atlas

        outline = load_atlas("lobes")
        print("ROI table from shipped atlases brodmann + networks; lobe outlines on surfaces")
    except (ImportError, OSError, ValueError) as exc:
        print(f"shipped atlases unavailable ({exc}); invented demo atlases")
        result, outline = demo_result(), None
    sources_to_volume(result.source_abs[0])  # volume lookup built once (cached afterwards)
    t1 = time.perf_counter()
    c1 = _cpu()
    figs = result_figures(result, outline=outline, n_jobs=n_jobs)
    t2 = time.perf_counter()
    path = write_report(result, out / "report.html", figures=figs)
    t3 = time.perf_counter()
    c3 = _cpu()
    kinds: dict[str, int] = {}
    for k in figs:
        kinds[k.split("/")[0]] = kinds.get(k.split("/")[0], 0) + 1
    print(f"setup (imports, demo result, volume lookup): {t1 - t0:6.1f} s")
    print(f"figures with n_jobs={n_jobs} ({len(figs)}: {kinds}): {t2 - t1:6.1f} s")
    print(f"report writing: {t3 - t2:6.1f} s")
    print(f"figures + report: {t3 - t1:6.1f} s   (total {t3 - t0:.1f} s)")
    print(f"CPU time (this process and its workers) for figures + report: {c3 - c1:6.1f} s "
          "(wall time above also counts other processes sharing the cores)")
    print(f"report: {path}  {path.stat().st_size / 1e6:.2f} MB")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
