"""Pipeline fingerprints, file hashes and output safety.

Output safety (see :func:`check_output_dir`, :func:`atomic_output_dir`, :func:`check_output_file`):

* ``--out`` may be a new path, an existing *empty* folder, or an existing *sourcelab output
  folder* of the same kind.  sourcelab recognises its folders by the marker key
  ``"sourcelab_output"`` that it writes into their ``provenance.json`` (analysis, demo, replay and
  batch outputs; BIDS-derivative participant folders carry it in a hidden
  ``.sourcelab-output.json``, as BIDS reserves the other names).  The marker lists every file
  sourcelab wrote there.  Anything else is refused with one line: a folder of the user's own
  files, a sourcelab folder holding files it did not write, the current folder, a symbolic link,
  a file, a folder holding an input.
* A folder is replaced atomically: the new output is built in a hidden temporary folder
  ``.NAME.tmp-XXXXXXXX`` beside it and swapped in with one ``renameat2(RENAME_EXCHANGE)`` where
  the system has it (Linux), else two renames under a lock.  The previous folder is then removed
  **file by file, only the files its marker lists**; anything else found there is kept (renamed
  to ``NAME.kept-<time>``) and reported.  sourcelab never deletes or moves a file it did not write.
* Each temporary folder holds a marker file ``.sourcelab-tmp.json`` that its process keeps
  locked (``flock``) while it runs.  A run killed with SIGKILL leaves the folder behind; the next
  run on the same ``--out`` finds it, sees that nobody holds the lock, and removes it.
* Concurrent runs on the same ``--out`` both succeed: the swaps are serialised by a lock on the
  parent folder, every state of ``--out`` is one complete output, and the last run to finish wins.
"""

from __future__ import annotations

import contextlib
import errno
import hashlib
import json
import logging
import math
import os
import re
import secrets
import shutil
import socket
import stat
import sys
import tempfile
import time
from dataclasses import asdict, dataclass
from pathlib import Path

from . import PIPELINE_VERSION, __version__
from ._docs import fill_doc
from .checks import check_option
from .errors import InputError

log = logging.getLogger("sourcelab")


def sha256_file(path: str | Path, *, chunk: int = 1 << 20) -> str:
    """Hex sha256 of a file's bytes.

    Parameters
    ----------
    path : str | Path
        File to hash.
    chunk : int
        Read size, bytes (memory only; the hash does not depend on it).

    Returns
    -------
    str
        64 lower-case hex digits.
    """
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(chunk), b""):
            h.update(block)
    return h.hexdigest()


@dataclass(frozen=True)
class Fingerprint:
    """Everything that makes numbers from two analyses comparable.

    Two results (or a result and a norms file) may be compared only when their fingerprints are
    equal.  ``sourcelab_version`` is recorded for the record but is *not* compared:
    ``pipeline_version`` is bumped whenever the numbers change.
    """

    headmodel_sha256: str
    method: str
    orientation: str
    lambda2: float
    bands: tuple[tuple[str, float, float], ...]
    reference: str = "average"
    epoch_s: float = 2.0
    pipeline_version: int = PIPELINE_VERSION
    sourcelab_version: str = __version__

    #: fields that must agree for numbers to be comparable
    COMPARED = (
        "headmodel_sha256",
        "method",
        "orientation",
        "lambda2",
        "bands",
        "reference",
        "epoch_s",
        "pipeline_version",
    )

    def to_dict(self) -> dict:
        """The fingerprint as a JSON-serialisable dict (``bands`` as a list of lists).

        Returns
        -------
        dict
            One key per field, including ``sourcelab_version``.
        """
        d = asdict(self)
        d["bands"] = [list(b) for b in self.bands]
        return d

    @classmethod
    def from_dict(cls, d: dict) -> "Fingerprint":
        """Rebuild a fingerprint from :meth:`to_dict` output (e.g. read from JSON).

        Unknown keys are ignored; missing ``epoch_s`` defaults to 2.0 s and missing
        ``pipeline_version`` to -1 (so it never matches a current fingerprint).

        Parameters
        ----------
        d : dict
            Needs ``headmodel_sha256``, ``method``, ``orientation``, ``lambda2`` and ``bands``
            (``[name, low_hz, high_hz]`` triples).

        Returns
        -------
        Fingerprint

        Raises
        ------
        InputError
            If a required key is missing or a value does not convert.
        """
        try:
            d = dict(d)
            d["bands"] = tuple((str(b[0]), float(b[1]), float(b[2])) for b in d["bands"])
            d["lambda2"] = float(d["lambda2"])
            d["epoch_s"] = float(d.get("epoch_s", 2.0))
            d["pipeline_version"] = int(d.get("pipeline_version", -1))
            return cls(**{k: d[k] for k in d if k in cls.__dataclass_fields__})
        except (KeyError, TypeError, ValueError, IndexError) as exc:
            raise InputError(f"incomplete pipeline fingerprint ({exc!r})") from None

    def differences(self, other: "Fingerprint") -> list[str]:
        """Names of compared fields that differ, with both values.

        Only :attr:`COMPARED` fields count; ``lambda2`` is compared to a relative 1e-9.

        Parameters
        ----------
        other : Fingerprint

        Returns
        -------
        list of str
            ``"<field>: <self value> vs <other value>"`` per differing field; empty when the numbers
            are comparable.
        """
        out = []
        for name in self.COMPARED:
            a, b = getattr(self, name), getattr(other, name)
            if name == "lambda2":
                same = abs(a - b) <= 1e-9 * max(abs(a), abs(b), 1e-30)
            else:
                same = a == b
            if not same:
                out.append(f"{name}: {a!r} vs {b!r}")
        return out

    def to_json(self) -> str:
        """:meth:`to_dict` as JSON text with sorted keys.

        Returns
        -------
        str
            Compact JSON, sorted keys (stored in norms headers and epochs files).
        """
        return json.dumps(self.to_dict(), sort_keys=True)


_SAFE = re.compile(r"[^A-Za-z0-9._-]+")


def safe_name(identifier: str, *, max_len: int = 64) -> str:
    """Make an identifier read from a file (participant ID, channel name) safe as a path part.

    Anything outside ``[A-Za-z0-9._-]`` becomes ``_``; leading dots are removed so that the result
    is never ``.``/``..`` or hidden; an empty result is an error.

    Parameters
    ----------
    identifier : str
        Text from a file or user (converted with ``str``).
    max_len : int
        Longest result, characters (the text is cut).

    Returns
    -------
    str
        The safe name.

    Raises
    ------
    InputError
        If nothing but ``_`` would remain.
    """
    s = _SAFE.sub("_", str(identifier)).lstrip(".")[:max_len]
    if not s.strip("_"):
        raise InputError(f"identifier {identifier!r} has no usable characters for a file name")
    return s


