"""``sourcelab targets list|export|replay``: deviating regions, target files, causal replay.

* ``targets list RESULT_DIR [--max N] [--atlas NAME ...] [--out FILE.tsv]``
* ``targets export RESULT_DIR --roi NAME [--hemisphere H] [--atlas A] --band BAND
  [--measure M] [--norms FILE] --out TARGET.json``
* ``targets export RESULT_DIR --pair F3-F4 --band BAND [--measure msc] ...`` or
  ``--edge "visual.left|visual.right" [--atlas A] --band BAND [--measure lagcoh] ...``
* ``targets replay TARGET.json RECORDING --out DIR``
* ``targets stream TARGET.json [--name NAME | --type TYPE | --source-id ID] [--duration S]
  [--updates N] [--log FILE.tsv]``: live feedback over Lab Streaming Layer

The list is a statistical summary; choosing a training target rests with a licensed practitioner.
"""

from __future__ import annotations

from pathlib import Path

from ..cautions import SHORT
from ..constants import Z_THRESHOLD
from ..errors import InputError
from .options import add_hemisphere, add_out, subcommand, with_cautions


def _arguments(p) -> None:
    tsub = p.add_subparsers(dest="targets_cmd", metavar="ACTION", required=True)

    ls = tsub.add_parser("list", help="rank ROIs and networks that deviate from the norm")
    ls.add_argument("result_dir", help="analysis folder made with norms")
    ls.add_argument("--max", type=int, default=None, dest="max_n", help="show the first N rows")
    ls.add_argument(
        "--atlas", action="append", default=None, help="restrict to this atlas (repeatable)"
    )
    add_out(ls, "also write the table as TSV", default=None)
    ls.set_defaults(func=run)

    ex = tsub.add_parser("export", help="write a portable target definition (JSON)")
    ex.add_argument("result_dir")
    what = ex.add_mutually_exclusive_group(required=True)
    what.add_argument("--roi", help="ROI name, e.g. BA17 or default-mode")
    what.add_argument("--pair", help="electrode pair, e.g. F3-F4")
    what.add_argument("--edge", help='network/lobe edge, e.g. "visual.left|visual.right"')
    add_hemisphere(ex)
    ex.add_argument(
        "--atlas", default=None, help="atlas of the ROI (default brodmann) or of the edge"
    )
    ex.add_argument("--band", required=True)
    ex.add_argument(
        "--measure",
        default=None,
        help="ROI: absolute (default) or relative; pair: a pair measure (default "
        "msc) or asymmetry; edge: an edge measure (default lagcoh)",
    )
    ex.add_argument(
        "--window-segments",
        type=int,
        default=None,
        help="pair/edge: segments in the feedback window (default 15)",
    )
    ex.add_argument(
        "--norms", default=None, help="norms file (default: the one recorded in the analysis)"
    )
    ex.add_argument(
        "--allow-extrapolation",
        action="store_true",
        help="use the nearest age range when the age lies outside the norms",
    )
    ex.add_argument(
        "--filter-order",
        type=int,
        default=4,
        help="Butterworth order per band edge (higher: less leakage, more delay)",
    )
    ex.add_argument(
        "--smoothing",
        choices=("exponential", "moving", "none"),
        default="exponential",
        help="smoothing of the live value (default exponential)",
    )
    ex.add_argument(
        "--time-constant",
        type=float,
        default=2.0,
        metavar="S",
        help="smoothing time constant in seconds (default 2)",
    )
    ex.add_argument(
        "--threshold-sd",
        type=float,
        default=None,
        metavar="K",
        help="feedback threshold: K smoothed-SDs from the person's own level towards "
        "the norm (no threshold by default; the choice rests with the "
        "practitioner)",
    )
    add_out(ex, "TARGET.json")
    ex.set_defaults(func=run)

    rp = tsub.add_parser("replay", help="apply a target causally to a recording")
    rp.add_argument("target", help="TARGET.json")
    rp.add_argument("recording", help="EEG file (EDF, BDF, BrainVision, EEGLAB, FIF)")
    add_out(rp, "output folder")
    rp.set_defaults(func=run)

    st = tsub.add_parser(
        "stream",
        help="apply a target live to an LSL EEG stream and publish "
        "the feedback value as an LSL stream",
    )
    st.add_argument("target", help="TARGET.json")
    st.add_argument("--name", default=None, help="input LSL stream name")
    st.add_argument(
        "--type",
        default=None,
        dest="stype",
        help="input LSL stream type (default EEG when no name or source id is given)",
    )
    st.add_argument("--source-id", default=None, help="input LSL stream source id")
    st.add_argument(
        "--out-name", default=None, help="name of the published stream (default sourcelab-feedback)"
    )
    st.add_argument(
        "--unit",
        choices=("auto", "uV", "V"),
        default="auto",
        help="input unit (default: the stream's declared channel units)",
    )
    st.add_argument(
        "--duration", type=float, default=None, metavar="S", help="stop after S seconds"
    )
    st.add_argument(
        "--updates", type=int, default=None, metavar="N", help="stop after N published values"
    )
    st.add_argument(
        "--timeout",
        type=float,
        default=5.0,
        metavar="S",
        help="seconds allowed to find the input stream (default 5)",
    )
    st.add_argument(
        "--log",
        default=None,
        metavar="FILE.tsv",
        help="also write every published value (and its latency) as TSV",
    )
    st.set_defaults(func=run)


