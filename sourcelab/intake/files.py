"""File-level checks and readers: format dispatch, EDF/BDF header validation, BIDS lookup.

Every failure becomes a one-line :class:`sourcelab.errors.InputError` naming the file.
"""

from __future__ import annotations

import csv
import hashlib
import logging
import math
import re
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


#: Shortest recording accepted, s: intake's own checks need it (amplitude scale and bad sites
#: use a 1-s drift filter and 2-s Welch segments), and no analysis fits in less.
MIN_RECORDING_S = 2.0
#: Per-signal header field widths of EDF/BDF (Kemp et al. 1992): label, transducer, physical
#: dimension, physical min, physical max, digital min, digital max, prefiltering, samples per
#: record, reserved.
_SIGNAL_FIELDS = (16, 80, 8, 8, 8, 8, 8, 80, 8, 32)


def _edf_number(raw: bytes, what: str, path: Path, *, integer: bool = False):
    try:
        text = raw.decode("ascii").strip()
    except UnicodeDecodeError:
        raise InputError(f"corrupt EDF/BDF header: {what} field is not ASCII", path=path) from None
    try:
        value = int(text) if integer else float(text)
    except ValueError:
        kind = "an integer" if integer else "a number"
        raise InputError(
            f"corrupt EDF/BDF header: {what} field {text[:12]!r} is not {kind}", path=path
        ) from None
    return value