# --------------------------------------------------------------------------------------------
# Output folders: recognition
# --------------------------------------------------------------------------------------------

#: Key of the marker sourcelab writes into the provenance of every output folder.
MARKER_KEY = "sourcelab_output"
MARKER_FORMAT = 1
PROVENANCE_NAME = "provenance.json"
#: Marker file of folders whose names a standard fixes (BIDS derivatives).
HIDDEN_MARKER_NAME = ".sourcelab-output.json"
#: Marker file inside a temporary folder while its run is alive (locked).
TMP_MARKER_NAME = ".sourcelab-tmp.json"
#: Output kinds -> family; a folder is replaced only by an output of the same family.
KINDS = {
    "analysis": "analysis",
    "demo": "analysis",
    "replay": "replay",
    "batch": "batch",
    "bids": "bids",
    "compare": "compare",
}
_FAMILY_TEXT = {
    "analysis": "an analysis",
    "replay": "a target replay",
    "batch": "a batch",
    "bids": "a BIDS-derivatives",
    "compare": "a comparison",
}
#: Largest provenance/marker file parsed when recognising a folder.
_MARKER_MAX_BYTES = 64 * 1024 * 1024

# Outputs written before the marker existed (sourcelab 0.1): recognised by their provenance and
# accepted only when every entry is a name those versions wrote.
_LEGACY_ANALYSIS_FILES = {
    "roi_table.tsv",
    "sensor_table.tsv",
    "provenance.json",
    "leakage_brodmann.tsv",
    "leakage_brodmann.png",
    "candidates.tsv",
    "leakage_hints.tsv",
    "report.html",
    "demo-01_invented_eeg.edf",
    "epochs.npz",
}
_LEGACY_ANALYSIS_DIRS = {"figures": (".png",), "maps": (".stc", ".gii", ".nii.gz")}
_LEGACY_REPLAY_FILES = {"replay.tsv", "replay.png", "replay.json"}
_BATCH_STATUS_HEADER = "recording\tparticipant\tpath\tstatus\tseconds\tpeak_rss_mb\tmessage"


@dataclass(frozen=True)
class OutputFolder:
    """What :func:`recognise_output_dir` found.

    Attributes
    ----------
    kind : str
        One of :data:`KINDS`.
    files : frozenset of str | None
        Relative POSIX paths sourcelab wrote (from the marker); None for a legacy folder (then
        the legacy name rules apply) or a batch folder (never replaced as a whole).
    legacy : bool
    """

    kind: str
    files: frozenset | None
    legacy: bool = False

    @property
    def family(self) -> str:
        return KINDS[self.kind]


def _open_small_file(path: Path, flags: int, max_bytes: int) -> int | None:
    """A descriptor of ``path`` opened with ``flags`` without following a symlink, when it is a
    regular file of at most ``max_bytes``; None (nothing left open) otherwise."""
    try:
        fd = os.open(path, flags | getattr(os, "O_NOFOLLOW", 0))
    except OSError:
        return None
    try:
        st = os.fstat(fd)
    except OSError:
        st = None
    if st is None or not stat.S_ISREG(st.st_mode) or st.st_size > max_bytes:
        os.close(fd)
        return None
    return fd


def _read_json_file(path: Path, max_bytes: int = _MARKER_MAX_BYTES):
    """Parse a small JSON file without following a symlink; None when absent or unreadable."""
    from .checks import loads_json

    fd = _open_small_file(path, os.O_RDONLY, max_bytes)
    if fd is None:
        return None
    try:
        with os.fdopen(fd, "rb") as f:
            data = f.read(max_bytes + 1)
    except OSError:
        return None
    try:
        return loads_json(data, where=path, max_depth=64)
    except InputError:
        return None


def _marker_from(doc) -> OutputFolder | None:
    if not isinstance(doc, dict):
        return None
    m = doc.get(MARKER_KEY)
    if not isinstance(m, dict) or m.get("format") != MARKER_FORMAT or m.get("kind") not in KINDS:
        return None
    files = m.get("files")
    if files is None and m["kind"] == "batch":
        return OutputFolder(kind="batch", files=None)
    if not isinstance(files, list) or not all(isinstance(f, str) for f in files):
        return None
    clean = frozenset(f for f in files if f and not f.startswith("/") and ".." not in f.split("/"))
    return OutputFolder(kind=m["kind"], files=clean)


def recognise_output_dir(folder: str | Path) -> OutputFolder | None:
    """Is ``folder`` a sourcelab output folder?  Returns what it is, or None.

    Recognised: the marker key :data:`MARKER_KEY` in ``provenance.json`` (or in
    ``.sourcelab-output.json``); and, for folders written by sourcelab 0.1, their provenance
    (``"sourcelab_provenance": 1`` with a fingerprint), ``replay.json`` or ``batch_status.tsv``.
    A symbolic link is never recognised.

    Parameters
    ----------
    folder : str | Path
        Folder to inspect (only read).

    Returns
    -------
    OutputFolder or None
        The kind and the files sourcelab wrote there; None when not recognised (or not a folder).
    """
    folder = Path(folder)
    try:
        if not stat.S_ISDIR(os.lstat(folder).st_mode):
            return None
    except OSError:
        return None
    for name in (PROVENANCE_NAME, HIDDEN_MARKER_NAME):
        doc = _read_json_file(folder / name)
        found = _marker_from(doc)
        if found is not None:
            return found
    doc = _read_json_file(folder / PROVENANCE_NAME)
    if isinstance(doc, dict) and doc.get("sourcelab_provenance") == 1 and "fingerprint" in doc:
        return OutputFolder(kind="analysis", files=None, legacy=True)
    rep = _read_json_file(folder / "replay.json")
    if isinstance(rep, dict) and "target" in rep and "recording_sha256" in rep:
        return OutputFolder(kind="replay", files=None, legacy=True)
    try:
        with open(folder / "batch_status.tsv", encoding="utf-8") as f:
            if f.readline().rstrip("\n") == _BATCH_STATUS_HEADER:
                return OutputFolder(kind="batch", files=None, legacy=True)
    except (OSError, UnicodeDecodeError):
        pass
    sub = folder.name
    prov = _read_json_file(folder / "eeg" / f"{sub}_desc-sourcelab_provenance.json")
    if sub.startswith("sub-") and isinstance(prov, dict) and "fingerprint" in prov:
        return OutputFolder(kind="bids", files=None, legacy=True)
    return None


