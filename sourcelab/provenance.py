"""Pipeline fingerprints, file hashes and atomic output folders."""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import re
import shutil
import tempfile
from dataclasses import asdict, dataclass
from pathlib import Path

from . import PIPELINE_VERSION, __version__
from .errors import InputError


def sha256_file(path: str | Path, *, chunk: int = 1 << 20) -> str:
    """Hex sha256 of a file's bytes."""
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
    COMPARED = ("headmodel_sha256", "method", "orientation", "lambda2", "bands", "reference",
                "epoch_s", "pipeline_version")

    def to_dict(self) -> dict:
        d = asdict(self)
        d["bands"] = [list(b) for b in self.bands]
        return d

    @classmethod
    def from_dict(cls, d: dict) -> "Fingerprint":
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
        """Names of compared fields that differ, with both values."""
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
        return json.dumps(self.to_dict(), sort_keys=True)


_SAFE = re.compile(r"[^A-Za-z0-9._-]+")


def safe_name(identifier: str, *, max_len: int = 64) -> str:
    """Make an identifier read from a file (participant ID, channel name) safe as a path part.

    Anything outside ``[A-Za-z0-9._-]`` becomes ``_``; leading dots are removed so that the result
    is never ``.``/``..`` or hidden; an empty result is an error.
    """
    s = _SAFE.sub("_", str(identifier)).lstrip(".")[:max_len]
    if not s.strip("_"):
        raise InputError(f"identifier {identifier!r} has no usable characters for a file name")
    return s


@contextlib.contextmanager
def atomic_output_dir(out: str | Path, *, overwrite: bool = True):
    """Yield a temporary folder beside ``out``; on success it replaces ``out``, on error it vanishes.

    Nothing partial is ever left at ``out``: a failed analysis leaves the previous contents (or
    nothing) in place.
    """
    out = Path(out)
    parent = out.parent if str(out.parent) else Path(".")
    parent.mkdir(parents=True, exist_ok=True)
    if out.exists() and not out.is_dir():
        raise InputError("output path exists and is not a folder", path=out)
    if out.exists() and any(out.iterdir()) and not overwrite:
        raise InputError("output folder is not empty", path=out)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.tmp-", dir=parent))
    try:
        yield tmp
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    old = None
    if out.exists():
        old = parent / f".{out.name}.old-{os.getpid()}"
        os.replace(out, old)
    os.replace(tmp, out)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def atomic_write_text(path: str | Path, text: str) -> None:
    """Write a text file through a temporary name in the same folder, then rename."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent or ".")
    try:
        umask = os.umask(0)
        os.umask(umask)
        os.fchmod(fd, 0o666 & ~umask)  # mkstemp creates 0600; give the file ordinary permissions
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            f.write(text)
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise
