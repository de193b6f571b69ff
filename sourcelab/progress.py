"""Stage progress for the things a person waits for (analysis, demo, norms, batches).

A bar is drawn on standard error only when it is a terminal (tqdm's ``disable=None``); piped or
redirected output stays clean, and ``-q`` on the command line turns it off.
"""

from __future__ import annotations

import contextlib
import sys


class Stages:
    """A progress bar over named stages (``with Stages([...]) as st: st.step("reading")``).

    Parameters
    ----------
    names : sequence of str
        The stages, in order.
    desc : str
        Label at the start of the bar.
    enabled : bool | None
        True: always; False: never; None: only when standard error is a terminal.
    """

    def __init__(self, names, *, desc: str = "sourcelab", enabled: bool | None = None):
        self.names = list(names)
        self.desc = desc
        self.enabled = enabled
        self._bar = None
        self._done = 0

    def __enter__(self) -> Stages:
        # None: a bar only on a terminal (as tqdm's disable=None), and tqdm imported only then
        if self.enabled is True or (self.enabled is None and _stderr_is_terminal()):
            from tqdm import tqdm

            self._bar = tqdm(
                total=len(self.names),
                desc=self.desc,
                unit="stage",
                leave=False,
                disable=None if self.enabled is None else False,
                bar_format="{desc}: {n_fmt}/{total_fmt} {postfix} [{elapsed}]",
            )
        return self

    def step(self, name: str) -> None:
        """Start stage ``name`` (the previous one is counted as done).

        Parameters
        ----------
        name : str
            The stage, shown after the bar.
        """
        if self._bar is not None:
            if self._done:
                self._bar.update(1)
            self._bar.set_postfix_str(name, refresh=True)
        self._done += 1

    def __exit__(self, *exc) -> None:
        if self._bar is not None:
            with contextlib.suppress(Exception):
                self._bar.update(1)
                self._bar.close()


def _stderr_is_terminal() -> bool:
    try:
        return bool(sys.stderr.isatty())
    except (AttributeError, ValueError):  # no standard error, or a closed one
        return False
