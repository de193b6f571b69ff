"""``sourcelab batch INPUTS... --out DIR``: analyse a cohort, resumably, in parallel.

Exit codes: 0 every recording done or already up to date; 1 at least one recording failed (the
others are written; see ``DIR/failures.tsv``); 2 the input itself is wrong (nothing matched, bad
participants or norms file, bad option, Dask requested but not installed).
"""

from __future__ import annotations

import logging
import sys

from .._docs import fill_doc
from .options import (
    add_common_options,
    add_engine_options,
    add_out,
    config_from_args,
    progress_flag,
    subcommand,
)


def _arguments(p) -> None:
    p.add_argument(
        "inputs",
        nargs="+",
        metavar="INPUT",
        help="recording file, glob pattern (quote it), folder or BIDS dataset",
    )
    add_out(p, "batch output folder")
    p.add_argument(
        "--participants",
        metavar="TSV",
        help="participants.tsv with participant_id and age (BIDS convention)",
    )
    p.add_argument("--norms", help="norms TSV for z-scores (every recording then needs an age)")
    p.add_argument("--condition", help='recording condition, e.g. "eyes closed"')
    add_engine_options(
        p,
        workers_help="parallel workers on this machine (default: %(default)s)",
        engine_help="execution engine (default: serial for 1 worker, processes for more, "
        "dask with --scheduler)",
        scheduler_help="Dask scheduler address, e.g. tcp://10.0.0.5:8786 (needs sourcelab[dist])",
    )
    p.add_argument("--force", action="store_true", help="recompute up-to-date recordings")
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    add_common_options(p)


@fill_doc
def run(args) -> int:
    """Analyse every recording found in the inputs into one folder each (``sourcelab batch``).

    Success (0) means every recording is done or already up to date; 1 is returned when at least
    one failed (the others are written; see ``failures.tsv``).

    %(cli_run_args)s

    %(cli_run_returns)s
    """
    from ..batch import discover, make_engine, run_batch
    from ..errors import InputError

    if args.workers < 1:
        raise InputError(f"--workers: must be >= 1, got {args.workers}")
    config = config_from_args(args)
    items = discover(args.inputs, participants=args.participants)
    # Per-recording warnings go to each provenance.json and the status file; on the terminal
    # they would bury the progress bar, so they are shown only with -v.
    logger = logging.getLogger("sourcelab")
    level = logger.level
    quiet = logger.getEffectiveLevel() >= logging.WARNING
    worker_level = logging.ERROR if quiet else logger.getEffectiveLevel()
    try:
        logger.setLevel(worker_level)
        with make_engine(
            args.engine, workers=args.workers, scheduler=args.scheduler, log_level=worker_level
        ) as engine:
            print(f"sourcelab: {len(items)} recordings, engine {engine.describe()}")
            summary = run_batch(
                items,
                args.out,
                config=config,
                norms=args.norms,
                condition=args.condition,
                engine=engine,
                force=args.force,
                figures=not args.no_figures,
                report=not args.no_report,
                exports=not args.no_maps,
                progress=progress_flag(args),
                command=["sourcelab", *sys.argv[1:]],
            )
    finally:
        logger.setLevel(level)
    n = len(summary.outcomes)
    print(
        f"sourcelab: {summary.count('done')} analysed, {summary.count('skipped')} up to date, "
        f"{summary.count('failed')} failed of {n} in {summary.seconds:.1f} s"
    )
    for o in summary.failures:
        print(f"sourcelab: failed: {o.name}: {o.message}", file=sys.stderr)
    for path in summary.tables.values():
        print(f"sourcelab: wrote {path}")
    print(f"sourcelab: status of every recording in {summary.out / 'batch_status.tsv'}")
    return summary.exit_code


#: ``add_parser(sub)``, called by :mod:`sourcelab.cli.main`
add_parser = subcommand(
    "batch",
    run,
    _arguments,
    help="analyse many recordings (resumable; processes or Dask)",
    description="Analyse every recording given (files, glob patterns, folders, a BIDS "
    "dataset): one output folder per recording, group ROI and sensor tables, "
    "a status and a failures file. Recordings whose outputs are up to date are "
    "skipped. Exit code 0 all done, 1 some failed, 2 wrong input.",
)
