"""Latency of ``sourcelab targets stream``: sample arrival to published value.  Not a test.

Run: ``python benchmarks/bench_stream.py [--seconds 20]``.  An invented 19-channel pink-noise
recording (µV, 256 Hz) is played over Lab Streaming Layer by mne-lsl's ``PlayerLSL`` (chunks of
16 samples, 62.5 ms) on the loopback interface only (an LSL configuration with
``ResolveScope = machine`` is written and set through ``LSLAPICFG`` before mne-lsl loads), and
``run_stream`` applies a right-BA17 alpha target of the shipped sLORETA operator (absolute power)
and a network-sized relative target.  Reported per published update:

* **latency**: from the moment the inlet chunk that completes a step is pulled into sourcelab to
  the return of ``StreamOutlet.push_sample`` (processing + publication, one core);
* **age**: local LSL clock at publication minus the time stamp of the newest sample in the window
  (adds the player's chunking and the polling interval; the player stamps chunks ahead of real
  time, so it can be negative).

Goal (issue 18): latency median <= 5 ms per update on one core.
"""

from __future__ import annotations

import argparse
import os
import tempfile
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
_CFG = Path(tempfile.mkdtemp(prefix="sourcelab-bench-lsl-")) / "lsl_api.cfg"
os.environ["LSLAPICFG"] = str(_CFG)

import numpy as np  # noqa: E402


def _target(measure: str):
    from sourcelab.config import AnalysisConfig
    from sourcelab.analysis import fingerprint_for
    from sourcelab.inverse import inverse_operator
    from sourcelab.rois import load_atlas
    from sourcelab.targets import make_target

    cfg = AnalysisConfig()
    op = inverse_operator(cfg.method, cfg.orientation, cfg.lambda2)
    if measure == "absolute":
        atlas, name, hemi = "brodmann", "BA17", "right"
    else:
        atlas, name, hemi = "yeo7", None, None
    rois = load_atlas(atlas).rois
    roi = (
        [r for r in rois if (r.name, r.hemisphere) == (name, hemi)][0]
        if name
        else max(rois, key=lambda r: len(r.vertices))
    )
    return make_target(
        kernel=op.kernel,
        n_comp=op.n_comp,
        atlas=atlas,
        roi=roi.name,
        hemisphere=roi.hemisphere,
        vertices=roi.vertices,
        band="alpha",
        bands=fingerprint_for(cfg).bands,
        measure=measure,
        fingerprint=fingerprint_for(cfg),
        sfreq=256.0,
        norm={"mean": 0.5, "sd": 0.13, "transform": "log10" if measure == "absolute" else "logit"},
    )


def bench(measure: str, seconds: float) -> dict:
    import mne
    from mne_lsl.player import PlayerLSL

    from sourcelab.config import SITES_1020
    from sourcelab.simulate import pink_noise
    from sourcelab.targets.stream import run_stream

    sf = 256.0
    rng = np.random.default_rng(0)
    x = 3.0 * rng.standard_normal((19, 19)) @ pink_noise(19, int((seconds + 6) * sf), sf, rng)
    raw = mne.io.RawArray(x * 1e-6, mne.create_info(list(SITES_1020), sf, "eeg"), verbose="error")
    tg = _target(measure)
    name = f"sourcelab-bench-{os.getpid()}-{measure}"
    player = PlayerLSL(raw, chunk_size=16, n_repeat=1, name=name, source_id=name)
    player.start()
    try:
        s = run_stream(tg, name=name, duration_s=seconds, say=lambda m: None)
    finally:
        player.stop()
    s.update(measure=measure, n_sources=int(tg.vertices.size))
    return s


def main() -> None:
    from sourcelab.targets.stream import write_loopback_config

    write_loopback_config(_CFG)
    p = argparse.ArgumentParser()
    p.add_argument("--seconds", type=float, default=20.0)
    a = p.parse_args()
    for measure in ("absolute", "relative"):
        r = bench(measure, a.seconds)
        print(
            f"{r['measure']:<9} {r['n_sources']:>5} sources, {r['rows']} updates: latency "
            f"median {r['latency_ms_median']:.2f} ms, p95 {r['latency_ms_p95']:.2f} ms; age "
            f"of the newest sample at publication median {r['age_ms_median']:.1f} ms, p95 "
            f"{r['age_ms_p95']:.1f} ms"
        )


if __name__ == "__main__":
    main()
