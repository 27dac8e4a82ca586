"""``specpar`` entry point: the parser made from the command modules, and the
one place where user errors become a one-line message."""
from __future__ import annotations

import argparse
import importlib
import sys

from specpar.core.about import VERSION
from specpar.core.errors import InputError

from .common import Parser

__all__ = ["main", "build_parser"]

#: Command modules of this package, in the order ``specpar --help`` lists them;
#: each exposes ``register(subparsers)``.
COMMANDS = ("estimate", "calibrations", "calibrate", "bench", "parallax", "cluster", "worked", "problems")

DESCRIPTION = ("Distances to stars from MK spectral type and photometry (spectroscopic parallax): "
               "calibrated absolute magnitudes and intrinsic colours, colour excess, extinction, "
               "distance modulus and distance with uncertainties.")


def build_parser() -> argparse.ArgumentParser:
    """The ``specpar`` parser with every command registered."""
    parser = Parser(prog="specpar", description=DESCRIPTION)
    parser.add_argument("--version", action="version", version=f"specpar {VERSION}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=Parser)
    for name in COMMANDS:
        importlib.import_module(f"{__package__}.{name}").register(sub)
    return parser


def main(args=None) -> int:
    """Entry point; returns the exit status."""
    from specpar.io.atomic import Terminated
    parser = build_parser()
    ns = parser.parse_args(args)
    if not ns.command:
        parser.print_help()
        return 2
    try:
        return ns.func(ns)
    except InputError as exc:
        print(f"specpar: error: {exc}", file=sys.stderr)
        return 1
    except MemoryError:
        print("specpar: error: out of memory; use smaller blocks (--chunk-rows) or fewer draws (--mc)",
              file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("specpar: interrupted", file=sys.stderr)
        return 130
    except Terminated:
        print("specpar: terminated (SIGTERM); no output written, temporary file removed", file=sys.stderr)
        return 143


if __name__ == "__main__":
    sys.exit(main())
