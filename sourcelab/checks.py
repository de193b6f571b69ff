"""The one option checker: every bad option, field or file is refused here, worded alike.

In the style of MNE-Python's ``_check_option`` / ``_validate_type``: small functions that take the
*name* the user knows (``"--snr"``, ``"snr"``, ``"power.step_s"``), the value, what is allowed and
optionally *where* the value came from (a file); they return the value converted to its canonical
type, or raise :class:`~sourcelab.errors.InputError` with one line::

    <where>: <name>: must be > 0, got -1
    <where>: <name>: 'MNE' is not one of sLORETA, eLORETA, dSPM
    <where>: <name>: must be an integer, got 2.5

Also the bounded readers for files a user hands us (:func:`read_bytes_bounded`,
:func:`load_json`, :func:`loads_json`): a size limit before anything is parsed, a nesting-depth
limit (JSON nested 100,000 deep is an error message, not a ``RecursionError``) and finite numbers
only (JSON has no NaN; ``NaN``/``Infinity`` literals and ``1e999`` are refused).

This module imports nothing from sourcelab except :mod:`sourcelab.errors`.
"""

from __future__ import annotations

import json
import math
import numbers
import os
import stat
from collections.abc import Iterable
from pathlib import Path

from .errors import InputError

__all__ = [
    "check_option",
    "check_type",
    "check_number",
    "check_path",
    "check_text",
    "read_bytes_bounded",
    "load_json",
    "loads_json",
    "walk_json",
]

#: Default size limit of a JSON file a user gives (target definitions with network kernel rows
#: reach ~25 MB: 18,715 sources x 3 rows x 19 numbers x ~22 characters).
JSON_MAX_BYTES = 64 * 1024 * 1024
#: Default nesting limit of user JSON (sourcelab's own files nest at most 5 deep).
JSON_MAX_DEPTH = 32


def _fmt(value) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _fail(name: str, problem: str, where) -> InputError:
    return InputError(f"{name}: {problem}", path=where, field=name)


def check_type(name: str, value, types, *, where=None, type_name: str | None = None):
    """Refuse ``value`` unless it is an instance of ``types`` (``bool`` is never a number).

    Parameters
    ----------
    name : str
        Option or field name as the user knows it.
    value : object
    types : type | tuple of type
    where : str | Path | None
        File the value came from (prefixed to the message).
    type_name : str, optional
        How to call the expected type in the message.

    Returns
    -------
    value
        ``value`` unchanged.
    """
    types = types if isinstance(types, tuple) else (types,)
    numeric = any(t in (int, float, numbers.Number, numbers.Real, numbers.Integral) for t in types)
    if isinstance(value, types) and not (numeric and isinstance(value, bool) and bool not in types):
        return value
    want = type_name or " or ".join(t.__name__ for t in types)
    raise _fail(name, f"must be {want}, got {_describe(value)}", where)


def _describe(value) -> str:
    if isinstance(value, bool):
        return f"a boolean ({value!r})"
    if isinstance(value, str):
        return f"a text ({_fmt(value)})"
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, (list, tuple)):
        return "a list"
    if value is None:
        return "nothing"
    return _fmt(value)


def check_option(name: str, value, allowed: Iterable, *, where=None):
    """Refuse ``value`` unless it is one of ``allowed``.

    ``True``/``False`` are not accepted for ``1``/``0`` unless ``allowed`` itself holds booleans;
    dicts and lists are never accepted.

    Parameters
    ----------
    name : str
        Option or field name as the user knows it (``"--method"``, ``"inverse.method"``).
    value : object
    allowed : iterable
        The accepted values; listed in the message.
    where : str | Path | None
        File the value came from (prefixed to the message).

    Returns
    -------
    value
        ``value`` unchanged.

    Raises
    ------
    InputError
        ``"<where>: <name>: <value> is not one of <allowed>"``.
    """
    allowed = tuple(allowed)
    try:
        ok = value in allowed and not isinstance(value, (dict, list))
    except TypeError:  # unhashable or incomparable
        ok = False
    if ok and not any(type(value) is bool and type(a) is not bool for a in allowed):
        return value
    shown = ", ".join(str(a) for a in allowed)
    raise _fail(name, f"{_fmt(value)} is not one of {shown}", where)


