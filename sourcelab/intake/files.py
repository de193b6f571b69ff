"""File-level checks and readers: format dispatch, EDF/BDF header validation, BIDS lookup.

Every failure becomes a one-line :class:`sourcelab.errors.InputError` naming the file.
"""

from __future__ import annotations

import csv
import hashlib
import logging
import warnings
from pathlib import Path

import mne

from ..errors import InputError

logger = logging.getLogger("sourcelab")

#: Recognised file suffixes -> (format name, MNE reader).
READERS = {
    ".edf": ("EDF", mne.io.read_raw_edf),
    ".bdf": ("BDF", mne.io.read_raw_bdf),
    ".vhdr": ("BrainVision", mne.io.read_raw_brainvision),
    ".set": ("EEGLAB", mne.io.read_raw_eeglab),
    ".fif": ("FIF", mne.io.read_raw_fif),
}
ALLOWED = "EDF/EDF+ (.edf), BDF (.bdf), BrainVision (.vhdr), EEGLAB (.set), FIF (.fif, .fif.gz)"


def _suffix(path: Path) -> str:
    name = path.name.lower()
    if name.endswith(".fif.gz"):
        return ".fif"
    return path.suffix.lower()


def _one_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return (text[0] if text else type(exc).__name__)[:200]


def check_edf_header(path: Path) -> None:
    """Validate an EDF/BDF header and the file length it implies.

    Parameters
    ----------
    path : Path
        An ``.edf`` or ``.bdf`` file.

    Raises
    ------
    InputError
        Corrupt header (non-numeric fields, impossible counts) or a file shorter than the header
        says (truncated).  Layout: EDF specification (Kemp et al. 1992, Electroencephalogr Clin
        Neurophysiol 82:391-393) and EDF+ (Kemp & Olivan 2003, Clin Neurophysiol 114:1755-1761).
    """
    bdf = _suffix(path) == ".bdf"
    size = path.stat().st_size
    with open(path, "rb") as f:
        head = f.read(256)
        if len(head) < 256:
            raise InputError("not an EDF/BDF file: header shorter than 256 bytes", path=path)
        version = head[:8]
        if not (version == b"0       " or (bdf and version[:1] == b"\xff")):
            raise InputError("corrupt EDF/BDF header: bad version field", path=path)
        try:
            header_bytes = int(head[184:192].decode("ascii").strip())
            n_records = int(head[236:244].decode("ascii").strip())
            record_s = float(head[244:252].decode("ascii").strip())
            n_signals = int(head[252:256].decode("ascii").strip())
        except (UnicodeDecodeError, ValueError):
            raise InputError("corrupt EDF/BDF header: non-numeric size fields", path=path) from None
        if n_signals < 1 or header_bytes != 256 * (n_signals + 1) or record_s < 0:
            raise InputError(
                f"corrupt EDF/BDF header: {n_signals} signals but header of {header_bytes} bytes",
                path=path)
        rest = f.read(256 * n_signals)
    if len(rest) < 256 * n_signals:
        raise InputError("truncated EDF/BDF file: signal headers incomplete", path=path)
    off = n_signals * (16 + 80 + 8 + 8 + 8 + 8 + 8 + 80)
    try:
        per_record = [int(rest[off + 8 * i: off + 8 * (i + 1)].decode("ascii").strip())
                      for i in range(n_signals)]
    except (UnicodeDecodeError, ValueError):
        raise InputError("corrupt EDF/BDF header: non-numeric samples per record",
                         path=path) from None
    if n_records == -1:  # allowed while recording; the reader infers it from the file size
        return
    if n_records < 1:
        raise InputError(f"corrupt EDF/BDF header: {n_records} data records", path=path)
    expected = header_bytes + n_records * sum(per_record) * (3 if bdf else 2)
    if size < expected:
        raise InputError(
            f"truncated EDF/BDF file: {size} bytes, header promises {expected}", path=path)


