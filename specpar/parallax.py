"""Temporary alias of :mod:`specpar.pipeline.parallax` during the move to layered folders (removed when done)."""
import sys

from specpar.pipeline.parallax import __name__ as _target  # noqa: F401

sys.modules[__name__] = sys.modules["specpar.pipeline.parallax"]