def _legacy_allowed(rel: str, info: OutputFolder) -> bool:
    parts = rel.split("/")
    if info.kind == "replay":
        return len(parts) == 1 and rel in _LEGACY_REPLAY_FILES
    if info.kind == "bids":
        return len(parts) == 2 and parts[0] == "eeg" and parts[1].startswith("sub-")
    if len(parts) == 1:
        return rel in _LEGACY_ANALYSIS_FILES
    if len(parts) == 2 and parts[0] in _LEGACY_ANALYSIS_DIRS:
        return parts[1].lower().endswith(_LEGACY_ANALYSIS_DIRS[parts[0]])
    return False


def _is_ours(rel: str, info: OutputFolder) -> bool:
    if info.files is not None:
        return rel in info.files
    return info.legacy and _legacy_allowed(rel, info)


def foreign_entries(folder: str | Path, info: OutputFolder, *, limit: int = 5) -> list[str]:
    """Entries of a recognised output folder that sourcelab did not write (up to ``limit``).

    Symbolic links, special files and unlisted files count as foreign; a folder counts only
    through its contents (an empty sub-folder is harmless).

    Parameters
    ----------
    folder : str | Path
        The output folder.
    info : OutputFolder
        What :func:`recognise_output_dir` found for it.
    limit : int
        Stop after this many entries.

    Returns
    -------
    list of str
        Relative POSIX paths, in walk order; empty when everything is sourcelab's.
    """
    folder = Path(folder)
    out: list[str] = []
    for root, dirs, files in os.walk(folder, followlinks=False):
        base = Path(root).relative_to(folder).as_posix()
        for name in sorted(dirs + files):
            rel = name if base == "." else f"{base}/{name}"
            p = Path(root) / name
            try:
                st = os.lstat(p)
            except OSError:
                continue
            if stat.S_ISDIR(st.st_mode):
                continue
            if not stat.S_ISREG(st.st_mode) or not _is_ours(rel, info):
                out.append(rel)
                if len(out) >= limit:
                    return out
    return out


# --------------------------------------------------------------------------------------------
# Pre-flight checks
# --------------------------------------------------------------------------------------------


def _name_max(folder: Path) -> int:
    try:
        return int(os.pathconf(folder, "PC_NAME_MAX"))
    except (OSError, ValueError, AttributeError):
        return 255


def _nearest_existing(path: Path) -> Path:
    p = path
    while True:
        try:
            os.lstat(p)
            return p
        except FileNotFoundError:
            if p.parent == p:
                return p
            p = p.parent
        except NotADirectoryError:
            p = p.parent


def _check_parent(out: Path, name: str, shown, *, extra_chars: int) -> None:
    """Parent folder of an output: creatable, writable, names short enough."""
    parent = out.parent
    anc = _nearest_existing(parent)
    try:
        st = os.stat(anc)
    except OSError as exc:
        raise InputError(f"{name}: cannot use {anc} ({exc.strerror})", path=shown) from None
    if not stat.S_ISDIR(st.st_mode):
        raise InputError(f"{name}: {anc} is a file, not a folder", path=shown)
    limit = _name_max(anc)
    new_parts = [] if anc == parent else list(parent.relative_to(anc).parts)
    for part in new_parts:
        if len(os.fsencode(part)) > limit:
            raise InputError(
                f"{name}: folder name {part[:40]!r}... is {len(os.fsencode(part))} "
                f"bytes; the file system allows {limit}",
                path=shown,
            )
    n = len(os.fsencode(out.name))
    if n + extra_chars > limit:
        raise InputError(
            f"{name}: the name is {n} bytes; at most {limit - extra_chars} are "
            f"possible here (the file system allows {limit}, sourcelab's "
            f"temporary name adds {extra_chars})",
            path=shown,
        )
    if len(os.fsencode(str(out.absolute()))) + extra_chars >= 4096:
        raise InputError(f"{name}: the path is too long", path=shown)
    try:  # the real test: make (and remove) a temporary entry where sourcelab will write
        probe = tempfile.mkdtemp(
            prefix=f".{out.name}.tmp-" if anc == parent else ".sourcelab-probe-", dir=anc
        )
        os.rmdir(probe)
    except OSError as exc:
        raise InputError(
            f"{name}: cannot write in {anc} ({exc.strerror or exc})", path=shown
        ) from None


def _lstat(out: Path, name: str, shown):
    """``os.lstat(out)``, ``None`` when nothing is there; unusable paths as one line."""
    try:
        return os.lstat(out)
    except FileNotFoundError:
        return None
    except NotADirectoryError:
        raise InputError(
            f"{name}: a parent of this path is a file, not a folder", path=shown
        ) from None
    except OSError as exc:
        raise InputError(f"{name}: cannot use this path ({exc.strerror})", path=shown) from None


def _refuse_special(out_text: str, name: str) -> Path:
    if not isinstance(out_text, (str, os.PathLike)):
        raise InputError(f"{name}: needs a path, got {out_text!r}")
    text = os.fspath(out_text)
    if text.strip() == "":
        raise InputError(f"{name}: an empty path; give a new folder name")
    if "\0" in text:
        raise InputError(f"{name}: the path contains a NUL character")
    out = Path(text)
    if text.startswith("/") and text.strip("/") == "":
        raise InputError(f"{name}: is the root of the file system", path=text)
    if out.name in ("", ".", "..") or text.rstrip("/") in ("", ".", ".."):
        raise InputError(
            f"{name}: {text!r} is the current folder or one above it; give a new folder name",
            path=text,
        )
    return out


def _resolved(p: Path) -> Path:
    try:
        return p.resolve(strict=False)
    except (OSError, RuntimeError):
        return p.absolute()


def _input_inside(out: Path, inputs) -> Path | None:
    ro = _resolved(out)
    for inp in inputs or ():
        ri = _resolved(Path(inp))
        if ri == ro or ro in ri.parents:
            return Path(inp)
    return None


