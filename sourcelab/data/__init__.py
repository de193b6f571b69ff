"""Shipped data: one folder, one manifest.

Every file sourcelab reads at run time lives in this package folder and is listed in
``MANIFEST.json`` with its sha256; :func:`shipped_bytes` refuses a file whose bytes differ (a
damaged installation).  ``README.md`` beside this module gives each file's origin, licence and the
command that rebuilds it.

=============================  ===========================================================
file                           rebuilt by
=============================  ===========================================================
``fsaverage5_eeg19.npz``       ``python -m sourcelab.headmodel.build``
``yeo7_fsaverage5.npz``        ``python -m atlases.build_yeo7`` (from a source checkout)
``brodmann_fsaverage5.npz``    ``python -m atlases.build_brodmann``
``groupings.json``             ``python -m atlases.build_groupings``
``demo_norms.tsv`` (+ .npz)    ``sourcelab demo --rebuild-norms sourcelab/data/demo_norms.tsv``
=============================  ===========================================================
"""

from __future__ import annotations

import hashlib
import json
from functools import cache
from pathlib import Path

#: The folder holding the shipped files.
DATA_DIR = Path(__file__).resolve().parent
MANIFEST_NAME = "MANIFEST.json"


def data_path(name: str) -> Path:
    """Path of a shipped file (not checked; see :func:`shipped_bytes`).

    Parameters
    ----------
    name : str
        File name inside this folder, e.g. ``"groupings.json"``.

    Returns
    -------
    Path
        ``DATA_DIR / name``, absolute; the file may not exist.
    """
    return DATA_DIR / name


@cache
def manifest() -> dict[str, str]:
    """``{file name: sha256}`` of every shipped data file.

    Returns
    -------
    dict of str to str
        File name -> hex sha256 digest, read once from ``MANIFEST.json`` (cached).
    """
    return dict(json.loads((DATA_DIR / MANIFEST_NAME).read_text(encoding="utf-8"))["files"])


@cache
def shipped_bytes(name: str) -> tuple[bytes, str]:
    """Bytes and sha256 of a shipped file, verified against ``MANIFEST.json``.

    Parameters
    ----------
    name : str
        File name inside this folder, e.g. ``"yeo7_fsaverage5.npz"``.

    Returns
    -------
    data : bytes
        The file's contents (cached per name).
    sha256 : str
        Hex digest (equal to the manifest entry).

    Raises
    ------
    RuntimeError
        The file is missing, not listed, or its bytes differ from the manifest (a damaged or
        edited installation: reinstall sourcelab or rebuild the file).
    """
    expected = manifest().get(name)
    if expected is None:
        raise RuntimeError(f"{name} is not a shipped sourcelab data file")
    try:
        data = (DATA_DIR / name).read_bytes()
    except OSError as exc:
        raise RuntimeError(
            f"shipped data file {name} unreadable ({exc.strerror}); reinstall sourcelab"
        ) from None
    digest = hashlib.sha256(data).hexdigest()
    if digest != expected:
        raise RuntimeError(
            f"shipped data file {name} has sha256 {digest[:12]}, the manifest "
            f"says {expected[:12]}: reinstall sourcelab or rebuild the file"
        )
    return data, digest


def update_manifest(entries: dict[str, str], *, folder: Path | None = None) -> None:
    """Merge ``{file name: sha256}`` into ``MANIFEST.json`` (used by the rebuild scripts).

    The manifest is rewritten sorted by file name through a temporary file and a rename, and
    the caches of :func:`manifest` and :func:`shipped_bytes` are cleared.

    Parameters
    ----------
    entries : dict of str to str
        File name -> hex sha256 digest; existing entries of the same names are replaced.
    folder : Path, optional
        Folder holding ``MANIFEST.json`` (default :data:`DATA_DIR`); created as a new manifest
        when absent.
    """
    path = (folder or DATA_DIR) / MANIFEST_NAME
    current = json.loads(path.read_text(encoding="utf-8")) if path.exists() else {"files": {}}
    current["files"].update(entries)
    current["files"] = dict(sorted(current["files"].items()))
    tmp = path.with_name(f".{path.name}.tmp")
    tmp.write_text(json.dumps(current, indent=2) + "\n", encoding="utf-8")
    tmp.replace(path)
    manifest.cache_clear()
    shipped_bytes.cache_clear()