def check_number(
    name: str,
    value,
    *,
    kind: type = float,
    low: float | None = None,
    high: float | None = None,
    low_open: bool = False,
    high_open: bool = False,
    none_ok: bool = False,
    where=None,
):
    """A finite real number (or integer) within bounds.

    Parameters
    ----------
    name : str
    value : object
        ``bool`` and text are refused even when they would convert; for ``kind=int`` a float
        is accepted only when it is integral (``4.0``), as JSON writers of other languages emit.
    kind : {float, int}
    low, high : float, optional
        Bounds, inclusive unless ``low_open`` / ``high_open``.
    low_open, high_open : bool
        Make the lower / upper bound exclusive.
    none_ok : bool
        Accept ``None`` (returned as is).
    where : str | Path | None

    Returns
    -------
    float | int | None
        ``value`` converted to ``kind`` (None only with ``none_ok``).
    """
    if value is None and none_ok:
        return None
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        want = "an integer" if kind is int else "a number"
        raise _fail(name, f"must be {want}, got {_describe(value)}", where)
    try:
        x = float(value)
    except (OverflowError, ValueError):  # a huge int
        raise _fail(name, f"must be a finite number, got {_fmt(value)}", where) from None
    if not math.isfinite(x):
        raise _fail(name, f"must be a finite number, got {_fmt(value)}", where)
    if kind is int:
        if isinstance(value, numbers.Integral):
            out = int(value)
        elif x == int(x):
            out = int(x)
        else:
            raise _fail(name, f"must be an integer, got {_fmt(value)}", where)
    else:
        out = x
    below = low is not None and (out <= low if low_open else out < low)
    above = high is not None and (out >= high if high_open else out > high)
    if below or above:
        raise _fail(
            name, f"must be {_range_text(low, high, low_open, high_open)}, got {_fmt(value)}", where
        )
    return out


def _range_text(low, high, low_open, high_open) -> str:
    def g(v):
        return f"{v:g}" if isinstance(v, float) else str(v)

    if low is not None and high is not None:
        return f"{'>' if low_open else '>='} {g(low)} and {'<' if high_open else '<='} {g(high)}"
    if low is not None:
        return f"{'>' if low_open else '>='} {g(low)}"
    return f"{'<' if high_open else '<='} {g(high)}"


def check_text(
    name: str, value, *, max_len: int = 200, pattern=None, allowed_text: str = "", where=None
) -> str:
    """A single-line text, at most ``max_len`` characters, optionally matching ``pattern``.

    Parameters
    ----------
    name : str
        Option or field name as the user knows it.
    value : object
        Must be a non-empty ``str`` without CR, LF, TAB or NUL.
    max_len : int
        Largest accepted length, characters.
    pattern : re.Pattern, optional
        Must match the whole text (``fullmatch``).
    allowed_text : str
        How to describe ``pattern`` in the message.
    where : str | Path | None
        File the value came from (prefixed to the message).

    Returns
    -------
    str
        ``value`` unchanged.
    """
    if not isinstance(value, str):
        raise _fail(name, f"must be a text, got {_describe(value)}", where)
    if not value.strip() or len(value) > max_len or any(c in value for c in "\r\n\t\0"):
        raise _fail(
            name,
            f"must be a non-empty single-line text of at most {max_len} "
            f"characters, got {_fmt(value)}",
            where,
        )
    if pattern is not None and not pattern.fullmatch(value):
        raise _fail(
            name, f"{_fmt(value)} is not allowed; use {allowed_text or pattern.pattern}", where
        )
    return value


