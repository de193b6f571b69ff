"""Load the shipped fsaverage5 EEG head model (hash-checked against the data manifest)."""

from __future__ import annotations

import functools
import io
import json
from pathlib import Path

import numpy as np

from ..constants import SITES_1020
from ..errors import InputError
from .model import FILE_FORMAT, N_SURFACE, HeadModel, TemplateSurface

#: File name of the shipped head model inside ``sourcelab/data``.
SHIPPED_NAME = "fsaverage5_eeg19.npz"

_KEYS = (
    "gain",
    "ch_names",
    "ch_pos",
    "src_pos",
    "src_nn",
    "vertno",
    "surf_white",
    "surf_pial",
    "surf_inflated",
    "surf_faces",
    "surf_sulc",
    "meta_json",
)
_HINT = "reinstall sourcelab or rebuild with `python -m sourcelab.headmodel.build`"


def shipped_path() -> Path:
    """Path of the head model shipped inside the package.

    Returns
    -------
    pathlib.Path
        ``sourcelab/data/fsaverage5_eeg19.npz``.
    """
    from ..data import data_path

    return data_path(SHIPPED_NAME)


def load_head_model(path: str | Path | None = None) -> HeadModel:
    """The fsaverage5 template EEG head model (cached; arrays are read-only).

    Parameters
    ----------
    path : path-like, optional
        A head-model ``.npz`` written by :func:`sourcelab.headmodel.build.build_head_model`;
        default: the shipped file, verified against ``sourcelab/data/MANIFEST.json``.

    Returns
    -------
    model : HeadModel
        ``gain`` (19, 3 n_src) float64, V/(A·m), free orientation, *not* re-referenced;
        positions in MNE head coordinates (m); meshes in MNI305 mm; ``sha256`` of the ``.npz``.

    Raises
    ------
    InputError
        If the file is missing, unreadable, of another format or (shipped file) its sha256
        differs from the manifest.
    """
    if path is None:
        return _load_shipped()
    return _load_file(str(Path(path).resolve()))


@functools.lru_cache(maxsize=1)
def _load_shipped() -> HeadModel:
    from ..data import shipped_bytes

    try:
        data, digest = shipped_bytes(SHIPPED_NAME)
    except RuntimeError as exc:
        raise InputError(f"{exc}; {_HINT}", path=shipped_path()) from None
    return _parse(data, digest, shipped_path())


@functools.lru_cache(maxsize=2)
def _load_file(path: str) -> HeadModel:
    import hashlib

    p = Path(path)
    try:
        data = p.read_bytes()
    except FileNotFoundError:
        raise InputError(f"head model file not found; {_HINT}", path=p) from None
    except OSError as exc:
        raise InputError(f"head model file unreadable ({exc.strerror})", path=p) from None
    return _parse(data, hashlib.sha256(data).hexdigest(), p)


def _parse(data: bytes, digest: str, where: Path) -> HeadModel:
    import zipfile

    try:
        with np.load(io.BytesIO(data), allow_pickle=False) as z:
            missing = [k for k in _KEYS if k not in z.files]
            if missing:
                raise InputError(f"head model file lacks arrays {missing}; {_HINT}", path=where)
            arr = {k: z[k] for k in _KEYS}
        meta = json.loads(str(arr["meta_json"]))
    except (OSError, ValueError, zipfile.BadZipFile) as exc:
        raise InputError(f"head model file unreadable ({exc}); {_HINT}", path=where) from None
    if meta.get("file_format") != FILE_FORMAT:
        raise InputError(
            f"head model file format {meta.get('file_format')!r}, this sourcelab "
            f"reads {FILE_FORMAT}; {_HINT}",
            path=where,
        )
    ch_names = tuple(str(c) for c in arr["ch_names"])
    if ch_names != SITES_1020:
        raise InputError(f"head model channels {ch_names} differ from SITES_1020", path=where)
    fields = {
        k: np.ascontiguousarray(arr[k], dtype=np.float64)
        for k in ("gain", "ch_pos", "src_pos", "src_nn")
    }
    vertno = np.asarray(arr["vertno"], dtype=np.int64)
    n_src = fields["src_pos"].shape[0]
    if fields["gain"].shape != (len(ch_names), 3 * n_src) or vertno.shape != (n_src,):
        raise InputError(
            f"head model gain shape {fields['gain'].shape} does not match "
            f"{len(ch_names)} channels x 3 x {n_src} sources",
            path=where,
        )
    if np.any(np.diff(vertno) <= 0) or vertno[0] < 0 or vertno[-1] >= N_SURFACE:
        raise InputError("head model vertno must increase within 0..20483", path=where)
    cortex = np.zeros(N_SURFACE, dtype=bool)
    cortex[vertno] = True
    surf = {
        k: np.ascontiguousarray(arr[f"surf_{k}"], dtype=np.float64)
        for k in ("white", "pial", "inflated", "sulc")
    }
    surface = TemplateSurface(
        faces=np.asarray(arr["surf_faces"], dtype=np.int64), cortex=cortex, **surf
    )
    for a in (*fields.values(), vertno, *surf.values(), surface.faces, cortex):
        a.flags.writeable = False
    return HeadModel(
        ch_names=ch_names, vertno=vertno, surface=surface, sha256=digest, meta=meta, **fields
    )
