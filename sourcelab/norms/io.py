"""The sourcelab norms file: a plain TSV with a JSON sidecar (see FORMAT.md).

Format 3 (sourcelab 0.3): ``norms.tsv`` is a plain tab-separated table (header row first; reads
with ``pandas.read_csv(path, sep="\t")``), and ``norms.json`` beside it holds the column
descriptions (BIDS style) and, under ``"sourcelab-norms"``, the format version, pipeline
fingerprint, condition, cohort summary and notes.  Format 2 files (the commented header below,
written by sourcelab 0.2) are still read.

One row per (kind, atlas, name, hemisphere, band, measure, age range) gives a model of the
*transformed* value (``log10`` for absolute power, ``logit`` for relative power) as a polynomial in
``log10(age in years)`` with a constant residual standard deviation.  Age-binned norms are the
degree-0 case (``b0`` is the bin mean); age-regression norms have degree 1-3.

Format 2 example::

    # sourcelab-norms 2
    # fingerprint: {"bands": [["delta", 1.0, 4.0], ...], "headmodel_sha256": "...", ...}
    # condition: eyes closed
    # cohort: {"n": 100, "age_min": 18.2, "age_max": 79.5, ...}
    # note: simulated demo norms, not from real people
    kind  atlas     name  hemisphere  band   measure   age_min  age_max  model       degree ...
    roi   brodmann  BA17  left        alpha  absolute  6.0      80.0     regression  2      ...

References
----------
Gasser T, Bächer P, Möcks J (1982).  Electroencephalogr Clin Neurophysiol 53:119-124 (from memory).
John ER, Ahn H, Prichep L, et al. (1980).  Science 210:1255-1258 (from memory).
"""

from __future__ import annotations

import contextvars
import json
import math
import re
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError
from ..provenance import Fingerprint, atomic_write_text, sha256_file
from .coupling import TRANSFORM_FOR_COUPLING
from .transforms import TRANSFORM_FOR_MEASURE, TRANSFORMS

FORMAT_NAME = "sourcelab-norms"
FORMAT_VERSION = 3
#: Format versions read: 3 (TSV + JSON sidecar), 2 (commented header, sourcelab 0.2).
LEGACY_FORMAT_VERSION = 2
#: Highest polynomial degree a row may use (coefficients b0..b3).
MAX_DEGREE = 3
#: Placeholder for "does not apply" (BIDS convention), used for atlas/hemisphere of sensor rows.
NA = "n/a"

KINDS = ("roi", "sensor", "pair", "edge")
#: Measures allowed per kind (band power for ROIs and sensors; coupling for pairs and edges).
KIND_MEASURES = {
    "roi": tuple(TRANSFORM_FOR_MEASURE),
    "sensor": tuple(TRANSFORM_FOR_MEASURE),
    "pair": tuple(TRANSFORM_FOR_COUPLING),
    "edge": tuple(TRANSFORM_FOR_COUPLING),
}
MODELS = ("binned", "regression")
#: Columns identifying a row's quantity (without the age range).
QUANTITY_COLUMNS = ("kind", "atlas", "name", "hemisphere", "band", "measure")
KEY_COLUMNS = QUANTITY_COLUMNS + ("age_min", "age_max")
COEF_COLUMNS = tuple(f"b{k}" for k in range(MAX_DEGREE + 1))
#: All columns of a norms table, in file order.
#: Upper triangle of ``(XᵀX)⁻¹`` of a row's kept controls (design ``[1, x, x², x³]``,
#: ``x = log10 age``): what the predictive p-value's leverage needs (format 2).
V_COLUMNS = tuple(f"v{j}{k}" for j in range(MAX_DEGREE + 1) for k in range(j, MAX_DEGREE + 1))
COLUMNS = (
    KEY_COLUMNS + ("model", "degree", "transform") + COEF_COLUMNS + ("sd", "n", "df") + V_COLUMNS
)
_STR_COLUMNS = QUANTITY_COLUMNS + ("model", "transform")
_FLOAT_COLUMNS = ("age_min", "age_max") + COEF_COLUMNS + ("sd",) + V_COLUMNS
_INT_COLUMNS = ("degree", "n", "df")
_HEADER_KEYS = ("fingerprint", "condition", "cohort", "note")
_HEADER_RE = re.compile(r"^# ([a-z]+): (.*)$")
#: Largest norms file read (the demo norms are 0.25 MB; a table for every shipped atlas, band,
#: measure and 20 age bins stays below 100 MB).
NORMS_MAX_BYTES = 256 * 1024 * 1024
#: Header JSON (fingerprint, cohort) nests only a few levels.
_HEADER_MAX_DEPTH = 16


