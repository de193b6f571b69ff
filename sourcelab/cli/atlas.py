"""``sourcelab atlas list|show NAME|plot NAME --out PNG``."""

from __future__ import annotations

from pathlib import Path

from .._docs import fill_doc
from ..errors import InputError
from .options import add_out, subcommand


def _arguments(p) -> None:
    asub = p.add_subparsers(dest="atlas_cmd", metavar="ACTION", required=True)
    asub.add_parser("list", help="available atlases and their ROI counts").set_defaults(func=run)
    s = asub.add_parser("show", help="ROIs of one atlas with sizes and centroids")
    s.add_argument("name")
    s.set_defaults(func=run)
    pl = asub.add_parser("plot", help="render an atlas on the inflated surface")
    pl.add_argument("name")
    add_out(pl, "PNG file")
    pl.set_defaults(func=run)


@fill_doc
def run(args) -> int:
    """List the shipped atlases, print one atlas's ROIs, or render one atlas to a PNG.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed ``atlas`` arguments: ``atlas_cmd`` (``"list"``, ``"show"`` or ``"plot"``),
        ``name`` (show, plot) and ``out`` (plot; must end in ``.png``).

    %(cli_run_returns)s
    """
    from ..rois import atlas_summary, available_atlases, load_atlas

    if args.atlas_cmd == "list":
        for name in available_atlases():
            at = load_atlas(name)
            n_small = sum(r.small for r in at.rois)
            print(f"{name:<12} {len(at.rois):>4} ROIs ({n_small} small)  {at.description}")
        return 0
    if args.atlas_cmd == "show":
        from ..rois.names import area_name, natural_key

        t = atlas_summary(args.name)
        names = [area_name(r) for r in t["roi"]]
        if any(names):
            t.insert(1, "name", names)
            hemi = {"left": 0, "right": 1, "both": 2}
            order = sorted(
                range(len(t)),
                key=lambda i: (hemi.get(t["hemisphere"].iloc[i], 3), natural_key(t["roi"].iloc[i])),
            )
            t = t.iloc[order]
        print(t.to_string(index=False))
        return 0
    from ..figures.atlas import plot_atlas

    out = Path(args.out)
    if out.suffix.lower() != ".png":
        raise InputError("--out must end in .png", path=out)
    import matplotlib.pyplot as plt

    from ..provenance import save_png

    fig = plot_atlas(args.name, output_file=None)
    save_png(fig, out, dpi=100)  # atomic, parent folders created, marked as sourcelab's
    plt.close(fig)
    print(f"sourcelab: wrote {out}")
    return 0


#: ``add_parser(sub)``, called by :mod:`sourcelab.cli.main`
add_parser = subcommand(
    "atlas", run, arguments=_arguments, help="list, show or plot the shipped atlases"
)
