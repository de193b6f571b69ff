"""Load the shipped fsaverage5 EEG head model, verifying its sha256."""

from __future__ import annotations

import functools
import json
from pathlib import Path

import numpy as np

from ..config import SITES_1020
from ..errors import InputError
from ..provenance import sha256_file
from .build import FILE_FORMAT, sidecar_path
from .model import HeadModel

#: File name of the shipped head model inside ``sourcelab/data``.
SHIPPED_NAME = "fsaverage5_eeg19.npz"

_KEYS = ("gain", "ch_names", "ch_pos", "src_pos", "src_nn", "src_mni", "n_left", "meta_json")


def shipped_path() -> Path:
    """Path of the head model shipped inside the package."""
    return Path(__file__).resolve().parent.parent / "data" / SHIPPED_NAME


def load_head_model(path: str | Path | None = None) -> HeadModel:
    """The fsaverage5 template EEG head model (cached; arrays are read-only).

    Parameters
    ----------
    path : path-like, optional
        A head-model ``.npz`` written by :func:`sourcelab.headmodel.build.build_head_model`;
        default: the file shipped in ``sourcelab/data``.  Its ``.json`` sidecar must record the
        file's sha256.

    Returns
    -------
    model : HeadModel
        ``gain`` (19, 61452) float64, V/(A·m), free orientation, *not* re-referenced; positions
        in MNE head coordinates (m); ``src_mni`` in MNI305 mm; ``sha256`` of the ``.npz``.

    Raises
    ------
    InputError
        If the file or its sidecar is missing, unreadable, or the sha256 differs.
    """
    p = shipped_path() if path is None else Path(path)
    return _load_cached(str(p.resolve()))


@functools.lru_cache(maxsize=4)
def _load_cached(path: str) -> HeadModel:
    p = Path(path)
    side = sidecar_path(p)
    hint = "reinstall sourcelab or rebuild with `python -m sourcelab.headmodel.build --out PATH`"
    if not p.is_file():
        raise InputError(f"head model file not found; {hint}", path=p)
    try:
        expected = json.loads(side.read_text(encoding="utf-8"))["sha256"]
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise InputError(f"head model sha256 sidecar missing or unreadable ({exc}); {hint}",
                         path=side) from None
    digest = sha256_file(p)
    if digest != expected:
        raise InputError(f"head model sha256 {digest} differs from the recorded {expected}; "
                         f"the file is corrupt or was changed; {hint}", path=p)
    try:
        with np.load(p, allow_pickle=False) as z:
            missing = [k for k in _KEYS if k not in z.files]
            if missing:
                raise InputError(f"head model file lacks arrays {missing}", path=p)
            arr = {k: z[k] for k in _KEYS}
        meta = json.loads(str(arr["meta_json"]))
    except (OSError, ValueError) as exc:
        raise InputError(f"head model file unreadable ({exc}); {hint}", path=p) from None
    if meta.get("file_format") != FILE_FORMAT:
        raise InputError(f"head model file format {meta.get('file_format')!r}, "
                         f"this sourcelab reads {FILE_FORMAT}; {hint}", path=p)
    ch_names = tuple(str(c) for c in arr["ch_names"])
    if ch_names != SITES_1020:
        raise InputError(f"head model channels {ch_names} differ from SITES_1020", path=p)
    fields = {k: np.ascontiguousarray(arr[k], dtype=np.float64)
              for k in ("gain", "ch_pos", "src_pos", "src_nn", "src_mni")}
    n_src = fields["src_pos"].shape[0]
    if fields["gain"].shape != (len(ch_names), 3 * n_src):
        raise InputError(f"head model gain shape {fields['gain'].shape} does not match "
                         f"{len(ch_names)} channels x 3 x {n_src} sources", path=p)
    for a in fields.values():
        a.flags.writeable = False
    return HeadModel(ch_names=ch_names, n_left=int(arr["n_left"]), sha256=digest, meta=meta,
                     **fields)