def check_path(
    name: str,
    value,
    *,
    kind: str = "file",
    must_exist: bool = True,
    suffixes: Iterable[str] | None = None,
    max_bytes: int | None = None,
    where=None,
) -> Path:
    """An input path: exists, is a file / folder, has an allowed suffix, is not too large.

    Parameters
    ----------
    name : str
        Option name (``"--config"``); the path itself is named in the message.
    value : str | Path
    kind : {"file", "dir", "any"}
        ``"any"``: a file or a folder (a BIDS folder holding one recording).
    must_exist : bool
    suffixes : iterable of str, optional
        Allowed endings, lower case with the dot (``".toml"``, ``".fif.gz"``).
    max_bytes : int, optional
        Largest accepted file size.
    where : str | Path | None
        Unused for paths (the path is the "where"); kept for a uniform signature.

    Returns
    -------
    Path
        ``value`` as a Path (not resolved).
    """
    check_option("kind", kind, ("file", "dir", "any"))
    if not isinstance(value, (str, os.PathLike)) or str(value) == "":
        raise _fail(name, f"needs a path, got {_describe(value)}", where)
    path = Path(value)
    text = str(value)
    if "\0" in text:
        raise _fail(name, "the path contains a NUL character", where)
    if suffixes is not None:
        suffixes = tuple(s.lower() for s in suffixes)
        if not text.lower().endswith(suffixes):
            raise InputError(
                f"{name}: the name must end in {' or '.join(suffixes)}", path=path, field=name
            )
    try:
        st = os.stat(path)
    except FileNotFoundError:
        if not must_exist:
            return path
        what = {"file": "file", "dir": "folder", "any": "file or folder"}[kind]
        raise InputError(f"{name}: {what} not found", path=path, field=name) from None
    except NotADirectoryError:
        raise InputError(
            f"{name}: a parent of this path is a file, not a folder", path=path, field=name
        ) from None
    except OSError as exc:
        raise InputError(f"{name}: cannot access ({exc.strerror})", path=path, field=name) from None
    is_dir = stat.S_ISDIR(st.st_mode)
    if kind == "file" and is_dir:
        raise InputError(f"{name}: is a folder, not a file", path=path, field=name)
    if kind == "dir" and not is_dir:
        raise InputError(f"{name}: is not a folder", path=path, field=name)
    if not is_dir and not stat.S_ISREG(st.st_mode):
        raise InputError(f"{name}: is not a regular file", path=path, field=name)
    if not os.access(path, os.R_OK | (os.X_OK if is_dir else 0)):
        raise InputError(f"{name}: not readable (permission denied)", path=path, field=name)
    if max_bytes is not None and not is_dir and st.st_size > max_bytes:
        raise InputError(
            f"{name}: file of {st.st_size:,} bytes is larger than the {max_bytes:,}-byte limit",
            path=path,
            field=name,
        )
    return path


def read_bytes_bounded(path: str | Path, *, max_bytes: int, what: str = "file") -> bytes:
    """Read a whole file, refusing one larger than ``max_bytes``.

    The size is checked before and while reading, so a growing or special file cannot exhaust
    memory.

    Parameters
    ----------
    path : str | Path
        File to read.
    max_bytes : int
        Largest accepted size, bytes.
    what : str
        How to call the file in messages (``"target file"``).

    Returns
    -------
    bytes
        The whole file content.

    Raises
    ------
    InputError
        Not found, a folder, unreadable, or too large; the message names ``path``.
    """
    path = Path(path)
    try:
        with open(path, "rb") as f:
            st = os.fstat(f.fileno())
            if stat.S_ISDIR(st.st_mode):
                raise InputError(f"{what} is a folder, not a file", path=path)
            if st.st_size > max_bytes:
                raise InputError(
                    f"{what} of {st.st_size:,} bytes is larger than the {max_bytes:,}-byte limit",
                    path=path,
                )
            data = f.read(max_bytes + 1)
    except FileNotFoundError:
        raise InputError(f"{what} not found", path=path) from None
    except IsADirectoryError:
        raise InputError(f"{what} is a folder, not a file", path=path) from None
    except OSError as exc:
        raise InputError(f"cannot read {what} ({exc.strerror or exc})", path=path) from None
    if len(data) > max_bytes:
        raise InputError(f"{what} is larger than the {max_bytes:,}-byte limit", path=path)
    return data


def _refuse_constant(name: str):
    raise ValueError(f"{name} is not a number JSON allows")


