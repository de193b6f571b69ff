"""Packages whose public names are imported on first use (PEP 562 module ``__getattr__``)."""

from __future__ import annotations

import importlib
import sys


def lazy_exports(package: str, homes: dict, submodules=()) -> tuple:
    """The ``__getattr__`` and ``__dir__`` of a package that imports its names on first use.

    Parameters
    ----------
    package : str
        The package's ``__name__``.
    homes : dict of str to str
        Public name -> the submodule (name relative to ``package``) that defines it.
    submodules : sequence of str
        Submodules also reachable as attributes before anything imported them.

    Returns
    -------
    getattr : callable
        The module's ``__getattr__``: imports the home of a name, keeps the value in the
        package's namespace and returns it.
    dir : callable
        The module's ``__dir__``: its namespace and the lazy names.
    """

    def __getattr__(name):
        if name in submodules:
            return importlib.import_module(f".{name}", package)
        home = homes.get(name)
        if home is None:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        value = getattr(importlib.import_module(f".{home}", package), name)
        setattr(sys.modules[package], name, value)
        return value

    def __dir__():
        return sorted(set(vars(sys.modules[package])) | set(homes))

    return __getattr__, __dir__
