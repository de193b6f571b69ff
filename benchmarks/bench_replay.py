"""Time per window update of a replayed target (19 channels, one core).  Not a test.

Run: ``python benchmarks/bench_replay.py`` (uses an invented pink-noise signal and a random
19-column kernel of realistic ROI sizes; no head model needed).  Reports the median time of
one 250-ms step pushed as it would arrive from an amplifier, for absolute power with a
Brodmann-sized ROI and relative power with a network-sized ROI.
"""

from __future__ import annotations

import os
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402

from sourcelab.config import Bands  # noqa: E402
from sourcelab.provenance import Fingerprint  # noqa: E402
from sourcelab.simulate import pink_noise  # noqa: E402
from sourcelab.targets import OnlineTarget, make_target  # noqa: E402


def bench(
    measure: str, n_sources: int, *, sfreq: float = 256.0, n_steps: int = 400, band: str = "alpha"
) -> dict:
    rng = np.random.default_rng(0)
    bands = Bands()
    fp = Fingerprint(
        "0" * 64,
        "sLORETA",
        "fixed",
        1 / 9,
        tuple((n, lo, hi) for n, (lo, hi) in zip(bands.names, bands.edges)),
    )
    kernel = rng.standard_normal((n_sources, 19))
    tg = make_target(
        kernel=kernel,
        n_comp=1,
        atlas="bench",
        roi="roi",
        hemisphere="left",
        vertices=np.arange(n_sources),
        band=band,
        bands=fp.bands,
        measure=measure,
        fingerprint=fp,
        sfreq=sfreq,
    )
    online = OnlineTarget(tg, sfreq)
    step = online.step
    x = 10 * pink_noise(19, step * (n_steps + 8), sfreq, rng)
    for j in range(8):  # fill the window
        online.push(x[:, j * step : (j + 1) * step])
    times = []
    for j in range(8, n_steps + 8):
        chunk = x[:, j * step : (j + 1) * step]
        t0 = time.perf_counter()
        online.push(chunk)
        times.append(time.perf_counter() - t0)
    t = np.array(times) * 1e3
    return {
        "measure": measure,
        "n_sources": n_sources,
        "median_ms": float(np.median(t)),
        "p95_ms": float(np.percentile(t, 95)),
        "step_samples": step,
    }


def main() -> None:
    for measure, n in (
        ("absolute", 400),
        ("absolute", 3000),
        ("relative", 400),
        ("relative", 3000),
    ):
        r = bench(measure, n)
        print(
            f"{r['measure']:<9} {r['n_sources']:>5} sources: {r['median_ms']:.3f} ms median, "
            f"{r['p95_ms']:.3f} ms p95 per {r['step_samples']}-sample (250 ms) update"
        )


if __name__ == "__main__":
    main()
