"""``sourcelab targets list|export|replay``: deviating regions, target files, causal replay.

* ``targets list RESULT_DIR [--max N] [--atlas NAME ...] [--out FILE.tsv]``
* ``targets export RESULT_DIR --roi NAME [--hemisphere H] [--atlas A] --band BAND
  [--measure M] [--norms FILE] --out TARGET.json``
* ``targets export RESULT_DIR --pair F3-F4 --band BAND [--measure msc] ...`` or
  ``--edge "visual.left|visual.right" [--atlas A] --band BAND [--measure lagcoh] ...``
* ``targets replay TARGET.json RECORDING --out DIR``

The list is a statistical summary; choosing a training target rests with a licensed practitioner.
"""

from __future__ import annotations

from pathlib import Path

from ..cautions import SHORT
from ..errors import InputError


def add_parser(sub) -> None:
    p = sub.add_parser("targets", help="deviating regions/networks, target files and replay",
                       description=__doc__.split("\n\n")[0] + " " + SHORT)
    tsub = p.add_subparsers(dest="targets_cmd", metavar="ACTION", required=True)

    ls = tsub.add_parser("list", help="rank ROIs and networks that deviate from the norm")
    ls.add_argument("result_dir", help="analysis folder made with norms")
    ls.add_argument("--max", type=int, default=None, dest="max_n", help="show the first N rows")
    ls.add_argument("--atlas", action="append", default=None,
                    help="restrict to this atlas (repeatable)")
    ls.add_argument("--out", default=None, help="also write the table as TSV")
    ls.set_defaults(func=run)

    ex = tsub.add_parser("export", help="write a portable target definition (JSON)")
    ex.add_argument("result_dir")
    what = ex.add_mutually_exclusive_group(required=True)
    what.add_argument("--roi", help="ROI name, e.g. BA17 or default-mode")
    what.add_argument("--pair", help="electrode pair, e.g. F3-F4")
    what.add_argument("--edge", help='network/lobe edge, e.g. "visual.left|visual.right"')
    ex.add_argument("--hemisphere", choices=("left", "right", "both"), default=None)
    ex.add_argument("--atlas", default=None,
                    help="atlas of the ROI (default brodmann) or of the edge")
    ex.add_argument("--band", required=True)
    ex.add_argument("--measure", default=None,
                    help="ROI: absolute (default) or relative; pair: a pair measure (default "
                         "msc) or asymmetry; edge: an edge measure (default lagcoh)")
    ex.add_argument("--window-segments", type=int, default=None,
                    help="pair/edge: segments in the feedback window (default 15)")
    ex.add_argument("--norms", default=None,
                    help="norms file (default: the one recorded in the analysis)")
    ex.add_argument("--allow-extrapolation", action="store_true",
                    help="use the nearest age range when the age lies outside the norms")
    ex.add_argument("--filter-order", type=int, default=4,
                    help="Butterworth order per band edge (higher: less leakage, more delay)")
    ex.add_argument("--out", required=True, help="TARGET.json")
    ex.set_defaults(func=run)

    rp = tsub.add_parser("replay", help="apply a target causally to a recording")
    rp.add_argument("target", help="TARGET.json")
    rp.add_argument("recording", help="EEG file (EDF, BDF, BrainVision, EEGLAB, FIF)")
    rp.add_argument("--out", required=True, help="output folder")
    rp.set_defaults(func=run)


def _list(args) -> int:
    from ..targets import candidates_from_folder, write_candidates

    table = candidates_from_folder(args.result_dir, max_n=args.max_n,
                                   include=tuple(args.atlas) if args.atlas else None)
    print(SHORT)
    print("Statistical deviation only; whether to train any of these rests with a licensed "
          "practitioner who weighs symptoms and history.")
    if table.empty:
        print("no ROI or network deviates beyond |z| = 1.96")
    else:
        cols = ["rank", "kind", "atlas", "roi", "hemisphere", "band", "measure", "z",
                "direction", "fdr", "n_vertices", "small", "neighbours_same", "n_neighbours",
                "members_deviating", "n_members"]
        print(table[cols].to_string(index=False, float_format=lambda v: f"{v:+.2f}"))
    if args.out:
        out = Path(args.out)
        if out.suffix.lower() not in (".tsv", ".txt"):
            raise InputError("--out must end in .tsv", path=out)
        write_candidates(table, out)
        print(f"sourcelab: wrote {out}")
    return 0


def _export(args) -> int:
    from ..targets import export_coupling_target, export_target, write_target

    if args.roi is None:
        from ..targets.coupling import WINDOW_SEGMENTS

        kind = "pair" if args.pair is not None else "edge"
        t = export_coupling_target(args.result_dir, kind=kind, label=args.pair or args.edge,
                                   band=args.band, measure=args.measure, atlas=args.atlas,
                                   norms=args.norms,
                                   allow_extrapolation=args.allow_extrapolation,
                                   window_segments=args.window_segments or WINDOW_SEGMENTS)
        write_target(t, args.out)
        z = t.offline.get("z")
        zs = f", offline z {z:+.2f}" if z is not None else ", no norm"
        print(f"sourcelab: wrote {args.out} ({t.name}, value {t.offline['value']:.4g}{zs}, "
              f"direction {t.direction})")
        return 0
    measure = args.measure or "absolute"
    if measure not in ("absolute", "relative"):
        raise InputError(f"--measure {measure!r}: an ROI target is absolute or relative power")
    t = export_target(args.result_dir, roi=args.roi, band=args.band,
                      atlas=args.atlas or "brodmann", hemisphere=args.hemisphere,
                      measure=measure, norms=args.norms,
                      allow_extrapolation=args.allow_extrapolation,
                      filter_order=args.filter_order)
    write_target(t, args.out)
    z = t.offline.get("z")
    zs = f", offline z {z:+.2f}" if z is not None else ", no norm"
    print(f"sourcelab: wrote {args.out} ({t.name}, {t.vertices.size} sources{zs}, "
          f"direction {t.direction})")
    return 0


def _replay(args) -> int:
    from ..targets import read_target, replay_recording

    target = read_target(args.target)
    s = replay_recording(target, args.recording, args.out)
    if "pooled_value" in s:                 # a pair or edge target
        diff = s["difference_to_offline"]
        extra = f", {diff:+.4g} from the offline value" if diff is not None else ""
        print(f"sourcelab: {s['n_clean']} of {s['n_segments']} segments clean; value over all "
              f"clean segments {s['pooled_value']:.4g}{extra}; wrote {args.out}")
        return 0
    ratio = s["ratio_to_offline"]
    extra = f", {ratio:.3f} x the offline value" if ratio is not None else ""
    print(f"sourcelab: {s['n_clean']} of {s['n_windows']} windows clean; mean power "
          f"{s['clean_mean_power']:.4g}{extra}; wrote {args.out}")
    return 0


#: action -> handler
_ACTIONS = {"list": _list, "export": _export, "replay": _replay}


def run(args) -> int:
    return _ACTIONS[args.targets_cmd](args)
