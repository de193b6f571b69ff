"""``sourcelab compare RESULT_A RESULT_B [...] --out DIR``: change across sessions of one person.

Every later session is compared with the first.  Sessions must come from the same pipeline
(fingerprint); two analyses of one recording (e.g. eyes closed vs eyes open) compare the same way.
"""

from __future__ import annotations

from ..cautions import SHORT
from ..constants import ROI_KEY
from .options import add_out, subcommand, with_cautions

#: Columns of the changed rows printed on the terminal.
SHOWN_COLUMNS = ("session_b", *ROI_KEY, "change_t", "change_z", "rci", "verdict")


def _arguments(p) -> None:
    p.add_argument(
        "results",
        nargs="+",
        metavar="RESULT_DIR",
        help="analysis folders (first = baseline), at least two",
    )
    add_out(p)
    p.add_argument(
        "--label",
        action="append",
        default=None,
        help="session label, one per folder in order (default: folder names)",
    )
    p.add_argument(
        "--target",
        action="append",
        default=None,
        metavar="TARGET.json",
        help="show this target's row in the figure (repeatable)",
    )
    p.add_argument("--n-boot", type=int, default=1000, help="bootstrap replicates per session")
    p.add_argument("--seed", type=int, default=0)


def run(args) -> int:
    """Compare every later session with the first, write the comparison folder, print a summary.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed ``compare`` arguments (``results``, ``out``, ``label``, ``target``, ``n_boot``,
        ``seed``).

    Returns
    -------
    int
        0 on success.

    Raises
    ------
    InputError
        Fewer than two folders, a label count that does not match, ``--n-boot`` below 100, or
        folders that cannot be compared; the CLI turns it into one line and exit code 2.
    """
    from ..compare import compare_sessions, write_comparison
    from ..errors import InputError

    if len(args.results) < 2:
        raise InputError("compare: need at least two analysis folders")
    if args.label is not None and len(args.label) != len(args.results):
        raise InputError(f"--label: {len(args.label)} labels for {len(args.results)} folders")
    if args.n_boot < 100:
        raise InputError(f"--n-boot: need at least 100, got {args.n_boot}")
    table = compare_sessions(args.results, n_boot=args.n_boot, seed=args.seed, labels=args.label)
    s = write_comparison(
        table, args.out, targets=args.target, inputs=[*args.results, *(args.target or ())]
    )
    print(
        f"sourcelab: compared {len(args.results)} sessions, {s['n_rows']} rows: "
        f"{s['changed']} changed (FDR q <= 0.05 and |RCI| >= 1.96); wrote {args.out}"
    )
    ch = table[table["verdict"] != "no change"]
    if len(ch):
        cols = list(SHOWN_COLUMNS)
        print(ch[cols].head(20).to_string(index=False, float_format=lambda v: f"{v:+.2f}"))
    print(
        "A change between sessions is a statistical statement about these recordings; "
        "whether it matters, and why it happened, rests with the practitioner."
    )
    print(SHORT)
    return 0


#: ``add_parser(sub)``, called by :mod:`sourcelab.cli.main`
add_parser = subcommand(
    "compare",
    run,
    _arguments,
    help="change across sessions of one person",
    description=with_cautions(__doc__),
)
