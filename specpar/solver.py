"""Temporary alias of :mod:`specpar.core.solver` during the move to layered folders (removed when done)."""
import sys

from specpar.core.solver import __name__ as _target  # noqa: F401

sys.modules[__name__] = sys.modules["specpar.core.solver"]
