"""Temporary alias of :mod:`specpar.core.sptype` during the move to layered folders (removed when done)."""
import sys

from specpar.core.sptype import __name__ as _target  # noqa: F401

sys.modules[__name__] = sys.modules["specpar.core.sptype"]