#: Common abbreviations of recording conditions (common practice in clinical EEG).
CONDITION_ALIASES = {"ec": "eyes closed", "eo": "eyes open"}


def normalise_condition(condition: str) -> str:
    """Canonical form for comparing conditions (``"Eyes-closed"``, ``"EC"``: ``"eyes closed"``).

    Parameters
    ----------
    condition : str
        A recording condition as written by a user or a file.

    Returns
    -------
    str
        Lower case, ``-``/``_`` and runs of white space replaced by one space, and the
        abbreviations of :data:`CONDITION_ALIASES` expanded.
    """
    text = " ".join(re.sub(r"[-_]+", " ", str(condition)).lower().split())
    return CONDITION_ALIASES.get(text, text)


#: True while :func:`read_norms` builds a :class:`Norms` from a table it has just validated
#: (with file line numbers): the constructor then does not validate it a second time.
_TABLE_VALIDATED = contextvars.ContextVar("norms_table_validated", default=False)


@dataclass(frozen=True, eq=False)
class Norms:
    """A validated norms table with its pipeline fingerprint and recording condition.

    Attributes
    ----------
    table : DataFrame
        One row per quantity and age range; columns :data:`COLUMNS` (see FORMAT.md).
    fingerprint : Fingerprint
        The pipeline that produced the reference values; analyses must match it.
    condition : str
        Recording condition of the reference cohort, e.g. ``"eyes closed"``.
    cohort : dict
        Summary of the reference cohort (n, ages, sex counts, source); JSON-serialisable.
    notes : tuple of str
        Free-text provenance lines (``# note:`` in the file).
    path : Path | None
        File the norms were read from or written to.
    sha256 : str | None
        Hex sha256 of that file's bytes.
    """

    table: pd.DataFrame
    fingerprint: Fingerprint
    condition: str
    cohort: dict = field(default_factory=dict)
    notes: tuple[str, ...] = ()
    path: Path | None = None
    sha256: str | None = None

    def __post_init__(self):
        where = self.path if self.path is not None else "norms"
        if not isinstance(self.fingerprint, Fingerprint):
            raise InputError("norms fingerprint must be a sourcelab Fingerprint", path=where)
        if (
            not isinstance(self.condition, str)
            or not self.condition.strip()
            or "\n" in self.condition
        ):
            raise InputError("norms condition must be a non-empty single line", path=where)
        for note in self.notes:
            if "\n" in note:
                raise InputError("norms notes must be single lines", path=where)
        if not _TABLE_VALIDATED.get():
            object.__setattr__(self, "table", validate_table(self.table, path=where))

    def summary(self) -> dict:
        """Short description for result provenance (path, sha256, fingerprint, condition).

        Returns
        -------
        dict
            JSON-serialisable: ``path`` (str or None), ``sha256``, ``fingerprint`` (dict),
            ``condition``, ``cohort`` (a copy) and ``n_rows``.
        """
        return {
            "path": None if self.path is None else str(self.path),
            "sha256": self.sha256,
            "fingerprint": self.fingerprint.to_dict(),
            "condition": self.condition,
            "cohort": dict(self.cohort),
            "n_rows": int(len(self.table)),
        }


def _bad(msg: str, path, line: int | None = None):
    return InputError(msg if line is None else f"line {line}: {msg}", path=path)


