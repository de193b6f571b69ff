"""Turn the user's batch inputs (files, globs, folders, a BIDS dataset) into a list of recordings.

Each recording gets a participant ID, an optional age (from a BIDS-style ``participants.tsv``) and a
unique, path-safe output-folder name.  Identifiers read from files only ever reach a path through
:func:`sourcelab.provenance.safe_name`.
"""

from __future__ import annotations

import csv
import glob
import logging
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from ..constants import RECORDING_SUFFIXES, recording_suffix
from ..errors import InputError
from ..provenance import safe_name

log = logging.getLogger("sourcelab")

#: Names used for the batch's own files in the output folder; never given to a recording.
RESERVED_NAMES = frozenset({"group_roi_table", "group_sensor_table", "batch_status", "failures"})
_GLOB_CHARS = re.compile(r"[*?\[]")
_BIDS_SUB = re.compile(r"(?:^|_)(sub-[A-Za-z0-9]+)(?:_|$)")


@dataclass(frozen=True)
class BatchItem:
    """One recording of a batch.

    Attributes
    ----------
    path : Path
        The recording file (absolute).
    name : str
        Output-folder name: path-safe, unique within the batch (file stem, ``_eeg`` removed).
    participant : str
        Participant ID: BIDS ``sub-<label>`` entity, else the matched ``participants.tsv`` ID,
        else the file stem.
    age : float | None
        Age in years from ``participants.tsv``; None when not listed or not a number.
    """

    path: Path
    name: str
    participant: str
    age: float | None = None


def _without_suffix(path: Path) -> str:
    name = path.name
    for ext in (".fif.gz", path.suffix):
        if ext and name.lower().endswith(ext.lower()):
            return name[: -len(ext)]
    return name


def recording_stem(path: Path) -> str:
    """File name without its recording suffix(es) and without a trailing BIDS ``_eeg``.

    Parameters
    ----------
    path : Path
        Recording file (``.fif.gz`` counts as one suffix).

    Returns
    -------
    str
        E.g. ``sub-01_task-rest`` for ``sub-01_task-rest_eeg.edf``.
    """
    name = _without_suffix(path)
    return name.removesuffix("_eeg")


def _is_hidden_or_derived(path: Path, root: Path) -> bool:
    parts = path.relative_to(root).parts
    return any(
        p.startswith(".") or p in ("derivatives", "sourcedata") for p in parts[:-1]
    ) or parts[-1].startswith(".")


def _folder_recordings(folder: Path) -> list[Path]:
    """Recordings in a folder tree; in a BIDS dataset only ``*_eeg.<ext>`` files."""
    bids = (folder / "dataset_description.json").is_file() or any(
        p.is_dir() and p.name.startswith("sub-") for p in folder.iterdir()
    )
    found = []
    for p in sorted(folder.rglob("*")):
        if not p.is_file() or _is_hidden_or_derived(p, folder):
            continue
        if recording_suffix(p) not in RECORDING_SUFFIXES:
            continue
        if bids and not _without_suffix(p).endswith("_eeg"):
            continue
        found.append(p)
    return found


def expand_inputs(inputs: Sequence[str | Path]) -> list[Path]:
    """Files, glob patterns and folders → sorted-as-given list of distinct recording files.

    Parameters
    ----------
    inputs : str | Path | sequence of str | Path
        Recording files, glob patterns (``**`` allowed) and folders (searched recursively,
        skipping hidden folders, ``derivatives/`` and ``sourcedata/``; in a BIDS dataset only
        ``*_eeg.<ext>`` files), in any mix.

    Returns
    -------
    list of Path
        Resolved paths in input order (folders and glob matches sorted), duplicates removed.

    Raises
    ------
    InputError
        An input that is neither an existing path nor a glob matching something, or nothing found.
    """
    if isinstance(inputs, (str, Path)):
        inputs = [inputs]
    out: list[Path] = []
    for raw in inputs:
        p = Path(raw).expanduser()
        if p.is_dir():
            found = _folder_recordings(p)
            if not found:
                raise InputError(
                    f"no recordings ({', '.join(RECORDING_SUFFIXES)}) in this folder", path=p
                )
            out += found
        elif p.is_file():
            out.append(p)
        elif _GLOB_CHARS.search(str(raw)):
            found = sorted(
                Path(m)
                for m in glob.glob(str(p), recursive=True)
                if Path(m).is_file() and recording_suffix(Path(m)) in RECORDING_SUFFIXES
            )
            if not found:
                raise InputError(
                    f"pattern matches no recording ({', '.join(RECORDING_SUFFIXES)})", path=raw
                )
            out += found
        else:
            raise InputError("file, folder or pattern not found", path=p)
    seen, unique = set(), []
    for p in out:
        key = p.resolve()
        if key not in seen:
            seen.add(key)
            unique.append(key)
    return unique


def _parse_age(value) -> float | None:
    try:
        age = float(str(value).strip())
    except ValueError:
        return None
    return age if math.isfinite(age) and age > 0 else None


