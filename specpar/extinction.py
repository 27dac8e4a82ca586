"""Temporary alias of :mod:`specpar.calib.extinction` during the move to layered folders (removed when done)."""
import sys

from specpar.calib.extinction import __name__ as _target  # noqa: F401

sys.modules[__name__] = sys.modules["specpar.calib.extinction"]
