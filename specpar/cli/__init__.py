"""Command line: ``specpar <command> ...``, a thin layer over the library.

One module per command, each exposing ``register(subparsers)``; options that
the Python API also takes are built from the library's declarations
(:mod:`specpar.core.options`), so defaults cannot drift. Only
:class:`specpar.core.errors.InputError` (bad user input) is turned into a
one-line message; anything else is a bug and keeps its traceback.
"""
from .main import build_parser, main

__all__ = ["main", "build_parser"]