def _list(args) -> int:
    from ..targets import candidates_from_folder, write_candidates
    from ..targets.candidates import CANDIDATE_LIST_COLUMNS, read_candidates
    from ..targets.peaks import PEAK_LIST_COLUMNS

    # the analysis' own candidates (z-map peaks) unless areas of given atlases are asked for
    table = None if args.atlas else read_candidates(args.result_dir)
    if table is None:
        table = candidates_from_folder(
            args.result_dir, max_n=args.max_n, include=tuple(args.atlas) if args.atlas else None
        )
        cols = list(CANDIDATE_LIST_COLUMNS)
    else:
        table = table.head(args.max_n) if args.max_n else table
        cols = [c for c in PEAK_LIST_COLUMNS if c in table.columns]
    print(SHORT)
    print(
        "Statistical deviation only; whether to train any of these rests with a licensed "
        "practitioner who weighs symptoms and history."
    )
    if table.empty:
        print(f"no area or network deviates beyond |z| = {Z_THRESHOLD}")
    else:
        print(table[cols].to_string(index=False, float_format=lambda v: f"{v:+.2f}"))
    if args.out:
        out = Path(args.out)
        if out.suffix.lower() not in (".tsv", ".txt"):
            raise InputError("--out must end in .tsv", path=out)
        write_candidates(table, out)
        print(f"sourcelab: wrote {out}")
    return 0


def _export(args) -> int:
    from ..targets import export_coupling_target, export_target

    if args.roi is None:
        from ..targets.coupling import WINDOW_SEGMENTS

        kind = "pair" if args.pair is not None else "edge"
        t = export_coupling_target(
            args.result_dir,
            kind=kind,
            label=args.pair or args.edge,
            band=args.band,
            measure=args.measure,
            atlas=args.atlas,
            norms=args.norms,
            allow_extrapolation=args.allow_extrapolation,
            window_segments=args.window_segments or WINDOW_SEGMENTS,
        )
        _wrote_target(t, args.out, f"value {t.offline['value']:.4g}")
        return 0
    measure = args.measure or "absolute"
    if measure not in ("absolute", "relative"):
        raise InputError(f"--measure {measure!r}: an ROI target is absolute or relative power")
    t = export_target(
        args.result_dir,
        roi=args.roi,
        band=args.band,
        atlas=args.atlas or "brodmann",
        hemisphere=args.hemisphere,
        measure=measure,
        norms=args.norms,
        allow_extrapolation=args.allow_extrapolation,
        filter_order=args.filter_order,
        smoothing=args.smoothing,
        time_constant_s=args.time_constant,
        threshold_sd=args.threshold_sd,
    )
    _wrote_target(t, args.out, f"{t.vertices.size} sources")
    for line in live_summary(t):
        print(f"sourcelab: {line}")
    return 0


def _wrote_target(t, out, what: str) -> None:
    """Write target ``t`` to ``out`` and say so: its name, ``what`` it is, offline z, direction."""
    from ..targets import write_target

    write_target(t, out)
    z = t.offline.get("z")
    zs = f", offline z {z:+.2f}" if z is not None else ", no norm"
    print(f"sourcelab: wrote {out} ({t.name}, {what}{zs}, direction {t.direction})")


