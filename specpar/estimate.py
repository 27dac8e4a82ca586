"""Temporary alias of :mod:`specpar.pipeline` during the move to layered folders (removed when done)."""
import sys

from specpar.pipeline import __name__ as _target  # noqa: F401

sys.modules[__name__] = sys.modules["specpar.pipeline"]
