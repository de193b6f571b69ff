"""``sourcelab demo``: the whole pipeline on an invented participant against invented norms."""

from __future__ import annotations

from pathlib import Path

from .._docs import fill_doc
from .options import add_out, add_output_options, progress_flag, subcommand


def _arguments(p) -> None:
    add_out(p, "output folder (default: %(default)s)", default="sourcelab-demo")
    add_output_options(p)
    p.add_argument(
        "--rebuild-norms",
        metavar="TSV",
        help="instead of the demo, rebuild the invented demo norms into TSV",
    )


@fill_doc
def run(args) -> int:
    """Analyse the invented demo participant against the invented demo norms, or rebuild them.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed ``demo`` arguments: ``out`` (output folder, replaced atomically),
        ``rebuild_norms`` (write the invented demo norms to this TSV instead), the output
        options and ``quiet``.

    %(cli_run_returns)s
    """
    from ..figures.warm import warm_renderer

    if args.rebuild_norms:
        from .. import demo

        out = demo.build_demo_norms(args.rebuild_norms, progress=progress_flag(args))
        print(f"sourcelab: wrote invented demo norms {out}")
        return 0
    # the figure renderer warms up on a core the imports and the analysis leave idle
    with warm_renderer(enabled=not args.no_figures):
        return _demo(args)


def _demo(args) -> int:
    """The demo analysis and its output folder (inside :func:`run`'s warmed renderer)."""
    import dataclasses

    from .. import demo
    from ..analysis import analyze
    from ..config import AnalysisConfig
    from ..outputs import write_analysis_into
    from ..progress import Stages
    from ..provenance import atomic_output_dir
    from .analyze import print_summary

    progress = progress_flag(args)
    out = Path(args.out)  # checked by the CLI pre-flight (sourcelab.cli.main.preflight)
    print(
        "sourcelab: demo — an INVENTED participant (demo-01, 41 y, eyes closed, simulated by "
        "sourcelab) against INVENTED norms (80 simulated adults). No real person's data."
    )
    with atomic_output_dir(out, kind="demo") as tmp:
        with Stages(["simulating the invented recording"], desc="demo", enabled=progress) as st:
            st.step("simulating the invented recording")
            edf = demo.write_edf(
                demo.demo_recording(),
                tmp / "demo-01_invented_eeg.edf",
                description="INVENTED demo recording simulated by sourcelab",
            )
        result = analyze(
            edf,
            config=AnalysisConfig(),
            age=demo.DEMO_AGE,
            norms=demo.demo_norms_path(),
            condition=demo.DEMO_CONDITION,
            progress=progress,
        )
        # record where the recording will be after the folder is renamed into place
        result = dataclasses.replace(
            result, recording=dataclasses.replace(result.recording, path=str(out / edf.name))
        )
        write_analysis_into(
            result,
            tmp,
            figures=not args.no_figures,
            report=not args.no_report,
            exports=not args.no_maps,
            command=["sourcelab", "demo"],
            progress=progress,
        )
    t = result.roi_table
    pl = demo.PLANTED
    rows = t[
        (t.atlas == "brodmann")
        & t.roi.isin(pl["rois"])
        & (t.hemisphere == pl["hemisphere"])
        & (t.band == pl["band"])
        & (t.measure == "absolute")
    ]
    zs = ", ".join(f"{r.roi} z = {r.z:+.2f}" for r in rows.itertuples())
    print(
        f"sourcelab: planted (invented) deviation, {pl['band']} in {pl['hemisphere']} "
        f"dorsolateral prefrontal cortex: {zs}"
    )
    print_summary(result, out)
    return 0


#: ``add_parser(sub)``, called by :mod:`sourcelab.cli.main`
add_parser = subcommand(
    "demo",
    run,
    _arguments,
    help="run the pipeline on an invented demo participant",
    description="Simulate an invented participant (no real data), analyse it "
    "against invented demo norms, and write tables, figures and "
    "the report.",
)