def check_edf_header(path: Path) -> dict:
    """Validate an EDF/BDF header and the file length it implies, before MNE reads the file.

    Parameters
    ----------
    path : Path
        An ``.edf`` or ``.bdf`` file.

    Returns
    -------
    dict
        ``n_signals``, ``n_records``, ``record_s``, ``samples_per_record`` (list),
        ``duration_s``, ``labels``.

    Raises
    ------
    InputError
        With a specific message for: a header shorter than 256 bytes; a bad version field;
        non-numeric fields; a signal count or header size that disagree; a data-record
        duration that is zero, negative or not finite (MNE would silently read such a file as
        1-s records, with a wrong sampling rate); zero or negative samples per record; digital
        minimum not below maximum, or equal physical limits; a record count of zero, or one that
        disagrees with the file size (truncated, or whole records beyond the count); a recording
        shorter than :data:`MIN_RECORDING_S`.  Layout: EDF specification (Kemp et al. 1992,
        Electroencephalogr Clin Neurophysiol 82:391-393) and EDF+ (Kemp & Olivan 2003, Clin
        Neurophysiol 114:1755-1761).
    """
    bdf = _suffix(path) == ".bdf"
    size = path.stat().st_size
    with open(path, "rb") as f:
        head = f.read(256)
        if len(head) < 256:
            raise InputError(
                f"not an EDF/BDF file: {len(head)} bytes, shorter than the 256-byte header",
                path=path,
            )
        version = head[:8]
        if not (version == b"0       " or (bdf and version[:1] == b"\xff")):
            raise InputError(
                f"corrupt EDF/BDF header: bad version field {version.decode('latin-1')!r}",
                path=path,
            )
        n_signals = _edf_number(head[252:256], "number-of-signals", path, integer=True)
        if n_signals < 1:
            raise InputError(
                f"corrupt EDF/BDF header: {n_signals} signals; need at least 1", path=path
            )
        header_bytes = _edf_number(head[184:192], "header-size", path, integer=True)
        if header_bytes != 256 * (n_signals + 1):
            raise InputError(
                f"corrupt EDF/BDF header: header-size field says {header_bytes} "
                f"bytes, but {n_signals} signals need 256 x {n_signals + 1} = "
                f"{256 * (n_signals + 1)}",
                path=path,
            )
        n_records = _edf_number(head[236:244], "number-of-data-records", path, integer=True)
        record_s = _edf_number(head[244:252], "data-record-duration", path)
        if not math.isfinite(record_s):
            raise InputError(
                f"corrupt EDF/BDF header: data-record duration {record_s!r} is not "
                "a finite number of seconds",
                path=path,
            )
        if record_s <= 0:
            raise InputError(
                f"corrupt EDF/BDF header: data-record duration is {record_s:g} s; "
                "it must be > 0 (the sampling rate is samples per record divided "
                "by it)",
                path=path,
            )
        rest = f.read(256 * n_signals)
    if len(rest) < 256 * n_signals:
        raise InputError(
            f"truncated EDF/BDF file: {size} bytes, the {n_signals} signal headers "
            f"need {header_bytes}",
            path=path,
        )
    offsets = [0]
    for w in _SIGNAL_FIELDS:
        offsets.append(offsets[-1] + w * n_signals)

    def field(k: int, i: int) -> bytes:
        w = _SIGNAL_FIELDS[k]
        return rest[offsets[k] + w * i : offsets[k] + w * (i + 1)]

    labels = [field(0, i).decode("latin-1").strip() for i in range(n_signals)]
    lo_d, hi_d = (-8388608, 8388607) if bdf else (-32768, 32767)
    per_record = []
    for i, label in enumerate(labels):
        name = f"signal {i + 1} ({label[:16]!r})"
        spr = _edf_number(field(8, i), f"{name} samples-per-record", path, integer=True)
        if spr < 1:
            raise InputError(
                f"corrupt EDF/BDF header: {name} has {spr} samples per data "
                "record; it must be at least 1",
                path=path,
            )
        per_record.append(spr)
        pmin = _edf_number(field(3, i), f"{name} physical-minimum", path)
        pmax = _edf_number(field(4, i), f"{name} physical-maximum", path)
        dmin = _edf_number(field(5, i), f"{name} digital-minimum", path, integer=True)
        dmax = _edf_number(field(6, i), f"{name} digital-maximum", path, integer=True)
        if not (math.isfinite(pmin) and math.isfinite(pmax)) or pmin == pmax:
            raise InputError(
                f"corrupt EDF/BDF header: {name} physical minimum and maximum "
                f"({pmin:g}, {pmax:g}) must be finite and differ",
                path=path,
            )
        if not lo_d <= dmin < dmax <= hi_d:
            raise InputError(
                f"corrupt EDF/BDF header: {name} digital range ({dmin}, {dmax}) "
                f"must satisfy {lo_d} <= minimum < maximum <= {hi_d}",
                path=path,
            )
    record_bytes = sum(per_record) * (3 if bdf else 2)
    data_bytes = size - header_bytes
    whole = data_bytes // record_bytes
    if n_records == -1:  # allowed while recording; the reader infers it from the file size
        if whole < 1:
            raise InputError(
                "EDF/BDF file holds no complete data record (record count -1, "
                f"{max(data_bytes, 0)} data bytes, {record_bytes} per record)",
                path=path,
            )
        n_records = whole
    elif n_records < 1:
        raise InputError(
            f"corrupt EDF/BDF header: {n_records} data records; need at least 1 "
            "(or -1 while recording)",
            path=path,
        )
    elif whole < n_records:
        expected = header_bytes + n_records * record_bytes
        raise InputError(
            f"truncated EDF/BDF file: {size} bytes, the header promises {expected} "
            f"({n_records} data records of {record_bytes} bytes)",
            path=path,
        )
    elif whole > n_records:
        raise InputError(
            f"EDF/BDF header says {n_records} data records but the file holds "
            f"{whole}; the header's record count is wrong",
            path=path,
        )
    duration = n_records * record_s
    if duration < MIN_RECORDING_S:
        raise InputError(
            f"recording too short: {duration:g} s ({n_records} data records of "
            f"{record_s:g} s); at least {MIN_RECORDING_S:g} s are needed",
            path=path,
        )
    return {
        "n_signals": n_signals,
        "n_records": n_records,
        "record_s": record_s,
        "samples_per_record": per_record,
        "duration_s": duration,
        "labels": labels,
    }


