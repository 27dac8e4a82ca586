"""Calibration layer: the shipped tables (absolute magnitudes and intrinsic
colours by spectral type and luminosity class, Cepheid period-luminosity
relations), where they are found, and the extinction laws. The data live in the
repository's top-level ``calibrations/`` folder and ship inside the wheel as
the package data ``specpar.calibrations``."""