def live_summary(t) -> list[str]:
    """Lines describing the expected live fluctuation, smoothing and threshold of a target.

    Parameters
    ----------
    t : TargetDefinition
        An area target; its ``live`` section (may be None) and ``window_s`` (s) are read.

    Returns
    -------
    list of str
        The expected live SD per window and after smoothing (log10 or logit units, and z when
        the target has a norm), the threshold when one is set, and a last line saying that live
        values are noisy and the decision rests with the practitioner.
    """
    live = t.live or {}
    sm = live.get("smoothing") or {}
    unit = "log10 units" if live.get("transform", "log10") == "log10" else "logit units"
    out = []
    exp = live.get("expected_sd")
    if exp is None:
        out.append("expected live SD not available (the analysis folder has no epochs.npz)")
    else:
        w, s = exp["window"], exp["smoothed"]
        wz = f" = {w['z']:.2f} z" if w.get("z") is not None else ""
        sz = f" = {s['z']:.2f} z" if s.get("z") is not None else ""
        out.append(
            f"expected live SD at the person's steady state: {w['transformed']:.3f} "
            f"{unit}{wz} per {t.window_s:g}-s window; {s['transformed']:.3f}{sz} after "
            f"{sm.get('kind', 'exponential')} smoothing (time constant "
            f"{float(sm.get('time_constant_s', 2.0)):g} s)"
        )
    th = live.get("threshold")
    if th is not None:
        zt = f", z {th['z']:+.2f}" if th.get("z") is not None else ""
        out.append(
            f"threshold: smoothed value {th['direction']} to {th['level']:.3f} {unit} "
            f"({th['k_sd']:g} smoothed SD from the person's level{zt})"
        )
    out.append("live values are noisy; the threshold and the decision rest with the practitioner")
    return out


def _replay(args) -> int:
    from ..targets import read_target, replay_recording

    target = read_target(args.target)
    s = replay_recording(target, args.recording, args.out)
    if "pooled_value" in s:  # a pair or edge target
        diff = s["difference_to_offline"]
        extra = f", {diff:+.4g} from the offline value" if diff is not None else ""
        print(
            f"sourcelab: {s['n_clean']} of {s['n_segments']} segments clean; value over all "
            f"clean segments {s['pooled_value']:.4g}{extra}; wrote {args.out}"
        )
        return 0
    ratio = s["ratio_to_offline"]
    extra = f", {ratio:.3f} x the offline value" if ratio is not None else ""
    print(
        f"sourcelab: {s['n_clean']} of {s['n_windows']} windows clean; mean power "
        f"{s['clean_mean_power']:.4g}{extra}; wrote {args.out}"
    )
    return 0


def _stream(args) -> int:
    import sys

    from ..targets import read_target

    try:
        import mne_lsl  # noqa: F401

        from ..targets.stream import run_stream
    except ImportError:
        raise InputError("live streaming needs mne-lsl: pip install 'sourcelab[live]'") from None
    target = read_target(args.target)
    if getattr(target, "kind", "roi") in ("pair", "edge"):
        raise InputError(
            f"a {target.kind} target can be replayed (sourcelab targets replay) but "
            "not streamed live: live streaming takes area targets",
            path=args.target,
        )
    if args.log is not None and Path(args.log).suffix.lower() not in (".tsv", ".txt"):
        raise InputError("--log must end in .tsv", path=args.log)
    for v, flag in ((args.duration, "--duration"), (args.updates, "--updates")):
        if v is not None and not v > 0:
            raise InputError(f"{flag} must be > 0, got {v}")
    print(SHORT)
    for line in live_summary(target):
        print(f"sourcelab: {line}")

    def say(msg):
        print(f"sourcelab: {msg}", file=sys.stderr, flush=True)

    try:
        s = run_stream(
            target,
            name=args.name,
            stype=args.stype,
            source_id=args.source_id,
            out_name=args.out_name,
            duration_s=args.duration,
            max_updates=args.updates,
            unit=args.unit,
            timeout_s=args.timeout,
            log_path=args.log,
            say=say,
        )
    except KeyboardInterrupt:
        print("sourcelab: stopped")
        return 0
    flags = ", ".join(f"{k} {v}" for k, v in sorted(s["by_status"].items()))
    print(
        f"sourcelab: published {s['rows']} values on {s['output']!r} ({flags}); latency "
        f"sample arrival to publication median {s['latency_ms_median']:.2f} ms, 95th "
        f"percentile {s['latency_ms_p95']:.2f} ms"
    )
    return 0


#: action -> handler
_ACTIONS = {"list": _list, "export": _export, "replay": _replay, "stream": _stream}


def run(args) -> int:
    """Dispatch to the chosen ``targets`` action.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed ``targets`` arguments; ``targets_cmd`` names the action (``"list"``,
        ``"export"``, ``"replay"`` or ``"stream"``).

    Returns
    -------
    int
        0 on success (also when a live stream is stopped with Ctrl-C).

    Raises
    ------
    InputError
        For bad arguments or input files; the CLI turns it into one line and exit code 2.
    """
    return _ACTIONS[args.targets_cmd](args)


#: ``add_parser(sub)``, called by :mod:`sourcelab.cli.main`
add_parser = subcommand(
    "targets",
    run,
    _arguments,
    help="deviating regions/networks, target files and replay",
    description=with_cautions(__doc__),
)
