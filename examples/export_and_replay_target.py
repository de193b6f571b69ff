"""Export a training target from an analysis and replay it causally on the recording.

    python examples/export_and_replay_target.py [--out FOLDER]

Uses the INVENTED demo participant and INVENTED demo norms.  The exported JSON file carries the
spatial filter, band-pass, norm and pipeline fingerprint; a real-time program can compute the same
area power from it.  Choosing a target for a real person rests with a licensed practitioner.
"""

from __future__ import annotations

import argparse
import tempfile
from pathlib import Path

import sourcelab


def main(argv=None) -> int:
    from sourcelab import demo
    from sourcelab.targets import export_target, read_target, replay_recording, write_target

    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--out", default=None)
    args = p.parse_args(argv)
    work = Path(args.out or tempfile.mkdtemp(prefix="sourcelab-target-"))
    work.mkdir(parents=True, exist_ok=True)

    edf = demo.write_edf(
        demo.demo_recording(),
        work / "demo-01_invented_eeg.edf",
        description="INVENTED demo recording",
    )
    result = sourcelab.analyze(
        edf, age=demo.DEMO_AGE, norms=demo.demo_norms_path(), condition=demo.DEMO_CONDITION
    )
    result.write(work / "analysis", figures=False, report=False, maps=False)
    best = result.candidates.iloc[0]  # ranked by the peaks of the per-source z-maps
    print(
        f"first candidate: {best['area']} {best['hemisphere']} {best['band']} "
        f"{best['measure']} power, peak z = {best['peak_z']:+.2f}"
    )
    target = export_target(
        work / "analysis",
        roi=best["area"],
        hemisphere=best["hemisphere"],
        band=best["band"],
        measure=best["measure"],
    )
    write_target(target, work / "target.json")
    replayed = replay_recording(read_target(work / "target.json"), edf, work / "replay")
    print(
        f"replayed {replayed['n_clean']} clean windows; mean power "
        f"{replayed['clean_mean_power']:.4g} vs offline {replayed['offline_value']:.4g}"
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
