"""The package version, read once from the installed package metadata
(``pyproject.toml`` is the only place it is written)."""
from __future__ import annotations

from importlib import metadata

__all__ = ["VERSION"]

try:
    VERSION = metadata.version("specpar")
except metadata.PackageNotFoundError:  # running from a source tree that was never installed
    VERSION = "0+unknown"