def validate_table(
    table: pd.DataFrame, *, path="norms", first_line: int | None = None
) -> pd.DataFrame:
    """Check a norms table and return a clean copy with canonical dtypes and column order.

    Parameters
    ----------
    table : DataFrame
        Columns :data:`COLUMNS`.
    path : str | Path
        Named in error messages.
    first_line : int | None
        File line number of the first data row (for messages), or None for row indices.

    Returns
    -------
    DataFrame
        A copy with columns in :data:`COLUMNS` order and canonical dtypes (text, float, int).

    Raises
    ------
    InputError
        Missing/unknown columns, empty table, NaN or non-finite numbers, SD <= 0, bad kind,
        model, transform or degree, duplicate rows, overlapping age ranges.
    """
    if not isinstance(table, pd.DataFrame):
        raise _bad("norms table must be a pandas DataFrame", path)
    missing = [c for c in COLUMNS if c not in table.columns]
    if missing:
        raise _bad(f"norms table is missing columns {missing}; required: {list(COLUMNS)}", path)
    extra = [c for c in table.columns if c not in COLUMNS]
    if extra:
        raise _bad(f"norms table has unknown columns {extra}; allowed: {list(COLUMNS)}", path)
    if len(table) == 0:
        raise _bad("norms table has no rows", path)
    t = table.loc[:, list(COLUMNS)].reset_index(drop=True).copy()

    def where(i):
        return (first_line + i) if first_line is not None else None

    def row_name(i):
        return "" if first_line is not None else f"row {i}: "

    for c in _STR_COLUMNS:
        vals = t[c].tolist()
        for i, v in enumerate(vals):
            if not isinstance(v, str) or not v.strip() or any(ch in v for ch in "\t\r\n"):
                raise _bad(
                    f"{row_name(i)}column {c!r} must be a non-empty text without tabs, got {v!r}",
                    path,
                    where(i),
                )
        t[c] = t[c].astype(object)
    for c in _FLOAT_COLUMNS + _INT_COLUMNS:
        try:
            arr = np.asarray(t[c].to_numpy(), dtype=float)
        except (TypeError, ValueError):
            raise _bad(f"column {c!r} must be numeric", path) from None
        bad = np.flatnonzero(~np.isfinite(arr))
        if bad.size:
            i = int(bad[0])
            raise _bad(
                f"{row_name(i)}column {c!r} is NaN or not finite ({t[c].iloc[i]!r})", path, where(i)
            )
        if c in _INT_COLUMNS:
            if np.any(arr != np.round(arr)):
                i = int(np.flatnonzero(arr != np.round(arr))[0])
                raise _bad(f"{row_name(i)}column {c!r} must be an integer", path, where(i))
            t[c] = arr.astype(np.int64)
        else:
            t[c] = arr
    kind_ok = t["kind"].isin(KINDS)
    measure_ok = pd.Series(
        [m in KIND_MEASURES.get(k, ()) for k, m in zip(t["kind"].tolist(), t["measure"].tolist())],
        index=t.index,
    )
    checks = [
        (~kind_ok, f"kind must be one of {list(KINDS)}"),
        (
            ~measure_ok,
            "measure must be one of "
            + "; ".join(f"{k}: {sorted(set(v))}" for k, v in KIND_MEASURES.items()),
        ),
        (
            ~t["transform"].isin(tuple(TRANSFORMS)),
            f"unknown transform; allowed: {sorted(TRANSFORMS)}",
        ),
        (~t["model"].isin(MODELS), f"model must be one of {list(MODELS)}"),
        (~(t["sd"] > 0), "sd must be > 0"),
        (t["n"] < 2, "n must be >= 2"),
        (t["age_min"] < 0, "age_min must be >= 0 (years)"),
        (~(t["age_max"] > t["age_min"]), "age_max must be > age_min"),
        ((t["degree"] < 0) | (t["degree"] > MAX_DEGREE), f"degree must be 0..{MAX_DEGREE}"),
        ((t["model"] == "binned") & (t["degree"] != 0), "binned rows must have degree 0"),
        (
            (t["model"] == "regression") & ~(t["age_min"] > 0),
            "regression rows need age_min > 0 (the model uses log10 age)",
        ),
        (
            (t["kind"] == "sensor") & ((t["atlas"] != NA) | (t["hemisphere"] != NA)),
            f"sensor rows must have atlas and hemisphere {NA!r}",
        ),
        (
            (t["kind"] == "pair") & ((t["atlas"] != NA) | (t["hemisphere"] != NA)),
            f"pair rows must have atlas and hemisphere {NA!r}",
        ),
        (
            (t["kind"] == "edge") & ((t["atlas"] == NA) | (t["hemisphere"] != NA)),
            f"edge rows must name their atlas and have hemisphere {NA!r}",
        ),
    ]
    deg = t["degree"].to_numpy()
    for k, c in enumerate(COEF_COLUMNS):
        checks.append(
            (
                pd.Series((k > deg) & (t[c].to_numpy() != 0)),
                f"coefficient {c} must be 0 for rows of degree < {k}",
            )
        )
    checks.append((t["df"] != t["n"] - t["degree"] - 1, "df must equal n - degree - 1"))
    checks.append((~(t["v00"] > 0), "v00 must be > 0"))
    for c in V_COLUMNS:
        j, k = int(c[1]), int(c[2])
        checks.append(
            (
                pd.Series((np.maximum(j, k) > deg) & (t[c].to_numpy() != 0)),
                f"{c} must be 0 for rows of degree < {max(j, k)}",
            )
        )
    checks.append(
        (
            pd.Series(~_leading_blocks_positive(t)),
            "the (XᵀX)⁻¹ entries v.. must form a positive-definite matrix",
        )
    )
    for mask, msg in checks:
        bad = np.flatnonzero(np.asarray(mask))
        if bad.size:
            i = int(bad[0])
            shown = {
                c: t[c].iloc[i]
                for c in ("kind", "name", "band", "measure", "transform", "sd", "degree", "model")
            }
            raise _bad(f"{row_name(i)}{msg} ({_fmt_row(shown)})", path, where(i))
    dup = t.duplicated(list(KEY_COLUMNS), keep="first")
    if dup.any():
        i = int(np.flatnonzero(dup.to_numpy())[0])
        raise _bad(
            f"{row_name(i)}duplicate row for {_fmt_row({c: t[c].iloc[i] for c in KEY_COLUMNS})}",
            path,
            where(i),
        )
    s = t.sort_values(list(QUANTITY_COLUMNS) + ["age_min"], kind="stable")
    same = np.ones(len(s) - 1, dtype=bool)
    for c in QUANTITY_COLUMNS:
        v = s[c].to_numpy()
        same &= v[1:] == v[:-1]
    amin, amax = s["age_min"].to_numpy(), s["age_max"].to_numpy()
    overlap = np.flatnonzero(same & (amin[1:] < amax[:-1]))
    if overlap.size:
        j = int(overlap[0])
        i = int(s.index[j + 1])
        q = {c: s[c].iloc[j] for c in QUANTITY_COLUMNS}
        raise _bad(
            f"{row_name(i)}overlapping age ranges [{amin[j]}, {amax[j]}] and "
            f"[{amin[j + 1]}, {amax[j + 1]}] for {_fmt_row(q)}",
            path,
            where(i),
        )
    return t