def walk_json(obj, *, max_depth: int = JSON_MAX_DEPTH, where=None, what: str = "JSON") -> None:
    """Check a parsed JSON value iteratively: nesting depth and finite numbers.

    Parameters
    ----------
    obj : object
        Value returned by a JSON parser (dicts, lists, str, numbers, bool, None).
    max_depth : int
        Deepest accepted nesting of dicts/lists (the top level is depth 1).
    where : str | Path | None
        File named in messages.
    what : str
        How to call the value in messages.

    Raises
    ------
    InputError
        If nested deeper than ``max_depth`` or holding a non-finite float.
    """
    stack = [(obj, 1)]
    while stack:
        o, depth = stack.pop()
        if isinstance(o, dict):
            if depth > max_depth:
                raise InputError(f"{what} is nested more than {max_depth} levels deep", path=where)
            stack.extend((v, depth + 1) for v in o.values())
        elif isinstance(o, list):
            if depth > max_depth:
                raise InputError(f"{what} is nested more than {max_depth} levels deep", path=where)
            stack.extend((v, depth + 1) for v in o)
        elif isinstance(o, float) and not math.isfinite(o):
            raise InputError(
                f"{what} holds a number outside the double-precision range", path=where
            )


def loads_json(
    text: str | bytes, *, where=None, max_depth: int = JSON_MAX_DEPTH, what: str = "JSON"
):
    """Parse JSON text strictly: no ``NaN``/``Infinity``, bounded depth, finite numbers.

    Parameters
    ----------
    text : str | bytes
    where : str | Path | None
        Named in messages.
    max_depth : int
    what : str
        How to call the text in messages (``"target file"``).

    Returns
    -------
    object
        The parsed value (dicts, lists, str, finite numbers, bool, None).
    """
    if isinstance(text, bytes):
        try:
            text = text.decode("utf-8")
        except UnicodeDecodeError:
            raise InputError(f"{what} is not UTF-8 text", path=where) from None
    # Cheap pre-check so that hostile nesting never reaches the recursive decoder; brackets
    # inside strings can only over-count, which still leaves the exact check below to decide.
    if text.count("[") + text.count("{") > max_depth:
        depth = _bracket_depth(text)
        if depth > max_depth:
            raise InputError(f"{what} is nested more than {max_depth} levels deep", path=where)
    try:
        obj = json.loads(text, parse_constant=_refuse_constant)
    except RecursionError:
        raise InputError(f"{what} is nested too deeply", path=where) from None
    except ValueError as exc:  # JSONDecodeError and the refused constants
        msg = " ".join(str(exc).split())[:160]
        raise InputError(f"not valid JSON ({msg})", path=where) from None
    walk_json(obj, max_depth=max_depth, where=where, what=what)
    return obj


def _bracket_depth(text: str) -> int:
    """Maximum nesting of ``[``/``{`` outside JSON strings (linear, no recursion)."""
    import re

    import numpy as np

    stripped = re.sub(r'"(?:[^"\\]|\\.)*"', '""', text)
    b = np.frombuffer(stripped.encode("utf-8", "replace"), dtype=np.uint8)
    step = np.zeros(b.shape, dtype=np.int64)
    step[(b == ord("[")) | (b == ord("{"))] = 1
    step[(b == ord("]")) | (b == ord("}"))] = -1
    return int(np.cumsum(step).max()) if step.size else 0


def load_json(
    path: str | Path,
    *,
    max_bytes: int = JSON_MAX_BYTES,
    max_depth: int = JSON_MAX_DEPTH,
    what: str = "JSON file",
):
    """Read and parse a JSON file with :func:`read_bytes_bounded` and :func:`loads_json`.

    Parameters
    ----------
    path : str | Path
        JSON file.
    max_bytes : int
        Largest accepted file size, bytes.
    max_depth : int
        Deepest accepted nesting.
    what : str
        How to call the file in messages.

    Returns
    -------
    object
        The parsed JSON value (finite numbers only).

    Raises
    ------
    InputError
        Unreadable, too large, not UTF-8, not valid JSON, too deep or non-finite; the message
        names ``path``.
    """
    data = read_bytes_bounded(path, max_bytes=max_bytes, what=what)
    return loads_json(data, where=Path(path), max_depth=max_depth, what=what)
