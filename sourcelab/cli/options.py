"""Options that several ``sourcelab`` sub-commands share: one home for each option's name,
choices and usual help text, and for reading them back (configuration, progress bars).

Each ``add_*`` function extends a sub-command parser in place; a sub-command whose option means
something narrower passes its own ``help`` (and, where it differs, its own default).
"""

from __future__ import annotations

from .._docs import docdict
from ..cautions import SHORT
from ..constants import INVERSE_METHODS, ORIENTATIONS

#: Usual help of ``--out`` when it names an output folder.
OUT_HELP = "output folder (replaced atomically)"
#: Hemisphere choices of options naming one ROI.
HEMISPHERES = ("left", "right", "both")
#: Execution engines of commands that analyse many recordings.
ENGINES = ("serial", "processes", "dask")
#: Help of ``--snr`` (amplitude ratio; the default is AnalysisConfig's).
SNR_HELP = "amplitude SNR; lambda2 = 1/SNR^2 (default 3)"


def subcommand(name: str, run, arguments, *, help: str, description: str | None = None):
    """Make a sub-command module's ``add_parser(sub)`` (one home for the registration).

    Parameters
    ----------
    name : str
        The sub-command (``sourcelab NAME``).
    run : callable
        ``run(args) -> int``, the parser's ``func``.
    arguments : callable
        ``arguments(p)`` adds the sub-command's arguments (and actions) to its parser ``p``.
    help : str
        Its line in ``sourcelab --help``.
    description : str, optional
        The text of ``sourcelab NAME --help``.

    Returns
    -------
    add_parser : callable
        ``add_parser(sub)``: adds the sub-command to the ``sourcelab`` parser's sub-parsers
        ``sub``, as every module of :data:`sourcelab.cli.main.COMMANDS` provides.
    """

    def add_parser(sub) -> None:
        p = sub.add_parser(name, help=help, description=description)
        arguments(p)
        p.set_defaults(func=run)

    add_parser.__doc__ = f"Register the ``{name}`` sub-command.\n\n" + docdict["cli_add_parser"]
    return add_parser


def with_cautions(doc: str) -> str:
    """A sub-command's description: its module docstring's first paragraph, then the short
    cautions (:data:`sourcelab.cautions.SHORT`).

    Parameters
    ----------
    doc : str
        The module docstring.

    Returns
    -------
    str
        One paragraph of text.
    """
    return doc.split("\n\n")[0] + " " + SHORT


def add_out(p, help: str = OUT_HELP, **kwargs) -> None:
    """``--out``: required unless a ``default`` is given.

    Parameters
    ----------
    p : argparse.ArgumentParser
        Sub-command parser, extended in place.
    help : str
        Help text (default :data:`OUT_HELP`).
    **kwargs
        Passed to ``add_argument`` (e.g. ``default``, which makes the option optional).
    """
    kwargs.setdefault("required", "default" not in kwargs)
    p.add_argument("--out", help=help, **kwargs)


def add_inverse_options(p, *, defaults: bool = False) -> None:
    """``--method``, ``--orientation`` and ``--snr`` (amplitude SNR, λ² = 1/SNR²).

    Parameters
    ----------
    p : argparse.ArgumentParser
        Sub-command parser, extended in place.
    defaults : bool
        False (analyses): each option is None unless given, so that the configuration file's
        value applies.  True (commands without a configuration file): sLORETA, fixed
        orientation and SNR 3, named in the help.
    """
    if defaults:
        p.add_argument(
            "--method",
            choices=INVERSE_METHODS,
            default="sLORETA",
            help="inverse method (default sLORETA)",
        )
        p.add_argument(
            "--orientation",
            choices=ORIENTATIONS,
            default="fixed",
            help="source orientation (default fixed)",
        )
        p.add_argument("--snr", type=float, default=3.0, help=SNR_HELP)
        return
    p.add_argument("--method", choices=INVERSE_METHODS, help="inverse method")
    p.add_argument("--orientation", choices=ORIENTATIONS, help="source orientation")
    p.add_argument("--snr", type=float, help=SNR_HELP)


def add_common_options(p) -> None:
    """Options shared by the analysing commands (analyze, batch, norms build).

    Parameters
    ----------
    p : argparse.ArgumentParser
        Sub-command parser to extend in place with ``--config``, the inverse options of
        :func:`add_inverse_options` (no defaults) and the output options of
        :func:`add_output_options`.
    """
    p.add_argument("--config", metavar="TOML", help="analysis configuration file")
    add_inverse_options(p)
    add_output_options(p)


def add_output_options(p) -> None:
    """Options that skip the slow outputs (analyze, demo, batch, norms build).

    Parameters
    ----------
    p : argparse.ArgumentParser
        Sub-command parser to extend in place with ``--no-figures``, ``--no-report`` and
        ``--no-maps``.
    """
    p.add_argument("--no-figures", action="store_true", help="tables and provenance only")
    p.add_argument("--no-report", action="store_true", help="skip the HTML report")
    p.add_argument(
        "--no-maps", action="store_true", help="skip the source-map exports (STC, GIfTI, NIfTI)"
    )


def add_engine_options(p, *, workers_help: str, engine_help: str, scheduler_help: str) -> None:
    """``--workers`` (default 1), ``--engine`` and ``--scheduler`` (a Dask address).

    Parameters
    ----------
    p : argparse.ArgumentParser
        Sub-command parser, extended in place.
    workers_help, engine_help, scheduler_help : str
        Help texts (what the workers do differs between commands).
    """
    p.add_argument("--workers", type=int, default=1, help=workers_help)
    p.add_argument("--engine", choices=ENGINES, help=engine_help)
    p.add_argument("--scheduler", metavar="ADDRESS", help=scheduler_help)


def add_hemisphere(p, help: str | None = None) -> None:
    """``--hemisphere`` of an ROI named by the command line (default None: unique name).

    Parameters
    ----------
    p : argparse.ArgumentParser
        Sub-command parser, extended in place.
    help : str, optional
        Help text.
    """
    p.add_argument("--hemisphere", choices=HEMISPHERES, default=None, help=help)


def config_from_args(args):
    """The analysis configuration from ``--config`` with the command-line overrides applied.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed arguments with ``config`` (TOML path or None), ``method``, ``orientation`` and
        ``snr`` (each None when not given on the command line).

    Returns
    -------
    config : sourcelab.config.AnalysisConfig
        The configuration read by :func:`sourcelab.config.load_config`; flags override the
        file.
    """
    from ..config import load_config

    return load_config(args.config, method=args.method, orientation=args.orientation, snr=args.snr)


def progress_flag(args) -> bool | None:
    """Progress bars: off with ``-q`` (or ``--no-progress``), else only when standard error is
    a terminal (None).

    Parameters
    ----------
    args : argparse.Namespace
        Parsed arguments; ``quiet`` and ``no_progress`` are read when present.

    Returns
    -------
    enabled : bool or None
        False with ``-q`` or ``--no-progress``; None (decide from whether standard error is a
        terminal) otherwise.
    """
    off = getattr(args, "quiet", False) or getattr(args, "no_progress", False)
    return False if off else None
