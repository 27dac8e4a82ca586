"""Fitting calibration tables to real stars, and checking them on real stars.

Modules (one concern each):

- :mod:`.sample`: calibrators read from the input table, each row with the reason it is not used.
- :mod:`.likelihood`: per-star likelihood of the parallax given the apparent magnitude.
- :mod:`.smoothing`: type-node bases, smoothing penalties, colour fits, errors from curvature.
- :mod:`.luminosity`: the per-class maximum-likelihood fit (:func:`fit_luminosity`).
- :mod:`.tables`: calibration tables from a fit, and :func:`write_calibrations`.
- :mod:`.fit`: :func:`calibrate`, the user-facing fit of every class.
- :mod:`.validate`: photometric against trigonometric distances in volume-complete groups.
- :mod:`.options`: the options of ``calibrate``, declared once for the API and the command line.
- :mod:`.catalogue`: readers of the catalogue files (BSC5, Hipparcos, new reduction).
- :mod:`.realdata`: fetch, check, cross-match and cache of the real calibrators
  (``python -m specpar.calfit.realdata``); the even/odd HIP halves. Not imported here.
"""
from __future__ import annotations

from .fit import CalibrationFit, calibrate
from .likelihood import OUTLIER_WIDTH, mixture_summary, star_loglike
from .luminosity import LuminosityFit, fit_luminosity
from .sample import UBV_ERRORS, default_scale_height, group_labels
from .tables import write_calibrations
from .validate import format_validation, validate

__all__ = ["calibrate", "write_calibrations", "CalibrationFit", "fit_luminosity", "LuminosityFit",
           "star_loglike", "mixture_summary", "OUTLIER_WIDTH", "validate", "format_validation",
           "group_labels", "default_scale_height", "UBV_ERRORS"]
