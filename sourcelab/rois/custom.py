"""User-defined ROIs on the cortical template sources, read from a TOML or TSV file.

File format
-----------
**TOML** (``*.toml``)::

    name = "my-rois"                 # optional, default: file stem
    description = "pilot ROIs"       # optional

    [[roi]]
    name = "left-dlpfc"
    kind = "sphere"                  # sources whose mid-thickness point is within the sphere
    center = [-40.0, 30.0, 30.0]     # mm
    radius_mm = 10.0
    space = "mni152"                 # "mni152" (default; SPM/FSL) or "mni305" (fsaverage)
    hemisphere = "left"              # optional: "left", "right" or "both" (restricts the sources)

    [[roi]]
    name = "posterior-dmn"
    kind = "areas"                   # union of shipped ROIs by name
    areas = ["BA23", "BA31", "default-mode", "yeo7:default", "occipital"]
    hemisphere = "both"

    [[roi]]
    name = "hand-picked"
    kind = "vertices"
    vertices = [0, 1, 2, 10242]      # fsaverage5 surface vertices, 0..20483 (left first)

    [[roi]]
    name = "my-label"
    kind = "label"                   # FreeSurfer .label on fsaverage5 or fsaverage
    file = "lh.my.label"             # relative to this file's folder
    hemisphere = "left"              # required for label and annot

    [[roi]]
    name = "parc"
    kind = "annot"                   # FreeSurfer .annot, fsaverage5 (10,242) or fsaverage (163,842)
    file = "lh.parc.annot"
    hemisphere = "left"
    entries = ["precuneus"]          # optional: union of these entries; default: one ROI per entry,
                                     # named "<name>.<entry>"

**TSV** (``*.tsv``, tab-separated, header ``name  kind  hemisphere  spec``; ``hemisphere`` may be
empty)::

    left-dlpfc   sphere    left    -40 30 30 10          # x y z radius [space]
    dmn          areas     both    BA23,BA31,default-mode
    picked       vertices          0,1,2,10242
    my-label     label     left    lh.my.label
    parc         annot     left    lh.parc.annot

Area names: ``BA<n>`` (Brodmann), lobe names, network names (``sourcelab atlas list``) and
``yeo7:<network>``.  fsaverage vertex ``i`` equals fsaverage5 vertex ``i`` for ``i < 10,242``, so
fsaverage labels keep those vertices (the others are dropped with a warning).  Surface vertices
on the medial wall are not sources and are dropped.  An ROI without sources is an error; an ROI
with fewer than :data:`SMALL_MIN_VERTICES` sources is logged as a warning and flagged ``small``.
"""

from __future__ import annotations

import csv
import logging
import tomllib
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..headmodel.geometry import mni305_to_mni152
from ..headmodel.model import HEMIS, N_PER_HEMI, N_SURFACE
from .atlas import ROI, Atlas
from .registry import (
    SMALL_MIN_VERTICES,
    brodmann_labels,
    groupings,
    hemisphere_mask,
    make_roi,
    surface_to_sources,
    yeo7_labels,
)

logger = logging.getLogger("sourcelab")

_HEMI_OPTIONS = ("left", "right", "both")
_TSV_COLUMNS = ("name", "kind", "hemisphere", "spec")


def _hemisphere_of_sources(sources: np.ndarray) -> np.ndarray:
    from ..headmodel import load_head_model

    return load_head_model().hemisphere_of(sources)


def _area_vertices(area: str, path: Path) -> np.ndarray:
    """Surface-vertex mask of one shipped ROI name (both hemispheres)."""
    ba = brodmann_labels()
    g = groupings()
    if area.upper().startswith("BA") and area[2:].isdigit():
        n = int(area[2:])
        if n not in set(np.unique(ba).tolist()) or n == 0:
            raise InputError(f"unknown Brodmann area {area!r}", path=path)
        return ba == n
    if area in g["lobes"]["groups"]:
        return np.isin(ba, g["lobes"]["groups"][area])
    if area in g["networks"]["groups"]:
        return np.isin(ba, g["networks"]["groups"][area]["areas"])
    if area.startswith("yeo7:"):
        lab, names = yeo7_labels()
        if area[5:] in names:
            return lab == names.index(area[5:]) + 1
    allowed = (
        "BA<n>",
        *g["lobes"]["groups"],
        *g["networks"]["groups"],
        *(f"yeo7:{n}" for n in yeo7_labels()[1]),
    )
    raise InputError(f"unknown area {area!r}; allowed: {', '.join(allowed)}", path=path)


