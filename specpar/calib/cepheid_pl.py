"""Cepheid period-luminosity (PL) relations: loading the table and evaluating it.

the fundamental period P0 before any relation is read.

The relations (``calibrations/cepheids_pl.ecsv``) give, as functions of
``x = log10 P0 - 1``, the absolute magnitudes M_V, M_J, M_H, M_Ks, the
Wesenheit magnitude ``M_W = M_V - R_W (M_V - M_Ic)`` and the intrinsic colour
(B-V)_0. How they become the absolute magnitudes the solver uses:

* ``M_V``, ``M_J``, ``M_H``, ``M_Ks`` from their own relations;
  ``M_B = M_V + (B-V)_0`` from the period-colour relation.
* ``M_Ic = M_V - (V-Ic)_0`` with ``(V-Ic)_0 = (M_V - M_W) / R_W`` and R_W the
  ratio the W_VI relation was published with. With V and Ic measured the fit
  (two magnitudes, two unknowns: exact) then gives
  ``dm = W - M_W'`` where ``W = V - R (V - Ic)`` uses the chosen extinction
  law's ``R = R_V / (R_V - R_Ic)`` and ``M_W' = M_W + (R_W - R) (V-Ic)_0``.
  For an unreddened star this is exactly the published Wesenheit distance,
  whatever the law. For a reddened one it differs from a Wesenheit distance
  computed with R_W by ``(R_W - R) E(V-Ic)``: the law in use, not the
  published ratio, removes the extinction. With the default law (F99,
  R_V = 3.1) R is 2.28 against R_W = 2.45, i.e. +0.17 mag in distance
  modulus per mag of E(V-Ic); CCM89 gives R = 2.47. The published Ic relation
  is kept in the table only as a check of the implied one.

Error model. The intrinsic scatter of Cepheids about the PL relations comes
mostly from their position inside the instability strip: a star hotter than
average at its period is brighter and bluer, so its residuals in all bands
are correlated and lie nearly along the reddening lines, which is why the
Wesenheit index has a much smaller scatter than V or Ic (Madore & Freedman
1991). The covariance of the absolute magnitudes given to the solver is

* a common shift of all bands (``var_mv``) equal to the W_VI total variance
  ``T_W = sigma_W**2 + e_zp**2 + (x e_slope)**2``: intrinsic scatter plus the
  zero-point and slope errors of the relation at this period;
* a strip direction ``g`` (``dabsmag``, scaled by the unit ``e_sptnum`` the
  estimate hook sets): ``g_V = sqrt(T_V - T_W)``, along the reddening vector
  for B and Ic (``g_b = g_V R_b / R_V``) so that the Wesenheit combination gets
  exactly ``T_W``; for J, H, Ks the amplitude that makes each band's total
  variance its own ``T_b``;
* independent scatter of the colour links: none for V-Ic (it would add to the
  W scatter), the remainder of the period-colour scatter for B-V, and small
  adopted values for V-Ks, H-Ks, J-H (table meta ``colour_scatter``).

References
----------
Benedict, G. F. et al. 2007, AJ 133, 1810 (V, Ic, Ks, W_VI relations).
Fouque, P. et al. 2007, A&A 476, 73 (J, H relations).
Tammann, G. A., Sandage, A. & Reindl, B. 2003, A&A 404, 423 (period-colour).
Udalski, A. et al. 1999, Acta Astron. 49, 201; Persson, S. E. et al. 2004,
AJ 128, 2239 (intrinsic scatter).
Alcock, C. et al. 1995, AJ 109, 1653 (first-overtone to fundamental period).
Madore, B. F. & Freedman, W. L. 1991, PASP 103, 933 (Wesenheit index).
All values from memory; see the table's ``source`` column.
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np
from astropy.table import Table

from ..core.bands import BANDS, CALIBRATION_COLOURS, band_index
from ..core.errors import InputError
from .extinction import DEFAULT_LAW, DEFAULT_RV, band_coefficients
from .resources import calibration_dir
from .tables import CalibrationValues, read_ecsv

__all__ = [
    "PL_FILE", "BAND_RELATIONS", "RANGE_TOLERANCE", "Relation", "PLCalibration", "load_pl_calibration",
    "fundamental_period", "pl_calibration_values",
]

PL_FILE = "cepheids_pl.ecsv"
_REQUIRED_COLUMNS = ("relation", "kind", "slope", "e_slope", "zp", "e_zp", "logP_pivot", "sigma",
                     "logP_min", "logP_max", "role", "source")
_REQUIRED_RELATIONS = ("V", "J", "H", "Ks", "W_VI", "B-V")
#: Band -> the relations its absolute magnitude needs (its period range is their intersection).
BAND_RELATIONS = {"V": ("V",), "B": ("V", "B-V"), "Ic": ("V", "W_VI"), "J": ("J",), "H": ("H",),
                   "Ks": ("Ks",)}
#: Slack (in log10 P0) at the ends of a relation's period range, for rounding of the limits.
RANGE_TOLERANCE = 1e-9


@dataclass(frozen=True)
class Relation:
    """One linear relation ``value = zp + slope (log10 P0 - pivot)`` with its validity range."""

    name: str
    kind: str
    slope: float
    e_slope: float
    zp: float
    e_zp: float
    pivot: float
    sigma: float
    logp_min: float
    logp_max: float
    role: str
    source: str

    def inside(self, logp0) -> np.ndarray:
        """True where ``logp0`` lies in the calibrated range (False for NaN)."""
        logp0 = np.asarray(logp0, dtype=float)
        with np.errstate(invalid="ignore"):
            return (logp0 >= self.logp_min - RANGE_TOLERANCE) & (logp0 <= self.logp_max + RANGE_TOLERANCE)

    def value(self, logp0) -> np.ndarray:
        """The relation at ``logp0``; NaN outside its range (never extrapolated)."""
        logp0 = np.asarray(logp0, dtype=float)
        return np.where(self.inside(logp0), self.zp + self.slope * (logp0 - self.pivot), np.nan)

    def variance(self, logp0) -> np.ndarray:
        """Scatter plus zero-point and slope errors at ``logp0``: ``sigma^2 + e_zp^2 + (x e_slope)^2``."""
        logp0 = np.asarray(logp0, dtype=float)
        x = logp0 - self.pivot
        var = self.sigma ** 2 + self.e_zp ** 2 + (x * self.e_slope) ** 2
        return np.where(self.inside(logp0), var, np.nan)


@dataclass(frozen=True)
class PLCalibration:
    """The Cepheid relations in use, loaded from an ECSV table.

    Attributes
    ----------
    relations : dict of str -> Relation
    r_w : float
        A_V / E(V-Ic) with which the W_VI relation was published.
    overtone_ratio : tuple of float
        (a, b) in ``P1/P0 = a + b log10 P0``.
    overtone_range : tuple of float
        log10 P0 range where that conversion holds.
    colour_scatter : dict of str -> float
        Adopted independent scatter of near-infrared colour links (mag).
    references : list of str
    path : str
    """

    relations: dict
    r_w: float
    overtone_ratio: tuple
    overtone_range: tuple
    colour_scatter: dict
    references: list
    path: str

    def describe(self) -> str:
        """One line naming the file and its references, for output metadata."""
        return f"{self.path}: " + "; ".join(self.references)


def _read_pl_table(path: str) -> Table:
    t = read_ecsv(path, "Cepheid calibration")
    missing = [c for c in _REQUIRED_COLUMNS if c not in t.colnames]
    names = [str(n) for n in t["relation"]] if "relation" in t.colnames else []
    missing += [f"relation {r}" for r in _REQUIRED_RELATIONS if r not in names]
    missing += [f"meta {k}" for k in ("R_W", "overtone_ratio", "overtone_logP0_range") if k not in t.meta]
    if missing:
        raise InputError(f"Cepheid calibration {path}: missing {', '.join(missing)}; "
                         f"see calibrations/_build/make_cepheid_table.py for the format")
    return t


@lru_cache(maxsize=8)
def load_pl_calibration(path=None) -> PLCalibration:
    """Load the Cepheid relations (cached).

    Parameters
    ----------
    path : str or Path, optional
        ECSV table; default the shipped ``calibrations/cepheids_pl.ecsv``.

    Returns
    -------
    PLCalibration
    """
    path = str(path) if path is not None else str(calibration_dir() / PL_FILE)
    t = _read_pl_table(path)
    rel = {}
    for row in t:
        rel[str(row["relation"])] = Relation(
            str(row["relation"]), str(row["kind"]),
            *(float(row[c]) for c in ("slope", "e_slope", "zp", "e_zp", "logP_pivot", "sigma",
                                      "logP_min", "logP_max")),
            str(row["role"]), str(row["source"]))
    refs = t.meta.get("references", [])
    return PLCalibration(
        relations=rel, r_w=float(t.meta["R_W"]),
        overtone_ratio=tuple(float(v) for v in t.meta["overtone_ratio"]),
        overtone_range=tuple(float(v) for v in t.meta["overtone_logP0_range"]),
        colour_scatter={str(k): float(v) for k, v in dict(t.meta.get("colour_scatter", {})).items()},
        references=[refs] if isinstance(refs, str) else list(refs), path=Path(path).name)


def fundamental_period(p1, cal: PLCalibration | None = None) -> np.ndarray:
    """Fundamental-mode period P0 (d) of a first-overtone period P1 (d).

    Solves ``P1/P0 = a + b log10 P0`` (Alcock et al. 1995: a = 0.720,
    b = -0.027) by fixed-point iteration; the map is a strong contraction
    (|d log P0 / d log P1 - 1| < 0.02), so eight steps reach machine precision.

    References
    ----------
    Alcock, C. et al. 1995, AJ 109, 1653 (from memory).
    """
    cal = cal or load_pl_calibration()
    a, b = cal.overtone_ratio
    p1 = np.asarray(p1, dtype=float)
    p0 = p1 / a
    with np.errstate(invalid="ignore", divide="ignore"):
        for _ in range(8):
            p0 = p1 / (a + b * np.log10(p0))
    return p0


def _strip_terms(cal, logp0, R):
    """Common variance, strip direction per band and colour-link variances (see module doc)."""
    rel = cal.relations
    total = {k: rel[k].variance(logp0) for k in ("V", "W_VI", "J", "H", "Ks")}
    c0 = total["W_VI"]
    for k in ("V", "J", "H", "Ks"):  # where W_VI is not calibrated, the smallest available
        c0 = np.fmin(c0, total[k])
    n, nb, nc = logp0.size, len(BANDS), len(CALIBRATION_COLOURS)
    var_c = np.zeros((n, nc))
    col = CALIBRATION_COLOURS.index
    for name, s in cal.colour_scatter.items():
        var_c[:, col(name)] = s ** 2
    iV = band_index("V")
    g = np.zeros((n, nb))
    with np.errstate(invalid="ignore"):
        g[:, iV] = np.sqrt(np.clip(total["V"] - c0, 0.0, None))
        for b in ("B", "Ic"):  # along the reddening vector: no effect on the Wesenheit index
            g[:, band_index(b)] = g[:, iV] * R[band_index(b)] / R[iV]
        strip_bv = g[:, iV] * (R[band_index("B")] - R[iV]) / R[iV]
        var_c[:, col("B-V")] = np.clip(rel["B-V"].variance(logp0) - strip_bv ** 2, 0.0, None)
        chain = var_c[:, col("V-Ks")]
        for b, link in (("Ks", None), ("H", "H-Ks"), ("J", "J-H")):
            chain = chain + (var_c[:, col(link)] if link else 0.0)
            g[:, band_index(b)] = np.sqrt(np.clip(total[b] - c0 - chain, 0.0, None))
    return c0, g, var_c


def pl_calibration_values(logp0, *, law=DEFAULT_LAW, rv=DEFAULT_RV,
                          cal: PLCalibration | None = None) -> CalibrationValues:
    """Absolute magnitudes and their covariance terms at fundamental periods.

    Parameters
    ----------
    logp0 : array_like
        log10 of the fundamental-mode period in days (NaN: not computable).
    law, rv :
        Extinction law and R_V; they fix R = R_V / (R_V - R_Ic) in the
        Wesenheit-equivalent fit and the reddening direction of the strip term.
    cal : PLCalibration, optional
        Default: the shipped table.

    Returns
    -------
    CalibrationValues
        ``absmag`` for V, B, Ic, J, H, Ks (NaN for the other bands and outside
        a relation's period range), ``dabsmag`` the instability-strip
        direction, ``var_mv`` the common variance, ``var_colour`` the
        independent colour-link variances, ``colours`` the intrinsic colours.

    References
    ----------
    See the module docstring.
    """
    cal = cal or load_pl_calibration()
    rel = cal.relations
    logp0 = np.atleast_1d(np.asarray(logp0, dtype=float))
    n, nb, nc = logp0.size, len(BANDS), len(CALIBRATION_COLOURS)
    mv, mw = rel["V"].value(logp0), rel["W_VI"].value(logp0)
    mags = {"V": mv, "Ks": rel["Ks"].value(logp0), "H": rel["H"].value(logp0), "J": rel["J"].value(logp0)}
    colours = np.full((n, nc), np.nan)
    col = CALIBRATION_COLOURS.index
    colours[:, col("B-V")] = rel["B-V"].value(logp0)
    colours[:, col("V-Ic")] = (mv - mw) / cal.r_w
    colours[:, col("V-Ks")] = mv - mags["Ks"]
    colours[:, col("H-Ks")] = mags["H"] - mags["Ks"]
    colours[:, col("J-H")] = mags["J"] - mags["H"]
    mags["B"] = mv + colours[:, col("B-V")]
    mags["Ic"] = mv - colours[:, col("V-Ic")]
    absmag = np.full((n, nb), np.nan)
    for b, m in mags.items():
        absmag[:, band_index(b)] = m
    R = np.asarray(band_coefficients(law, rv), dtype=float)
    c0, g, var_c = _strip_terms(cal, logp0, R)
    dabsmag = np.where(np.isfinite(absmag), g, np.nan)
    return CalibrationValues(absmag, dabsmag, c0, var_c, colours)