def check_output_dir(
    out, *, kind: str = "analysis", inputs=(), name: str = "--out", clean: bool = True
) -> Path:
    """Pre-flight check of an output folder, before any computation.

    Parameters
    ----------
    out : str | Path
        The folder to write (replaced atomically when it exists).
    kind : {"analysis", "demo", "replay", "batch", "bids", "compare"}
    inputs : iterable of path
        Files the command reads; ``out`` must not be or contain any of them.
    name : str
        The option, for messages.
    clean : bool
        Remove stale temporary folders of earlier killed runs beside ``out``.

    Returns
    -------
    Path
        ``out`` as a Path, after the checks.

    Raises
    ------
    InputError
        One line naming ``out`` and the problem.
    """
    check_option("kind", kind, sorted(KINDS))
    out = _refuse_special(out, name)
    shown = out
    st = _lstat(out, name, shown)
    cwd = _resolved(Path.cwd())
    ro = _resolved(out)
    if ro == cwd or ro in cwd.parents:
        raise InputError(
            f"{name}: is the current folder or holds it; give a new folder name", path=shown
        )
    if ro.parent == ro:
        raise InputError(f"{name}: is the root of the file system", path=shown)
    if st is not None:
        if stat.S_ISLNK(st.st_mode):
            raise InputError(
                f"{name}: is a symbolic link; give the folder itself or a new name", path=shown
            )
        if not stat.S_ISDIR(st.st_mode):
            raise InputError(f"{name}: exists and is a file, not a folder", path=shown)
    hit = _input_inside(out, inputs)
    if hit is not None:
        raise InputError(
            f"{name}: holds the input {hit}; choose a folder that does not hold your data",
            path=shown,
        )
    if st is not None:
        _check_replaceable(out, kind, name, shown)
    _check_parent(out, name, shown, extra_chars=14)
    if clean:
        clean_stale_temporaries(out.parent if str(out.parent) else Path("."), out.name)
    return out


def _check_replaceable(out: Path, kind: str, name: str, shown) -> OutputFolder | None:
    """An existing folder: empty, or a sourcelab output of this family holding only its files."""
    try:
        with os.scandir(out) as it:
            empty = not any(True for _ in it)
    except OSError as exc:
        raise InputError(f"{name}: cannot read the folder ({exc.strerror})", path=shown) from None
    if empty:
        return None
    info = recognise_output_dir(out)
    if info is None:
        raise InputError(
            f"{name}: exists and is not a sourcelab output folder (no sourcelab "
            "provenance.json); sourcelab replaces only its own outputs - give a "
            "new folder name",
            path=shown,
        )
    if info.family != KINDS[kind]:
        raise InputError(
            f"{name}: holds {_FAMILY_TEXT[info.family]} output of sourcelab, not "
            f"{_FAMILY_TEXT[KINDS[kind]]} output; give another folder",
            path=shown,
        )
    if info.family == "batch":
        return info
    foreign = foreign_entries(out, info)
    if foreign:
        raise InputError(
            f"{name}: holds files sourcelab did not write ({', '.join(foreign)}); "
            "move them out or give another folder",
            path=shown,
        )
    return info


# --------------------------------------------------------------------------------------------
# Locks, markers and removal of sourcelab's own files
# --------------------------------------------------------------------------------------------

try:
    import fcntl
except ImportError:  # pragma: no cover - Windows
    fcntl = None