def _leading_blocks_positive(t: pd.DataFrame) -> np.ndarray:
    """Per row: the leading (degree + 1) block of the packed (XᵀX)⁻¹ is positive definite."""
    iu = np.triu_indices(MAX_DEGREE + 1)
    v = t[list(V_COLUMNS)].to_numpy(dtype=float)
    m = np.zeros((len(t), MAX_DEGREE + 1, MAX_DEGREE + 1))
    m[:, iu[0], iu[1]] = v
    m[:, iu[1], iu[0]] = v
    ok = np.zeros(len(t), dtype=bool)
    deg = t["degree"].to_numpy(dtype=int)
    for d in np.unique(deg):
        sel = deg == d
        if not 0 <= d <= MAX_DEGREE:
            continue
        block = m[sel][:, : d + 1, : d + 1]
        ok[sel] = np.all(np.linalg.eigvalsh(block) > 0, axis=1) if block.size else True
    return ok


def _fmt_row(d: dict) -> str:
    return ", ".join(f"{k}={v}" for k, v in d.items())


def _fmt_value(v) -> str:
    if isinstance(v, (float, np.floating)):
        return repr(float(v))  # shortest string that round-trips exactly
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    return str(v)


#: Column descriptions of a norms table (the JSON sidecar, BIDS style).
COLUMN_NOTES = {
    "kind": {
        "Description": "roi, sensor, pair (electrode pair) or edge (ROI pair of a network "
        "or lobe atlas)"
    },
    "atlas": {"Description": "atlas of roi and edge rows; n/a for sensor and pair rows"},
    "name": {"Description": "ROI, channel, electrode pair or edge"},
    "hemisphere": {"Description": "left, right or both (roi rows); n/a for the other kinds"},
    "band": {"Description": "frequency band, as in the fingerprint"},
    "measure": {"Description": "band-power or coupling measure"},
    "age_min": {"Description": "youngest age the row applies to", "Units": "years"},
    "age_max": {"Description": "oldest age the row applies to", "Units": "years"},
    "model": {
        "Description": "binned (mean and SD of an age bin) or regression (polynomial in log10 age)"
    },
    "degree": {"Description": "polynomial degree, 0-3"},
    "transform": {
        "Description": "transform of the value the model describes (log10, logit, "
        "fisher_sqrt, ...; see FORMAT.md)"
    },
    **{
        f"b{k}": {
            "Description": f"coefficient of x^{k} of the mean, x = log10(age in years)",
            "Units": "transformed scale",
        }
        for k in range(MAX_DEGREE + 1)
    },
    "sd": {"Description": "residual standard deviation", "Units": "transformed scale"},
    "n": {"Description": "reference participants behind the row"},
    "df": {"Description": "residual degrees of freedom"},
    **{
        c: {
            "Description": f"element {c[1]},{c[2]} of (X'X)^-1 of the row's design [1, x, x^2, x^3]"
        }
        for c in V_COLUMNS
    },
}