def _sphere(center, radius, space: str, path: Path) -> np.ndarray:
    try:
        c = np.asarray(center, dtype=float).reshape(3)
        r = float(radius)
    except (TypeError, ValueError):
        raise InputError(
            f"sphere needs center = [x, y, z] and radius_mm, got {center!r}, {radius!r}", path=path
        ) from None
    if not np.all(np.isfinite(c)) or not (np.isfinite(r) and r > 0):
        raise InputError(f"sphere center must be finite and radius_mm > 0, got {r!r}", path=path)
    if space not in ("mni152", "mni305"):
        raise InputError(f"unknown space {space!r}; allowed: mni152, mni305", path=path)
    # measure in the user's space (the affine is not an exact isometry)
    from ..headmodel import load_head_model

    mid = load_head_model().surface.mid
    pts = mni305_to_mni152(mid) if space == "mni152" else mid
    return np.linalg.norm(pts - c, axis=1) <= r


def _read_label(file: Path, hemi: str, path: Path) -> np.ndarray:
    import nibabel as nib

    try:
        v = np.asarray(nib.freesurfer.read_label(str(file)), dtype=np.int64)
    except (OSError, ValueError, IndexError) as exc:
        raise InputError(f"cannot read FreeSurfer label ({exc})", path=file) from None
    return _local_to_mask(v, hemi, file)


def _local_to_mask(v: np.ndarray, hemi: str, file: Path) -> np.ndarray:
    if hemi not in HEMIS:
        raise InputError(
            f"hemisphere must be left or right for {file.name}, got {hemi!r}", path=file
        )
    dropped = int(np.sum(v >= N_PER_HEMI))
    if dropped:
        logger.warning(
            "%s: %d vertices are not on fsaverage5 (index >= %d) and were dropped",
            file,
            dropped,
            N_PER_HEMI,
        )
    v = v[(v >= 0) & (v < N_PER_HEMI)]
    m = np.zeros(N_SURFACE, dtype=bool)
    m[v + HEMIS.index(hemi) * N_PER_HEMI] = True
    return m


def _read_annot(file: Path, hemi: str, entries, name: str) -> list[tuple[str, np.ndarray]]:
    import nibabel as nib

    try:
        lab, _ctab, names = nib.freesurfer.read_annot(str(file))
    except (OSError, ValueError, IndexError) as exc:
        raise InputError(f"cannot read FreeSurfer annotation ({exc})", path=file) from None
    if lab.shape[0] not in (N_PER_HEMI, 163842):
        raise InputError(
            f"annotation has {lab.shape[0]} vertices; expected fsaverage5 "
            f"({N_PER_HEMI}) or fsaverage (163842)",
            path=file,
        )
    lab = np.asarray(lab[:N_PER_HEMI])
    names = [n.decode() if isinstance(n, bytes) else str(n) for n in names]
    wanted = names if entries is None else list(entries)
    unknown = [e for e in wanted if e not in names]
    if unknown:
        raise InputError(
            f"entries {unknown} not in the annotation; allowed: {', '.join(names)}", path=file
        )
    masks = [(e, _local_to_mask(np.flatnonzero(lab == names.index(e)), hemi, file)) for e in wanted]
    if entries is not None:
        return [(name, np.logical_or.reduce([m for _, m in masks]))]
    return [(f"{name}.{e}", m) for e, m in masks if m.any()]


def _one_roi(spec: dict, base: Path, path: Path) -> list[tuple[str, str | None, np.ndarray]]:
    """(name, hemisphere or None, mask) triples from one ROI definition."""
    name = str(spec.get("name", "")).strip()
    if not name or len(name) > 64 or not name.isprintable():
        raise InputError(
            f"every ROI needs a printable name of 1-64 characters, got {name!r}", path=path
        )
    kind = spec.get("kind")
    hemi = spec.get("hemisphere") or None
    if hemi is not None and hemi not in _HEMI_OPTIONS:
        raise InputError(
            f"ROI {name!r}: hemisphere {hemi!r}; allowed: {', '.join(_HEMI_OPTIONS)}", path=path
        )
    if kind == "sphere":
        masks = [
            (
                name,
                _sphere(
                    spec.get("center"),
                    spec.get("radius_mm"),
                    str(spec.get("space", "mni152")),
                    path,
                ),
            )
        ]
    elif kind == "areas":
        areas = spec.get("areas")
        if not isinstance(areas, list) or not areas:
            raise InputError(f"ROI {name!r}: areas must be a non-empty list", path=path)
        masks = [(name, np.logical_or.reduce([_area_vertices(str(a), path) for a in areas]))]
    elif kind == "vertices":
        try:
            v = np.asarray(spec.get("vertices"), dtype=np.int64).ravel()
        except (TypeError, ValueError):
            raise InputError(f"ROI {name!r}: vertices must be integers", path=path) from None
        if v.size and (v.min() < 0 or v.max() >= N_SURFACE):
            raise InputError(
                f"ROI {name!r}: vertices must be fsaverage5 surface vertices 0..{N_SURFACE - 1}",
                path=path,
            )
        m = np.zeros(N_SURFACE, dtype=bool)
        m[v] = True
        masks = [(name, m)]
    elif kind in ("label", "annot"):
        if not spec.get("file"):
            raise InputError(f"ROI {name!r}: kind {kind} needs file", path=path)
        file = Path(str(spec["file"]))
        file = file if file.is_absolute() else base / file
        if not file.is_file():
            raise InputError(f"ROI {name!r}: file not found", path=file)
        if kind == "label":
            masks = [(name, _read_label(file, hemi or "", path))]
        else:
            masks = _read_annot(file, hemi or "", spec.get("entries"), name)
    else:
        raise InputError(
            f"ROI {name!r}: unknown kind {kind!r}; allowed: sphere, areas, vertices, label, annot",
            path=path,
        )
    return [(n, hemi, m) for n, m in masks]


