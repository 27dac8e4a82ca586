"""Pieces shared by the command modules."""
from __future__ import annotations

import argparse
import sys

from specpar.io.columns import column_map as _column_map

__all__ = ["Parser", "column_map"]


class Parser(argparse.ArgumentParser):
    """argparse with a one-line error (status 2) instead of the full usage dump."""

    def error(self, message):
        self.print_usage(sys.stderr)
        self.exit(2, f"{self.prog}: error: {message}\n")


def column_map(pairs):
    """``--col OURS=YOURS`` pairs to a mapping (see :func:`specpar.io.columns.column_map`)."""
    return _column_map(pairs)