@contextlib.contextmanager
def _locked_dir(folder: Path):
    """Exclusive lock on a folder (``flock`` on its descriptor) for the commit of an output."""
    if fcntl is None:  # pragma: no cover
        yield
        return
    fd = os.open(folder, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
    try:
        fcntl.flock(fd, fcntl.LOCK_EX)
        yield
    finally:
        os.close(fd)


def _write_tmp_marker(folder: Path, name: str, role: str = "build") -> int:
    """Create and lock the temporary-folder marker; returns the descriptor holding the lock.

    ``role`` is ``"build"`` (a new output being written: removable as a whole) or ``"old"``
    (a replaced output being removed: only its listed files go).
    """
    path = folder / TMP_MARKER_NAME
    fd = os.open(path, os.O_RDWR | os.O_CREAT | os.O_EXCL | getattr(os, "O_NOFOLLOW", 0), 0o644)
    if fcntl is not None:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    doc = {
        "sourcelab_tmp": 1,
        "role": role,
        "name": name,
        "pid": os.getpid(),
        "host": socket.gethostname(),
        "created_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "version": __version__,
    }
    os.write(fd, json.dumps(doc).encode())
    return fd


def _owner_gone(folder: Path) -> bool | None:
    """For a temporary folder: ``"build"``/``"old"`` (its role) when its marker exists and nobody
    holds its lock; False when a live run holds it; None when there is no valid marker."""
    fd = _open_small_file(folder / TMP_MARKER_NAME, os.O_RDWR, 4096)
    if fd is None:
        return None
    try:
        doc = json.loads(os.read(fd, 4096).decode("utf-8", "replace") or "null")
        if not isinstance(doc, dict) or doc.get("sourcelab_tmp") != 1:
            return None
        if fcntl is None:  # pragma: no cover
            return False
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            return False
        return "old" if doc.get("role") == "old" else "build"
    except (OSError, ValueError):
        return None
    finally:
        os.close(fd)


def _remove_listed(folder: Path, info: OutputFolder) -> list[str]:
    """Delete the files sourcelab wrote in ``folder`` (as ``info`` lists them), then the empty
    folders; return what had to be kept.  Never follows a symbolic link."""
    kept: list[str] = []
    for root, dirs, files in os.walk(folder, topdown=False, followlinks=False):
        base = Path(root).relative_to(folder).as_posix()
        for fname in files + [d for d in dirs if os.path.islink(os.path.join(root, d))]:
            rel = fname if base == "." else f"{base}/{fname}"
            p = os.path.join(root, fname)
            try:
                st = os.lstat(p)
            except OSError:
                continue
            if fname == TMP_MARKER_NAME and base == ".":
                continue  # removed last by the caller
            if stat.S_ISREG(st.st_mode) and _is_ours(rel, info):
                with contextlib.suppress(FileNotFoundError):
                    os.unlink(p)
            else:
                kept.append(rel)
        if base != ".":
            with contextlib.suppress(OSError):
                os.rmdir(root)  # only succeeds when empty
    return kept


def _dispose_old(old: Path, out: Path, info: OutputFolder | None, marker_fd: int | None) -> None:
    """Remove a replaced output folder (now at ``old``) file by file."""
    try:
        kept = [] if info is None else _remove_listed(old, info)
        if info is None:  # it was an empty folder
            with contextlib.suppress(FileNotFoundError):
                os.unlink(old / TMP_MARKER_NAME)
            os.rmdir(old)
            return
        if kept:
            keep = out.parent / f"{out.name}.kept-{time.strftime('%Y%m%d-%H%M%S')}"
            with contextlib.suppress(FileNotFoundError):
                os.unlink(old / TMP_MARKER_NAME)
            os.rename(old, keep)
            log.warning(
                "%s: the previous output held files sourcelab did not write (%s); they "
                "are kept in %s",
                out,
                ", ".join(kept[:5]),
                keep,
            )
            return
        with contextlib.suppress(FileNotFoundError):
            os.unlink(old / TMP_MARKER_NAME)
        os.rmdir(old)
    except OSError as exc:
        log.warning("%s: could not remove the previous output at %s (%s)", out, old, exc)
    finally:
        if marker_fd is not None:
            os.close(marker_fd)


_TMP_NAME = r"\.tmp-[A-Za-z0-9_]+"


def clean_stale_temporaries(parent: str | Path, name: str | None = None) -> list[Path]:
    """Remove temporary folders that killed sourcelab runs left beside an output.

    A candidate is a real folder named ``.NAME.tmp-*`` (any NAME when ``name`` is None).  It is
    removed only when it holds sourcelab's marker file and no live process holds the marker's
    lock (the kernel drops the lock when its process dies, SIGKILL included).  A folder whose
    marker is missing is touched only under the parent-folder lock (no commit is running): an
    empty one is removed, a recognised sourcelab output is removed file by file, anything else
    is left alone.  ``.NAME.old-PID`` folders of sourcelab 0.1 are removed when recognised.

    Parameters
    ----------
    parent : str | Path
        Folder holding the outputs (``""`` for the current folder).
    name : str, optional
        Output name whose temporaries to look for; None: any.

    Returns
    -------
    list of Path
        The folders removed.
    """
    parent = Path(parent) if str(parent) else Path(".")
    pat = re.compile(
        r"^\."
        + (re.escape(name) if name is not None else r".+?")
        + r"(?:"
        + _TMP_NAME
        + r"|\.old-\d+)$"
    )
    removed: list[Path] = []
    try:
        with os.scandir(parent) as it:
            entries = [e for e in it if pat.match(e.name)]
    except OSError:
        return removed
    unmarked = []
    for e in entries:
        if not e.is_dir(follow_symlinks=False):
            continue
        p = Path(e.path)
        gone = _owner_gone(p)
        if gone is None:
            unmarked.append(p)
        elif gone == "old":  # a replaced output whose removal was interrupted
            info = recognise_output_dir(p)
            m = re.match(r"^\.(.+)" + _TMP_NAME + r"$", p.name)
            out = parent / (name or (m.group(1) if m else p.name))
            if info is not None and info.family != "batch":
                _dispose_old(p, out, info, None)
            elif info is None:  # a replaced empty folder: only the marker inside
                with contextlib.suppress(OSError):
                    os.unlink(p / TMP_MARKER_NAME)
                    os.rmdir(p)
        elif gone == "build":
            shutil.rmtree(p, ignore_errors=True)  # a build folder: sourcelab wrote it all
        if gone and not os.path.lexists(p):
            removed.append(p)
            log.info("removed the temporary folder of an earlier interrupted run: %s", p)
    if unmarked:
        with _locked_dir(parent):
            for p in unmarked:
                if _owner_gone(p) is not None:
                    continue
                with contextlib.suppress(OSError):
                    os.rmdir(p)  # empty
                if os.path.lexists(p):
                    info = recognise_output_dir(p)
                    if info is not None and info.family != "batch" and not foreign_entries(p, info):
                        _remove_listed(p, info)
                        with contextlib.suppress(OSError):
                            os.rmdir(p)
                if not os.path.lexists(p):
                    removed.append(p)
    return removed


# --------------------------------------------------------------------------------------------
# Atomic swap
# --------------------------------------------------------------------------------------------

_RENAME_NOREPLACE, _RENAME_EXCHANGE = 1, 2
_renameat2 = None


def _get_renameat2():
    global _renameat2
    if _renameat2 is None:
        _renameat2 = False
        if sys.platform.startswith("linux"):
            try:
                import ctypes

                libc = ctypes.CDLL(None, use_errno=True)
                fn = libc.renameat2
                fn.argtypes = [
                    ctypes.c_int,
                    ctypes.c_char_p,
                    ctypes.c_int,
                    ctypes.c_char_p,
                    ctypes.c_uint,
                ]
                fn.restype = ctypes.c_int
                _renameat2 = fn
            except (OSError, AttributeError):
                _renameat2 = False
    return _renameat2


def _rename2(src: Path, dst: Path, flags: int) -> bool:
    """``renameat2``; False when the system or file system does not support it."""
    fn = _get_renameat2()
    if not fn:
        return False
    import ctypes

    at_fdcwd = -100
    if fn(at_fdcwd, os.fsencode(src), at_fdcwd, os.fsencode(dst), flags) == 0:
        return True
    e = ctypes.get_errno()
    if e in (errno.EINVAL, errno.ENOSYS, errno.EOPNOTSUPP, errno.ENOTSUP):
        return False
    raise OSError(e, os.strerror(e), str(dst))


def _manifest(folder: Path) -> list[str]:
    files = []
    for root, dirs, names in os.walk(folder, followlinks=False):
        base = Path(root).relative_to(folder).as_posix()
        for n in names:
            rel = n if base == "." else f"{base}/{n}"
            if rel == TMP_MARKER_NAME:
                continue
            if stat.S_ISREG(os.lstat(os.path.join(root, n)).st_mode):
                files.append(rel)
    return sorted(files)


def _write_marker(folder: Path, kind: str) -> None:
    """Write the output marker (with the list of files) into a finished temporary folder."""
    marker_name = HIDDEN_MARKER_NAME if kind == "bids" else PROVENANCE_NAME
    files = _manifest(folder)
    if marker_name not in files:
        files = sorted(files + [marker_name])
    mark = {"kind": kind, "format": MARKER_FORMAT, "files": files}
    path = folder / marker_name
    doc = None
    if marker_name == PROVENANCE_NAME and path.is_file():
        with open(path, encoding="utf-8") as f:
            doc = json.load(f)
        if not isinstance(doc, dict):
            doc = {"content": doc}
    if doc is None:
        doc = (
            {
                "sourcelab_provenance": 1,
                "command": list(sys.argv),
                "versions": {"sourcelab": __version__},
            }
            if marker_name == PROVENANCE_NAME
            else {}
        )
    doc[MARKER_KEY] = mark
    with open(path, "w", encoding="utf-8") as f:
        json.dump(doc, f, indent=2, allow_nan=False)


def _created_parents(parent: Path) -> list[Path]:
    """Create ``parent`` and its missing ancestors; return those created (deepest last)."""
    missing = []
    p = parent
    while not os.path.lexists(p):
        missing.append(p)
        if p.parent == p:
            break
        p = p.parent
    made = []
    for d in reversed(missing):
        try:
            os.mkdir(d)
            made.append(d)
        except FileExistsError:
            pass
    return made


def _remove_created(made: list[Path]) -> None:
    for d in reversed(made):
        with contextlib.suppress(OSError):
            os.rmdir(d)  # only when still empty


@contextlib.contextmanager
def atomic_output_dir(
    out: str | Path, *, overwrite: bool = True, kind: str = "analysis", inputs=()
):
    """Yield a temporary folder beside ``out``; on success it replaces ``out`` atomically.

    On an error the temporary folder vanishes and ``out`` is untouched: nothing partial is ever
    left.  ``out`` is checked with :func:`check_output_dir` on entry (fast; the CLI has done it
    before computing) and again under the commit lock.

    Parameters
    ----------
    out : str | Path
    overwrite : bool
        False: refuse an existing non-empty ``out`` even when it is a sourcelab output.
    kind : {"analysis", "demo", "replay", "bids"}
        Written into the marker; an existing ``out`` must be of the same family.
    inputs : iterable of path
        Files read for this output; ``out`` may not hold them.

    Yields
    ------
    Path
        The temporary folder to write into; committed to ``out`` when the block exits
        without an exception.

    Raises
    ------
    InputError
        If ``out`` cannot be written or replaced (one line naming it).
    """
    if kind == "batch":
        raise ValueError("a batch folder is updated in place, not replaced")
    out = check_output_dir(out, kind=kind, inputs=inputs, name="output folder")
    if not overwrite and out.exists() and any(out.iterdir()):
        raise InputError("output folder is not empty", path=out)
    parent = out.parent if str(out.parent) else Path(".")
    made = _created_parents(parent)
    try:
        tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.tmp-", dir=parent))
    except OSError as exc:
        _remove_created(made)
        raise InputError(f"cannot write here ({exc.strerror})", path=out) from None
    marker_fd = None
    try:
        marker_fd = _write_tmp_marker(tmp, out.name)
        yield tmp
        _write_marker(tmp, kind)
        old, info, old_fd = _commit(tmp, out, parent, kind, inputs)
    except BaseException:
        if marker_fd is not None:
            os.close(marker_fd)
        shutil.rmtree(tmp, ignore_errors=True)  # sourcelab's own temporary folder
        _remove_created(made)
        raise
    os.close(marker_fd)
    if old is not None:
        _dispose_old(old, out, info, old_fd)


def _commit(tmp: Path, out: Path, parent: Path, kind: str, inputs):
    """Swap ``tmp`` into ``out`` under the parent lock.

    Returns (old folder, its info, descriptor locking its marker) or (None, None, None).
    """
    with _locked_dir(parent):
        info = None
        exists = os.path.lexists(out)
        if exists:
            st = os.lstat(out)
            if stat.S_ISLNK(st.st_mode) or not stat.S_ISDIR(st.st_mode):
                raise InputError(
                    "appeared while sourcelab was running and is not a folder; nothing was written",
                    path=out,
                )
            info = _check_replaceable(out, kind, "output folder", out)
        hit = _input_inside(out, inputs)
        if hit is not None:
            raise InputError(f"holds the input {hit}; nothing was written", path=out)
        os.unlink(tmp / TMP_MARKER_NAME)  # our lock fd stays open until the caller closes it
        if not exists:
            if not _rename2(tmp, out, _RENAME_NOREPLACE):
                os.rename(tmp, out)  # serialised against other sourcelab runs by the lock
            return None, None, None
        if _rename2(tmp, out, _RENAME_EXCHANGE):
            old = tmp
        else:
            old = parent / f".{out.name}.tmp-{secrets.token_hex(4)}"
            os.rename(out, old)
            try:
                os.rename(tmp, out)
            except OSError:
                os.rename(old, out)
                raise
        # Mark the old folder (under the lock, so no cleaner can see it unmarked) so that a run
        # killed while removing it leaves a folder the next run recognises and removes.
        try:  # nothing after the swap may raise: the caller would remove ``tmp``, now the old
            fd = _write_tmp_marker(old, out.name, role="old")
        except OSError:
            fd = None
        return old, info, fd


# --------------------------------------------------------------------------------------------
# Batch output folders (updated in place)
# --------------------------------------------------------------------------------------------

_GROUP_TMP = re.compile(r"^\.group_(?:roi|sensor)_table\.(?:tsv|parquet)\.tmp-(\d+)$")


def prepare_output_root(out: str | Path, *, kind: str = "batch", inputs=()) -> Path:
    """Create (or reuse) a folder that sourcelab updates in place, such as a batch output.

    The folder must be new, empty or a sourcelab output of this kind; it is marked with
    ``provenance.json`` (:data:`MARKER_KEY`, kind ``batch``) and cleaned of stale temporary
    folders and group-table files of killed runs.

    Parameters
    ----------
    out : str | Path
        The folder.
    kind : str
        Output kind recorded in the marker (default ``"batch"``).
    inputs : iterable of path
        Files the command reads; ``out`` must not be or contain any of them.

    Returns
    -------
    Path
        ``out``, existing and marked.

    Raises
    ------
    InputError
        If ``out`` is not new, empty or a sourcelab output of this kind.
    """
    out = check_output_dir(out, kind=kind, inputs=inputs, name="--out", clean=False)
    _created_parents(out)
    mark = out / PROVENANCE_NAME
    if _marker_from(_read_json_file(mark)) is None:
        if os.path.lexists(mark):
            doc = _read_json_file(mark)
            if not (isinstance(doc, dict) and doc.get("sourcelab_provenance") == 1):
                raise InputError(
                    "provenance.json exists and was not written by sourcelab", path=mark
                )
        atomic_write_text(
            mark,
            json.dumps(
                {
                    "sourcelab_provenance": 1,
                    "command": list(sys.argv),
                    "versions": {"sourcelab": __version__},
                    MARKER_KEY: {"kind": kind, "format": MARKER_FORMAT, "files": None},
                },
                indent=2,
            )
            + "\n",
        )
    clean_stale_temporaries(out)
    with os.scandir(out) as it:
        group_tmp = list(it)
    for e in group_tmp:
        m = _GROUP_TMP.match(e.name)
        if m and e.is_file(follow_symlinks=False) and not _pid_alive(int(m.group(1))):
            with contextlib.suppress(OSError):
                os.unlink(e.path)
    return out


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OverflowError, OSError):
        return True
    return True


