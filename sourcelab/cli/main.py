"""``sourcelab`` command line: one sub-command per module, errors as one line and exit code 2."""

from __future__ import annotations

import argparse
import importlib
import logging
import sys

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


def _get_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="sourcelab",
        description="Source-level quantitative EEG: sLORETA band power on the fsaverage template, "
                    "Brodmann areas and networks, z-scores against norms. Supports assessment and "
                    "research; not a diagnostic device.")
    p.add_argument("--version", action="version", version=f"sourcelab {__version__}")
    p.add_argument("-v", "--verbose", action="count", default=0, help="more log output")
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


def main(argv: list[str] | None = None) -> int:
    """Run the CLI; returns the exit code (0 ok, 2 user error)."""
    parser = _get_parser()
    argv = list(sys.argv[1:] if argv is None else argv)
    if (len(argv) >= 2 and argv[0] == "targets" and argv[1] not in _TARGET_ACTIONS
            and not argv[1].startswith("-")):
        argv.insert(1, "list")
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse already printed a one-line usage error
        return int(exc.code or 0)
    level = logging.WARNING - 10 * min(args.verbose, 2)
    logger = logging.getLogger("sourcelab")
    if not any(isinstance(h, _StderrHandler) for h in logger.handlers):
        h = _StderrHandler()
        h.setFormatter(logging.Formatter("sourcelab: %(levelname)s: %(message)s"))
        logger.addHandler(h)
    logger.setLevel(level)
    try:
        return int(args.func(args) or 0)
    except InputError as exc:
        msg = " ".join(str(exc).split())
        print(f"sourcelab: error: {msg}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("sourcelab: interrupted", file=sys.stderr)
        return 130


def run() -> None:  # console-script entry point
    sys.exit(main())


if __name__ == "__main__":
    run()
