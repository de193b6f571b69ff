"""``sourcelab analyze RECORDING --out DIR``."""

from __future__ import annotations

import re
import sys
from pathlib import Path

from .._docs import fill_doc
from ..errors import InputError
from .options import add_common_options, add_out, config_from_args, progress_flag, subcommand


def _arguments(p) -> None:
    p.add_argument("recording", help="EDF/BDF/BrainVision/EEGLAB/FIF file or BIDS EEG path")
    add_out(p)
    p.add_argument("--age", type=float, help="age in years (needed with --norms)")
    p.add_argument("--norms", help="norms TSV (sourcelab norms format)")
    p.add_argument("--condition", help='recording condition, e.g. "eyes closed" (EC/EO accepted)')
    p.add_argument(
        "--select",
        action="append",
        metavar="ANNOTATION|T0-T1",
        help='analyse only segments with this annotation (e.g. "eyes closed") or '
        "this time range in seconds (e.g. 120-300); repeatable, union",
    )
    p.add_argument(
        "--rois",
        metavar="FILE",
        help="user-defined ROIs (TOML or TSV; see atlases/README.md), reported as their own atlas",
    )
    p.add_argument(
        "--bids-root",
        metavar="DIR",
        help="also write a BIDS-derivatives copy under DIR/derivatives/sourcelab",
    )
    p.add_argument(
        "--participant-id",
        metavar="ID",
        help="participant label for --bids-root (made safe for file names)",
    )
    p.add_argument(
        "--allow-extrapolation",
        action="store_true",
        help="z-score outside the norms' age range (flagged on every row)",
    )
    p.add_argument(
        "--allow-condition-mismatch",
        action="store_true",
        help="z-score against norms of another condition (flagged)",
    )
    add_common_options(p)


@fill_doc
def run(args) -> int:
    """Analyse one recording and write its output folder (``sourcelab analyze``).

    %(cli_run_args)s

    %(cli_run_returns)s
    """
    path = Path(args.recording)
    if not path.exists():
        raise InputError("file not found", path=path)
    config = config_from_args(args)
    if args.bids_root and not args.participant_id:
        raise InputError("--bids-root needs --participant-id")
    custom = None
    if args.rois:
        from ..rois import load_custom_rois

        custom = load_custom_rois(args.rois)
    from ..figures.warm import warm_renderer

    with warm_renderer(enabled=not args.no_figures):  # warmed while the analysis runs
        return _analyze_and_write(args, path, config, custom)


def _analyze_and_write(args, path: Path, config, custom) -> int:
    """The analysis and its output folder (inside :func:`run`'s warmed figure renderer)."""
    from ..analysis import analyze

    result = analyze(
        path,
        config=config,
        age=args.age,
        norms=args.norms,
        custom_rois=custom,
        select=parse_select(args.select),
        condition=args.condition,
        allow_extrapolation=args.allow_extrapolation,
        allow_condition_mismatch=args.allow_condition_mismatch,
        progress=progress_flag(args),
    )
    out = result.write(
        args.out,
        figures=not args.no_figures,
        report=not args.no_report,
        maps=not args.no_maps,
        command=["sourcelab", *sys.argv[1:]],
        progress=progress_flag(args),
    )
    if args.bids_root:
        from ..exports import export_bids_derivatives

        d = export_bids_derivatives(result, args.bids_root, args.participant_id)
        print(f"sourcelab: wrote BIDS derivatives {d}")
    print_summary(result, out)
    return 0


#: ``T0-T1`` in seconds; a sign is recognised so that ``-5-100`` is refused as a range, not
#: looked up as an annotation.
_RANGE = re.compile(r"^\s*([-+]?\d+(?:\.\d*)?)\s*-\s*([-+]?\d+(?:\.\d*)?)\s*$")


def parse_select(values):
    """``--select`` values: ``"T0-T1"`` (seconds) becomes a time range, anything else is an
    annotation description.

    Parameters
    ----------
    values : list of str or None
        The repeated ``--select`` values as given.

    Returns
    -------
    select : list of (tuple of (float, float) or str) or None
        One entry per value, in order: ``(t0, t1)`` in seconds from the start of the recording,
        or the annotation description unchanged; None when ``values`` is empty or None.

    Raises
    ------
    sourcelab.errors.InputError
        When a range has a negative time or its end does not come after its start.
    """
    if not values:
        return None
    out = []
    for v in values:
        m = _RANGE.match(v)
        if m:
            t0, t1 = float(m.group(1)), float(m.group(2))
            if t0 < 0 or t1 < 0:
                raise InputError(
                    f"--select {v!r}: times are counted from the start of the "
                    "recording and cannot be negative"
                )
            if not t1 > t0:
                raise InputError(f"--select {v!r}: the end must come after the start")
            out.append((t0, t1))
        else:
            out.append(v)
    return out


def print_summary(result, out) -> None:
    """The result's summary on standard output, one ``sourcelab:`` line each, with what the
    cleaning removed and the procedure spans it left out.

    Parameters
    ----------
    result : sourcelab.result.AnalysisResult
        The analysis result; its ``summary()`` and ``quality`` (rejected seconds per reason,
        excluded procedure spans) are printed.
    out : str or pathlib.Path
        The output folder written, named on the ``wrote`` line.
    """
    q = result.quality
    removed = {k: v for k, v in q.rejected_s.items() if v}
    lines = result.summary().splitlines()
    print(f"sourcelab: {lines[0]}")
    if removed:
        print("sourcelab: removed: " + ", ".join(f"{k} {v:.0f} s" for k, v in removed.items()))
    for e in q.excluded:
        print(
            f"sourcelab: excluded {e['kind']} ({e['label']}, {e['start_s']:.0f}-"
            f"{e['stop_s']:.0f} s): {e['overlap_s']:.0f} s of the selection"
        )
    for line in lines[1:-1]:
        print(f"sourcelab: {line}")
    print(f"sourcelab: wrote {out}")
    print(lines[-1])


#: ``add_parser(sub)``, called by :mod:`sourcelab.cli.main`
add_parser = subcommand(
    "analyze",
    run,
    _arguments,
    help="analyse one recording",
    description="Analyse one 19-channel 10-20 recording: source band power, "
    "ROI tables, z-scores (with --norms), figures and report.",
)
