"""specpar: distances to stars from MK spectral type and photometry
(spectroscopic parallax), with extinction, error propagation and flags."""
from .core.about import VERSION as __version__
from .core.sptype import parse_sptypes
from .calib.tables import CalibrationSet, load_calibration, default_calibrations
from .calib.extinction import band_coefficients, LAWS
from .pipeline.estimate import estimate
from .pipeline.options import EstimateOptions
from .batch.stream import estimate_file
from .calfit import calibrate, write_calibrations, CalibrationFit

# Cluster fitting loads scipy.optimize / scipy.ndimage; it is imported on first use
# so that ``import specpar`` (and the estimate command) start faster.
_LAZY = {"fit_cluster": "cluster", "ClusterResult": "cluster", "simulate_cluster": "cluster"}


def __getattr__(name):
    if name in _LAZY:
        import importlib
        value = getattr(importlib.import_module(f".{_LAZY[name]}", __name__), name)
        globals()[name] = value
        return value
    if name == "cluster":
        import importlib
        return importlib.import_module(f".{name}", __name__)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_LAZY))

__all__ = ["estimate", "estimate_file", "EstimateOptions", "parse_sptypes", "CalibrationSet", "load_calibration",
           "default_calibrations", "band_coefficients", "LAWS", "fit_cluster", "ClusterResult",
           "simulate_cluster", "calibrate", "write_calibrations", "CalibrationFit", "__version__"]