# --------------------------------------------------------------------------------------------
# Single output files
# --------------------------------------------------------------------------------------------

#: PNG text written into every PNG sourcelab saves as a file of its own (how it recognises them).
PNG_METADATA = {"Software": f"sourcelab {__version__}"}

_FILE_KINDS = (
    "png",
    "norms",
    "target",
    "candidates",
    "leakage",
    "calibration",
    "stream-log",
    "source-norms",
    "sidecar",
)
#: First columns of a norms table (format 3) and of a calibration report.
_NORMS_HEAD = "kind\tatlas\tname\themisphere\tband\tmeasure\tage_min\tage_max\tmodel\t"
_CALIBRATION_HEAD = "kind\tatlas\tname\themisphere\tband\tmeasure\tage_min\tage_max\tn\t"
#: The JSON sidecars sourcelab writes beside its own tables (norms, candidates).
_SIDECAR_RE = re.compile(r'"GeneratedBy"\s*:\s*\[\s*\{\s*"Name"\s*:\s*"sourcelab"')


def _png_software(head: bytes) -> str | None:
    """The ``Software`` tEXt value of a PNG (its first 64 KiB), or None."""
    if not head.startswith(b"\x89PNG\r\n\x1a\n"):
        return None
    i = 8
    while i + 8 <= len(head):
        n = int.from_bytes(head[i : i + 4], "big")
        ctype = head[i + 4 : i + 8]
        if ctype == b"tEXt":
            body = head[i + 8 : i + 8 + n]
            key, _, value = body.partition(b"\0")
            if key == b"Software":
                return value.decode("latin-1")
        if ctype == b"IDAT":
            return None
        i += 12 + n
    return None


