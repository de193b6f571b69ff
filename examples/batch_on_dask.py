"""Analyse a folder of recordings on a Dask local cluster (or worker processes).

    python examples/batch_on_dask.py [--n 4] [--engine dask|processes|serial] [--out FOLDER]

The recordings are INVENTED (simulated adults).  On several machines, start a scheduler and
workers (see DEVELOPERS.md) and pass ``scheduler="tcp://HOST:8786"`` to ``make_engine``.
"""

from __future__ import annotations

import argparse
import tempfile
from pathlib import Path


def main(argv=None) -> int:
    from sourcelab import demo
    from sourcelab.batch import discover, make_engine, run_batch
    from sourcelab.config import AnalysisConfig

    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--n", type=int, default=4)
    p.add_argument("--engine", default="dask", choices=("dask", "processes", "serial"))
    p.add_argument("--out", default=None)
    args = p.parse_args(argv)
    work = Path(args.out or tempfile.mkdtemp(prefix="sourcelab-batch-"))
    data = work / "recordings"
    data.mkdir(parents=True)
    for pid, _age, raw in demo.cohort(args.n, duration_s=70.0):
        demo.write_edf(raw, data / f"{pid}.edf", description="INVENTED recording")

    items = discover([data])
    with make_engine(args.engine, workers=2) as engine:
        summary = run_batch(
            items,
            work / "results",
            engine=engine,
            config=AnalysisConfig(n_boot=0),
            figures=False,
            report=False,
            exports=False,
        )
    print(
        f"{summary.count('done')} done, {len(summary.failures)} failed; group table "
        f"{summary.tables['roi']}"
    )
    return summary.exit_code


if __name__ == "__main__":
    raise SystemExit(main())
