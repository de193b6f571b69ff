"""``sourcelab`` command line: one sub-command per module, errors as one line and exit code 2.

Conventions (every sub-command):

* A user mistake (bad file, option or value) prints **one line** on stderr,
  ``sourcelab: error: <file or option>: <problem>``, and exits with code 2; argparse's own
  errors are one line too, with a hint to ``--help``.  No traceback (``-v`` shows one for an
  internal error, which exits with code 1).
* :func:`preflight` checks every input path, every numeric option and every output
  (``--out``, ``--bids-root``, ``--tsv``, ``--plot``; writability, name length, that an existing
  output is sourcelab's own) **before any computation**; see :mod:`sourcelab.provenance`.
* A closed stdout (``sourcelab atlas show brodmann | head -1``) is not an error: the rest of the
  printed text is dropped silently and the command still writes its files and exits normally.
* A value that looks like a negative number is taken as the value of the option before it
  (``--select -5-100``, ``--snr -1``), so that the option's own check can explain what is wrong
  with it, instead of argparse calling it an unknown option.  ``--select -5-100`` is therefore a
  time range starting at -5 s, refused because times start at 0 s.
"""

from __future__ import annotations

import argparse
import importlib
import io
import logging
import os
import re
import sys
from pathlib import Path

from .. import __version__
from ..errors import InputError

#: sub-command name -> module (each has ``add_parser(subparsers)`` and ``run(args) -> int``)
COMMANDS = {
    "analyze": "sourcelab.cli.analyze",
    "demo": "sourcelab.cli.demo",
    "atlas": "sourcelab.cli.atlas",
    "norms": "sourcelab.cli.norms",
    "targets": "sourcelab.cli.targets",
    "leakage": "sourcelab.cli.leakage",
    "batch": "sourcelab.cli.batch",
    "compare": "sourcelab.cli.compare",
}

#: ``sourcelab targets RESULT_DIR`` is short for ``sourcelab targets list RESULT_DIR``
_TARGET_ACTIONS = ("list", "export", "replay", "stream")

#: Largest input files accepted by the pre-flight (beyond them the readers would only exhaust
#: memory): configuration and ROI files are text of a few KB; norms tables a few MB;
#: participants tables a few hundred KB.
_MAX_BYTES = {
    "--config": 1 << 20,
    "--rois": 16 << 20,
    "--norms": 256 << 20,
    "--participants": 64 << 20,
    "target": 64 << 20,
}
#: Plausible ages, years (the norms' own ranges are checked when z-scores are computed).
_AGE_RANGE = (0.0, 130.0)


class _UsageError(Exception):
    def __init__(self, prog: str, message: str):
        super().__init__(message)
        self.prog = prog


class _Parser(argparse.ArgumentParser):
    """An ArgumentParser whose errors become one line (raised, printed by :func:`main`)."""

    def error(self, message):  # noqa: D401 - argparse API
        raise _UsageError(self.prog, message)


def _get_parser() -> argparse.ArgumentParser:
    p = _Parser(
        prog="sourcelab",
        description="Source-level quantitative EEG: sLORETA band power on the fsaverage template, "
        "Brodmann areas and networks, z-scores against norms. Supports assessment and "
        "research; not a diagnostic device.",
    )
    p.add_argument("--version", action="version", version=f"sourcelab {__version__}")
    p.add_argument("-v", "--verbose", action="count", default=0, help="more log output")
    p.add_argument(
        "-q",
        "--quiet",
        action="store_true",
        help="no progress bars and no warnings on the terminal (errors still show; "
        "warnings are kept in provenance.json)",
    )
    sub = p.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for name, modname in COMMANDS.items():
        importlib.import_module(modname).add_parser(sub)
    return p


class _StderrHandler(logging.StreamHandler):
    """Log to whatever ``sys.stderr`` is at the time of the message."""

    def __init__(self):
        super().__init__()

    @property
    def stream(self):
        return sys.stderr

    @stream.setter
    def stream(self, value):
        pass