def sidecar_path(path: str | Path) -> Path:
    """The JSON sidecar of a norms table (``norms.tsv`` -> ``norms.json``).

    Parameters
    ----------
    path : str | Path
        The norms table.

    Returns
    -------
    Path
        The same path with its last suffix replaced by ``.json``.
    """
    return Path(path).with_suffix(".json")


def format_norms(norms: Norms) -> str:
    """The text of a norms table (format 3: plain TSV, header row first; see FORMAT.md).

    Parameters
    ----------
    norms : Norms

    Returns
    -------
    str
        The column line and one tab-separated line per table row; floats written so they
        round-trip exactly.  Fingerprint, condition, cohort and notes go to the JSON sidecar.
    """
    lines = ["\t".join(COLUMNS)]
    t = norms.table
    cols = [t[c].tolist() for c in COLUMNS]
    for row in zip(*cols):
        lines.append("\t".join(_fmt_value(v) for v in row))
    return "\n".join(lines) + "\n"


def format_norms_sidecar(norms: Norms) -> str:
    """The JSON sidecar of a norms table.

    Column descriptions and the ``"sourcelab-norms"`` metadata (format version, fingerprint,
    condition, cohort, notes).

    Parameters
    ----------
    norms : Norms
        The norms whose metadata is written.

    Returns
    -------
    str
        Indented UTF-8 JSON text ending in a newline.
    """
    from .. import __version__

    meta = {
        "FormatVersion": FORMAT_VERSION,
        "GeneratedBy": [{"Name": "sourcelab", "Version": __version__}],
        "fingerprint": norms.fingerprint.to_dict(),
        "condition": norms.condition.strip(),
        "cohort": norms.cohort,
        "notes": list(norms.notes),
    }
    return (
        json.dumps(
            {**COLUMN_NOTES, FORMAT_NAME: meta}, indent=2, sort_keys=False, ensure_ascii=False
        )
        + "\n"
    )


def _format_legacy(norms: Norms) -> str:
    """Format 2 text (commented header), as sourcelab 0.2 wrote it; for reading tests."""
    lines = [
        f"# {FORMAT_NAME} {LEGACY_FORMAT_VERSION}",
        f"# fingerprint: {norms.fingerprint.to_json()}",
        f"# condition: {norms.condition.strip()}",
        f"# cohort: {json.dumps(norms.cohort, sort_keys=True)}",
    ]
    lines += [f"# note: {n}" for n in norms.notes]
    return "\n".join(lines) + "\n" + format_norms(norms)


def write_norms(norms: Norms, path: str | Path) -> Norms:
    """Write ``norms`` to ``path`` and its sidecar ``<stem>.json``, each atomically (temporary
    file + rename; the sidecar first).

    Parameters
    ----------
    norms : Norms
    path : str | Path
        Output file (``.tsv``); parent folders are created; an existing file is replaced.

    Returns
    -------
    Norms
        The same norms with ``path`` and ``sha256`` of the written table.

    Raises
    ------
    InputError
        If ``path`` is a folder or ends in ``.json``.
    """
    path = Path(path)
    if path.exists() and path.is_dir():
        raise InputError("norms output path is a folder", path=path)
    if path.suffix.lower() == ".json":
        raise InputError(
            "norms output path: the table needs a suffix other than .json (its "
            "sidecar is <name>.json)",
            path=path,
        )
    path.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_text(sidecar_path(path), format_norms_sidecar(norms))
    atomic_write_text(path, format_norms(norms))
    return replace(norms, path=path, sha256=sha256_file(path))


