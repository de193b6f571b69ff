"""Error types.  User mistakes raise :class:`InputError`; the CLI prints it as one line, exit 2."""

from __future__ import annotations

from pathlib import Path


class InputError(ValueError):
    """A problem with something the user gave us (a file, a parameter, norms).

    Parameters
    ----------
    message : str
        What is wrong, in one line, naming the allowed values where useful.
    path : str | Path | None
        The file concerned, if any; it is prefixed to the message.
    field : str | None
        The option or configuration field concerned, if any (the message already names it;
        kept so that a caller can add where the value came from, see
        :func:`sourcelab.config.load_config`).
    """

    def __init__(self, message: str, *, path: str | Path | None = None, field: str | None = None):
        self.path = None if path is None else Path(path)
        self.problem = message
        self.field = field
        super().__init__(f"{path}: {message}" if path is not None else message)