class _PipeGuard(io.TextIOBase):
    """A stdout that goes quiet once its reader has gone (``| head``), instead of raising.

    On the first ``BrokenPipeError`` the process's file descriptor 1 is pointed at
    ``os.devnull`` (so that the interpreter's final flush is quiet too); later writes are dropped.
    """

    def __init__(self, stream):
        self._stream = stream
        self.broken = False

    def _gone(self):
        self.broken = True
        try:
            fd = self._stream.fileno()
            null = os.open(os.devnull, os.O_WRONLY)
            os.dup2(null, fd)
            os.close(null)
        except (OSError, ValueError, io.UnsupportedOperation, AttributeError):
            pass

    def write(self, s):
        if self.broken:
            return len(s)
        try:
            return self._stream.write(s)
        except BrokenPipeError:
            self._gone()
            return len(s)

    def flush(self):
        if self.broken:
            return
        try:
            self._stream.flush()
        except BrokenPipeError:
            self._gone()

    def writable(self):
        return True

    def isatty(self):
        return False if self.broken else self._stream.isatty()

    def fileno(self):
        return self._stream.fileno()

    @property
    def encoding(self):
        return getattr(self._stream, "encoding", "utf-8")


def _value_options(parser: argparse.ArgumentParser) -> tuple[set, set]:
    """(options taking one value, every option string) across the parser tree."""
    takes, every = set(), set()
    stack = [parser]
    while stack:
        p = stack.pop()
        for a in p._actions:
            if isinstance(a, argparse._SubParsersAction):
                stack.extend(a.choices.values())
                continue
            every.update(a.option_strings)
            if (
                a.option_strings
                and a.nargs is None
                and a.const is None
                and not isinstance(
                    a,
                    (
                        argparse._StoreTrueAction,
                        argparse._StoreFalseAction,
                        argparse._CountAction,
                        argparse._VersionAction,
                        argparse._HelpAction,
                    ),
                )
            ):
                takes.update(a.option_strings)
    return takes, every


_NEGATIVE_LOOKING = re.compile(r"^-[\d.]")


def _join_negative_values(argv: list[str], parser) -> list[str]:
    """``--opt -5-100`` -> ``--opt=-5-100`` when ``--opt`` takes a value and ``-5-100`` looks
    like a (negative) number rather than an option."""
    takes, every = _value_options(parser)
    out, i = [], 0
    while i < len(argv):
        tok = argv[i]
        if tok == "--":
            out.extend(argv[i:])
            break
        nxt = argv[i + 1] if i + 1 < len(argv) else None
        if tok in takes and nxt is not None and _NEGATIVE_LOOKING.match(nxt) and nxt not in every:
            out.append(f"{tok}={nxt}")
            i += 2
            continue
        out.append(tok)
        i += 1
    return out


# --------------------------------------------------------------------------------------------
# Pre-flight: every input, option and output checked before any computation
# --------------------------------------------------------------------------------------------


def _opt(args, name):
    return getattr(args, name, None)


def _recording_inputs(path_text) -> list[Path]:
    """The recording and the files it brings (BrainVision data and marker, EEGLAB data)."""
    from ..checks import check_path

    path = check_path("recording", path_text, kind="any")
    files = [path]
    if path.is_file():
        from ..intake import files as intake_files

        suffix = intake_files._suffix(path)
        fmt = intake_files.READERS.get(suffix, ("?", None))[0]
        if fmt in ("BrainVision", "EEGLAB"):
            files = intake_files._companions(path, fmt)
    return files


def _check_bids_root(args, inputs) -> None:
    from ..checks import loads_json, read_bytes_bounded
    from ..exports import bids_label
    from ..provenance import check_output_dir

    root = Path(args.bids_root)
    if str(args.bids_root).strip() == "":
        raise InputError("--bids-root: an empty path")
    if root.exists() and not root.is_dir():
        raise InputError("--bids-root: is a file, not a folder", path=root)
    if not args.participant_id:
        raise InputError("--bids-root needs --participant-id")
    try:
        label = bids_label(args.participant_id)
    except InputError as exc:
        raise InputError(f"--participant-id: {exc.problem}") from None
    deriv = root / "derivatives" / "sourcelab"
    for p in (root / "derivatives", deriv):
        if p.exists() and not p.is_dir():
            raise InputError("--bids-root: is a file, not a folder", path=p)
    desc = deriv / "dataset_description.json"
    if os.path.lexists(desc):
        try:
            d = loads_json(read_bytes_bounded(desc, max_bytes=1 << 20), where=desc)
            ours = d["GeneratedBy"][0]["Name"] == "sourcelab"
        except (InputError, KeyError, IndexError, TypeError):
            ours = False
        if desc.is_symlink() or not ours:
            raise InputError(
                "--bids-root: exists and was not written by sourcelab; sourcelab "
                "does not overwrite it",
                path=desc,
            )
    check_output_dir(deriv / f"sub-{label}", kind="bids", inputs=inputs, name="--bids-root")


