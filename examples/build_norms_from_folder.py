"""Build norms from a folder of reference recordings (BIDS layout + participants.tsv).

    python examples/build_norms_from_folder.py [--n 24] [--out FOLDER]

The reference recordings here are INVENTED: simulated adults written as a small BIDS dataset.
With a real cohort, point :func:`sourcelab.build_norms` at your own folder; the participants file
needs ``participant_id`` and ``age`` columns (``sex`` and ``condition`` are optional).
"""

from __future__ import annotations

import argparse
import tempfile
from pathlib import Path

import sourcelab


def invented_cohort(root: Path, n: int, duration_s: float) -> Path:
    """Write ``n`` invented recordings as BIDS ``sub-XX/eeg/*_eeg.edf`` plus participants.tsv."""
    from sourcelab import demo

    rows = ["participant_id\tage\tsex"]
    for i, (pid, age, raw) in enumerate(demo.cohort(n, duration_s=duration_s)):
        sub = f"sub-{pid}"
        eeg = root / sub / "eeg"
        eeg.mkdir(parents=True)
        demo.write_edf(
            raw, eeg / f"{sub}_task-rest_eeg.edf", description="INVENTED reference recording"
        )
        rows.append(f"{sub}\t{age:.1f}\t{'FM'[i % 2]}")
    (root / "participants.tsv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    return root / "participants.tsv"


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument(
        "--n", type=int, default=24, help="invented reference recordings (norms need at least 20)"
    )
    p.add_argument("--seconds", type=float, default=90.0, help="length of each recording")
    p.add_argument("--out", default=None)
    args = p.parse_args(argv)

    work = Path(args.out or tempfile.mkdtemp(prefix="sourcelab-norms-"))
    participants = invented_cohort(work / "cohort", args.n, args.seconds)
    config = sourcelab.AnalysisConfig(n_boot=0)  # intervals do not change the norms
    built = sourcelab.build_norms(
        work / "cohort",
        participants,
        out=work / "norms.tsv",
        config=config,
        condition="eyes closed",
    )
    for pid, why in built.failures:
        print(f"left out {pid}: {why}")
    norms = sourcelab.read_norms(built.norms.path)
    print(
        f"norms of {norms.cohort['n']} invented adults, {len(norms.table)} rows: {built.norms.path}"
    )
    print(f"calibration: {built.report_path}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
