"""specpar: distances to stars from MK spectral type and photometry
(spectroscopic parallax), with extinction, error propagation and flags."""
__version__ = "0.1.0"

from .sptype import parse_sptypes  # noqa: E402
from .calibration import CalibrationSet, load_calibration, default_calibrations  # noqa: E402
from .extinction import band_coefficients, LAWS  # noqa: E402
from .estimate import estimate, EstimateOptions  # noqa: E402
from .stream import estimate_file  # noqa: E402
from .cluster import fit_cluster, ClusterResult, simulate_cluster  # noqa: E402
from .calibrate import calibrate, write_calibrations, CalibrationFit  # noqa: E402

__all__ = ["estimate", "estimate_file", "EstimateOptions", "parse_sptypes", "CalibrationSet", "load_calibration",
           "default_calibrations", "band_coefficients", "LAWS", "fit_cluster", "ClusterResult",
           "simulate_cluster", "calibrate", "write_calibrations", "CalibrationFit", "__version__"]