def _parse_sidecar(path: Path) -> dict:
    """Metadata of a format-3 table from its JSON sidecar (one-line errors naming the file)."""
    from ..checks import loads_json, read_bytes_bounded

    side = sidecar_path(path)
    if not side.is_file():
        raise InputError(
            f"no sidecar {side.name} beside the norms table (it holds the "
            "pipeline fingerprint and condition; copy it with the table)",
            path=path,
        )
    raw = read_bytes_bounded(side, max_bytes=NORMS_MAX_BYTES, what="norms sidecar")
    data = loads_json(raw, where=side, max_depth=_HEADER_MAX_DEPTH + 2, what="norms sidecar")
    meta = data.get(FORMAT_NAME) if isinstance(data, dict) else None
    if not isinstance(meta, dict):
        raise InputError(f"not a sourcelab norms sidecar (no {FORMAT_NAME!r} object)", path=side)
    if meta.get("FormatVersion") != FORMAT_VERSION:
        raise InputError(
            f"unsupported norms format version ({meta.get('FormatVersion')!r}); "
            f"this sourcelab reads versions {LEGACY_FORMAT_VERSION} and "
            f"{FORMAT_VERSION}; rebuild the norms with this sourcelab",
            path=side,
        )
    for key in ("fingerprint", "condition"):
        if key not in meta:
            raise InputError(f"sidecar has no {key!r}", path=side)
    try:
        fp = Fingerprint.from_dict(meta["fingerprint"])
    except (AttributeError, InputError, TypeError, ValueError) as exc:
        raise InputError(
            f"sidecar fingerprint is not a valid pipeline fingerprint ({exc})", path=side
        ) from None
    cohort = meta.get("cohort", {})
    if not isinstance(cohort, dict):
        raise InputError("sidecar cohort must be a JSON object", path=side)
    notes = meta.get("notes", [])
    if not isinstance(notes, list) or not all(isinstance(n, str) for n in notes):
        raise InputError("sidecar notes must be a list of texts", path=side)
    if not isinstance(meta["condition"], str):
        raise InputError("sidecar condition must be a text", path=side)
    return {
        "fingerprint": fp,
        "condition": meta["condition"],
        "cohort": cohort,
        "notes": tuple(notes),
    }


def _parse_header(lines: list[str], path) -> tuple[dict, int]:
    if not lines or lines[0].rstrip() != f"# {FORMAT_NAME} {LEGACY_FORMAT_VERSION}":
        got = lines[0].rstrip()[:60] if lines else "<empty file>"
        if lines and got.startswith(f"# {FORMAT_NAME} "):
            raise _bad(
                f"unsupported norms format version ({got!r}); this sourcelab reads "
                f"versions {LEGACY_FORMAT_VERSION} and {FORMAT_VERSION}; rebuild the "
                "norms with this sourcelab",
                path,
                1,
            )
        raise _bad(
            f"not a sourcelab norms file: first line must be the column names "
            f"({COLUMNS[0]}, {COLUMNS[1]}, ...) or '# {FORMAT_NAME} "
            f"{LEGACY_FORMAT_VERSION}', got {got!r}",
            path,
            1,
        )
    head: dict = {"note": []}
    i = 1
    while i < len(lines) and lines[i].startswith("#"):
        m = _HEADER_RE.match(lines[i])
        if not m or m.group(1) not in _HEADER_KEYS:
            raise _bad(
                f"bad header line {lines[i][:60]!r}; expected '# key: value' with key "
                f"one of {list(_HEADER_KEYS)}",
                path,
                i + 1,
            )
        key, value = m.group(1), m.group(2).strip()
        if key == "note":
            head["note"].append(value)
        elif key in head:
            raise _bad(f"header key {key!r} given twice", path, i + 1)
        else:
            head[key] = (value, i + 1)
        i += 1
    for key in ("fingerprint", "condition"):
        if key not in head:
            raise _bad(f"header has no '# {key}:' line", path)
    from ..checks import loads_json

    fp_text, fp_line = head["fingerprint"]
    try:
        fp = Fingerprint.from_dict(
            loads_json(fp_text, max_depth=_HEADER_MAX_DEPTH, what="header fingerprint")
        )
    except (AttributeError, InputError) as exc:
        raise _bad(
            f"header fingerprint is not a valid pipeline fingerprint ({exc})", path, fp_line
        ) from None
    cohort: dict = {}
    if "cohort" in head:
        c_text, c_line = head["cohort"]
        try:
            cohort = loads_json(c_text, max_depth=_HEADER_MAX_DEPTH, what="header cohort")
        except InputError as exc:
            raise _bad(f"header cohort is not JSON ({exc})", path, c_line) from None
        if not isinstance(cohort, dict):
            raise _bad("header cohort must be a JSON object", path, c_line)
    return {
        "fingerprint": fp,
        "condition": head["condition"][0],
        "cohort": cohort,
        "notes": tuple(head["note"]),
    }, i


