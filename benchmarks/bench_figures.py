"""Benchmark: the figure set, the reports (HTML + PDF) and ``sourcelab demo`` wall time.

Run: ``python benchmarks/bench_figures.py [out_dir [n_jobs]]`` (``n_jobs`` default: what the
output writer uses, :func:`sourcelab.figures.figure_set.figure_jobs`; ``--no-demo`` skips the demo
run; ``--repeat N`` writes the whole output folder N times, default 3).  Prints the figure-set
time (as PNG, as the output writer draws it), the report time (HTML and PDF from those PNGs), the
maps time, then the median time of :func:`sourcelab.outputs.write_analysis_into` (figures,
reports and maps as ``sourcelab analyze`` writes them: the PDF in a forked process beside the
HTML report and the maps), the ``sourcelab demo`` wall time in a fresh process, CPU seconds
beside each, and the machine's load average before and after: on a shared machine the wall times
scale with the load, the CPU seconds much less.

Goals (issue 19, not tests): all outputs (figures + report + maps) of a 10-minute recording
<= 8 s; ``sourcelab demo`` <= 12 s wall on 2 cores.
"""

from __future__ import annotations

import os
import resource
import subprocess
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


def _load() -> str:
    return " ".join(f"{x:.1f}" for x in os.getloadavg())


class _Clock:
    def __init__(self):
        self.w, self.c = time.perf_counter(), _cpu()

    def lap(self) -> tuple[float, float]:
        w, c = time.perf_counter(), _cpu()
        out = (w - self.w, c - self.c)
        self.w, self.c = w, c
        return out


def main(argv=None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    demo = "--no-demo" not in argv
    argv = [a for a in argv if a != "--no-demo"]
    repeat = 3
    if "--repeat" in argv:
        i = argv.index("--repeat")
        repeat = int(argv[i + 1])
        del argv[i : i + 2]
    out = Path(argv[0]) if argv else Path(tempfile.mkdtemp(prefix="sourcelab-bench-"))
    out.mkdir(parents=True, exist_ok=True)
    print(f"load average before (1, 5, 15 min): {_load()}   cores: {os.cpu_count()}")
    clock = _Clock()
    from sourcelab.demo import demo_result

    try:
        from sourcelab.figures.figure_set import figure_jobs
    except ImportError:  # a version before parallel figures (for before/after runs)

        def figure_jobs():
            return 1

    from sourcelab.figures.geometry import sources_to_volume
    from sourcelab.report import write_pdf, write_report

    n_jobs = int(argv[1]) if len(argv) > 1 else figure_jobs()
    result = demo_result()
    sources_to_volume(result.source_abs[0])  # volume lookup built once (cached afterwards)
    setup = clock.lap()
    pngs = result.figures(as_png=True, n_jobs=n_jobs)
    figs = clock.lap()
    write_report(result, out / "report.html", figures=pngs)
    html = clock.lap()
    write_pdf(result, out / "report.pdf", figures=pngs)
    pdf = clock.lap()
    from sourcelab.exports import export_gifti, export_nifti, export_stc, map_measures

    measures = map_measures(result)
    export_stc(result, out / "maps", measures=measures)
    export_gifti(result, out / "maps", measures=measures)
    export_nifti(result, out / "maps", measures=measures)
    maps = clock.lap()
    kinds: dict[str, int] = {}
    for k in pngs:
        kinds[k.split("/")[0]] = kinds.get(k.split("/")[0], 0) + 1
    size = sum(len(p) for p in pngs.values()) / 1e6
    print(
        f"setup (imports, demo result, volume lookup): {setup[0]:6.1f} s wall {setup[1]:6.1f} s CPU"
    )
    print(f"figure set, n_jobs={n_jobs} ({len(pngs)} PNG, {size:.1f} MB: {kinds}):")
    print(f"    {figs[0]:6.1f} s wall {figs[1]:6.1f} s CPU")
    print(
        f"report HTML: {html[0]:6.1f} s wall {html[1]:6.1f} s CPU "
        f"({(out / 'report.html').stat().st_size / 1e6:.1f} MB)"
    )
    print(
        f"report PDF:  {pdf[0]:6.1f} s wall {pdf[1]:6.1f} s CPU "
        f"({(out / 'report.pdf').stat().st_size / 1e6:.1f} MB)"
    )
    print(f"maps:        {maps[0]:6.1f} s wall {maps[1]:6.1f} s CPU")
    total = figs[0] + html[0] + pdf[0] + maps[0]
    print(
        f"all outputs (figures + reports + maps): {total:6.1f} s wall "
        f"{figs[1] + html[1] + pdf[1] + maps[1]:6.1f} s CPU   (goal <= 8 s on 2 quiet cores)"
    )
    print(f"load average after outputs: {_load()}")
    if repeat > 0:
        import shutil
        import statistics

        from sourcelab.outputs import write_analysis_into

        walls, cpus = [], []
        for i in range(repeat):
            folder = out / f"written{i}"
            shutil.rmtree(folder, ignore_errors=True)
            folder.mkdir()
            clock.lap()
            write_analysis_into(result, folder, command=["bench"])
            w, c = clock.lap()
            walls.append(w)
            cpus.append(c)
            print(
                f"    write_analysis_into #{i + 1}: {w:6.1f} s wall {c:6.1f} s CPU  load {_load()}"
            )
        print(
            f"all outputs as written by the output writer (tables too), median of {repeat}: "
            f"{statistics.median(walls):6.1f} s wall {statistics.median(cpus):6.1f} s CPU   "
            "(goal <= 8 s on 2 quiet cores)"
        )
    if demo:
        t = time.perf_counter()
        c = _cpu()
        run = subprocess.run(
            [
                sys.executable,
                "-c",
                "from sourcelab.cli.main import run; run()",
                "demo",
                "--out",
                str(out / "demo"),
            ],
            capture_output=True,
            text=True,
        )
        wall, cpu = time.perf_counter() - t, _cpu() - c
        ok = "ok" if run.returncode == 0 else f"FAILED ({run.returncode}): {run.stderr[-300:]}"
        print(f"sourcelab demo: {wall:6.1f} s wall {cpu:6.1f} s CPU, {ok}   (goal <= 12 s wall)")
        print(f"load average after demo: {_load()}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