def _read_tsv(path: Path) -> list[dict]:
    with open(path, newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(f, delimiter="\t"))
    if not rows or tuple(rows[0].keys())[:4] != _TSV_COLUMNS:
        raise InputError(f"TSV header must be {' '.join(_TSV_COLUMNS)} (tab-separated)", path=path)
    out = []
    for row in rows:
        spec = {"name": row["name"], "kind": row["kind"], "hemisphere": row["hemisphere"]}
        text = (row["spec"] or "").strip()
        parts = text.replace(",", " ").split()
        if row["kind"] == "sphere":
            if len(parts) not in (4, 5):
                raise InputError(
                    f"ROI {row['name']!r}: sphere spec is 'x y z radius [space]'", path=path
                )
            spec.update(
                center=parts[:3],
                radius_mm=parts[3],
                space=parts[4] if len(parts) == 5 else "mni152",
            )
        elif row["kind"] == "areas":
            spec["areas"] = parts
        elif row["kind"] == "vertices":
            try:
                spec["vertices"] = [int(p) for p in parts]
            except ValueError:
                raise InputError(
                    f"ROI {row['name']!r}: vertices must be integers", path=path
                ) from None
        else:
            spec["file"] = text
        out.append(spec)
    return out


def load_custom_rois(path: str | Path) -> Atlas:
    """Read user-defined ROIs (format in the module docstring) into an :class:`Atlas`.

    Parameters
    ----------
    path : str or Path
        A ``.toml`` or ``.tsv`` definition.

    Returns
    -------
    Atlas
        One ROI per definition (per annotation entry for ``annot`` without ``entries``);
        ``sha256`` is the definition file's hash.

    Raises
    ------
    InputError
        Unreadable or invalid definition, unknown names, or an ROI with no sources.
    """
    from ..provenance import sha256_file

    path = Path(path)
    if not path.is_file():
        raise InputError("ROI definition file not found", path=path)
    suffix = path.suffix.lower()
    if suffix == ".toml":
        try:
            doc = tomllib.loads(path.read_text(encoding="utf-8"))
        except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
            raise InputError(f"invalid TOML ({exc})", path=path) from None
        specs = doc.get("roi", [])
        if not isinstance(specs, list) or not all(isinstance(s, dict) for s in specs):
            raise InputError("ROIs must be given as [[roi]] tables", path=path)
        atlas_name = str(doc.get("name", path.stem))
        description = str(doc.get("description", f"user-defined ROIs from {path.name}"))
    elif suffix == ".tsv":
        specs, atlas_name = _read_tsv(path), path.stem
        description = f"user-defined ROIs from {path.name}"
    else:
        raise InputError(f"unknown ROI file type {suffix!r}; allowed: .toml, .tsv", path=path)
    if not specs:
        raise InputError("no ROIs defined", path=path)
    rois: list[ROI] = []
    seen: set[tuple[str, str]] = set()
    for spec in specs:
        for name, hemi, mask in _one_roi(spec, path.parent, path):
            if hemi is not None:
                mask = mask & hemisphere_mask(hemi)
            v = surface_to_sources(mask)
            if hemi is None:
                hemis = set(np.unique(_hemisphere_of_sources(v)).tolist())
                hemi = hemis.pop() if len(hemis) == 1 else "both"
            if v.size == 0:
                raise InputError(f"ROI {name!r} ({hemi}) contains no template sources", path=path)
            if (name, hemi) in seen:
                raise InputError(f"ROI {name!r} ({hemi}) is defined twice", path=path)
            seen.add((name, hemi))
            roi = make_roi(name, hemi, v)
            if roi.small:
                logger.warning(
                    "ROI %r (%s) in %s has only %d sources (< %d): too small to trust "
                    "at this resolution; flagged small",
                    name,
                    hemi,
                    path,
                    v.size,
                    SMALL_MIN_VERTICES,
                )
            rois.append(roi)
    return Atlas(
        name=atlas_name,
        description=description,
        citation="user-defined",
        rois=tuple(rois),
        sha256=sha256_file(path),
    )