def _check_config_inputs(args, inputs: list) -> None:
    from ..checks import check_path

    for opt in ("config", "norms", "rois", "participants"):
        value = _opt(args, opt)
        if value is not None:
            name = f"--{opt}"
            inputs.append(check_path(name, value, kind="file", max_bytes=_MAX_BYTES[name]))


def preflight(args) -> None:
    """Check every input path, numeric option and output of a parsed command line.

    Runs before the command computes anything.  Raises :class:`InputError` (one line) for the
    first problem found; creates nothing (it may remove stale temporary folders of killed
    sourcelab runs beside an output).

    Parameters
    ----------
    args : argparse.Namespace
        The parsed command line; ``command`` (and ``atlas_cmd``, ``norms_cmd`` or
        ``targets_cmd``) select the checks.  Ages are checked against 0-130 years, ``--snr``
        against (0, 1000], ``--duration`` and ``--timeout`` (s) against (0, 1e7].

    Raises
    ------
    InputError
        For the first bad input path, numeric option or output, naming it.
    """
    from ..checks import check_number, check_path
    from ..provenance import check_output_dir, check_output_file

    cmd = args.command
    inputs: list[Path] = []
    if _opt(args, "age") is not None:
        check_number("--age", args.age, low=_AGE_RANGE[0], high=_AGE_RANGE[1])
    for opt, low, high in (
        ("workers", 1, 1024),
        ("top", 1, 100_000),
        ("max_n", 1, 10**9),
        ("filter_order", 1, 12),
    ):
        if _opt(args, opt) is not None:
            check_number(
                "--" + {"max_n": "max"}.get(opt, opt).replace("_", "-"),
                getattr(args, opt),
                kind=int,
                low=low,
                high=high,
            )
    if cmd == "leakage":
        check_number("--snr", args.snr, low=0.0, high=1000.0, low_open=True)
    _check_config_inputs(args, inputs)
    if cmd == "analyze":
        from .analyze import parse_select

        inputs.extend(_recording_inputs(args.recording))
        parse_select(args.select)
        check_output_dir(args.out, kind="analysis", inputs=inputs)
        if args.bids_root:
            _check_bids_root(args, inputs)
    elif cmd == "demo":
        if args.rebuild_norms:
            out = check_output_file(
                args.rebuild_norms, kind="norms", name="--rebuild-norms", suffixes=(".tsv",)
            )
            check_output_file(out.with_suffix(".json"), kind="sidecar", name="--rebuild-norms")
        else:
            check_output_dir(args.out, kind="demo")
    elif cmd == "atlas" and args.atlas_cmd == "plot":
        check_output_file(args.out, kind="png", suffixes=(".png",))
    elif cmd == "norms":
        if args.norms_cmd == "check":
            check_path("norms file", args.norms, kind="file", max_bytes=_MAX_BYTES["--norms"])
        else:
            cohort = check_path("cohort", args.cohort, kind="dir")
            inputs.append(cohort)
            out = check_output_file(args.out, kind="norms", suffixes=(".tsv",), inputs=inputs)
            check_output_file(out.with_suffix(".json"), kind="sidecar", inputs=inputs)
            for suffix, kind in (("_calibration.tsv", "calibration"), ("_calibration.png", "png")):
                check_output_file(out.with_name(out.stem + suffix), kind=kind, inputs=inputs)
            if Path(args.out).resolve().is_relative_to(cohort.resolve()):
                raise InputError(
                    "--out: lies inside the cohort folder; write the norms elsewhere", path=args.out
                )
    elif cmd == "targets":
        if args.targets_cmd in ("list", "export"):
            check_path("result folder", args.result_dir, kind="dir")
        if args.targets_cmd == "list" and args.out is not None:
            out = check_output_file(args.out, kind="candidates", suffixes=(".tsv", ".txt"))
            check_output_file(out.with_suffix(".json"), kind="sidecar", name="--out")
        elif args.targets_cmd == "export":
            check_output_file(args.out, kind="target", suffixes=(".json",), inputs=inputs)
        elif args.targets_cmd == "replay":
            inputs.append(
                check_path("target", args.target, kind="file", max_bytes=_MAX_BYTES["target"])
            )
            inputs.extend(_recording_inputs(args.recording))
            check_output_dir(args.out, kind="replay", inputs=inputs)
        elif args.targets_cmd == "stream":
            check_path("target", args.target, kind="file", max_bytes=_MAX_BYTES["target"])
            for opt in ("duration", "timeout"):
                if getattr(args, opt) is not None:
                    check_number(f"--{opt}", getattr(args, opt), low=0.0, high=1e7, low_open=True)
            if args.updates is not None:
                check_number("--updates", args.updates, kind=int, low=1, high=10**9)
            if args.log is not None:
                check_output_file(
                    args.log, kind="stream-log", name="--log", suffixes=(".tsv", ".txt")
                )
    elif cmd == "compare":
        for folder in args.results:
            inputs.append(check_path("result folder", folder, kind="dir"))
        for target in args.target or ():
            inputs.append(check_path("target", target, kind="file", max_bytes=_MAX_BYTES["target"]))
        check_number("--n-boot", args.n_boot, kind=int, low=100, high=100_000)
        check_output_dir(args.out, kind="compare", inputs=inputs)
    elif cmd == "leakage":
        if args.tsv is not None:
            check_output_file(args.tsv, kind="leakage", name="--tsv", suffixes=(".tsv",))
        if args.plot is not None:
            check_output_file(args.plot, kind="png", name="--plot", suffixes=(".png",))
        if (
            args.tsv is not None
            and args.plot is not None
            and Path(args.tsv).resolve() == Path(args.plot).resolve()
        ):
            raise InputError("--tsv and --plot name the same file", path=args.tsv)
    elif cmd == "batch":
        for text in args.inputs:
            if not any(c in text for c in "*?[") and os.path.lexists(text):
                inputs.append(Path(text))
        check_output_dir(args.out, kind="batch", inputs=inputs)


