"""Calibration tables: absolute magnitude, its intrinsic scatter and intrinsic
colours as functions of spectral type, one table per luminosity class.

Tables are ECSV files (see ``calibrations/README.md`` for the format). Each
column is interpolated in the numeric spectral type with a monotone cubic
(PCHIP, Fritsch & Carlson 1980) over the rows where it is given, and is never
extrapolated: outside a column's first and last row the value is NaN.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path

import numpy as np
from astropy.table import Table
from scipy.interpolate import PchipInterpolator

from ..core.bands import BANDS, CALIBRATION_COLOURS, V_INDEX, chain_matrices
from ..core.sptype import CLASS_ORDER
from .resources import calibration_dir
from ..core.errors import InputError

__all__ = [
    "Calibration", "CalibrationSet", "CalibrationValues", "load_calibration",
    "default_calibrations", "calibration_dir",
]

REQUIRED_COLUMNS = ("sptype", "sptnum", "M_V", "sig_M_V", "B-V")
DEFAULT_FILES = {
    "V": "dwarfs_V.ecsv", "IV": "subgiants_IV.ecsv", "III": "giants_III.ecsv",
    "II": "bright_giants_II.ecsv", "Ib": "supergiants_Ib.ecsv",
    "Iab": "supergiants_Iab.ecsv", "Ia": "supergiants_Ia.ecsv",
}
_P, _DEP = chain_matrices()


@dataclass
class CalibrationValues:
    """Calibration read at a set of spectral types (arrays over stars).

    absmag : (n, n_bands) absolute magnitudes, NaN where not calibrated.
    dabsmag : (n, n_bands) derivative of absmag per subclass.
    var_mv : (n,) variance of M_V (intrinsic scatter, widened for blended classes).
    var_colour : (n, n_colours) variance of each calibration colour.
    """

    absmag: np.ndarray
    dabsmag: np.ndarray
    var_mv: np.ndarray
    var_colour: np.ndarray
    colours: np.ndarray
    """(n, n_colours) intrinsic colours as tabulated."""

    FIELDS = ("absmag", "dabsmag", "var_mv", "var_colour", "colours")

    @classmethod
    def empty(cls, n: int) -> "CalibrationValues":
        nb, nc = len(BANDS), len(CALIBRATION_COLOURS)
        return cls(*(np.full(shape, np.nan) for shape in ((n, nb), (n, nb), (n,), (n, nc), (n, nc))))


@dataclass
class Calibration:
    """One luminosity class's calibration, loaded from an ECSV table.

    Attributes
    ----------
    name, luminosity_class, title : str
    references : list of str
        Literature references, from the file's ``meta``.
    colour_scatter : float
        Default intrinsic 1-sigma scatter of each intrinsic colour (mag).
    table : astropy.table.Table
        The table as read, ``source`` column included.
    """

    name: str
    luminosity_class: str
    title: str
    references: list
    colour_scatter: float
    table: Table
    path: str = ""
    _interp: dict = field(default_factory=dict, repr=False)

    def __post_init__(self):
        x_all = np.asarray(self.table["sptnum"], dtype=float)
        for col in ("M_V", "sig_M_V") + CALIBRATION_COLOURS:
            if col not in self.table.colnames:
                continue
            y = np.ma.filled(np.ma.asarray(self.table[col], dtype=float), np.nan)
            ok = np.isfinite(y)
            if ok.sum() >= 2:
                self._interp[col] = (PchipInterpolator(x_all[ok], y[ok], extrapolate=False),
                                     x_all[ok].min(), x_all[ok].max())

    @property
    def sptnum_range(self) -> tuple[float, float]:
        """Spectral-type range (numeric) where M_V is calibrated."""
        return float(self._interp["M_V"][1]), float(self._interp["M_V"][2])

    @property
    def bands(self) -> tuple[str, ...]:
        """Bands whose absolute magnitude this calibration can give somewhere."""
        have = np.array([c in self._interp for c in CALIBRATION_COLOURS])
        return tuple(b.name for b, dep in zip(BANDS, _DEP) if have[dep].all())

    def describe(self) -> str:
        """One line: name, class, range and references."""
        lo, hi = self.sptnum_range
        return f"{self.name} (class {self.luminosity_class}, sptnum {lo:g}-{hi:g}): " + "; ".join(self.references)

    def _column(self, col, x):
        if col not in self._interp:
            nan = np.full_like(x, np.nan)
            return nan, nan
        f, lo, hi = self._interp[col]
        return f(x), f.derivative()(x)

    def evaluate(self, sptnum) -> CalibrationValues:
        """Read the calibration at numeric spectral types ``sptnum`` (array)."""
        x = np.asarray(sptnum, dtype=float)
        mv, dmv = self._column("M_V", x)
        sig, _ = self._column("sig_M_V", x)
        cols = np.stack([self._column(c, x)[0] for c in CALIBRATION_COLOURS], axis=-1)
        dcols = np.stack([self._column(c, x)[1] for c in CALIBRATION_COLOURS], axis=-1)
        # a band is NaN exactly when M_V or a colour on its chain is missing
        absmag = mv[:, None] + np.einsum("bc,nc->nb", _P, np.nan_to_num(cols))
        missing = (~np.isfinite(cols))[:, None, :] & _DEP[None]
        absmag[missing.any(-1)] = np.nan
        dabs = dmv[:, None] + np.einsum("bc,nc->nb", _P, np.nan_to_num(dcols))
        var_c = np.broadcast_to(self.colour_scatter ** 2, cols.shape).copy()
        return CalibrationValues(absmag, dabs, sig ** 2, var_c, cols)


def _blend(a: CalibrationValues, b: CalibrationValues) -> CalibrationValues:
    """Mean of two neighbouring classes; the variance grows by the half-difference squared."""
    half_mv = (a.absmag[:, V_INDEX] - b.absmag[:, V_INDEX]) / 2.0
    half_c = (a.colours - b.colours) / 2.0
    return CalibrationValues(
        (a.absmag + b.absmag) / 2.0,
        (a.dabsmag + b.dabsmag) / 2.0,
        (a.var_mv + b.var_mv) / 2.0 + half_mv ** 2,
        (a.var_colour + b.var_colour) / 2.0 + half_c ** 2,
        (a.colours + b.colours) / 2.0,
    )


def _check_table(t: Table, path: str) -> None:
    missing = [c for c in REQUIRED_COLUMNS if c not in t.colnames]
    if missing:
        raise InputError(f"calibration {path}: missing column(s) {', '.join(missing)}; "
                         f"required are {', '.join(REQUIRED_COLUMNS)}")
    lc = t.meta.get("luminosity_class")
    if lc not in CLASS_ORDER:
        raise InputError(f"calibration {path}: meta 'luminosity_class' is {lc!r}; "
                         f"it must be one of {', '.join(CLASS_ORDER)}")
    x = np.asarray(t["sptnum"], dtype=float)
    if len(x) < 2 or not np.all(np.diff(x) > 0):
        raise InputError(f"calibration {path}: 'sptnum' must have at least two rows, strictly increasing")


def read_ecsv(path, what="calibration") -> Table:
    """Read an ECSV table; one ValueError naming the file for any problem."""
    try:
        return Table.read(path, format="ascii.ecsv")
    except FileNotFoundError:
        raise InputError(f"{what} file {path} does not exist") from None
    except Exception as exc:  # astropy raises several types for malformed ECSV
        raise InputError(f"{what} file {path} is not a readable ECSV table: {exc}") from None


@lru_cache(maxsize=32)
def load_calibration(path) -> Calibration:
    """Load one calibration table (ECSV) and check its format.

    Parameters
    ----------
    path : str or Path
        ECSV file with columns ``sptype, sptnum, M_V, sig_M_V, B-V`` and any of
        the other calibration colours, and ``meta`` keys ``luminosity_class``,
        ``references``, ``colour_scatter``.
    """
    path = str(path)
    t = read_ecsv(path)
    _check_table(t, path)
    refs = t.meta.get("references", [])
    refs = [refs] if isinstance(refs, str) else list(refs)
    return Calibration(
        name=str(t.meta.get("name", Path(path).stem)),
        luminosity_class=t.meta["luminosity_class"],
        title=str(t.meta.get("title", "")),
        references=refs,
        colour_scatter=float(t.meta.get("colour_scatter", 0.03)),
        table=t,
        path=Path(path).name,
    )


class CalibrationSet:
    """The calibrations in use, one per luminosity class.

    Parameters
    ----------
    extra : iterable of path, optional
        User calibration files; each replaces the shipped table of its class.
    """

    def __init__(self, extra=()):
        folder = calibration_dir()
        self.by_class: dict[str, Calibration] = {}
        for lc, fname in DEFAULT_FILES.items():
            if (folder / fname).exists():
                self.by_class[lc] = load_calibration(folder / fname)
        given = {}
        for p in extra or ():
            cal = load_calibration(p)
            lc = cal.luminosity_class
            if lc in given:
                raise InputError(f"two calibration files for luminosity class {lc}: {given[lc]} and {p}; "
                                 "give one file per class")
            given[lc] = p
            self.by_class[lc] = cal
        if "V" not in self.by_class:
            raise InputError(f"no dwarf (class V) calibration found in {folder.name}/")

    def describe(self) -> dict:
        """Class -> one-line description, for output metadata."""
        return {lc: cal.describe() for lc, cal in self.by_class.items()}

    def evaluate(self, sptnum, lc_bright, lc_faint) -> CalibrationValues:
        """Calibration values for arrays of types and (possibly blended) classes.

        Rows whose class has no table, or whose type lies outside the table,
        come back NaN.
        """
        x = np.asarray(sptnum, dtype=float)
        lb = np.asarray(lc_bright, dtype=object)
        lf = np.asarray(lc_faint, dtype=object)
        out_b = CalibrationValues.empty(len(x))
        out_f = CalibrationValues.empty(len(x))
        for lc, cal in self.by_class.items():
            for sel_arr, out in ((lb == lc, out_b), (lf == lc, out_f)):
                sel = np.flatnonzero(sel_arr)
                if sel.size:
                    v = cal.evaluate(x[sel])
                    for name in CalibrationValues.FIELDS:
                        getattr(out, name)[sel] = getattr(v, name)
        blended = _blend(out_b, out_f)
        same = lb == lf
        for name in CalibrationValues.FIELDS:
            getattr(blended, name)[same] = getattr(out_b, name)[same]
        return blended


@lru_cache(maxsize=1)
def default_calibrations() -> CalibrationSet:
    """The shipped calibrations (cached)."""
    return CalibrationSet()
