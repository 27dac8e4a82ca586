#!/usr/bin/env python
"""Build ``calibrations/cepheids_pl.ecsv``: period-luminosity (Leavitt law) and
period-colour relations for classical Cepheids, one row per relation.

Run from the repository root::

    python calibrations/_build/make_cepheid_table.py

Every number below was typed in from memory of the cited publications; no file
with these numbers exists on the build machine, and every row's ``source``
says "from memory". Check them against the papers before relying on the last
digit.

Form of each row: ``value = zp + slope * (log10 P0 - logP_pivot)``, with P0
the fundamental-mode period in days, valid for ``logP_min <= log10 P0 <=
logP_max`` and never extrapolated beyond.
"""
from __future__ import annotations

import os
import tempfile
from collections import OrderedDict
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import Table

OUTDIR = Path(__file__).resolve().parent.parent  # the calibrations/ folder
FILENAME = "cepheids_pl.ecsv"

BENEDICT = ("Benedict et al. 2007, AJ 133, 1810 (2007AJ....133.1810B), relations from HST FGS "
            "trigonometric parallaxes of ten Galactic Cepheids, as quoted in its abstract (from memory)")
FOUQUE = ("Fouque et al. 2007, A&A 476, 73 (2007A&A...476...73F), Galactic PL relations from HST and "
          "revised Hipparcos parallaxes combined with infrared surface-brightness and cluster distances "
          "(from memory; published with the zero point at log P = 0, moved here to log P = 1 with the "
          "quoted zero-point error kept; low confidence in the last digit)")
TSR03 = ("Tammann, Sandage & Reindl 2003, A&A 404, 423 (2003A&A...404..423T), Galactic period-colour "
         "relation (from memory; scatter and errors approximate)")
UDALSKI = ("scatter: OGLE-II LMC fundamental-mode dispersion, Udalski et al. 1999, Acta Astron. 49, 201 "
           "(1999AcA....49..201U) (from memory)")
PERSSON = ("scatter: LMC near-infrared dispersion, Persson et al. 2004, AJ 128, 2239 "
           "(2004AJ....128.2239P) (from memory, rounded)")
RANGE_B07 = ("period range: that of the ten calibrators, 3.7-35.6 d (from memory); logP_min and logP_max "
             "are log10 of these periods, unrounded, so that the shortest- and longest-period calibrators "
             "are inside")
RANGE_APPROX = "period range: that of the Galactic calibrating sample, approximate (from memory)"

#: Period ranges in days. The Benedict et al. (2007) relations hold over the periods of their
#: ten calibrators, 3.7-35.6 d (from memory); the limits are stored as log10 of these periods
#: without rounding (rounding 1.5514 down to 1.55 used to reject the longest-period calibrator).
P_B07 = (np.log10(3.7), np.log10(35.6))
#: Approximate period range of the Galactic calibrating samples of Fouque et al. (2007) and
#: Tammann, Sandage & Reindl (2003): log10 P0 = 0.40-1.65 (from memory, approximate).
P_APPROX = (0.40, 1.65)

# name, kind, slope, e_slope, zp, e_zp, pivot, sigma, (logP_min, logP_max), role, source
ROWS = [
    ("V", "PL", -2.43, 0.12, -4.05, 0.02, 1.0, 0.159, *P_B07, "used",
     f"{BENEDICT}; {UDALSKI}; {RANGE_B07}"),
    ("Ic", "PL", -2.81, 0.11, -4.78, 0.03, 1.0, 0.109, *P_B07, "check",
     f"{BENEDICT}; {UDALSKI}; {RANGE_B07}; not used directly: M_Ic = M_V - (V-Ic)_0 with "
     "(V-Ic)_0 = (M_V - M_W)/R_W, so that V and Ic together give the W_VI distance; kept to check "
     "that the implied Ic relation agrees with the published one"),
    ("J", "PL", -3.194, 0.068, -5.274, 0.021, 1.0, 0.120, *P_APPROX, "used",
     f"{FOUQUE}; {PERSSON}; {RANGE_APPROX}"),
    ("H", "PL", -3.328, 0.064, -5.606, 0.020, 1.0, 0.110, *P_APPROX, "used",
     f"{FOUQUE}; {PERSSON}; {RANGE_APPROX}"),
    ("Ks", "PL", -3.32, 0.12, -5.71, 0.03, 1.0, 0.108, *P_B07, "used",
     f"{BENEDICT}; {PERSSON}; {RANGE_B07}; published K system, the few-hundredths difference "
     "to 2MASS Ks (Carpenter 2001, AJ 121, 2851) is not applied"),
    ("W_VI", "PL", -3.34, 0.16, -5.87, 0.02, 1.0, 0.076, *P_B07, "used",
     f"{BENEDICT}; W_VI = V - R_W (V - Ic) with R_W in the table meta; {UDALSKI}; {RANGE_B07}"),
    ("B-V", "PC", 0.366, 0.015, 0.361, 0.010, 0.0, 0.070, *P_APPROX, "used",
     f"{TSR03}; {RANGE_APPROX}"),
    ("V-Ic", "PC", 0.256, 0.015, 0.497, 0.010, 0.0, 0.070, *P_APPROX, "check",
     f"{TSR03}; {RANGE_APPROX}; not used: (V-Ic)_0 follows from the V and W_VI relations, this "
     "one checks it"),
]