def recognise_output_file(path: str | Path, kind: str) -> bool:
    """Was this existing file written by sourcelab (as a ``kind`` file)?

    ``png``: the PNG text ``Software = sourcelab ...``; ``norms``: first line
    ``# sourcelab-norms``; ``target``: ``"schema": "sourcelab-target/``; ``candidates``: the
    cautions comment lines and a ``rank`` header; ``leakage``: the leakage table header;
    ``calibration``: the calibration report header; ``stream-log``: the header of a
    ``targets stream --log`` file; ``source-norms``: the ``format`` array of a per-source norms
    ``.npz``.

    Parameters
    ----------
    path : str | Path
        The file (a symbolic link is never recognised).
    kind : str
        One of ``"png"``, ``"norms"``, ``"target"``, ``"candidates"``, ``"leakage"``,
        ``"calibration"``, ``"stream-log"``, ``"source-norms"``.

    Returns
    -------
    bool
        False also when the file cannot be opened.

    Raises
    ------
    ValueError
        For an unknown ``kind`` (a programming error, not user input).
    """
    check_option("kind", kind, _FILE_KINDS)
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0))
    except OSError:
        return False
    with os.fdopen(fd, "rb") as f:
        head = f.read(65536)
    if kind == "png":
        sw = _png_software(head)
        return sw is not None and sw.startswith("sourcelab")
    if kind == "source-norms":
        return _npz_format(path).startswith("sourcelab-source-norms")
    text = head.decode("utf-8", "replace")
    first = text.split("\n", 1)[0]
    if kind == "norms":
        return first.startswith("# sourcelab-norms") or first.startswith(_NORMS_HEAD)
    if kind == "sidecar":
        return text.lstrip().startswith("{") and _SIDECAR_RE.search(text) is not None
    if kind == "target":
        return re.search(r'"schema"\s*:\s*"sourcelab-target/', text[:4096]) is not None
    if kind == "candidates":
        from .cautions import CAUTIONS

        return (
            first == f"# {CAUTIONS[0]}"
            and re.search(r"^rank\t", text, re.M) is not None
            or (
                first.startswith("rank\t")
                and recognise_output_file(Path(path).with_suffix(".json"), "sidecar")
            )
        )
    if kind == "leakage":
        return first.startswith("atlas\ttarget_roi\ttarget_hemisphere\tsource_roi")
    if kind == "stream-log":
        return first.startswith("lsl_time\tpower\t")
    return first.startswith(_CALIBRATION_HEAD)


_OTHER_OWN_FILES = (
    ("report", re.compile(r"<title>sourcelab ")),
    ("status", re.compile(r"^" + re.escape(_BATCH_STATUS_HEADER) + r"$", re.M)),
    ("bids_description", re.compile(r'"GeneratedBy"\s*:\s*\[\s*\{\s*"Name"\s*:\s*"sourcelab"')),
    ("headmodel_sidecar", re.compile(r'^\{\s*"bytes"\s*:\s*\d+,\s*"file"\s*:\s*"[^"/]+\.npz"')),
    ("output_marker", re.compile(r'"(?:' + MARKER_KEY + r'|sourcelab_provenance)"\s*:')),
)


def _npz_format(path) -> str:
    """The ``format`` string array of an ``.npz`` sourcelab wrote (``""`` for anything else)."""
    import zipfile

    import numpy as np

    try:
        with np.load(path, allow_pickle=False) as z:
            return str(z["format"]) if "format" in z.files else ""
    except (OSError, ValueError, KeyError, zipfile.BadZipFile):
        return ""


def npz_bytes(arrays: dict) -> bytes:
    """An uncompressed ``.npz`` with fixed zip timestamps (equal arrays give equal bytes).

    Parameters
    ----------
    arrays : dict of str -> ndarray
        No object arrays (readers use ``allow_pickle=False``).

    Returns
    -------
    bytes
        The file's bytes (zip64, one ``<key>.npy`` member per array).
    """
    import io
    import zipfile

    import numpy as np

    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", compression=zipfile.ZIP_STORED, allowZip64=True) as zf:
        for key, arr in arrays.items():
            info = zipfile.ZipInfo(f"{key}.npy", date_time=(1980, 1, 1, 0, 0, 0))
            with zf.open(info, "w", force_zip64=True) as f:
                np.lib.format.write_array(f, np.asanyarray(arr), allow_pickle=False)
    return buf.getvalue()


