"""Analyse one recording from Python.

    python examples/analyse_file.py [RECORDING] [--out FOLDER]

Without RECORDING, an INVENTED demo recording (simulated by sourcelab, no real person) is
written and analysed against the INVENTED demo norms.  With a recording of your own, give
``--age``, ``--norms`` and ``--condition`` to get z-scores.
"""

from __future__ import annotations

import argparse
import tempfile
from pathlib import Path

import sourcelab


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("recording", nargs="?", help="EDF/BDF/BrainVision/EEGLAB/FIF file")
    p.add_argument("--out", default=None, help="output folder (default: a temporary folder)")
    p.add_argument("--age", type=float)
    p.add_argument("--norms")
    p.add_argument("--condition")
    args = p.parse_args(argv)

    if args.recording is None:  # the invented demo participant against the invented norms
        from sourcelab import demo

        folder = Path(tempfile.mkdtemp(prefix="sourcelab-example-"))
        recording = demo.write_edf(
            demo.demo_recording(),
            folder / "demo-01_invented_eeg.edf",
            description="INVENTED demo recording",
        )
        age, norms, condition = demo.DEMO_AGE, demo.demo_norms_path(), demo.DEMO_CONDITION
    else:
        recording, age, norms, condition = args.recording, args.age, args.norms, args.condition

    config = sourcelab.AnalysisConfig()  # every parameter that changes the numbers
    result = sourcelab.analyze(recording, config=config, age=age, norms=norms, condition=condition)
    print(result.summary())
    if result.candidates is not None:  # ranked deviations (with norms only)
        cols = [
            c
            for c in (
                "rank",
                "band",
                "measure",
                "direction",
                "area",
                "hemisphere",
                "peak_z",
                "probability",
            )
            if c in result.candidates.columns
        ]
        print(result.candidates[cols].head(5).to_string(index=False))
    t = result.roi_table  # tidy: atlas x area x band x measure
    print(
        t[(t.atlas == "lobes") & (t.band == "alpha") & (t.measure == "absolute")][
            ["roi", "hemisphere", "value"]
        ].to_string(index=False)
    )
    out = Path(args.out or tempfile.mkdtemp(prefix="sourcelab-result-")) / "result"
    result.write(out, figures=False, report=False, maps=False)  # tables + provenance
    print(f"wrote {out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