DESCRIPTIONS = OrderedDict([
    ("relation", "band of a PL relation (V, Ic, J, H, Ks), the Wesenheit index W_VI, or an "
                 "intrinsic colour of a period-colour relation (B-V, V-Ic)"),
    ("kind", "PL: absolute magnitude; PC: intrinsic colour"),
    ("slope", "d(value) / d(log10 P0), P0 the fundamental period in days"),
    ("e_slope", "1-sigma error of the slope"),
    ("zp", "value at log10 P0 = logP_pivot"),
    ("e_zp", "1-sigma error of zp"),
    ("logP_pivot", "log10 P0 at which zp is given"),
    ("sigma", "intrinsic 1-sigma scatter about the relation (instability-strip width)"),
    ("logP_min", "smallest log10 P0 the relation holds for"),
    ("logP_max", "largest log10 P0 the relation holds for"),
    ("role", "used: enters the distances; check: kept only to test consistency"),
    ("source", "references for this row; 'from memory' marks numbers recalled rather than copied"),
])
UNITS = {"slope": u.mag, "e_slope": u.mag, "zp": u.mag, "e_zp": u.mag, "sigma": u.mag}

META = OrderedDict([
    ("name", "cepheids_pl"),
    ("title", "Classical (type I) Cepheids: period-luminosity relations in V, J, H, Ks and W_VI, "
              "period-colour relation in B-V, first-overtone to fundamental period conversion"),
    ("references", [
        "Benedict, G. F. et al. 2007, AJ 133, 1810, 'Hubble Space Telescope Fine Guidance Sensor "
        "parallaxes of Galactic Cepheid variable stars: period-luminosity relations'; bibcode "
        "2007AJ....133.1810B (from memory)",
        "Fouque, P. et al. 2007, A&A 476, 73, 'A new calibration of Galactic Cepheid "
        "period-luminosity relations from B to K bands, and a comparison to LMC relations'; bibcode "
        "2007A&A...476...73F (from memory)",
        "Tammann, G. A., Sandage, A. & Reindl, B. 2003, A&A 404, 423; bibcode 2003A&A...404..423T "
        "(from memory)",
        "Udalski, A. et al. 1999, Acta Astron. 49, 201 (OGLE-II LMC Cepheids); bibcode "
        "1999AcA....49..201U (from memory)",
        "Persson, S. E. et al. 2004, AJ 128, 2239 (LMC near-infrared Cepheid photometry); bibcode "
        "2004AJ....128.2239P (from memory)",
        "Alcock, C. et al. 1995, AJ 109, 1653 (MACHO double-mode Cepheids); bibcode "
        "1995AJ....109.1653A (from memory)",
        "Madore, B. F. & Freedman, W. L. 1991, PASP 103, 933 (the Cepheid distance scale; "
        "Wesenheit index, instability strip nearly parallel to reddening lines) (from memory)",
    ]),
    ("R_W", 2.45),
    ("R_W_source", "ratio A_V / E(V-Ic) with which the W_VI relation was published (Benedict et al. "
                   "2007, adopting the value of Freedman et al. 2001, ApJ 553, 47; from memory)"),
    ("overtone_ratio", [0.720, -0.027]),
    ("overtone_logP0_range", [-0.15, 0.85]),
    ("overtone_source", "P1/P0 = 0.720 - 0.027 log10 P0 for double-mode Cepheids, Alcock et al. "
                        "1995, AJ 109, 1653 (from memory); as used to fundamentalise first-overtone "
                        "periods by Feast & Catchpole 1997, MNRAS 286, L1 (from memory). Valid range: "
                        "that of the double-mode stars defining it, about P0 = 0.7-7 d (approximate, "
                        "from memory)"),
    ("colour_scatter", OrderedDict([("V-Ks", 0.03), ("H-Ks", 0.02), ("J-H", 0.02)])),
    ("colour_scatter_source", "Adopted, not fitted: independent scatter of the near-infrared colour "
                              "links beyond the common instability-strip term, a few hundredths of a "
                              "mag (common practice)."),
    ("notes", "Rows with role 'check' do not enter distances. Zero points are at log P = 1 for the "
              "PL rows and at log P = 0 for the period-colour rows (column logP_pivot). How specpar "
              "turns these rows into absolute magnitudes and a covariance is documented in "
              "specpar/cepheid.py. Regenerate with 'python calibrations/_build/make_cepheid_table.py'."),
])


def make_table() -> Table:
    """The relations as an astropy Table with units, descriptions and meta."""
    cols = list(zip(*ROWS))
    t = Table(meta=META)
    for name, values in zip(DESCRIPTIONS, cols):
        if name in ("relation", "kind", "role", "source"):
            t[name] = np.array(values, dtype=str)
        else:
            t[name] = np.array(values, dtype=np.float64)
        if name in UNITS:
            t[name].unit = UNITS[name]
        t[name].description = DESCRIPTIONS[name]
    assert np.all(t["logP_min"] < t["logP_max"]) and np.all(t["sigma"] > 0)
    return t


def write_atomically(t: Table, path: Path) -> None:
    """Write ECSV through a temporary file in the same folder, then rename."""
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    try:
        t.write(tmp, format="ascii.ecsv", overwrite=True)
        os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.remove(tmp)


def main() -> None:
    path = OUTDIR / FILENAME
    write_atomically(make_table(), path)
    print(f"wrote {path.name}: {len(ROWS)} relations")


if __name__ == "__main__":
    main()