def recognise_any_output_file(path: str | Path) -> bool:
    """Was this existing regular file written by sourcelab (any kind it writes on its own)?

    Parameters
    ----------
    path : str | Path
        The file (symbolic links and special files are never recognised).

    Returns
    -------
    bool
        True when a sourcelab header, marker or PNG tag is found.
    """
    try:
        st = os.lstat(path)
    except OSError:
        return False
    if not stat.S_ISREG(st.st_mode):
        return False
    if any(recognise_output_file(path, k) for k in _FILE_KINDS):
        return True
    try:
        with open(path, "rb") as f:
            head = f.read(65536).decode("utf-8", "replace")
    except OSError:
        return False
    return any(rx.search(head) for _, rx in _OTHER_OWN_FILES)


def check_output_file(path, *, kind: str, name: str = "--out", suffixes=None, inputs=()) -> Path:
    """Pre-flight check of an output file, before any computation.

    A new file, or an existing one that sourcelab wrote (:func:`recognise_output_file`); never
    a folder, a symbolic link, one of the inputs, or another program's file.  Missing parent
    folders are allowed (created when the file is written); the nearest existing one must be a
    writable folder.

    Parameters
    ----------
    path : str | Path
        The output file.
    kind : str
        What the file is (``"png"``, ``"norms"``, ``"target"``, ...; see
        :func:`recognise_output_file`); an existing file must be of this kind.
    name : str
        The option, for messages.
    suffixes : iterable of str, optional
        Allowed endings in lower case (``".tsv"``), compared with the lower-cased name.
    inputs : iterable of path
        Files the command reads; ``path`` may not be one of them.

    Returns
    -------
    Path
        ``path`` as a Path.

    Raises
    ------
    InputError
        One line naming the path and the problem.
    """
    if not isinstance(path, (str, os.PathLike)) or os.fspath(path).strip() == "":
        raise InputError(f"{name}: an empty path; give a file name")
    text = os.fspath(path)
    out = Path(text)
    if text.endswith(("/", os.sep)) or out.name in ("", ".", ".."):
        raise InputError(f"{name}: is a folder name; give a file name", path=text)
    if suffixes is not None:
        suffixes = tuple(suffixes)
        if not out.name.lower().endswith(suffixes):
            raise InputError(f"{name}: must end in {' or '.join(suffixes)}", path=out)
    st = _lstat(out, name, out)
    if st is not None:
        if stat.S_ISLNK(st.st_mode):
            raise InputError(f"{name}: is a symbolic link; give a new file name", path=out)
        if stat.S_ISDIR(st.st_mode):
            raise InputError(f"{name}: is a folder, not a file", path=out)
    for inp in inputs or ():
        if _resolved(Path(inp)) == _resolved(out):
            raise InputError(f"{name}: is an input of this command; give a new file name", path=out)
    if st is not None:
        if not stat.S_ISREG(st.st_mode):
            raise InputError(f"{name}: exists and is not a regular file", path=out)
        if not recognise_output_file(out, kind):
            raise InputError(
                f"{name}: exists and was not written by sourcelab; sourcelab does "
                "not overwrite other files - give a new file name",
                path=out,
            )
    _check_parent(out, name, out, extra_chars=10)
    return out


def atomic_write_bytes(path: str | Path, data: bytes) -> None:
    """Write a file through a temporary name in the same folder, then rename.

    Missing parent folders are created (and removed again if the write fails).  An existing
    ``path`` is replaced only when sourcelab wrote it (:func:`recognise_any_output_file`); a
    symbolic link, a folder or another program's file raises :class:`InputError` and is left
    untouched.

    Parameters
    ----------
    path : str | Path
        Output file.
    data : bytes
        The whole content.
    """
    path = Path(path)
    if os.path.lexists(path) and not recognise_any_output_file(path):
        raise InputError(
            "exists and was not written by sourcelab; it is not overwritten", path=path
        )
    parent = path.parent if str(path.parent) else Path(".")
    made = _created_parents(parent)
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=parent)
    except OSError:
        _remove_created(made)
        raise
    try:
        umask = os.umask(0)
        os.umask(umask)
        os.fchmod(fd, 0o666 & ~umask)  # mkstemp creates 0600; give the file ordinary permissions
        with os.fdopen(fd, "wb") as f:
            f.write(data)
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        _remove_created(made)
        raise


def atomic_write_text(path: str | Path, text: str) -> None:
    """Write a UTF-8 text file atomically (see :func:`atomic_write_bytes`).

    Parameters
    ----------
    path : str | Path
        Output file.
    text : str
        The whole content, encoded as UTF-8.
    """
    atomic_write_bytes(path, text.encode("utf-8"))


@fill_doc
def save_png(fig, path: str | Path, *, dpi: int = 100, **kwargs) -> Path:
    """Save a Matplotlib figure as a PNG file atomically, marked as written by sourcelab.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    path : str | Path
        Output file (replaced only when sourcelab wrote it).
    dpi : int
        Resolution, dots per inch.
    **kwargs
        Passed to :meth:`matplotlib.figure.Figure.savefig`.

    %(returns_path)s
    """
    import io

    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, metadata=dict(PNG_METADATA), **kwargs)
    atomic_write_bytes(path, buf.getvalue())
    return Path(path)


def finite_json(o):
    """Replace NaN/inf by None throughout nested dicts and lists (JSON has no NaN).

    Parameters
    ----------
    o : object
        Dicts, lists, tuples, floats and NumPy scalars are converted recursively; anything else
        is returned as is.

    Returns
    -------
    object
        Same structure (tuples become lists), NumPy scalars as Python numbers, non-finite floats
        as None.
    """
    if isinstance(o, dict):
        return {k: finite_json(v) for k, v in o.items()}
    if isinstance(o, (list, tuple)):
        return [finite_json(v) for v in o]
    if isinstance(o, float) and not math.isfinite(o):
        return None
    try:
        import numpy as np

        if isinstance(o, np.floating):
            return float(o) if np.isfinite(o) else None
        if isinstance(o, np.integer):
            return int(o)
    except ImportError:  # pragma: no cover
        pass
    return o


def dumps_json(obj, **kwargs) -> str:
    """``json.dumps`` that always writes valid JSON: NaN and infinities become ``null``.

    Parameters
    ----------
    obj : object
        JSON-serialisable after :func:`finite_json`.
    **kwargs
        Passed to :func:`json.dumps` (``indent``, ``sort_keys``...).

    Returns
    -------
    str
        JSON text without NaN/Infinity literals.
    """
    return json.dumps(finite_json(obj), allow_nan=False, **kwargs)
