"""An invented :class:`~sourcelab.result.AnalysisResult` for figure/report tests and benchmarks.

Nothing here comes from a recording: an alpha "blob" of extra source power is centred on the
most posterior left occipital source, all other numbers are seeded random draws.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..config import SITES_1020, AnalysisConfig
from ..provenance import Fingerprint
from ..result import UNITS, AnalysisResult
from . import geometry

#: Invented atlases for demos: (atlas name, ROI names); ROIs are built from source positions.
DEMO_ATLAS = "demo-lobes"
DEMO_NETWORKS = "demo-networks"


def occipital_source() -> int:
    """Index of the most posterior left-hemisphere source (MNI305 y minimum)."""
    pos = geometry.source_positions_mni305()[: geometry.N_LEFT]
    return int(np.argmin(pos[:, 1]))


def blob(centre: int, *, width_mm: float = 20.0) -> np.ndarray:
    """Gaussian bump (peak 1) around source ``centre``, shape (20484,)."""
    pos = geometry.source_positions_mni305()
    d = np.linalg.norm(pos - pos[centre], axis=1)
    return np.exp(-0.5 * (d / width_mm) ** 2)


def demo_rois() -> dict[tuple[str, str], np.ndarray]:
    """Coarse invented "lobes" by position: {(name, hemisphere): source indices}."""
    pos = geometry.source_positions_mni305()
    hemi = np.where(np.arange(geometry.N_SRC) < geometry.N_LEFT, "left", "right")
    y, z = pos[:, 1], pos[:, 2]
    parts = {
        "occipital": y < -70,
        "parietal": (y >= -70) & (y < -25) & (z >= 10),
        "temporal": (y >= -70) & (y < 0) & (z < 10),
        "central": (y >= -25) & (y < 5) & (z >= 10),
        "frontal": y >= 5,
    }
    out = {}
    for name, m in parts.items():
        for h in ("left", "right"):
            out[(name, h)] = np.flatnonzero(m & (hemi == h))
    return out


def demo_result(*, seed: int = 0, with_z: bool = True, bands=None,
                atlases: tuple[str, ...] | None = None) -> AnalysisResult:
    """An invented result: 5 bands, alpha peak at the left occipital pole.

    Parameters
    ----------
    seed : int
    with_z : bool
        If False, all z columns are NaN (as without norms).
    bands : Bands | None
    atlases : tuple of str | None
        Names for :func:`sourcelab.rois.load_atlas` whose ROIs fill the ROI table (ROI z is then
        random, plus 3.4 for ROIs at the alpha blob); None uses two invented position-based
        atlases and needs no atlas files.
    """
    rng = np.random.default_rng(seed)
    cfg = AnalysisConfig() if bands is None else AnalysisConfig(bands=bands)
    names = cfg.bands.names
    nb = len(names)
    occ = blob(occipital_source())
    base = rng.uniform(0.8, 1.2, size=(nb, geometry.N_SRC))
    src_abs = base.copy()
    if "alpha" in names:
        src_abs[names.index("alpha")] += 4.0 * occ
    src_abs = src_abs.astype(np.float32)
    src_rel = (src_abs / src_abs.sum(0, keepdims=True)).astype(np.float32)
    sens_abs = rng.uniform(5, 20, size=(nb, len(SITES_1020)))
    if "alpha" in names:
        for ch, extra in (("O1", 60.0), ("O2", 40.0), ("P3", 20.0), ("Pz", 15.0)):
            sens_abs[names.index("alpha"), SITES_1020.index(ch)] += extra
    sens_rel = sens_abs / sens_abs.sum(0, keepdims=True)

    rows = []
    rois = demo_rois()
    sets = [(DEMO_ATLAS, rois), (DEMO_NETWORKS, _demo_networks(rois))]
    if atlases is not None:
        from ..rois import load_atlas

        sets = [(name, {(r.name, r.hemisphere): np.asarray(r.vertices) for r in
                        load_atlas(name).rois}) for name in atlases]
    for atlas, roi_defs in sets:
        for (name, hemi), idx in roi_defs.items():
            for b, band in enumerate(names):
                for measure, arr in (("absolute", src_abs), ("relative", src_rel)):
                    val = float(arr[b, idx].mean())
                    z = float(rng.normal(0, 1)) if with_z else np.nan
                    if with_z and band == "alpha" and measure == "absolute" and (
                            occ[idx].mean() > 0.3 if len(idx) else False):
                        z = 3.4
                    rows.append((atlas, name, hemi, band, measure, val, UNITS[measure], len(idx),
                                 len(idx) < 20, z))
    roi_table = pd.DataFrame(rows, columns=["atlas", "roi", "hemisphere", "band", "measure",
                                            "value", "unit", "n_vertices", "small", "z"])
    if with_z:
        roi_table["fdr_significant"] = roi_table["z"].abs() > 3.0
    srows = []
    for b, band in enumerate(names):
        for c, ch in enumerate(SITES_1020):
            for measure, arr, unit in (("absolute", sens_abs, UNITS["sensor_absolute"]),
                                       ("relative", sens_rel, UNITS["relative"])):
                z = float(rng.normal(0, 1.2)) if with_z else np.nan
                srows.append((ch, band, measure, float(arr[b, c]), unit, z))
    sensor_table = pd.DataFrame(srows, columns=["channel", "band", "measure", "value", "unit",
                                                "z"])
    fp = Fingerprint(headmodel_sha256="0" * 64, method=cfg.method, orientation=cfg.orientation,
                     lambda2=cfg.lambda2,
                     bands=tuple((n, lo, hi) for n, (lo, hi) in zip(names, cfg.bands.edges)))
    return AnalysisResult(
        config=cfg, fingerprint=fp, ch_names=SITES_1020, source_abs=src_abs, source_rel=src_rel,
        sensor_abs=sens_abs, sensor_rel=sens_rel, roi_table=roi_table, sensor_table=sensor_table,
        quality={"seconds_kept": 240.0, "seconds_rejected": 36.0, "epochs_kept": 120,
                 "epochs_rejected": 18, "split_half_reliability": 0.95,
                 "channel_kept_fraction": {ch: 0.9 for ch in SITES_1020}},
        recording={"path": "demo/invented.edf", "sha256": "f" * 64, "sfreq": 256.0,
                   "duration_s": 300.0, "participant_age": 30},
        norms={"path": "demo/invented-norms.json", "sha256": "e" * 64,
               "description": "invented demo norms"} if with_z else None,
    )


def _demo_networks(rois):
    nets = {"visual": ["occipital"], "somatomotor": ["central"], "default-mode": ["parietal",
            "frontal"], "auditory": ["temporal"]}
    out = {}
    for net, parts in nets.items():
        idx = np.concatenate([rois[(p, h)] for p in parts for h in ("left", "right")])
        out[(net, "both")] = np.unique(idx)
    return out
