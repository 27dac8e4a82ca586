"""Where the shipped calibration tables are: one way, the installed package
data ``specpar.calibrations`` found with :mod:`importlib.resources` (the
repository's top-level ``calibrations/`` folder, mapped to that package name by
``pyproject.toml``, in an editable install as in a wheel)."""
from __future__ import annotations

from importlib import resources
from pathlib import Path

__all__ = ["DATA_PACKAGE", "calibration_dir", "data_path"]

DATA_PACKAGE = "specpar.calibrations"


def calibration_dir() -> Path:
    """Folder holding the shipped calibration tables."""
    return Path(str(resources.files(DATA_PACKAGE)))


def data_path(name: str) -> Path:
    """Path of one shipped data file, e.g. ``data_path("giants_III.ecsv")``."""
    return calibration_dir() / name
