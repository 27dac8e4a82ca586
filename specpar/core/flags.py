"""Row flags: one bit per condition, each with a machine name and a sentence.

The ``flags`` output column is the bitwise OR of the bits below; the ``note``
column joins the sentences of the bits that are set (plus row details).
"""
from __future__ import annotations

import enum


__all__ = ["Flag", "describe", "flag_names"]


class Flag(enum.IntFlag):
    """Conditions a row can carry. Values are stable: they are written to files."""

    NO_LUMCLASS = 1 << 0
    TYPE_UNREADABLE = 1 << 1
    TYPE_UNSUPPORTED = 1 << 2
    TYPE_OUTSIDE_CALIBRATION = 1 << 3
    PECULIAR = 1 << 4
    TYPE_UNCERTAIN = 1 << 5
    ERROR_DEFAULTED = 1 << 6
    PHOT_REJECTED = 1 << 7
    NO_DISTANCE = 1 << 8
    EBV_ASSUMED_ZERO = 1 << 9
    EBV_NEGATIVE = 1 << 10
    BANDS_DISAGREE = 1 << 11
    NO_SUBTYPE = 1 << 12
    BAND_UNCALIBRATED = 1 << 13
    RV_UNCONSTRAINED = 1 << 14
    EBV_AT_BOUND = 1 << 15
    # parallax cross-check (bits 16-23)
    PLX_TENSION = 1 << 16
    PLX_REJECTED = 1 << 17
    PLX_LOW_SNR = 1 << 18
    PLX_UNITS_SUSPECT = 1 << 19
    PLX_COMBINED_WITHHELD = 1 << 20
    # period-luminosity rows (bits 24-27)
    PERIOD_OUT_OF_RANGE = 1 << 24
    PERIOD_INVALID = 1 << 25
    MODE_UNKNOWN = 1 << 26
    # type reading (bits 28-31)
    TYPE_COMPOSITE = 1 << 28
    LUMCLASS_NEAREST = 1 << 29


SENTENCES = {
    Flag.NO_LUMCLASS: "no luminosity class given: dwarf (V) assumed",
    Flag.TYPE_UNREADABLE: "spectral type could not be read",
    Flag.TYPE_UNSUPPORTED: "spectral type not covered by any calibration (not extrapolated)",
    Flag.TYPE_OUTSIDE_CALIBRATION: "spectral type outside the calibrated range of its luminosity class",
    Flag.PECULIAR: "peculiarity suffix present: the mean calibration may not apply",
    Flag.TYPE_UNCERTAIN: "type marked uncertain: subtype uncertainty widened to 1 subclass",
    Flag.ERROR_DEFAULTED: "missing or non-positive photometric error replaced by the default",
    Flag.PHOT_REJECTED: "non-numeric, non-finite or implausible photometry ignored",
    Flag.NO_DISTANCE: "no distance: not enough usable photometry or calibration",
    Flag.EBV_ASSUMED_ZERO: "only one band: E(B-V) not measured, assumed 0",
    Flag.EBV_NEGATIVE: ("the fit put E(B-V) more than 3 sigma below 0: spectral type and photometry are "
                        "inconsistent (check both)"),
    Flag.BANDS_DISAGREE: "bands disagree with the calibration (chi-square p < 0.001)",
    Flag.NO_SUBTYPE: "no subtype given: mid-class assumed with a wide uncertainty",
    Flag.BAND_UNCALIBRATED: "a band has no calibration for this type and was left out",
    Flag.RV_UNCONSTRAINED: "R_V could not be fitted from these bands: the fixed value was used",
    Flag.EBV_AT_BOUND: ("the fit preferred a negative E(B-V): E(B-V) held at its physical bound 0, "
                        "ebv_upper gives the 95 % upper limit"),
    Flag.PLX_TENSION: "photometric and trigonometric parallaxes disagree",
    Flag.PLX_REJECTED: "parallax or its error unusable and ignored",
    Flag.PLX_LOW_SNR: ("parallax below 5.7 times its error (or not positive): 1/parallax is no fair distance "
                       "(Lutz & Kelker 1973); use dist_plx_* or dist_comb_*"),
    Flag.PLX_UNITS_SUSPECT: "parallaxes look like arcsec, not mas: check units",
    Flag.PLX_COMBINED_WITHHELD: ("parallax and photometric distance disagree beyond the tension threshold: "
                                 "no combined distance given"),
    Flag.PERIOD_OUT_OF_RANGE: "pulsation period outside the calibrated range (not extrapolated)",
    Flag.PERIOD_INVALID: "pulsation period is zero, negative or not a number",
    Flag.MODE_UNKNOWN: "pulsation mode not recognised",
    Flag.TYPE_COMPOSITE: "composite spectrum: the primary's type was used, the companion's light is not modelled",
    Flag.LUMCLASS_NEAREST: "luminosity class partly beyond the calibrated classes: the nearest calibrated class was used",
}


def flag_names(value: int) -> list[str]:
    """Machine names of the bits set in ``value``."""
    return [f.name for f in Flag if value & f]


def describe(value: int) -> str:
    """Readable sentence list for the bits set in ``value``."""
    return "; ".join(SENTENCES[f] for f in Flag if value & f)

