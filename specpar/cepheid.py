"""Distances to classical Cepheids from their pulsation periods (Leavitt law).

A row of the input table with a value in ``period_d`` (pulsation period in
days) is treated as a classical Cepheid: its absolute magnitudes come from
period-luminosity (PL) relations instead of a spectral type, and it then goes
through the same solver, error propagation and output columns as every other
star (:func:`specpar.estimate`). An optional column ``pmode`` gives the
pulsation mode: ``F``, ``FU`` or ``0`` for the fundamental mode (also assumed
where the column or the value is missing), ``1O``, ``FO``, ``O1`` or ``1`` for
the first overtone (case ignored). First-overtone periods are converted to
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
import pandas as pd
from astropy.table import Table

from .bands import BANDS, CALIBRATION_COLOURS, band_index
from .calibration import CalibrationValues, calibration_dir, read_ecsv
from .extinction import DEFAULT_LAW, DEFAULT_RV, band_coefficients
from .flags import Flag

__all__ = [
    "PERIOD_COLUMN", "MODE_COLUMN", "MODES", "Relation", "PLCalibration", "CepheidRows",
    "load_pl_calibration", "fundamental_period", "pl_calibration_values", "cepheid_calibration",
]

PERIOD_COLUMN = "period_d"
MODE_COLUMN = "pmode"
PL_FILE = "cepheids_pl.ecsv"
#: Accepted spellings of the pulsation mode (upper-cased, stripped) -> 0 fundamental, 1 first overtone.
MODES = {"F": 0, "FU": 0, "0": 0, "1O": 1, "FO": 1, "O1": 1, "1": 1}
_REQUIRED_COLUMNS = ("relation", "kind", "slope", "e_slope", "zp", "e_zp", "logP_pivot", "sigma",
                     "logP_min", "logP_max", "role", "source")
_REQUIRED_RELATIONS = ("V", "J", "H", "Ks", "W_VI", "B-V")
#: Band -> the relations its absolute magnitude needs (its period range is their intersection).
_BAND_RELATIONS = {"V": ("V",), "B": ("V", "B-V"), "Ic": ("V", "W_VI"), "J": ("J",), "H": ("H",),
                   "Ks": ("Ks",)}
_TOL = 1e-9


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
            return (logp0 >= self.logp_min - _TOL) & (logp0 <= self.logp_max + _TOL)

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
        raise ValueError(f"Cepheid calibration {path}: missing {', '.join(missing)}; "
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


@dataclass
class CepheidRows:
    """What :func:`cepheid_calibration` hands to the estimate pipeline.

    Attributes
    ----------
    mask : (N,) bool
        Rows handled as Cepheids (a period was given, valid or not).
    values : CalibrationValues
        For the masked rows only, in order.
    flags : (N,) int64
        PERIOD_OUT_OF_RANGE, PERIOD_INVALID, MODE_UNKNOWN bits.
    detail : (N,) object
        Readable reason per row ('' when nothing to say).
    label : str
        Goes into ``lum_class`` for these rows.
    e_mv : (n_cep,) float
        Total 1-sigma uncertainty of M_V (scatter, zero point and slope);
        ``values.var_mv`` alone is only the common part (the W_VI scatter).
    period0_d : (n_cep,) float
        Fundamental-mode period used (d), NaN where not computable.
    """

    mask: np.ndarray
    values: CalibrationValues
    flags: np.ndarray
    detail: np.ndarray
    label: str = "Cep"
    e_mv: np.ndarray | None = None
    period0_d: np.ndarray | None = None


def _periods(series: pd.Series):
    """Period values, rows that carry a period, rows whose period is unusable."""
    from .estimate import numeric_values  # shared parser of numeric cells (lazy: estimate imports us lazily too)
    vals, bad = numeric_values(series)
    given = np.isfinite(vals) | bad
    with np.errstate(invalid="ignore"):
        invalid = bad | (given & ~(vals > 0))
    return np.where(invalid, np.nan, vals), given, invalid


def _modes(series: pd.Series | None, n: int):
    """Mode code per row: 0 fundamental (also when not given), 1 first overtone, -1 unknown."""
    if series is None:
        return np.zeros(n, int)
    codes, uniques = pd.factorize(series.astype(object), use_na_sentinel=True)

    def code(v):
        if isinstance(v, (float, np.floating)) and float(v).is_integer():
            v = int(v)
        text = str(v).strip().upper()
        return 0 if text in ("", "NAN", "NONE", "--") else MODES.get(text, -1)

    table = np.array([code(v) for v in uniques] + [0], dtype=int)  # sentinel -1 -> last entry
    return table[np.where(codes < 0, len(uniques), codes)]


def _range_details(cal, logp0, computable):
    """Bit mask per row of bands outside their relations' period range, and the sentences."""
    bands = list(_BAND_RELATIONS)
    out = np.zeros(logp0.size, np.int64)
    for k, b in enumerate(bands):
        inside = np.logical_and.reduce([cal.relations[r].inside(logp0) for r in _BAND_RELATIONS[b]])
        out |= np.where(computable & ~inside, 1 << k, 0)
    text = np.full(logp0.size, "", dtype=object)
    for combo in np.unique(out[out != 0]):
        names = [b for k, b in enumerate(bands) if combo >> k & 1]
        lims = {b: (max(cal.relations[r].logp_min for r in _BAND_RELATIONS[b]),
                    min(cal.relations[r].logp_max for r in _BAND_RELATIONS[b])) for b in names}
        ranges = ", ".join(f"{b} {lo:.3f}-{hi:.3f} (P0 {10 ** lo:.3g}-{10 ** hi:.3g} d)"
                           for b, (lo, hi) in lims.items())
        sel = out == combo
        every = len(names) == len(bands)
        head = "no PL relation holds at log10 P0 = " if every else "log10 P0 = "
        tail = (f": not calibrated for {', '.join(names)} (valid log10 P0: {ranges}); "
                f"{'the period is' if every else 'those bands are'} not extrapolated")
        text[sel] = head + np.char.mod("%.3f", logp0[sel]).astype(object) + tail
    return out, text