def read_norms(path: str | Path) -> Norms:
    """Read and strictly validate a norms file.

    Parameters
    ----------
    path : str | Path
        A norms table (format 3, with its ``.json`` sidecar beside it) or a format-2 file with
        a commented header (see FORMAT.md).

    Returns
    -------
    Norms
        Validated, with ``path`` and ``sha256`` of the file.

    Raises
    ------
    InputError
        One-line message naming the file (and line) for any problem: bad header, missing columns,
        NaN, SD <= 0, unknown transform, duplicate rows, overlapping age ranges ...
    """
    from ..checks import read_bytes_bounded

    path = Path(path)
    raw = read_bytes_bounded(path, max_bytes=NORMS_MAX_BYTES, what="norms file")
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise InputError("norms file is not UTF-8 text", path=path) from None
    lines = text.splitlines()
    if lines and lines[0].split("\t")[0] == COLUMNS[0] and not lines[0].startswith("#"):
        head, i = _parse_sidecar(path), 0  # format 3: plain table + JSON sidecar
    else:
        head, i = _parse_header(lines, path)  # format 2: commented header
    if i >= len(lines):
        raise _bad("no column header line after the comments", path)
    names = lines[i].split("\t")
    missing = [c for c in COLUMNS if c not in names]
    if missing:
        raise _bad(f"missing columns {missing}; required: {list(COLUMNS)}", path, i + 1)
    extra = [c for c in names if c not in COLUMNS]
    if extra or len(set(names)) != len(names):
        raise _bad(
            f"unknown or repeated columns {extra or names}; allowed: {list(COLUMNS)}", path, i + 1
        )
    rows = []
    first = i + 2
    for k, line in enumerate(lines[i + 1 :]):
        if not line.strip():
            raise _bad("blank line in the table", path, first + k)
        cells = line.split("\t")
        if len(cells) != len(names):
            raise _bad(f"{len(cells)} fields, expected {len(names)}", path, first + k)
        rows.append(cells)
    table = pd.DataFrame(rows, columns=names, dtype=object)
    for c in _FLOAT_COLUMNS + _INT_COLUMNS:
        cells = table[c].to_numpy(dtype=object)
        try:  # float() of every cell, in one cast ("" and "n/a" missing)
            table[c] = np.where((cells == "") | (cells == NA), "nan", cells).astype(float)
            continue
        except ValueError:
            pass
        for k, v in enumerate(cells.tolist()):  # name the first bad cell
            try:
                float(v) if v not in ("", NA) else math.nan
            except ValueError:
                raise _bad(f"column {c!r} is not a number ({v!r})", path, first + k) from None
    table = validate_table(table, path=path, first_line=first)
    token = _TABLE_VALIDATED.set(True)
    try:
        return Norms(
            table=table,
            fingerprint=head["fingerprint"],
            condition=head["condition"],
            cohort=head["cohort"],
            notes=head["notes"],
            path=path,
            sha256=sha256_file(path),
        )
    finally:
        _TABLE_VALIDATED.reset(token)


