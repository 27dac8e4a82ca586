"""Per-star pipeline: options, observables, sources of absolute magnitudes
(spectral type, Cepheid period), fit, Monte Carlo, notes, parallax check and
:func:`estimate`, which runs them in order."""
from ..calib.extinction import coefficients_at
from .estimate import OUTPUT_COLUMNS, attach_results, estimate, run_estimate
from .frames import numeric_values, to_frame
from .observables import PreparedInput, prepare_observables, read_photometry
from .options import DEFAULT_MAG_ERROR, MAX_MAG_ERROR, OPTIONS, EstimateOptions

__all__ = ["estimate", "run_estimate", "EstimateOptions", "OPTIONS", "OUTPUT_COLUMNS", "attach_results",
           "prepare_observables", "read_photometry", "PreparedInput", "to_frame", "numeric_values",
           "coefficients_at", "DEFAULT_MAG_ERROR", "MAX_MAG_ERROR"]
