"""``sourcelab norms build COHORT --participants TSV --out NORMS.tsv`` and ``norms check``."""

from __future__ import annotations

from .._docs import fill_doc
from .options import subcommand


def _arguments(p) -> None:
    from .options import add_common_options, add_engine_options, add_out

    nsub = p.add_subparsers(dest="norms_cmd", metavar="ACTION", required=True)
    b = nsub.add_parser("build", help="build norms from a folder of reference recordings")
    b.add_argument("cohort", help="folder of recordings or a BIDS dataset")
    b.add_argument("--participants", required=True, help="participants.tsv (BIDS convention)")
    add_out(b, "norms TSV to write")
    b.add_argument(
        "--condition",
        metavar="CONDITION",
        help='condition of the reference recordings, e.g. "eyes closed" (EC and EO '
        "are accepted); needed when participants.tsv has no condition column, "
        "else it selects the participants with that condition",
    )
    b.add_argument(
        "--model",
        choices=("regression", "binned"),
        default="regression",
        help="age model (default: %(default)s)",
    )
    add_engine_options(
        b,
        workers_help="analyse recordings in parallel worker processes (default 1)",
        engine_help="batch engine (default: serial for 1 worker, else processes)",
        scheduler_help="Dask scheduler address",
    )
    add_common_options(b)
    b.set_defaults(func=run)
    c = nsub.add_parser("check", help="validate a norms file and print a summary")
    c.add_argument("norms")
    c.set_defaults(func=run)


@fill_doc
def run(args) -> int:
    """Build a norms TSV from reference recordings, or validate and summarise a norms file.

    Recordings that fail during ``build`` are skipped and named on standard output.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed ``norms`` arguments: ``norms_cmd`` (``"build"`` or ``"check"``) and that
        action's options (see :func:`add_parser`).

    %(cli_run_returns)s
    """
    from ..norms import check_norms

    if args.norms_cmd == "check":
        print(check_norms(args.norms))
        return 0
    from ..batch import make_engine
    from ..cohort import build_norms
    from .options import config_from_args, progress_flag

    with make_engine(args.engine, workers=args.workers, scheduler=args.scheduler) as engine:
        built = build_norms(
            args.cohort,
            args.participants,
            config=config_from_args(args),
            out=args.out,
            condition=args.condition,
            model=args.model,
            engine=engine,
            progress=progress_flag(args),
        )
    for pid, message in built.failures:
        print(f"sourcelab: skipped {pid}: {message}")
    print(
        f"sourcelab: wrote {args.out} ({built.norms.cohort.get('n', '?')} participants); "
        f"calibration report {built.report_path}"
    )
    return 0


#: ``add_parser(sub)``, called by :mod:`sourcelab.cli.main`
add_parser = subcommand(
    "norms", run, _arguments, help="build norms from reference recordings, or check a file"
)