def _age_gaps(table) -> int:
    """Number of gaps between consecutive age ranges of one quantity, summed over quantities.

    One sort of the whole table by quantity and ``age_min`` (not one sort per quantity: a
    coupling norms file has ~17,000 quantities); rows with a missing quantity key are left out,
    as ``groupby`` leaves them out.
    """
    keys = list(QUANTITY_COLUMNS)
    a = table.dropna(subset=keys).sort_values([*keys, "age_min"], kind="mergesort")
    k = a[keys].to_numpy()
    same = (k[1:] == k[:-1]).all(axis=1)
    return int(np.sum(same & (a["age_min"].to_numpy()[1:] > a["age_max"].to_numpy()[:-1])))


def check_norms(path: str | Path) -> str:
    """Validate a norms file and summarise it (for ``sourcelab norms check``).

    Parameters
    ----------
    path : str | Path
        A norms file.

    Returns
    -------
    str
        Multi-line summary: format, sha256, fingerprint, condition, cohort, rows by kind and
        model, SD range, atlases/ROIs/channels/bands/measures, age coverage and gaps, and
        quantities whose band set is incomplete.

    Raises
    ------
    InputError
        If the file is invalid.
    """
    nm = read_norms(path)
    t = nm.table
    fp = nm.fingerprint
    lines = [
        f"{nm.path}: valid sourcelab norms file",
        f"sha256: {nm.sha256}",
        f"condition: {nm.condition}",
        "cohort: " + ", ".join(f"{k}={v}" for k, v in sorted(nm.cohort.items())),
        f"fingerprint: method={fp.method} orientation={fp.orientation} "
        f"lambda2={fp.lambda2:g} reference={fp.reference} epoch_s={fp.epoch_s:g} "
        f"pipeline_version={fp.pipeline_version} headmodel={fp.headmodel_sha256[:12]}",
        "fingerprint bands: " + ", ".join(f"{b[0]} {b[1]:g}-{b[2]:g} Hz" for b in fp.bands),
    ]
    lines += [f"note: {n}" for n in nm.notes]
    lines.append(
        f"rows: {len(t)} ("
        + ", ".join(f"{k} {m}: {c}" for (k, m), c in t.groupby(["kind", "model"]).size().items())
        + ")"
    )
    lines.append(
        f"sd (transformed scale): {t['sd'].min():.4g} to {t['sd'].max():.4g}; "
        f"n per row: {int(t['n'].min())} to {int(t['n'].max())}"
    )
    fp_bands = [b[0] for b in fp.bands]
    problems = 0
    for kind, g in t.groupby("kind"):
        bands = sorted(set(g["band"]), key=lambda b: fp_bands.index(b) if b in fp_bands else 99)
        if kind in ("roi", "edge"):
            n_roi = g[["atlas", "name", "hemisphere"]].drop_duplicates().groupby("atlas").size()
            noun = "ROIs" if kind == "roi" else "edges"
            where = ", ".join(f"{a}: {c} {noun}" for a, c in n_roi.items())
        else:
            where = f"{g['name'].nunique()} {'channels' if kind == 'sensor' else 'pairs'}"
        lines.append(
            f"{kind}: {where}; bands {bands}; measures {sorted(set(g['measure']))}; "
            f"ages {g['age_min'].min():g}-{g['age_max'].max():g} y"
        )
        missing_bands = sorted(set(fp_bands) - set(g["band"]))
        if missing_bands:
            problems += 1
            lines.append(f"  WARNING {kind}: fingerprint bands without norms: {missing_bands}")
        per_q = g.groupby(["atlas", "name", "hemisphere", "measure"])["band"].nunique()
        incomplete = int((per_q < len(set(g["band"]))).sum())
        if incomplete:
            problems += 1
            lines.append(f"  WARNING {kind}: {incomplete} ROI/channel x measure lack some bands")
        gaps = _age_gaps(g)
        if gaps:
            problems += 1
            lines.append(f"  WARNING {kind}: {gaps} gaps between age ranges")
        spans = g.groupby(list(QUANTITY_COLUMNS)).agg(lo=("age_min", "min"), hi=("age_max", "max"))
        if spans["lo"].nunique() > 1 or spans["hi"].nunique() > 1:
            problems += 1
            lines.append(f"  WARNING {kind}: quantities cover different age spans")
    lines.append("coverage: complete" if not problems else f"coverage: {problems} warnings")
    return "\n".join(lines)