def main(argv: list[str] | None = None) -> int:
    """Run the CLI; returns the exit code (0 ok, 1 internal error or failed batch items, 2 user
    error).

    Parameters
    ----------
    argv : list of str, optional
        Arguments without the program name (default ``sys.argv[1:]``).  ``targets RESULT_DIR``
        is read as ``targets list RESULT_DIR``.

    Returns
    -------
    int
        0 on success (also for ``--help`` and ``--version``), 1 for an internal error or failed
        batch items, 2 for a user error (one line on stderr, no traceback), 130 when
        interrupted.  With ``-v`` an internal error is raised with its traceback instead.
    """
    parser = _get_parser()
    argv = list(sys.argv[1:] if argv is None else argv)
    if (
        len(argv) >= 2
        and argv[0] == "targets"
        and argv[1] not in _TARGET_ACTIONS
        and not argv[1].startswith("-")
    ):
        argv.insert(1, "list")
    argv = _join_negative_values(argv, parser)
    try:
        args = parser.parse_args(argv)
    except _UsageError as exc:
        msg = " ".join(str(exc).split())
        print(f"sourcelab: error: {msg} (see '{exc.prog} --help')", file=sys.stderr)
        return 2
    except SystemExit as exc:  # --help, --version
        return int(exc.code or 0)
    level = logging.ERROR if args.quiet else logging.WARNING - 10 * min(args.verbose, 2)
    logger = logging.getLogger("sourcelab")
    if not any(isinstance(h, _StderrHandler) for h in logger.handlers):
        h = _StderrHandler()
        h.setFormatter(logging.Formatter("sourcelab: %(levelname)s: %(message)s"))
        logger.addHandler(h)
    logger.setLevel(level)
    real_stdout = sys.stdout
    guard = _PipeGuard(real_stdout)
    sys.stdout = guard
    try:
        preflight(args)
        return int(args.func(args) or 0)
    except InputError as exc:
        msg = " ".join(str(exc).split())
        print(f"sourcelab: error: {msg}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("sourcelab: interrupted", file=sys.stderr)
        return 130
    except OSError as exc:  # the system refused (disk full, permissions changed meanwhile)
        where = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
        reason = exc.strerror or " ".join(str(exc).split())
        print(f"sourcelab: error: {where}{reason}", file=sys.stderr)
        return 2
    except Exception as exc:
        if args.verbose:
            raise
        msg = " ".join(str(exc).split())[:300]
        print(
            f"sourcelab: internal error: {type(exc).__name__}: {msg} (please report it; run "
            "with -v for details)",
            file=sys.stderr,
        )
        return 1
    finally:
        guard.flush()
        sys.stdout = real_stdout


def run() -> None:  # console-script entry point
    """Console-script entry point: exit with :func:`main`'s code."""
    sys.exit(main())


if __name__ == "__main__":
    run()