def bids_resolve(path: Path) -> Path:
    """Find the EEG recording in a BIDS folder (subject, session or ``eeg`` folder).

    Returns the single ``*_eeg.<ext>`` file found; raises InputError when there is none or more
    than one (the message lists them so the user can pass one).
    """
    found = sorted(p for p in path.rglob("*_eeg.*") if _suffix(p) in READERS)
    if not found:
        raise InputError(f"no EEG recording (*_eeg with {ALLOWED}) in this folder", path=path)
    if len(found) > 1:
        names = ", ".join(str(p.relative_to(path)) for p in found[:6])
        raise InputError(f"several EEG recordings, pass one of: {names}", path=path)
    return found[0]


def bids_bad_channels(path: Path) -> tuple[str, ...]:
    """Channel names marked ``status=bad`` in the BIDS ``*_channels.tsv`` beside a recording.

    Reference: BIDS EEG extension (Pernet et al. 2019, Sci Data 6:103).
    """
    stem = path.name
    for ext in (".fif.gz",) + tuple(READERS):
        if stem.lower().endswith("_eeg" + ext):
            stem = stem[: -len("_eeg" + ext)]
            break
    else:
        return ()
    tsv = path.with_name(stem + "_channels.tsv")
    if not tsv.is_file():
        return ()
    try:
        with open(tsv, newline="", encoding="utf-8") as f:
            rows = list(csv.DictReader(f, delimiter="\t"))
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise InputError(f"unreadable channels.tsv ({_one_line(exc)})", path=tsv) from None
    if rows and "name" not in rows[0]:
        raise InputError("channels.tsv has no 'name' column", path=tsv)
    return tuple(r["name"] for r in rows if str(r.get("status", "")).strip().lower() == "bad")


def hash_files(paths) -> str:
    """sha256 of one file, or of the concatenated per-file hashes of several (header + data)."""
    from ..provenance import sha256_file

    paths = [Path(p) for p in paths]
    if len(paths) == 1:
        return sha256_file(paths[0])
    h = hashlib.sha256()
    for p in paths:
        h.update(sha256_file(p).encode())
    return h.hexdigest()


def _companions(path: Path, fmt: str) -> list[Path]:
    """The files whose bytes make up the recording (for the hash)."""
    if fmt == "BrainVision":
        extra = [path.with_suffix(s) for s in (".eeg", ".vmrk")]
    elif fmt == "EEGLAB":
        extra = [path.with_suffix(".fdt")]
    else:
        extra = []
    return [path] + [p for p in extra if p.is_file()]


def read_file(source) -> tuple[mne.io.BaseRaw, Path, str, tuple[str, ...], tuple[str, ...]]:
    """Read a recording from disk.

    Parameters
    ----------
    source : str | Path
        A recording file or a BIDS folder.

    Returns
    -------
    raw : mne.io.BaseRaw
        Preloaded, data in volts.
    path : Path
        The file actually read.
    sha256 : str
    bids_bads : tuple of str
        Original channel names marked bad in a BIDS channels.tsv.
    notes : tuple of str
        Reader warnings, one line each.
    """
    path = Path(source)
    if not path.exists():
        raise InputError("file not found", path=path)
    if path.is_dir():
        path = bids_resolve(path)
    suffix = _suffix(path)
    if suffix not in READERS:
        raise InputError(f"not a supported EEG file; allowed: {ALLOWED}", path=path)
    fmt, reader = READERS[suffix]
    if path.stat().st_size == 0:
        raise InputError(f"empty file, not a {fmt} recording", path=path)
    if fmt in ("EDF", "BDF"):
        check_edf_header(path)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            raw = reader(path, preload=True, verbose="error")
        except InputError:
            raise
        except Exception as exc:  # every reader failure becomes one line naming the file
            raise InputError(f"cannot read as {fmt}: {_one_line(exc)}", path=path) from None
    notes = tuple(f"{fmt} reader: {_one_line(w.message)}" for w in caught)
    for n in notes:
        logger.info("%s: %s", path, n)
    return raw, path, hash_files(_companions(path, fmt)), bids_bad_channels(path), notes