def bids_resolve(path: Path) -> Path:
    """Find the EEG recording in a BIDS folder (subject, session or ``eeg`` folder).

    Parameters
    ----------
    path : Path
        A BIDS subject, session or ``eeg`` folder (searched recursively).

    Returns
    -------
    Path
        The single ``*_eeg.<ext>`` file with a readable suffix.

    Raises
    ------
    InputError
        When there is none or more than one (the message lists them so the user can pass one).
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

    Parameters
    ----------
    path : Path
        A BIDS recording ``<stem>_eeg.<ext>``; other names have no channels file.

    Returns
    -------
    tuple of str
        Names from the ``name`` column whose ``status`` is ``bad`` (any case), in file order;
        empty when there is no ``<stem>_channels.tsv``.

    Raises
    ------
    InputError
        The channels file is unreadable or has no ``name`` column.

    References
    ----------
    BIDS EEG extension (Pernet et al. 2019, Sci Data 6:103).
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
    """sha256 of one file, or of the concatenated per-file hashes of several (header + data).

    Parameters
    ----------
    paths : sequence of str | Path
        The files, in order (order matters for several files).

    Returns
    -------
    str
        Hexadecimal sha256 digest: of the file itself for one file, else of the concatenated
        hexadecimal digests of each file.
    """
    from ..provenance import sha256_file

    paths = [Path(p) for p in paths]
    if len(paths) == 1:
        return sha256_file(paths[0])
    h = hashlib.sha256()
    for p in paths:
        h.update(sha256_file(p).encode())
    return h.hexdigest()


_VHDR_KEY = re.compile(r"^\s*(DataFile|MarkerFile)\s*=\s*(.*?)\s*$", re.I)


def brainvision_files(vhdr: Path) -> tuple[Path, Path | None]:
    """The data and marker files a BrainVision header names (``DataFile=``, ``MarkerFile=``).

    Both must be plain file names in the header's own folder: sourcelab does not read files
    elsewhere that a header points to.  A missing marker file falls back to ``<stem>.vmrk``
    as MNE-Python does (or none).

    Parameters
    ----------
    vhdr : Path
        The BrainVision header (``.vhdr``); its first MiB is read as Latin-1 text.

    Returns
    -------
    data : Path
        The data file (exists).
    marker : Path | None
        The marker file, or None when neither the named one nor ``<stem>.vmrk`` exists.

    Raises
    ------
    InputError
        No ``DataFile=``, a name pointing outside the folder, or a data file that is missing.
    """
    try:
        raw = vhdr.read_bytes()[: 1 << 20]
    except OSError as exc:
        raise InputError(f"cannot read BrainVision header ({exc.strerror})", path=vhdr) from None
    found: dict[str, str] = {}
    section = ""
    for line in raw.decode("latin-1").splitlines():
        s = line.strip()
        if s.startswith("["):
            section = s.lower()
            continue
        m = _VHDR_KEY.match(line)
        if m and section == "[common infos]" and m.group(1).lower() not in found:
            found[m.group(1).lower()] = m.group(2)
    if "datafile" not in found or not found["datafile"]:
        raise InputError("BrainVision header names no DataFile= in [Common Infos]", path=vhdr)
    out = []
    for key in ("datafile", "markerfile"):
        name = found.get(key, "")
        if not name:
            out.append(None)
            continue
        if (
            "/" in name
            or "\\" in name
            or name in (".", "..")
            or Path(name).is_absolute()
            or re.match(r"^[A-Za-z]:", name)
        ):
            label = "DataFile" if key == "datafile" else "MarkerFile"
            raise InputError(
                f"BrainVision {label}={name!r} points outside the header's folder; "
                "sourcelab reads only files beside the header",
                path=vhdr,
            )
        out.append(vhdr.parent / name)
    data, marker = out
    if not data.is_file():
        raise InputError(
            f"BrainVision data file {data.name!r} named in the header is missing", path=vhdr
        )
    if marker is None or not marker.is_file():
        sibling = vhdr.with_suffix(".vmrk")
        marker = sibling if sibling.is_file() else None
    return data, marker


def _companions(path: Path, fmt: str) -> list[Path]:
    """The files whose bytes make up the recording (for the hash), as they will be read."""
    if fmt == "BrainVision":
        data, marker = brainvision_files(path)
        extra = [data] + ([marker] if marker is not None else [])
    elif fmt == "EEGLAB":
        extra = [f for f in [eeglab_data_file(path)] if f is not None]
    else:
        extra = []
    return [path] + extra


def eeglab_data_file(set_path: Path) -> Path | None:
    """The separate data file (``.fdt``) an EEGLAB set names, resolved as MNE-Python does.

    Parameters
    ----------
    set_path : Path
        The EEGLAB ``.set`` file.

    Returns
    -------
    Path | None
        The named file beside the set, else ``<stem>.fdt``; None when the data are embedded in
        the set or neither file exists.

    Raises
    ------
    InputError
        The set cannot be read, or names a data file that is not a plain name beside it.
    """
    try:
        from mne.io.eeglab.eeglab import _check_load_mat  # MNE's own reader of the header

        name = _check_load_mat(str(set_path), None).get("data")
    except Exception as exc:  # any failure to read the MATLAB file
        raise InputError(f"cannot read as EEGLAB: {_one_line(exc)}", path=set_path) from None
    if not isinstance(name, str):
        return None
    if Path(name).name == set_path.name or Path(name).resolve() == set_path.resolve():
        return None
    if "/" in name or "\\" in name or name in (".", ".."):
        raise InputError(
            f"EEGLAB data file {name!r} named in the set is not a plain file name "
            "beside it; sourcelab reads only files beside the set",
            path=set_path,
        )
    data = set_path.parent / name
    if not data.is_file():
        data = set_path.with_suffix(".fdt")
    return data if data.is_file() else None


def _read_files(path: Path, fmt: str, raw) -> list[Path]:
    """Every file the reader actually read: the given file, MNE's data files (``raw.filenames``:
    the ``.eeg`` a BrainVision header names, the ``.fdt`` of an EEGLAB set) and the BrainVision
    marker file.  Data files outside the given file's folder are refused."""
    files = [path]
    for f in getattr(raw, "filenames", ()) or ():
        if f is None:
            continue
        f = Path(f)
        if f.resolve() != path.resolve() and f.resolve().parent != path.resolve().parent:
            raise InputError(
                f"{fmt} data file {str(f)!r} lies outside the folder of the file "
                "given; sourcelab reads only files beside it",
                path=path,
            )
        if all(f.resolve() != g.resolve() for g in files):
            files.append(f)
    if fmt == "BrainVision":
        _, marker = brainvision_files(path)
        if marker is not None and all(marker.resolve() != g.resolve() for g in files):
            files.append(marker)
    return files


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
    if not path.is_file():
        raise InputError(f"not a regular file, not a {fmt} recording", path=path)
    if path.stat().st_size == 0:
        raise InputError(f"empty file (0 bytes), not a {fmt} recording", path=path)
    if fmt in ("EDF", "BDF"):
        check_edf_header(path)
    elif fmt == "BrainVision":
        brainvision_files(path)
    elif fmt == "EEGLAB":
        eeglab_data_file(path)
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
    sfreq = float(raw.info["sfreq"])
    if not (math.isfinite(sfreq) and sfreq > 0):
        raise InputError(f"sampling rate {sfreq!r} Hz is not a positive number", path=path)
    if raw.n_times < MIN_RECORDING_S * sfreq:
        raise InputError(
            f"recording too short: {raw.n_times} samples ({raw.n_times / sfreq:.3g} "
            f"s at {sfreq:g} Hz); at least {MIN_RECORDING_S:g} s are needed",
            path=path,
        )
    sha = hash_files(_read_files(path, fmt, raw))
    return raw, path, sha, bids_bad_channels(path), notes
