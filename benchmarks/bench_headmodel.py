"""Timings of the head-model loader and MNE bridge (run: python benchmarks/bench_headmodel.py).

Not a test: prints wall times; a full rebuild is timed by ``python -m sourcelab.headmodel.build``.
"""

from __future__ import annotations

import time


def main() -> None:
    t0 = time.perf_counter()
    from sourcelab.headmodel import load_head_model, make_info, to_mne_forward
    from sourcelab.headmodel.load import _load_shipped as _load_cached

    t1 = time.perf_counter()
    model = load_head_model()
    t2 = time.perf_counter()
    _load_cached.cache_clear()
    load_head_model()
    t3 = time.perf_counter()
    load_head_model()
    t4 = time.perf_counter()
    to_mne_forward(model)
    t5 = time.perf_counter()
    to_mne_forward(model, make_info(250.0))
    t6 = time.perf_counter()
    print(f"import sourcelab.headmodel      {t1 - t0:7.3f} s")
    print(f"load_head_model (first)         {t2 - t1:7.3f} s")
    print(f"load_head_model (warm, no cache){t3 - t2:7.3f} s")
    print(f"load_head_model (cached)        {t4 - t3:7.5f} s")
    print(f"to_mne_forward (first)          {t5 - t4:7.3f} s")
    print(f"to_mne_forward (cached template){t6 - t5:7.3f} s")


if __name__ == "__main__":
    main()