def _match_participant(stem: str, bids_sub: str | None, ids: Sequence[str]) -> str | None:
    """The participants.tsv ID that names this recording (longest match), or None."""
    best = None
    for pid in ids:
        sid = str(pid).strip()
        if not sid:
            continue
        bare = sid.removeprefix("sub-")
        hit = (
            (bids_sub is not None and bids_sub[4:] == bare)
            or stem == sid
            or stem.startswith((sid + "_", sid + "."))
        )
        if hit and (best is None or len(sid) > len(best)):
            best = sid
    return best


def unique_names(stems: Sequence[str]) -> list[str]:
    """Path-safe, case-insensitively unique names: repeats get ``-2``, ``-3`` ... in order.

    Parameters
    ----------
    stems : sequence of str
        Recording stems (see :func:`recording_stem`).

    Returns
    -------
    list of str
        One name per stem, same order; reserved names get ``-rec`` appended.
    """
    used: set[str] = set()
    out = []
    for stem in stems:
        base = safe_name(stem)
        if base.lower() in RESERVED_NAMES:
            base += "-rec"
        name, k = base, 2
        while name.lower() in used:
            name, k = f"{base}-{k}", k + 1
        used.add(name.lower())
        out.append(name)
    return out


def discover(
    inputs: Sequence[str | Path], *, participants: str | Path | None = None
) -> tuple[BatchItem, ...]:
    """The recordings of a batch with their names, participant IDs and ages.

    Parameters
    ----------
    inputs : sequence of str | Path
        Recording files, glob patterns (``**`` allowed), folders (searched recursively; in a BIDS
        dataset only ``*_eeg.<ext>`` files outside ``derivatives/``), in any mix.
    participants : str | Path, optional
        BIDS-style ``participants.tsv`` with ``participant_id`` and ``age`` (years).  A recording
        matches an ID by its BIDS ``sub-`` entity, or by a file stem equal to the ID or starting
        with ``ID_``.  Unmatched recordings and non-numeric ages get ``age=None`` (logged).

    Returns
    -------
    tuple of BatchItem
        In input order (folders and globs sorted), duplicates removed.
    """
    paths = expand_inputs(inputs)
    ids: list[str] = []
    ages: dict[str, object] = {}
    if participants is not None:
        table = read_participants(participants)
        ids = [str(x).strip() for x in table["participant_id"]]
        ages = dict(zip(ids, table["age"]))
    stems = [recording_stem(p) for p in paths]
    items = []
    for path, stem, name in zip(paths, stems, unique_names(stems)):
        m = _BIDS_SUB.search(stem)
        bids_sub = m.group(1) if m else None
        pid = _match_participant(stem, bids_sub, ids) if ids else None
        age = None
        if pid is not None:
            age = _parse_age(ages[pid])
            if age is None:
                log.warning(
                    "batch: %s: age %r of participant %s is not a positive number",
                    path.name,
                    ages[pid],
                    pid,
                )
        elif ids:
            log.warning("batch: %s: not listed in %s", path.name, Path(participants).name)
        items.append(BatchItem(path=path, name=name, participant=pid or bids_sub or stem, age=age))
    return tuple(items)


def read_participants(participants_tsv: str | Path):
    """Read a BIDS ``participants.tsv`` (participant_id, age, optional sex, condition).

    Parameters
    ----------
    participants_tsv : str | Path
        Tab-separated UTF-8 file (a BOM is allowed) with columns ``participant_id`` and ``age``
        (years).

    Returns
    -------
    pandas.DataFrame
        One row per non-blank line, all cells as strings (object dtype); ``n/a`` and empty cells
        stay as text for per-row handling.

    Raises
    ------
    InputError
        File missing, not UTF-8, empty, lacking a required column, or an ID listed twice.
    """
    import pandas as pd

    path = Path(participants_tsv)
    try:
        with open(path, newline="", encoding="utf-8-sig") as f:
            rows = list(csv.reader(f, delimiter="\t"))
    except FileNotFoundError:
        raise InputError("participants file not found", path=path) from None
    except UnicodeDecodeError:
        raise InputError("participants file is not UTF-8 text", path=path) from None
    if not rows:
        raise InputError("participants file is empty", path=path)
    head = [h.strip() for h in rows[0]]
    for col in ("participant_id", "age"):
        if col not in head:
            raise InputError(
                f"participants file lacks column {col!r} (BIDS: participant_id, "
                "age, optional sex, condition)",
                path=path,
            )
    body = [r + [""] * (len(head) - len(r)) for r in rows[1:] if any(c.strip() for c in r)]
    df = pd.DataFrame([r[: len(head)] for r in body], columns=head, dtype=object)
    if df["participant_id"].duplicated().any():
        dup = df["participant_id"][df["participant_id"].duplicated()].iloc[0]
        raise InputError(f"participant {dup!r} listed twice", path=path)
    return df