def _join(*parts):
    """Element-wise '; '-join of object arrays of str, skipping empty pieces."""
    out = np.full(parts[0].shape, "", dtype=object)
    for p in parts:
        sep = np.where((out != "") & (p != ""), "; ", "")
        out = out + sep + p
    return out


def cepheid_calibration(frame: pd.DataFrame, opts) -> CepheidRows:
    """Absolute magnitudes for the rows of ``frame`` that carry a pulsation period.

    Parameters
    ----------
    frame : pandas.DataFrame
        Input with specpar column names; ``period_d`` (days) and optionally
        ``pmode`` (see :data:`MODES`). Rows with an empty period are not
        Cepheids. A non-numeric, zero or negative period flags PERIOD_INVALID,
        an unrecognised mode MODE_UNKNOWN; such rows stay Cepheid rows with no
        absolute magnitude (hence no distance), so nothing is lost and the
        spectral-type path does not run for them.
    opts : EstimateOptions
        ``law`` and ``rv`` are used.

    Returns
    -------
    CepheidRows

    References
    ----------
    See the module docstring.
    """
    cal = load_pl_calibration()
    N = len(frame)
    period, given, invalid = _periods(frame[PERIOD_COLUMN])
    mode_col = frame[MODE_COLUMN] if MODE_COLUMN in frame.columns else None
    mode = _modes(mode_col, N)
    unknown = given & ~invalid & (mode < 0)
    overtone = given & (mode == 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        p0 = np.where(overtone, fundamental_period(period, cal), period)
        logp0 = np.where(unknown, np.nan, np.log10(p0))
    lo, hi = cal.overtone_range
    with np.errstate(invalid="ignore"):
        conv_out = overtone & np.isfinite(logp0) & ((logp0 < lo - _TOL) | (logp0 > hi + _TOL))
    logp0 = np.where(conv_out, np.nan, logp0)
    band_out, range_text = _range_details(cal, logp0, np.isfinite(logp0))

    flags = np.zeros(N, np.int64)
    flags |= np.where(invalid, int(Flag.PERIOD_INVALID), 0)
    flags |= np.where(unknown, int(Flag.MODE_UNKNOWN), 0)
    flags |= np.where(conv_out | (band_out != 0), int(Flag.PERIOD_OUT_OF_RANGE), 0)

    raw_p = frame[PERIOD_COLUMN].map(str).to_numpy(object)
    raw_m = mode_col.map(str).to_numpy(object) if mode_col is not None else np.full(N, "", object)
    empty = np.full(N, "", dtype=object)
    detail = _join(
        np.where(invalid, "period_d = '" + raw_p + "' is not a usable period: give a number of days > 0",
                 empty),
        np.where(unknown, "pmode = '" + raw_m + "' not recognised: use F (fundamental) or 1O "
                 "(first overtone); no distance computed", empty),
        np.where(overtone & ~invalid, "first-overtone period " + np.char.mod("%.4g", period).astype(object)
                 + " d converted to fundamental P0 = " + np.char.mod("%.4g", p0).astype(object)
                 + " d (Alcock et al. 1995)", empty),
        np.where(conv_out, f"P0 outside the range of the overtone-to-fundamental relation "
                 f"(log10 P0 {lo:g} to {hi:g}); not extrapolated", empty),
        range_text,
    )
    rows = np.flatnonzero(given)
    values = pl_calibration_values(logp0[rows], law=opts.law, rv=opts.rv, cal=cal)
    e_mv = np.sqrt(cal.relations["V"].variance(logp0[rows]))
    return CepheidRows(mask=given, values=values, flags=flags, detail=detail,
                       e_mv=e_mv, period0_d=np.where(np.isfinite(logp0), p0, np.nan)[rows])
