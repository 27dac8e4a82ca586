"""Pieces shared by the command modules."""
from __future__ import annotations

import argparse
import sys

__all__ = ["Parser"]


class Parser(argparse.ArgumentParser):
    """argparse with a one-line error (status 2) instead of the full usage dump."""

    def error(self, message):
        self.print_usage(sys.stderr)
        self.exit(2, f"{self.prog}: error: {message}\n")

