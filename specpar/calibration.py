"""Temporary alias of :mod:`specpar.calib.tables` during the move to layered folders (removed when done)."""
import sys

from specpar.calib.tables import __name__ as _target  # noqa: F401

sys.modules[__name__] = sys.modules["specpar.calib.tables"]
