"""``sourcelab leakage ROI [--atlas brodmann] [--hemisphere left] [--top 10]``.

Prints where an ROI's value comes from under spatially white cortical activity: its self-share
and its strongest leakers (see :mod:`sourcelab.trust.leakage`).  ``--tsv`` writes the whole
matrix, ``--plot`` its heatmap.
"""

from __future__ import annotations

from pathlib import Path

from ..errors import InputError
from .options import add_hemisphere, add_inverse_options, subcommand


def _arguments(p) -> None:
    p.add_argument("roi", help="ROI name, e.g. BA17 or default-mode (case-insensitive)")
    p.add_argument("--atlas", default="brodmann", help="atlas name (default brodmann)")
    add_hemisphere(p, "hemisphere, needed when the name exists in several")
    p.add_argument("--top", type=int, default=10, help="number of leakers to list (default 10)")
    add_inverse_options(p, defaults=True)
    p.add_argument("--tsv", metavar="FILE", help="also write the whole matrix as TSV")
    p.add_argument("--plot", metavar="PNG", help="also write the matrix heatmap as PNG")


def run(args) -> int:
    """Print an ROI's self-share and strongest leakers; optionally write the TSV and PNG.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed ``leakage`` arguments (``roi``, ``atlas``, ``hemisphere``, ``top``, ``method``,
        ``orientation``, ``snr`` (amplitude ratio, λ² = 1/SNR²), ``tsv``, ``plot``).

    Returns
    -------
    int
        0 on success (files are written before anything is printed).

    Raises
    ------
    InputError
        For an unknown atlas or ROI, ``--top`` < 1, ``--snr`` <= 0, or output names without
        ``.png`` / ``.tsv``; the CLI turns it into one line and exit code 2.
    """
    from ..rois import available_atlases
    from ..trust import leakage_for, plot_leakage

    if args.atlas not in available_atlases():
        raise InputError(f"--atlas: {args.atlas!r} is not one of {list(available_atlases())}")
    if args.top < 1:
        raise InputError(f"--top: need a positive number, got {args.top}")
    if not args.snr > 0:
        raise InputError(f"--snr: must be > 0, got {args.snr}")
    if args.plot is not None and Path(args.plot).suffix.lower() != ".png":
        raise InputError("--plot must end in .png", path=args.plot)
    if args.tsv is not None and Path(args.tsv).suffix.lower() != ".tsv":
        raise InputError("--tsv must end in .tsv", path=args.tsv)
    leak = leakage_for(
        args.atlas, method=args.method, orientation=args.orientation, lambda2=1.0 / args.snr**2
    )
    table = leak.top(args.roi, args.hemisphere, n=args.top)
    written = []  # files first: the printing below may meet a closed stdout
    if args.tsv is not None:
        written.append(leak.to_tsv(args.tsv))
    if args.plot is not None:
        import matplotlib.pyplot as plt

        from ..provenance import save_png

        fig = plot_leakage(leak)
        save_png(fig, args.plot, dpi=120, bbox_inches="tight")
        plt.close(fig)
        written.append(args.plot)
    me = table.iloc[0]
    print(
        f"{me.roi} ({me.hemisphere}), atlas {args.atlas}, {args.method} {args.orientation}, "
        f"SNR {args.snr:g}: {100 * me.share:.1f} % of its expected power comes from its own "
        "sources (spatially white, noise-free activity)."
    )
    shown = table.assign(share=(100 * table.share).round(2), distance_mm=table.distance_mm.round(1))
    shown = shown.rename(columns={"share": "share_%"})
    print(shown.to_string(index=False, na_rep="-"))
    for path in written:
        print(f"sourcelab: wrote {path}")
    return 0


#: ``add_parser(sub)``, called by :mod:`sourcelab.cli.main`
add_parser = subcommand(
    "leakage",
    run,
    _arguments,
    help="ROI-to-ROI leakage (cross-talk) of the inverse",
    description="Share of an ROI's expected power that comes from each other "
    "ROI when every cortical source is equally active "
    "(uncorrelated, noise-free), for the chosen inverse.",
)
