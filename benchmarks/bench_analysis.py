"""Benchmark: tables-only ``sourcelab analyze`` against the floor process, with per-stage peaks.

Run: ``python benchmarks/bench_analysis.py [--minutes 10] [--reps 3] [--baseline SRC]``.  In
fresh processes, alternating, it runs the floor of ``run_all.py`` (MNE's EDF reader, one FFT
pass, the band cross-spectra), ``sourcelab analyze REC --out D --no-figures --no-report
--no-maps`` with the installed sourcelab and, with ``--baseline``, the same command with another
source tree first on ``sys.path`` (e.g. a worktree of main: an A/B comparison in the same run).
Prints wall times, their ratios to the floor and each process's peak resident memory, with the
load average.  Not a test; ratios in the same run are what count (the machine may be shared).
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from benchmarks.run_all import _CHILD, _median, _recording_path  # noqa: E402


def _run(mode: str, args: list[str], src: str | None = None) -> dict:
    env = dict(os.environ)
    flags = ["-I"]
    if src:
        env["PYTHONPATH"] = src
        flags = []  # -I would ignore PYTHONPATH
    with tempfile.TemporaryDirectory(prefix="sourcelab-bench-an-") as d:
        report = Path(d) / "report.json"
        cmd = [sys.executable, *flags, "-c", _CHILD, str(report), mode, *args]
        t0 = time.perf_counter()
        p = subprocess.run(cmd, cwd=d, capture_output=True, text=True, env=env)
        wall = time.perf_counter() - t0
        if p.returncode != 0 or not report.exists():
            raise RuntimeError(f"{mode} failed: {p.stderr.strip()[-800:]}")
        return {"wall_s": wall, "peak_mb": json.loads(report.read_text())["peak_mb"]}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--minutes", type=float, default=10.0)
    ap.add_argument("--reps", type=int, default=3)
    ap.add_argument("--baseline", help="source tree to compare with (put first on sys.path)")
    args = ap.parse_args(argv)
    from sourcelab.config import AnalysisConfig

    c = AnalysisConfig()
    edges = json.dumps([list(e) for e in c.bands.edges] + [[1.0, 45.0]])
    path = str(_recording_path(2026 if args.minutes == 10 else 2027, 60.0 * args.minutes))
    runs: dict[str, list[dict]] = {"floor": [], "analyze": []}
    if args.baseline:
        runs["baseline"] = []
    print(f"load average at start {os.getloadavg()[0]:.1f}", flush=True)
    with tempfile.TemporaryDirectory(prefix="sourcelab-bench-an-out-") as d:
        for i in range(args.reps):
            runs["floor"].append(_run("floor", [path, str(c.epoch_s), edges]))
            cli = ["analyze", path, "--out", f"{d}/o{i}", "--no-figures", "--no-report"]
            runs["analyze"].append(_run("cli", cli + ["--no-maps"]))
            if args.baseline:
                cli[3] = f"{d}/b{i}"
                runs["baseline"].append(_run("cli", cli + ["--no-maps"], args.baseline))
            print(
                f"rep {i + 1}: "
                + ", ".join(f"{k} {v[-1]['wall_s']:.1f} s" for k, v in runs.items()),
                flush=True,
            )
    floor = _median([r["wall_s"] for r in runs["floor"]])
    for k, v in runs.items():
        wall = _median([r["wall_s"] for r in v])
        peak = max(r["peak_mb"] for r in v)
        print(f"{k:9s} median {wall:6.2f} s  {wall / floor:5.1f}x floor  peak {peak:6.0f} MiB")
    print(f"load average at end {os.getloadavg()[0]:.1f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
